"""Outputs of a plan for GIS users, field survey teams and decision makers.

:func:`write_outputs` is the only function in the package that writes result files.  It takes an
:class:`OutputBundle` (the tables of every stage plus the plan) and writes, in ``out_dir``:

=========================  =================================================================================
``surfaces.geojson``       chosen surfaces (points, rank order) with the survey fields
``surface_walls.geojson``  each chosen panel as a short line along its wall, as long as the panel is wide
``demand.geojson``         demand points: direct SNR, SNR with the plan, covered before / after, serving site
``links.geojson``          base station -> surface -> served user lines
``candidates.geojson``     every candidate spot considered (only with ``include_candidates``)
``plan.gpkg``              all of the above as GeoPackage layers (only when ``formats`` has ``"gpkg"``)
``survey.csv``             the survey list, one row per chosen site in rank order
``survey.html``            printable survey list with a small map per site
``report.html``            self-contained report (figures embedded, no scripts, no network)
``report.md``              the same report in Markdown, figures in ``figures/*.png``
``run.json``               every figure, the parameters, input hashes, timings and versions (written last)
=========================  =================================================================================

Each file is written to a temporary file in the same folder and renamed into place, so a reader never sees
a half-written file; ``run.json`` is written last, so its presence marks a complete set.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from pathlib import Path

import geopandas
import pandas
import pyproj

from ..errors import SitingError
from . import atomic, figures, layers, report, survey
from .derive import PlanFigures, compass_point, derive, element_count, element_pitch_m

__all__ = ["OutputBundle", "PlanFigures", "write_outputs", "derive", "compass_point", "element_count",
           "element_pitch_m", "FORMATS"]

FORMATS = ("geojson", "gpkg")


@dataclass
class OutputBundle:
    """What the output stage needs from the pipeline.  Tables follow :mod:`siting.tables`."""

    crs: pyproj.CRS
    """projected CRS of every x, y below"""
    buildings: geopandas.GeoDataFrame
    """'buildings' contract"""
    base_stations: pandas.DataFrame
    """'base_stations' contract"""
    sites: pandas.DataFrame
    """'sites' contract (all candidate spots)"""
    sizes: pandas.DataFrame
    """'sizes' contract (+ optional 'elements' int column per size)"""
    users: pandas.DataFrame
    """'users' contract"""
    options: pandas.DataFrame
    """'options' contract"""
    coverage: pandas.DataFrame
    """'coverage' contract (option_id, user_id, snr_db, bs_idx)"""
    direct: pandas.DataFrame
    """'direct' contract (user_id, snr_db, bs_idx, los, covered)"""
    plan: object
    """has: chosen (option ids in rank order), objective, bound, gap, status, solver, cost, message,
    greedy_objective, timings_s, model_size"""
    ranking: pandas.DataFrame
    """option, rank, marginal_weight, cumulative_weight, exclusive_weight, shared_weight"""
    backups: pandas.DataFrame
    """option, backup_rank, backup_option, recovered_weight"""
    sweep: pandas.DataFrame | None
    """budget, covered_weight, bound, gap, cost, n_sites, status"""
    snr_target_db: float
    budget: float | None
    """max cost, None if only a panel count"""
    max_panels: int | None
    params: dict
    """the resolved job as nested dict (for the report's parameter table)"""
    run_info: dict
    """input_hashes, timings_s per stage, versions, visibility degree stats, notes"""
    formats: tuple = ("geojson",)
    """may include "gpkg\""""
    include_candidates: bool = False
    title: str = "Reflecting-surface siting plan"
    site_checks: pandas.DataFrame | None = None
    """one row per chosen option: option_id, feed_bs_idx (-1 none), feed_below_peak_db, back_lobe_feed,
    guessed_height_links, exposure_w_m2, exposure_where, exposure_reference_w_m2, exposure_share
    (see :data:`siting.outputs.derive.SITE_CHECK_COLUMNS`); None when not computed"""
    sensitivity: pandas.DataFrame | None = None
    """model, covered_weight, covered_directly_weight: the chosen plan under the planning model, each planning
    assumption relaxed alone and the upper-bound model; None when not computed"""


def _check_formats(formats) -> tuple:
    if isinstance(formats, str):
        formats = (formats,)
    bad = [f for f in formats if f not in FORMATS]
    if bad:
        raise SitingError(f"output formats: expected any of {list(FORMATS)}, got {bad}; "
                          "fix outputs.formats in the job")
    return tuple(formats)


def write_outputs(out_dir, bundle: OutputBundle) -> dict:
    """Write every output of a plan into ``out_dir``; return ``{name: path}`` of the files written.

    All figures are computed (and the bundle checked) before the first file is touched, so a bad bundle
    raises :class:`~siting.errors.SitingError` and leaves ``out_dir`` as it was.  ``run.json`` is written last.
    """
    t_start = time.perf_counter()
    formats = _check_formats(bundle.formats)
    fig = derive(bundle)
    t = {"derive": time.perf_counter() - t_start}
    out = Path(out_dir)
    try:
        (out / "figures").mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise SitingError(f"output folder: expected a writable folder at '{out}', got {exc.strerror}; "
                          "choose another outputs.folder or fix its permissions") from exc
    written: dict[str, Path] = {}

    t0 = time.perf_counter()
    lay = layers.build_layers(bundle, fig)
    if "geojson" in formats:
        for layer in lay:
            written[f"{layer.name}_geojson"] = layers.write_geojson(out / f"{layer.name}.geojson", layer)
    if "gpkg" in formats:
        written["gpkg"] = layers.write_gpkg(out / "plan.gpkg", lay)
    t["layers"] = time.perf_counter() - t0

    t0 = time.perf_counter()
    frame = survey.survey_frame(bundle, fig)
    written["survey_csv"] = survey.write_survey_csv(out / "survey.csv", frame)
    written["survey_html"] = atomic.write_text(out / "survey.html", survey.survey_html(bundle, fig, frame, bundle.title))
    t["survey"] = time.perf_counter() - t0

    t0 = time.perf_counter()
    pngs = {"district_map": figures.district_map(bundle, fig),
            "coverage_curve": figures.coverage_curve(bundle.sweep, fig.summary),
            "snr_cdf": figures.snr_cdf(fig, float(bundle.snr_target_db))}
    figure_files = {}
    for name, png in pngs.items():
        if png is not None:
            written[f"figure_{name}"] = atomic.write_bytes(out / "figures" / f"{name}.png", png)
            figure_files[name] = f"figures/{name}.png"
    t["figures"] = time.perf_counter() - t0

    t0 = time.perf_counter()
    rel = {k: str(Path(v).relative_to(out)) for k, v in written.items()}
    rel.update(report_html="report.html", report_md="report.md", run_json="run.json")
    record = report.run_record(bundle, fig, rel, t)
    written["report_html"] = atomic.write_text(out / "report.html", report.report_html(bundle, fig, pngs, record))
    written["report_md"] = atomic.write_text(out / "report.md", report.report_md(bundle, fig, figure_files, record))
    t["report"] = time.perf_counter() - t0
    t["total"] = time.perf_counter() - t_start
    record["timings_s"].update({f"outputs.{k}": v for k, v in t.items()})

    import json

    written["run_json"] = atomic.write_text(out / "run.json", json.dumps(record, indent=1, allow_nan=False,
                                                                         ensure_ascii=False) + "\n")
    return written
