"""The README stays true: its job reference is the schema, its quick start is what CI runs."""

import re
from pathlib import Path

from siting.job import SCHEMA

ROOT = Path(__file__).resolve().parents[1]


def test_readme_is_generated_from_the_schema():
    import importlib.util

    spec = importlib.util.spec_from_file_location("make_readme", ROOT / "docs" / "make_readme.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    assert (ROOT / "README.md").read_text(encoding="utf-8") == mod.render(), "run: python docs/make_readme.py"


def test_every_job_key_documented():
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    for section, keys in SCHEMA.items():
        assert f"**[{section}]**" in readme
        for name in keys:
            assert f"`{name}`" in readme


def test_two_quickstart_commands_between_markers():
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    for tag in ("quickstart-demo", "quickstart-test"):
        block = re.search(rf"<!-- {tag} -->\n```\n(.+?)\n```\n<!-- /{tag} -->", readme, re.S)
        assert block and "\n" not in block.group(1), f"{tag}: exactly one command line"
