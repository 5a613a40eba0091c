"""Regenerate README.md from docs/README.template.md, filling in the job-file reference from siting.job.SCHEMA.

Run ``python docs/make_readme.py`` after changing a job key; tests/test_readme.py fails until you do.
"""

from pathlib import Path

from siting.job import reference_markdown

ROOT = Path(__file__).resolve().parents[1]


def render() -> str:
    text = (ROOT / "docs" / "README.template.md").read_text(encoding="utf-8")
    return text.replace("<!-- job-reference -->\n", "<!-- job-reference -->\n" + reference_markdown().strip() + "\n")


if __name__ == "__main__":
    (ROOT / "README.md").write_text(render(), encoding="utf-8")
