"""What changed against the previous plan, and the next survey list.

The previous plan is the ``run.json`` of the job's output folder (read before the new set replaces it) or the
one ``inputs.previous_plan`` names (a ``run.json`` or a folder holding one).  Each site of either plan is

- ``kept``: in both plans (``settled in the field`` when a verdict accepted it; a size change is named);
- ``dropped``: only in the previous plan, with the reason: ``rejected``, ``wall rejected``, ``moved`` (to the
  spot that replaces it), ``panel too large`` or ``re-optimised`` (the optimiser preferred other spots);
- ``added``: only in the new plan: ``moved here`` (the spot of a moved site) or ``re-optimised``.

Site ids compare only within one candidate set: when the job fingerprints differ the diff says so and lists
nothing.  The next survey list (``survey.csv``) holds only the sites still to visit (accepted ones and the spots
of moved ones are done), with their backups, the job fingerprint and empty verdict columns for the field teams
(see :mod:`siting.verdicts`).
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .verdicts import FINGERPRINT_COLUMN, VERDICT_COLUMNS, job_fingerprint

#: The order in which a dropped site's reasons are named (the first that applies to all its options wins).
_WHY_ORDER = ("rejected", "moved", "wall rejected", "panel too large")


def read_previous_plan(path: str | Path | None) -> dict | None:
    """The previous plan's run.json as a dict, or None (no file, not a siting run record, unreadable)."""
    if not path:
        return None
    p = Path(path)
    p = p / "run.json" if p.is_dir() else p
    try:
        record = json.loads(p.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if not isinstance(record, dict) or record.get("format") != "siting-run" or "sites" not in record:
        return None
    record["_path"] = str(p)
    return record


def _site_reason(site: int, opts: pd.DataFrame, why: np.ndarray | None) -> str:
    if why is None:
        return "re-optimised"
    reasons = set(why[opts.index[opts["site_id"].to_numpy() == site]])
    for r in _WHY_ORDER:
        if reasons == {r}:
            return r
    return "re-optimised"


def plan_diff(previous: dict | None, new_sites: pd.DataFrame, fingerprint: str, options: pd.DataFrame,
              field_ctx=None) -> dict[str, Any]:
    """Kept, dropped and added sites against ``previous`` (a run.json dict) with the reason of each change.

    Parameters
    ----------
    previous : dict or None
        The previous run record (:func:`read_previous_plan`).
    new_sites : pandas.DataFrame
        The new plan's sites: site_id, size_id, rank.
    fingerprint : str
        This job's :func:`siting.verdicts.job_fingerprint`.
    options : pandas.DataFrame
        The options table (site_id per option), to name why a dropped site's options went.
    field_ctx : siting.replan.FieldContext, optional
        The verdicts of this run.

    Returns
    -------
    dict
        ``previous`` (path), ``comparable`` (bool), ``reason`` (when not comparable), ``counts`` and ``sites``: one
        record per site (site_id, change, reason, size_before, size_after, rank_before, rank_after).
    """
    if previous is None:
        return {"previous": None, "comparable": False, "reason": "no previous plan", "counts": {}, "sites": []}
    old_fp = (previous.get("run_info") or {}).get("job_fingerprint")
    if old_fp and old_fp != fingerprint:
        return {"previous": previous.get("_path"), "comparable": False, "counts": {}, "sites": [],
                "reason": f"the previous plan has another candidate set (fingerprint {old_fp}, now {fingerprint}): "
                          "site ids do not compare"}
    old = {int(s["site_id"]): s for s in previous.get("sites") or []}
    new = {int(s): (z, r) for s, z, r in zip(new_sites["site_id"], new_sites["size_id"], new_sites["rank"])}
    why = None if field_ctx is None or field_ctx.restriction is None else field_ctx.restriction.why
    accepted = set(field_ctx.accepted_sites()) if field_ctx is not None else set()
    moved_to = field_ctx.moved_to() if field_ctx is not None else {}
    moved_from = {v: k for k, v in moved_to.items()}
    rows = []
    for site in sorted(set(old) | set(new)):
        before, after = old.get(site), new.get(site)
        row = {"site_id": site, "size_before": before["size_id"] if before else None,
               "size_after": after[0] if after else None, "rank_before": before["rank"] if before else None,
               "rank_after": after[1] if after else None}
        if before and after:
            reason = "settled in the field" if site in accepted else "still chosen"
            if str(before["size_id"]) != str(after[0]):
                reason += f"; size {before['size_id']} -> {after[0]}"
            rows.append({**row, "change": "kept", "reason": reason})
        elif before:
            reason = _site_reason(site, options, why)
            if reason == "moved" and site in moved_to:
                reason = f"moved to spot {moved_to[site]}"
            rows.append({**row, "change": "dropped", "reason": reason})
        else:
            reason = f"moved here from site {moved_from[site]}" if site in moved_from else "re-optimised"
            rows.append({**row, "change": "added", "reason": reason})
    counts = {c: sum(r["change"] == c for r in rows) for c in ("kept", "dropped", "added")}
    return {"previous": previous.get("_path"), "comparable": True, "counts": counts, "sites": rows}


def field_run_info(result) -> dict[str, Any]:
    """What run.json's ``run_info`` gets from the field work: the job fingerprint, the verdicts, the plan diff.

    ``result`` is the runner's :class:`~siting.runner.RunResult`; called before the new output set is written,
    so the output folder's run.json is still the previous plan's.
    """
    fctx = result.field
    if fctx is not None and fctx.restriction is None:  # the plan came from the stage cache
        from .verdicts import restrict_options

        fctx.restriction = restrict_options(fctx.verdicts, result.sites, result.gains.options, result.sizes,
                                            fctx.moved_to())
    fp = fctx.fingerprint if fctx is not None else job_fingerprint(result.sites)
    job = result.job
    # a re-plan from field verdicts compares with the output folder's plan; any other run only with the plan named
    # in inputs.previous_plan, so rerunning a job (fresh, cached, resumed) gives the same report
    prev_path = job.inputs.previous_plan or (Path(job.output.folder) / "run.json" if fctx is not None else None)
    opts = result.gains.options
    rank = result.ranking.set_index("option")["rank"] if len(result.ranking) else pd.Series(dtype="int64")
    chosen = np.asarray(result.plan.chosen, np.int64)
    new_sites = pd.DataFrame({"site_id": opts["site_id"].to_numpy()[chosen],
                              "size_id": opts["size_id"].to_numpy()[chosen],
                              "rank": rank.reindex(chosen).to_numpy()})
    out: dict[str, Any] = {"job_fingerprint": fp,
                           "plan_diff": plan_diff(read_previous_plan(prev_path), new_sites, fp, opts, fctx)}
    if fctx is not None:
        out["field"] = fctx.summary()
    return out


def field_survey_frame(frame: pd.DataFrame, run_info: dict | None) -> pd.DataFrame:
    """The next survey list: accepted sites left out, the job fingerprint and empty verdict columns added."""
    info = run_info or {}
    done = set((info.get("field") or {}).get("accepted_sites") or [])
    out = frame[~frame["site_id"].isin(done)].reset_index(drop=True) if done else frame.copy()
    out[FINGERPRINT_COLUMN] = info.get("job_fingerprint", "")
    for c in VERDICT_COLUMNS:
        out[c] = ""
    return out


def _rows(record: dict) -> tuple[dict, list[list[str]]]:
    diff = (record.get("run_info") or {}).get("plan_diff") or {}
    rows = [[str(r["site_id"]), r["change"], str(r["size_before"] or "-"), str(r["size_after"] or "-"),
             str(r["reason"])] for r in diff.get("sites", []) if r["change"] != "kept" or "settled" in r["reason"]
            or "size" in r["reason"]]
    return diff, rows


_HEAD = ["Site", "Change", "Size before", "Size after", "Why"]


def _sentence(diff: dict) -> str:
    if not diff.get("comparable"):
        return f"No comparison: {diff.get('reason', 'no previous plan')}."
    c = diff["counts"]
    return (f"Against the previous plan ({diff['previous']}): {c['kept']} site(s) kept, {c['dropped']} dropped, "
            f"{c['added']} added. Sites kept unchanged are not listed.")


def report_section(record: dict) -> tuple[str, list[str], list[list[str]]] | None:
    """The report's "Changes against the previous plan" section as (sentence, table head, table rows), plain
    text for the Markdown and HTML writers to escape; None without a previous plan."""
    diff, rows = _rows(record)
    if not diff or diff.get("previous") is None:
        return None
    return _sentence(diff), _HEAD, rows


def cli_lines(run_json: str | Path | None) -> list[str]:
    """What ``siting plan`` prints about the verdicts and the changes, read back from the run.json written."""
    try:
        info = json.loads(Path(str(run_json)).read_text(encoding="utf-8")).get("run_info") or {}
    except (OSError, ValueError, TypeError):
        return []
    out = []
    field_info = info.get("field")
    if field_info:
        c = field_info["counts"]
        out.append(f"field verdicts: {c['accepted']} accepted, {c['moved']} moved, {c['rejected']} rejected "
                   f"({field_info['walls_rejected']} whole wall(s)), {c['pending']} pending")
    diff = info.get("plan_diff") or {}
    if diff.get("comparable"):
        c = diff["counts"]
        out.append(f"against the previous plan: {c['kept']} kept, {c['dropped']} dropped, {c['added']} added "
                   "(report.md lists why)")
    return out
