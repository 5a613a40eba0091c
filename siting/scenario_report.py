"""The scenario comparison files: ``scenarios.md``, ``scenarios.html``, ``scenarios.json``, ``robust_survey.csv``.

Written into the job's output folder by :func:`siting.scenarios.run_scenarios` as one committed set (staging
folder, then moved into place together, :class:`siting.outputs.atomic.OutputSet`): a failure leaves the previous
comparison as it was.  ``scenarios.json`` (moved last) lists the four files in its ``manifest``; only files it
lists are replaced by a later run without ``--overwrite`` (:func:`comparison_clash`).
"""

from __future__ import annotations

import html
import json
from pathlib import Path

import pandas as pd

from .outputs import atomic
from .outputs.survey import write_survey_csv

_COMPARE = [("scenario", "Scenario"), ("status", "Status"), ("proven", "Optimality"), ("surfaces", "Surfaces"),
            ("cost", "Cost"), ("covered_weight", "Newly covered weight"), ("covered_share", "Covered share"),
            ("bound", "Bound"), ("gap", "Gap"), ("time_s", "Time [s]"), ("error", "Error")]
_ROBUST = [("robust_rank", "#"), ("site_id", "Site"), ("chosen_in", "Chosen in"), ("chosen_share", "Share"),
           ("size_id", "Size"), ("best_rank", "Best rank"), ("building_id", "Building"), ("scenarios", "Scenarios")]


def _cell(col: str, v) -> str:
    if v is None or (isinstance(v, float) and v != v):
        return "-"
    if col in ("covered_share", "chosen_share"):
        return f"{100 * float(v):.1f} %"
    if col == "gap":
        return f"{100 * float(v):.2f} %"
    if col in ("cost", "covered_weight", "bound"):
        return f"{float(v):,.1f}"
    return str(v)


def _rows(frame: pd.DataFrame, cols) -> tuple[list[list[str]], list[str]]:
    present = [(c, h) for c, h in cols if c in frame.columns]
    return [[_cell(c, r[c]) for c, _ in present] for _, r in frame.iterrows()], [h for c, h in present]


def _sentences(result) -> list[str]:
    ok = [r for r in result.runs if r.ok]
    out = [f"{len(result.runs)} scenario(s): {len(ok)} ran, {len(result.runs) - len(ok)} failed. They shared one "
           "stage cache: a scenario that changes only the budget or the solver re-uses candidates, visibility and "
           "gains."]
    if result.counted:
        out.append(f"Robustness counts the {len(result.counted)} scenario(s) on candidate set {result.fingerprint} "
                   f"({', '.join(result.counted)}).")
    other = [r.name for r in ok if r.name not in result.counted]
    if other:
        out.append(f"Not comparable site by site (another candidate set): {', '.join(other)}.")
    stopped = [r.name for r in ok if r.row.get("status") != "optimal"]
    out.append("Every plan is proven optimal." if ok and not stopped else
               f"Stopped at a gap: {', '.join(stopped)} (raise solver.time_limit_s for these)." if stopped else "")
    return [s for s in out if s]


def comparison_md(result) -> str:
    """The comparison report in Markdown."""
    rows, head = _rows(result.comparison(), _COMPARE)
    p = ["# Scenario comparison", "", *[f"{s}" for s in _sentences(result)], "", "## Scenarios", "",
         "| " + " | ".join(head) + " |", "|" + "---|" * len(head)]
    p += ["| " + " | ".join(c.replace("|", "\\|").replace("\n", " ") for c in r) + " |" for r in rows]
    p += ["", "## Site robustness", "", "Sites chosen in most scenarios first (robust_survey.csv holds the same list "
          "for the field, with the verdict columns).", ""]
    if len(result.robustness):
        rows, head = _rows(result.robustness, _ROBUST)
        p += ["| " + " | ".join(head) + " |", "|" + "---|" * len(head)]
        p += ["| " + " | ".join(c.replace("|", "\\|") for c in r) + " |" for r in rows]
    else:
        p.append("No scenario chose a site.")
    return "\n".join(p) + "\n"


def _html_table(rows, head) -> str:
    esc = html.escape
    return ("<table><thead><tr>" + "".join(f"<th>{esc(h)}</th>" for h in head) + "</tr></thead><tbody>"
            + "".join("<tr>" + "".join(f"<td>{esc(c)}</td>" for c in r) + "</tr>" for r in rows) + "</tbody></table>")


