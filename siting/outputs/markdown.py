"""The plan report in Markdown: the same sections and numbers as the HTML report, figures as files.

Text from input data is made inert (HTML characters as entities, emphasis and code characters escaped, no
inline link or image), so a name in the buildings layer cannot inject markup into a Markdown viewer.
"""

from __future__ import annotations

import html

from ..plandiff import report_section
from .derive import PlanFigures
from .report import (
    CAUTIONS,
    EXPOSURE_CAUTION,
    KEY_FIGURES,
    SENSITIVITY_SENTENCE,
    SITE_DETAIL_TABLE,
    SITE_TABLE,
    SITES_SENTENCE,
    _check_lists,
    _cur,
    _exposure_rows,
    _exposure_sentence,
    _input_rows,
    _key_figure,
    _kind_rows,
    _sensitivity_rows,
    _site_rows,
    _summary_sentences,
    _sweep_rows,
    assumptions,
    backups_sentence,
    flatten,
    site_headers,
    solver_rows,
    timing_rows,
)

# ---------------------------------------------------------------------------------------------- Markdown

_MD_SPECIAL = str.maketrans({c: "\\" + c for c in "\\`*_"})


def _md_text(v) -> str:
    """Text from the data made inert in Markdown: HTML characters as entities, emphasis and code characters
    backslash-escaped, no inline link or image (``](`` broken), one line."""
    text = html.escape(str(v), quote=False).translate(_MD_SPECIAL).replace("](", "]\\(")
    return text.replace("\r", " ").replace("\n", " ")


def _md_escape(v: str) -> str:
    return _md_text(v).replace("|", "\\|")


def _md_table(head, rows) -> str:
    lines = ["| " + " | ".join(_md_escape(h) for h in head) + " |", "|" + "---|" * len(head)]
    lines += ["| " + " | ".join(_md_escape(c) for c in r) + " |" for r in rows]
    return "\n".join(lines)


def report_md(bundle, fig: PlanFigures, figure_files: dict, record: dict) -> str:
    """The same report in Markdown; figures are referenced as files relative to the report."""
    s = fig.summary
    sentences = [_md_text(x) for x in _summary_sentences(s)]
    if s["empty_plan"]:  # the reason comes first, in bold
        sentences[0] = f"**{sentences[0]}**"
    p = [f"# {_md_text(bundle.title)}", "", " ".join(sentences), ""]
    p += ["## Key figures", "", _md_table(["Figure", "Value"], [(lbl, _key_figure(s, k, kind)) for k, lbl, kind in KEY_FIGURES]), ""]
    head, rows = _kind_rows(fig)
    p += ["## Coverage before and after", "", _md_table(head, rows), ""]
    p += ["## Budget and solver", "", _md_table(["Item", "Value"], solver_rows(s)), ""]
    p += ["## Map", "", f"![Map of the district with buildings, base stations, chosen surfaces and demand]({figure_files['district_map']})", ""]
    p += ["## Coverage against budget", ""]
    if figure_files.get("coverage_curve"):
        p += [f"![Covered demand weight against budget]({figure_files['coverage_curve']})", "",
              _md_table(*_sweep_rows(bundle, s)), ""]
    else:
        p += ["No budget sweep was run for this job.", ""]
    p += ["## SNR distribution", "", f"![SNR distribution without and with the plan]({figure_files['snr_cdf']})", ""]
    p += ["## Ranked sites", ""]
    if len(fig.sites):
        p += [_md_table(site_headers(SITE_TABLE, _cur(s)), _site_rows(fig)), "",
              _md_table(site_headers(SITE_DETAIL_TABLE), _site_rows(fig, SITE_DETAIL_TABLE)), "", SITES_SENTENCE, "",
              backups_sentence(fig), ""]
    else:
        p += ["No site was chosen.", ""]
    p += ["## Feeds and building heights to check", ""]
    if not s.get("site_checks_computed"):
        p += ["No site checks were computed for this run.", ""]
    elif len(fig.sites):
        lobes, heights = _check_lists(fig)
        p += ["Surfaces fed from a station's back lobe (more than 20 dB below its boresight gain):", ""]
        p += ([f"- {_md_text(x)}" for x in lobes] or ["none."]) + [""]
        p += ["Surfaces whose links depend on guessed building heights:", ""]
        p += ([f"- {_md_text(x)}" for x in heights] or ["none."]) + [""]
    else:
        p += ["No site was chosen.", ""]
    p += ["## RF exposure screening", ""]
    if s.get("site_checks_computed") and len(fig.sites):
        p += [_md_table(*_exposure_rows(fig)), ""]
        sentence = _exposure_sentence(fig)
        if sentence:
            p += [_md_text(sentence), ""]
    else:
        p += ["No exposure screening was computed for this run." if len(fig.sites) else "No site was chosen.", ""]
    p += [EXPOSURE_CAUTION, ""]
    p += ["## What the model assumptions are worth", ""]
    if fig.sensitivity is not None and len(fig.sensitivity):
        p += [SENSITIVITY_SENTENCE, "", _md_table(*_sensitivity_rows(fig)), ""]
    else:
        p += ["No model sensitivity was computed for this run.", ""]
    changes = report_section(record)  # changes against the previous plan (siting.plandiff)
    if changes is not None:
        sentence, head, rows = changes
        p += ["## Changes against the previous plan", "", _md_text(sentence), ""]
        p += [_md_table(head, rows), ""] if rows else []
    p += ["## Model assumptions", ""] + [f"- {a}" for a in assumptions(bundle.params)] + [""]
    p += ["## Cautions", ""] + [f"- {c}" for c in CAUTIONS] + [""]
    p += ["## Inputs and parameters", "", _md_table(["Input", "Value"], _input_rows(bundle, s)), ""]
    hashes = record.get("input_hashes") or {}
    if hashes:
        p += ["### Input files", "", _md_table(["File", "SHA-256"], sorted(hashes.items())), ""]
    params = flatten(bundle.params)
    if params:
        p += ["### Parameters", "", _md_table(["Key", "Value"], [(k, str(v)) for k, v in params]), ""]
    p += ["## Run details", "", "### Timings", "", _md_table(["Stage", "Time [s]"], timing_rows(record)), ""]
    p += ["### Versions", "", _md_table(["Package", "Version"], [(k, str(v)) for k, v in record["versions"].items()]), ""]
    if fig.notes:
        p += ["### Notes", ""] + [f"- {_md_text(n)}" for n in fig.notes] + [""]
    return "\n".join(p)
