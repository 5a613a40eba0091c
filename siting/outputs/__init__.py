"""Outputs of a plan for GIS users, field survey teams and decision makers.

:func:`write_outputs` is the only function in the package that writes result files.  It takes an
:class:`OutputBundle` (the tables of every stage plus the plan) and writes, in ``out_dir``:

=========================  =================================================================================
``surfaces.geojson``       chosen surfaces (points, rank order) with the survey fields
``surface_walls.geojson``  each chosen panel as a short line along its wall, as long as the panel is wide
``demand.geojson``         demand points: direct SNR, SNR with the plan, covered before / after, serving site,
                           why a point is not covered (``reason``, ``shortfall_db``)
``links.geojson``          base station -> surface -> served user lines
``candidates.geojson``     every candidate spot considered (only with ``include_candidates``)
``plan.gpkg``              all of the above as GeoPackage layers (only when ``formats`` has ``"gpkg"``)
``survey.csv``             the survey list, one row per chosen site in rank order
``survey.html``            printable survey list (A4): a small map per site, backups with building, address,
                           wall, height and distance from the primary spot
``report.html``            self-contained report (figures embedded, no scripts, no network)
``report.md``              the same report in Markdown, figures in ``figures/*.png`` (the map at A4, 200 dpi)
``run.json``               every figure, the parameters, input hashes, timings, versions, the definitions of
                           its less obvious names and the ``manifest`` of the set (moved into place last)
=========================  =================================================================================

The set is complete or absent: every file is first written into a staging folder inside ``out_dir``, and
moved into place only when all of them are written; ``run.json`` is moved last and lists in ``manifest`` the
files of the set, the only files a later run replaces or removes (see :mod:`siting.outputs.atomic`).  A run
that fails, is killed or runs out of disk while writing leaves the previous set as it was.
:func:`check_output_folder` refuses unsafe output folders before a run starts.
"""

from __future__ import annotations

import json
import time
from dataclasses import dataclass
from pathlib import Path

import geopandas
import pandas
import pyproj

from ..errors import SitingError
from ..plandiff import field_survey_frame
from ..radio import element_count
from . import atomic, figures, folder, layers, markdown, report, survey
from . import record as record_mod
from .derive import PlanFigures, derive
from .folder import check_output_folder, output_folder_problems, planned_files
from .values import compass_point

__all__ = ["OutputBundle", "PlanFigures", "write_outputs", "derive", "compass_point", "element_count",
           "FORMATS", "check_output_folder", "output_folder_problems", "planned_files"]

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
    """option, rank (only these are read; the weights are recomputed and printed as ``weight_gained``)"""
    backups: pandas.DataFrame
    """the optimiser's backups (:func:`siting.optimize.backups_for`): option, backup_rank, backup_option and, when
    given, recovered_weight, recovered_share, kept_weight, weak, placement, in the order to show (weak, when
    missing, is recovered_share < 0.5); any further column is shown as given"""
    sweep: pandas.DataFrame | None
    """budget, covered_weight, bound, gap, cost, n_sites, status"""
    snr_target_db: float
    budget: float | None
    """max cost, None if only a panel count"""
    max_panels: int | None
    params: dict
    """the resolved job as nested dict (for the report's parameter and assumption tables only; the figures
    read the typed fields below)"""
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
    currency: str = ""
    """currency of every cost (e.g. "EUR"; ``budget.currency``); empty: costs print in "cost units" """
    element_pitch_m: float | None = None
    """element pitch [m] for the element counts when ``sizes`` has no 'elements' column (None: unknown)"""
    load_cap_weight: float | None = None
    """most weight one surface may carry (``surfaces.load_cap_weight``; None or 0: no cap, ``plan.covered``
    is then not consulted)"""
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


def write_outputs(out_dir, bundle: OutputBundle, *, extra_files: dict | None = None,
                  overwrite: bool = False) -> dict:
    """Write every output of a plan into ``out_dir`` as one complete set; return ``{name: path}`` of its files.

    All figures are computed (and the bundle checked) before the first file is touched, so a bad bundle
    raises :class:`~siting.errors.SitingError` and leaves ``out_dir`` as it was.  The whole set is written
    into a staging folder first and moved into place only when every file is written (see
    :mod:`siting.outputs.atomic`): a failure or a full disk while writing leaves the previous set as it was,
    and ``run.json`` (moved last) lists in ``manifest`` the files this run created, the only files a later
    run replaces or removes.

    Parameters
    ----------
    out_dir : the output folder (created when missing).
    bundle : the plan and every table (see :class:`OutputBundle`).
    extra_files : ``{name: (relative path, writer)}`` for further files of the set; ``writer(path)`` writes
        the file at ``path`` (e.g. the runner's LOS graph: ``{"los_graph": ("los_graph.graphml", fn)}``).
    overwrite : replace files of the set's names that no siting run created (default: refuse, naming them).
    """
    t_start = time.perf_counter()
    formats = _check_formats(bundle.formats)
    extra = dict(extra_files or {})
    fig = derive(bundle)
    t = {"derive": time.perf_counter() - t_start}
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise SitingError(f"output folder: expected a folder at '{out}', found a file; remove or rename the file, "
                          "or choose another output.folder")
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise SitingError(f"output folder: expected a writable folder at '{out}', got {exc.strerror}; "
                          "choose another output.folder or fix its permissions") from exc
    extra_names = [rel for rel, _ in extra.values()]
    rel = commit_set(out, folder.planned_files(formats, bundle.include_candidates, extra_names),
                     lambda st: _write_set(st, bundle, fig, formats, extra, t, t_start),
                     extra_names=extra_names, overwrite=overwrite)
    return {k: out / v for k, v in rel.items()}


