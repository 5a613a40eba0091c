"""The machine-readable record of a run, ``run.json``: every figure the report shows, the parameters, input
hashes, timings, package versions and the definitions of the less obvious names.
"""

from __future__ import annotations

import importlib.metadata
import math
import platform

import numpy as np
import pandas as pd

from .derive import PlanFigures

VERSIONED_PACKAGES = ("numpy", "scipy", "pandas", "shapely", "geopandas", "pyproj", "pyogrio", "pulp", "highspy",
                      "numba", "matplotlib", "siting")


def package_versions() -> dict:
    """Installed versions of the packages the results depend on (None when not installed)."""
    out: dict[str, str | None] = {"python": platform.python_version()}
    for name in VERSIONED_PACKAGES:
        try:
            out[name] = importlib.metadata.version(name)
        except importlib.metadata.PackageNotFoundError:
            out[name] = None
    return out


def jsonable(obj):
    """Recursively convert to JSON-safe values: numpy scalars and arrays, NaN / inf -> None, keys -> str."""
    if isinstance(obj, dict):
        return {str(k): jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple, set)):
        return [jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return [jsonable(v) for v in obj.tolist()]
    if isinstance(obj, pd.DataFrame):
        return [jsonable(r) for r in obj.to_dict("records")]
    if obj is None or obj is pd.NA:
        return None
    if isinstance(obj, (bool, np.bool_)):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        return float(obj) if math.isfinite(float(obj)) else None
    if isinstance(obj, str):
        return obj
    try:
        if pd.isna(obj):
            return None
    except (TypeError, ValueError):
        pass
    return str(obj)


# ---------------------------------------------------------------------------------------------- run.json

def _records(df: pd.DataFrame | None) -> list[dict] | None:
    """A table as a list of records in its column order, or None."""
    if df is None:
        return None
    return [dict(zip(df.columns, row)) for row in df.itertuples(index=False, name=None)]


#: What the less obvious names of ``run.json`` and the other outputs mean (written into ``run.json``).
DEFINITIONS = {
    "counts.coverage_rows": "rows of the coverage relation: (surface option, demand point) pairs whose SNR "
                            "through the surface was computed, whatever the SNR",
    "counts.coverage_rows_at_target": "of those rows, the ones whose SNR reaches the SNR target",
    "weight_gained": "newly covered weight a chosen site adds in rank order (the optimiser's ranking calls it "
                     "marginal_weight)",
    "cumulative_covered_weight": "covered weight after the sites up to this one, the weight covered directly "
                                 "(without any surface) included",
    "exclusive_weight": "newly covered weight that no other chosen site brings to the target",
    "shared_weight": "newly covered weight that another chosen site also brings to the target",
    "facing_deg": "outward wall normal, degrees clockwise from north, in [0, 360)",
    "currency": "unit of every cost and budget; 'cost units' when the job names none",
    "reason": "why a demand point is or is not covered (demand layer)",
    "manifest.files": "the files this output set holds; a later run replaces or removes only these",
}


def run_record(bundle, fig: PlanFigures, files: dict, output_timings_s: dict) -> dict:
    """Everything the report shows, in machine-readable form (written as ``run.json``)."""
    import pyproj

    plan = bundle.plan
    get = (lambda n: plan.get(n)) if isinstance(plan, dict) else (lambda n: getattr(plan, n, None))
    ri = dict(bundle.run_info or {})
    ri.pop("notes", None)  # already merged into fig.notes
    timings = dict(ri.pop("timings_s", {}) or {})
    timings.update({f"outputs.{k}": v for k, v in output_timings_s.items()})
    counts = dict(ri.pop("counts", {}) or {})
    counts["coverage_rows"] = fig.summary["n_coverage_rows"]
    counts["coverage_rows_at_target"] = fig.summary["n_coverage_rows_at_target"]
    return jsonable({
        # format 2: weight_gained, cumulative_covered_weight, manifest, definitions, counts
        "format": "siting-run", "format_version": 2, "title": bundle.title,
        "crs": pyproj.CRS(bundle.crs).to_string(),
        "summary": fig.summary,
        "coverage_by_kind": fig.by_kind,
        "plan": {"chosen_option_ids": fig.sites["option_id"].tolist(), "status": get("status"),
                 "solver": get("solver"), "objective": get("objective"), "bound": get("bound"), "gap": get("gap"),
                 "cost": get("cost"), "message": get("message"), "greedy_objective": get("greedy_objective"),
                 "mode": get("mode"), "tie_break": get("tie_break"),
                 "timings_s": get("timings_s"), "model_size": get("model_size")},
        "sites": fig.sites,
        "backups": fig.backups,
        "sweep": bundle.sweep if bundle.sweep is not None else None,
        # the runner's tables as handed over (null when the run did not compute them)
        "site_checks": _records(getattr(bundle, "site_checks", None)),
        "sensitivity": _records(getattr(bundle, "sensitivity", None)),
        "parameters": bundle.params,
        "input_hashes": ri.pop("input_hashes", {}),
        "timings_s": timings,
        "versions": {**package_versions(), **(ri.pop("versions", {}) or {})},
        "visibility": ri.pop("visibility", None),
        "counts": counts,
        "definitions": DEFINITIONS,
        "notes": fig.notes,
        "run_info": ri,
        "files": files,
    })