def comparison_html(result) -> str:
    """The comparison report as a self-contained HTML page (escaped, no scripts)."""
    esc = html.escape
    css = ("body{font-family:system-ui,Arial,sans-serif;margin:1.5em}table{border-collapse:collapse;font-size:.85em}"
           "td,th{border:1px solid #999;padding:2px 6px;text-align:left}")
    parts = [f"<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>Scenario comparison</title>"
             f"<style>{css}</style></head><body><h1>Scenario comparison</h1>",
             *[f"<p>{esc(s)}</p>" for s in _sentences(result)], "<h2>Scenarios</h2>",
             _html_table(*_rows(result.comparison(), _COMPARE)), "<h2>Site robustness</h2>"]
    parts.append(_html_table(*_rows(result.robustness, _ROBUST)) if len(result.robustness)
                 else "<p>No scenario chose a site.</p>")
    parts.append("</body></html>\n")
    return "\n".join(parts)


#: The comparison files, ``scenarios.json`` (the record) last.
COMPARISON_FILES = ("scenarios.md", "scenarios.html", "robust_survey.csv", "scenarios.json")


def comparison_clash(out_dir: Path) -> list[str]:
    """The comparison files present in ``out_dir`` that no siting run wrote there: all of them unless a
    ``scenarios.json`` record of siting's lists them (records without a manifest, of earlier versions: all four),
    and any that is a link or not a regular file."""
    out_dir = Path(out_dir)
    rec = atomic._read_json(out_dir / "scenarios.json")
    ours: set[str] = set()
    if isinstance(rec, dict) and rec.get("format") == "siting-scenarios":
        man = rec.get("manifest")
        ours = set(man.get("files", [])) if isinstance(man, dict) else set(COMPARISON_FILES)
    out = []
    for name in COMPARISON_FILES:
        p = out_dir / name
        if p.is_symlink() or (p.exists() and (not p.is_file() or name not in ours)):
            out.append(name)
    return out


def write_comparison(out_dir: Path, result, *, overwrite: bool = False) -> dict[str, Path]:
    """Write the comparison files into ``out_dir`` as one set; return ``{name: path}``.

    Refuses (:class:`~siting.errors.SitingError`) files of those names that no siting run wrote (unless
    ``overwrite``) and links or folders in their place; a failure while moving the set into place restores the
    previous comparison.
    """
    from .errors import SitingError
    from .outputs.folder import unsafe_paths
    from .scenarios import robust_survey_frame

    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    record = {"format": "siting-scenarios", "format_version": 1, "fingerprint": result.fingerprint,
              "counted": result.counted, "exit_code": result.exit_code,
              "scenarios": [{"name": r.name, "ok": r.ok, "exit_code": r.exit_code, "error": r.error, **r.row,
                             "recomputed": r.recomputed, "job_fingerprint": r.fingerprint,
                             "chosen_sites": [] if r.chosen is None else r.chosen["site_id"].astype(int).tolist()}
                            for r in result.runs],
              "robustness": json.loads(result.robustness.to_json(orient="records")) if len(result.robustness) else [],
              "manifest": {"created_by": "siting", "files": list(COMPARISON_FILES),
                           "note": "the comparison files of this folder; a later run replaces only these"}}
    keys = {"scenarios.md": "scenarios_md", "scenarios.html": "scenarios_html", "scenarios.json": "scenarios_json",
            "robust_survey.csv": "robust_survey_csv"}
    with atomic.folder_lock(out_dir):
        atomic.recover(out_dir)
        unsafe = unsafe_paths(out_dir, COMPARISON_FILES)
        clash = [] if overwrite else comparison_clash(out_dir)
        if unsafe or clash:
            raise SitingError(f"output folder '{out_dir}': " + "; ".join(
                [*unsafe, *([f"holds files that no siting run created there: {', '.join(clash)}"] if clash else [])])
                + "; move them away or choose another output.folder")
        try:
            with atomic.OutputSet(out_dir) as st:
                atomic.write_text(st.path("scenarios.md"), comparison_md(result))
                atomic.write_text(st.path("scenarios.html"), comparison_html(result))
                write_survey_csv(st.path("robust_survey.csv"), robust_survey_frame(result))
                atomic.write_text(st.path("scenarios.json"), json.dumps(
                    record, indent=1, allow_nan=False, ensure_ascii=False, default=str) + "\n")
                st.commit(list(COMPARISON_FILES), previous=[])
        except atomic.CommitError as exc:
            raise SitingError(f"output folder '{out_dir}': writing the scenario comparison: {exc}") from exc
        except OSError as exc:
            raise SitingError(f"output folder '{out_dir}': writing the scenario comparison failed "
                              f"({exc.strerror or exc}); the previous comparison is left as it was") from exc
    return {keys[name]: out_dir / name for name in COMPARISON_FILES}