def commit_set(out: Path, names: list[str], write, *, extra_names=(), overwrite: bool = False) -> dict:
    """Write one output set into ``out`` (an existing folder) and commit it: under the folder lock, recover an
    interrupted commit, refuse files among ``names`` that no siting run created (unless ``overwrite``), let
    ``write(staging)`` write the set and return ``{name: relative path}``, then move it into place.

    Used by :func:`write_outputs` and by the light set of a scenario (:mod:`siting.scenario_outputs`).
    """
    allowed = lambda rel: folder.siting_name(rel, list(extra_names))  # noqa: E731
    with atomic.folder_lock(out):
        try:
            atomic.recover(out, allowed)
        except OSError as exc:
            raise SitingError(f"output folder: expected a writable folder at '{out}', got {exc.strerror}; "
                              "choose another output.folder or fix its permissions") from exc
        unsafe = folder.unsafe_paths(out, names)
        if unsafe:
            raise SitingError(f"output folder '{out}': {'; '.join(unsafe)}; move it away or choose another "
                              "output.folder (--overwrite does not lift this)")
        clash = [] if overwrite else folder.foreign_files(out, names)
        if clash:
            raise SitingError(f"output folder '{out}' holds files that no siting run created there: "
                              f"{', '.join(clash)}; move them away, choose another output.folder, or allow it with "
                              "--overwrite")
        try:
            with atomic.OutputSet(out, allowed) as st:
                rel = write(st)
                st.commit(list(rel.values()))
        except atomic.CommitError as exc:
            cause = exc.cause
            why = ""
            if isinstance(cause, OSError):
                names = [str(f) for f in (cause.filename, cause.filename2) if f is not None]
                where = next((f for f in names if atomic.STAGING_PREFIX not in f), names[0] if names else "")
                why = f" ({cause.strerror or cause}{f': {where}' if where else ''})"
            raise SitingError(f"output folder '{out}': {exc}{why}; fix the permissions of the folder or of the item "
                              "named, or move it away, and run again") from exc
        except OSError as exc:
            raise SitingError(f"output folder '{out}': writing the output set failed ({exc.strerror or exc}); the "
                              "previous set is left as it was; free disk space or fix the folder's permissions and "
                              "run again") from exc
    return rel


def _write_set(st, bundle, fig, formats, extra, t, t_start) -> dict:
    """Write every file of the set into the staging folder; return ``{name: relative path}``, run.json last."""
    rel: dict[str, str] = {}

    def put(name: str, path: str, write) -> None:
        write(st.path(path))
        rel[name] = path

    t0 = time.perf_counter()
    lay = layers.build_layers(bundle, fig)
    if "geojson" in formats:
        for layer in lay:
            put(f"{layer.name}_geojson", f"{layer.name}.geojson", lambda p, la=layer: layers.write_geojson(p, la))
    if "gpkg" in formats:
        put("gpkg", "plan.gpkg", lambda p: layers.write_gpkg(p, lay))
    t["layers"] = time.perf_counter() - t0

    t0 = time.perf_counter()
    frame = survey.survey_frame(bundle, fig)
    frame = field_survey_frame(frame, bundle.run_info)  # the next survey list: sites still to visit
    put("survey_csv", "survey.csv", lambda p: survey.write_survey_csv(p, frame))
    put("survey_html", "survey.html",
        lambda p: atomic.write_text(p, survey.survey_html(bundle, fig, frame, bundle.title)))
    t["survey"] = time.perf_counter() - t0

    t0 = time.perf_counter()
    pngs = {"district_map": figures.district_map(bundle, fig),
            "coverage_curve": figures.coverage_curve(bundle.sweep, fig.summary, currency=bundle.currency),
            "snr_cdf": figures.snr_cdf(fig, float(bundle.snr_target_db))}
    figure_files = {}
    for name, png in pngs.items():
        if png is not None:
            put(f"figure_{name}", f"figures/{name}.png", lambda p, data=png: atomic.write_bytes(p, data))
            figure_files[name] = f"figures/{name}.png"
    t["figures"] = time.perf_counter() - t0

    t0 = time.perf_counter()
    for name, (path, writer) in extra.items():
        put(name, path, writer)
    if extra:
        t["extra_files"] = time.perf_counter() - t0

    t0 = time.perf_counter()
    files = dict(rel, report_html="report.html", report_md="report.md", run_json="run.json")
    record = record_mod.run_record(bundle, fig, files, t)
    put("report_html", "report.html", lambda p: atomic.write_text(p, report.report_html(bundle, fig, pngs, record)))
    put("report_md", "report.md",
        lambda p: atomic.write_text(p, markdown.report_md(bundle, fig, figure_files, record)))
    t["report"] = time.perf_counter() - t0
    t["total"] = time.perf_counter() - t_start
    record["timings_s"].update({f"outputs.{k}": v for k, v in t.items()})
    record["manifest"] = {"complete": True, "created_by": "siting",
                          "note": "the files of this output set; a later run replaces or removes only these",
                          "files": sorted([*rel.values(), "run.json"])}

    put("run_json", "run.json", lambda p: atomic.write_text(
        p, json.dumps(record, indent=1, allow_nan=False, ensure_ascii=False) + "\n"))
    return rel
