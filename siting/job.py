"""Job file: schema, defaults, validation and command-line overrides.

A job is a TOML file (read with the standard library's ``tomllib``) with one section per stage.  Every key is
declared once in :data:`SCHEMA` with its type, unit, default, allowed range and meaning; that table is also the
job-file reference printed in the README (``siting keys`` prints it).  Validation collects every problem and
raises them together in one :class:`~siting.errors.JobError`: an unknown key names the nearest valid key, a
wrong type or out-of-range value names the key, its unit and the allowed range.  Relative paths resolve against
the folder of the job file.  Overrides stack: file -> ``--set section.key=value`` -> keyword arguments of the API.

The validated job is a :class:`Job`: one frozen dataclass per section, generated from :data:`SCHEMA` (so the
reference, the validation and the typed fields cannot drift apart).  A key's "none" value in the file (``0`` for
a limit, ``''`` for an optional path, ``[]`` for an automatic list; :attr:`Key.none`) reads ``None`` there, lists
read as tuples and ``[[surfaces.panels]]`` as :class:`Panel` objects.  :func:`load_job` and :func:`validate`
return the same job as plain dicts in the file's encoding (:meth:`Job.to_dict`), for hashing and printing.
"""

from __future__ import annotations

import copy
import difflib
import errno
import json
import math
import os
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, fields, make_dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any, TypeAlias

from .errors import JobError

_NEVER = object()  # marker: the key has no "none" value
#: Smallest tile [m] (``run.tile_m``, 0 aside): each tile also reads a halo of ``radio.bs_range_m`` (at least 10 m,
#: default 400 m) around it, so tiles below 100 m only multiply the halo work and the cache entries.
MIN_TILE_M = 100.0


@dataclass(frozen=True)
class Key:
    """One job key: type name, default, unit, allowed range and meaning."""

    type: str  # "float", "int", "bool", "str", "path", "floats", "list", "panels"
    default: Any
    unit: str = ""
    lo: float | None = None
    hi: float | None = None
    doc: str = ""
    choices: tuple = ()
    required: bool = False
    #: the file value that means "none" (no limit, not given, automatic): it becomes ``None`` in :class:`Job`
    none: Any = _NEVER

    def range_text(self) -> str:
        if self.choices:
            return "one of " + ", ".join(toml_literal(c) for c in self.choices)
        if self.lo is None and self.hi is None:
            return ""
        lo = "-inf" if self.lo is None else f"{self.lo:g}"
        hi = "inf" if self.hi is None else f"{self.hi:g}"
        return f"{self.none:g} or {lo} .. {hi}" if self.none_outside_range() else f"{lo} .. {hi}"

    def none_outside_range(self) -> bool:
        """True when the key's "none" value is a number outside ``lo .. hi`` (allowed as well, e.g. run.tile_m = 0)."""
        return (isinstance(self.none, (int, float)) and not isinstance(self.none, bool)
                and ((self.lo is not None and self.none < self.lo) or (self.hi is not None and self.none > self.hi)))


#: Largest cost of one panel or one installation [currency]: a catalogue price above a billion currency units is
#: a typo (an extra zero, a price in cents of a currency with no cents) whatever the currency, and such numbers
#: break the optimiser's tolerances (a cost of 1e15 leaves the solver without a plan).
MAX_UNIT_COST = 1e9
#: Largest budget [currency]: a thousand panels at the largest unit cost; more is a typo.
MAX_BUDGET = 1e12
#: Largest weight of one demand point or one surface's load cap [weight]: the same bound as a given user's
#: weight (README "Inputs"); a weight above a billion households or subscribers is a typo, and such numbers
#: overflow the coverage sums.
MAX_WEIGHT = 1e9

PANEL_KEYS: dict[str, Key] = {
    "size_id": Key("str", None, doc="catalogue id, unique", required=True),
    "width_m": Key("float", None, "m", 0.05, 20.0, "panel width along the wall", required=True),
    "height_m": Key("float", None, "m", 0.05, 20.0, "panel height", required=True),
    "cost": Key("float", None, "currency", 0.0, MAX_UNIT_COST, "panel cost (above 1e9 is a typo: an extra zero "
                "or a price in cents)", required=True),
    "install_cost": Key("float", 0.0, "currency", 0.0, MAX_UNIT_COST, "installation cost per panel (above 1e9 is "
                        "a typo)"),
}

SCHEMA: dict[str, dict[str, Key]] = {
    "inputs": {
        "buildings": Key("path", None, doc="building footprints: GeoJSON, GeoPackage, Shapefile, FlatGeobuf, "
                         "GeoParquet or .osm.pbf (needs the osm extra)", required=True),
        "buildings_layer": Key("str", "", none="", doc="layer name inside a multi-layer file ('' = the first layer)"),
        "building_id_column": Key("str", "id", doc="column holding building ids (falls back to id/osm_id, then "
                                  "the feature index)"),
        "height_column": Key("str", "", none="", doc="column with roof height in metres, tried first ('' = none)"),
        "storey_height_m": Key("float", 3.0, "m", 2.0, 6.0, "height per storey for building:levels"),
        "default_height_m": Key("float", 9.0, "m", 2.0, 300.0, "height for buildings with no usable tag"),
        "height_uncertainty_m": Key("float", 3.0, "m", 0.0, 100.0, "height band (+/-) of buildings whose height "
                                    "came from building:levels or the default; links that depend on it are "
                                    "flagged"),
        "base_stations": Key("path", None, doc="point layer of base stations (bs_id, z_m, tx_power_dbm, "
                             "max_gain_dbi, azimuth_deg, downtilt_deg, pattern)", required=True),
        "sites": Key("path", "", none="", doc="optional point layer of given facade spots, snapped to walls"),
        "users": Key("path", "", none="", doc="optional point layer of given demand points"),
        "user_weight_column": Key("str", "weight", doc="column of the users layer holding the demand weight (a "
                                  "name other than 'weight' must exist in the layer; without a 'weight' column "
                                  "every user weighs 1)"),
        "crs": Key("str", "", none="", doc="projected CRS for all metric work, e.g. 'EPSG:25832' ('' = local UTM zone)"),
        "survey_results": Key("path", "", none="", doc="field verdicts: the survey list (CSV) with status, reason, "
                              "measured position, largest panel and rejects_wall filled in; re-plans around them"),
        "previous_plan": Key("path", "", none="", doc="run.json (or its folder) of the plan to compare with ('' = the "
                             "output folder's run.json when re-planning from survey_results, else none)"),
        "scenarios": Key("path", "", none="", doc="TOML file of [[scenarios]] tables (name + overrides) to run "
                         "besides those in the job"),
    },
    "area": {
        "bbox": Key("floats", [], "deg", none=[], doc="[min_lon, min_lat, max_lon, max_lat] clip box ([] = whole layer)"),
        "polygon": Key("path", "", none="", doc="polygon layer bounding the area of interest ('' = none)"),
    },
    "candidates": {
        "generate": Key("bool", True, doc="derive facade spots from the footprints"),
        "spacing_m": Key("float", 5.0, "m", 0.5, 100.0, "spot spacing along each wall"),
        "mount_heights_m": Key("floats", [4.0, 8.0], "m", 0.5, 300.0, "panel centre heights above ground"),
        "roof_margin_m": Key("float", 1.0, "m", 0.0, 20.0, "a spot must be this far below the roof"),
        "offset_m": Key("float", 0.05, "m", 0.0, 1.0, "outward offset of a spot from its wall"),
        "party_gap_m": Key("float", 0.5, "m", 0.0, 10.0, "walls within this gap of another building get no spot"),
        "front_clear_m": Key("float", 1.0, "m", 0.0, 20.0, "free space required in front of a spot"),
        "snap_tolerance_m": Key("float", 2.0, "m", 0.0, 50.0, "given spots farther than this from a wall are "
                                "dropped"),
    },
    "demand": {
        "street_grid": Key("bool", True, doc="outdoor demand on a regular grid over the streets"),
        "grid_m": Key("float", 5.0, "m", 1.0, 200.0, "street grid spacing"),
        "street_height_m": Key("float", 1.5, "m", 0.0, 10.0, "terminal height of street points"),
        "street_weight": Key("float", 1.0, "weight", 0.0, MAX_WEIGHT, "weight of one street point (above 1e9 is a "
                             "typo: it overflows the coverage sums)"),
        "homes": Key("bool", False, doc="fixed-wireless terminals at windows on every floor"),
        "home_spacing_m": Key("float", 10.0, "m", 1.0, 200.0, "spacing of home terminals along walls"),
        "area_per_household_m2": Key("float", 80.0, "m2", 10.0, 10000.0, "floor area per household"),
        "allow_indoor": Key("bool", False, doc="keep given users inside buildings as kind 'indoor'"),
    },
    "radio": {
        "frequency_ghz": Key("float", 28.0, "GHz", 0.5, 100.0, "carrier frequency"),
        "bandwidth_mhz": Key("float", 400.0, "MHz", 0.1, 5000.0, "channel bandwidth"),
        "noise_figure_db": Key("float", 7.0, "dB", 0.0, 30.0, "user receiver noise figure"),
        "user_gain_dbi": Key("float", 0.0, "dBi", -10.0, 40.0, "user antenna gain"),
        "direct_model": Key("str", "umi", choices=("umi", "uma", "free_space"),
                            doc="path loss of the direct path: 3GPP TR 38.901 UMi-Street Canyon, UMa, or free space"),
        "planning_margin_db": Key("float", 0.0, "dB", 0.0, 60.0, "extra loss on every path (fading, body, rain)"),
        "gaseous_absorption": Key("bool", True, doc="add ITU-R P.676 gaseous absorption (standard atmosphere)"),
        "snr_target_db": Key("float", 5.0, "dB", -20.0, 60.0, "a user is covered when its SNR reaches this"),
        "bs_range_m": Key("float", 400.0, "m", 10.0, 20000.0, "longest base-station link considered"),
        "surface_range_m": Key("float", 150.0, "m", 5.0, 5000.0, "longest surface-to-user link considered"),
        "serve_covered_users": Key("bool", False, doc="also compute surface links for users the direct path "
                                   "already covers"),
        "combining": Key("str", "power", choices=("power", "coherent"),
                         doc="how the direct and surface paths add: 'power' (their average over the channel) or "
                         "'coherent' (amplitudes co-phased, an upper bound; never with an NLOS direct path)"),
        "surface_hop_model": Key("str", "direct", choices=("direct", "free_space"),
                                 doc="path loss of each surface hop: the LOS law of direct_model, or free space"),
        "station_beam": Key("str", "one_beam", choices=("one_beam", "envelope"),
                            doc="a surface-served user's direct path sees the station beam aimed at the surface "
                            "('one_beam') or the best beam toward itself ('envelope', an upper bound)"),
        "fresnel_clearance": Key("float", 0.6, "share of F1", 0.0, 1.0,
                                 "a surface hop is clear only when roofs and walls keep this share of the first "
                                 "Fresnel zone radius free (0 = bare geometric ray)"),
        "robust_heights": Key("bool", False, doc="plan as if buildings with guessed heights stood at the top of "
                              "inputs.height_uncertainty_m"),
        "shadow_fading": Key("bool", True, doc="log-normal shadow fading (3GPP TR 38.901 sigma per path class); "
                             "false = median path loss only (upper bound)"),
        "coverage_probability": Key("float", 0.9, "share", 0.5, 0.999,
                                    "a user is covered when its SNR reaches the target with this probability "
                                    "under log-normal shadow fading (0.5 = median, no fade margin)"),
    },
    "surfaces": {
        "reflection_efficiency": Key("float", 0.8, "linear", 0.01, 1.0, "element reflection power efficiency"),
        "phase_bits": Key("int", 2, "bit", 0, 8, "phase-shifter resolution (0 = continuous)"),
        "element_pitch_wavelengths": Key("float", 0.5, "wavelengths", 0.05, 1.0, "element spacing"),
        "steer_limit_deg": Key("float", 60.0, "deg", 1.0, 89.0, "largest angle from the wall normal on either hop"),
        "control": Key("str", "beams", choices=("beams", "focus"),
                       doc="panel control: a finite set of far-field beams ('beams') or ideal per-user focusing "
                       "('focus', an upper bound)"),
        "beam_oversampling": Key("int", 2, "", 1, 8, "beam grid density: beams per beamwidth along each panel axis "
                                 "(1 = DFT grid)"),
        "squint": Key("bool", True, doc="phase-only elements: average the gain over the channel (beam squint); "
                      "false = narrowband upper bound"),
        "element_q": Key("float", 1.0, "", 0.0, 20.0, "unit-cell power pattern exponent q in cos(theta)^q on "
                         "each hop (1 = projected aperture; see docs/MODELS.md)"),
        "efficiency_angles_deg": Key("floats", [], "deg", 0.0, 90.0, "incidence angles of a measured reflection "
                                     "efficiency curve ([] = constant reflection_efficiency)"),
        "efficiency_values": Key("floats", [], "linear", 0.0, 1.0, "reflection efficiencies at "
                                 "efficiency_angles_deg"),
        "load_cap_weight": Key("float", 0.0, "weight", 0.0, MAX_WEIGHT, "most weight one surface may carry (0 = no "
                               "cap; above 1e9 is a typo)", none=0.0),
        "panels": Key("panels", None, doc="panel catalogue: [[surfaces.panels]] tables with size_id, width_m, "
                      "height_m, cost, install_cost", required=True),
    },
    "budget": {
        "max_cost": Key("float", 0.0, "currency", 0.0, MAX_BUDGET, "spending limit (0 = no cost limit; above 1e12, a "
                        "thousand panels at the largest unit cost, is a typo)", none=0.0),
        "max_panels": Key("int", 0, "panels", 0, 1_000_000, "panel count limit (0 = no count limit; a city-wide plan "
                          "holds thousands, so above a million is a typo)", none=0),
        "min_spacing_m": Key("float", 0.0, "m", 0.0, 100.0, "least distance between chosen spots on one wall"),
        "target_share": Key("float", 0.0, "share", 0.0, 1.0, "if > 0: find the cheapest plan covering this "
                            "share of the weight the surfaces can reach, instead of maximising coverage", none=0.0),
        "sweep_budgets": Key("floats", [], "currency", 0.0, MAX_BUDGET, "budgets for the coverage-versus-budget "
                             "curve ([] = 0.25x to 2x of max_cost, see siting.stages.SWEEP_BUDGET_FACTORS; above "
                             "1e12 is a typo)", none=[]),
        "currency": Key("str", "", doc="currency of every cost and budget, printed beside each cost in the outputs "
                        "(e.g. \"EUR\"; \"\" = \"cost units\")"),
    },
    "solver": {
        "name": Key("str", "highs", choices=("highs", "cbc"), doc="integer-programming solver"),
        "time_limit_s": Key("float", 120.0, "s", 1.0, 604800.0, "wall-clock limit per solve"),
        "mip_gap": Key("float", 1e-4, "share", 0.0, 0.5, "relative optimality gap at which to stop"),
        "threads": Key("int", 0, "threads", 0, 256, "solver threads (0 = solver default)", none=0),
    },
    "run": {
        "tile_m": Key("float", 500.0, "m", MIN_TILE_M, 100000.0, "tile size for checkpoints and parallel work (0 = "
                      "one tile; at least 100 m: each tile also reads the buildings within radio.bs_range_m around "
                      "it, so smaller tiles only multiply that work and the cache entries)", none=0.0),
    },
    "output": {
        "folder": Key("path", "out", doc="output folder (created)"),
        "formats": Key("list", ["geojson"], choices=("geojson", "gpkg"), doc="layer formats"),
        "candidates_layer": Key("bool", False, doc="also write every candidate spot (for QA)"),
        "los_graph": Key("bool", False, doc="also write the line-of-sight graph (base stations, spots, users) "
                         "as GraphML for network analysis"),
        "title": Key("str", "Reflecting-surface siting plan", doc="report title"),
    },
}


def _type_ok(key: Key, value: Any) -> bool:
    if key.type == "float":
        return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)
    if key.type == "int":
        return isinstance(value, int) and not isinstance(value, bool)
    if key.type == "bool":
        return isinstance(value, bool)
    if key.type in ("str", "path"):
        return isinstance(value, str)
    if key.type == "floats":
        return isinstance(value, list) and all(_type_ok(Key("float", 0), v) for v in value)
    if key.type == "list":
        return isinstance(value, list) and all(isinstance(v, str) for v in value)
    if key.type == "panels":
        return isinstance(value, list) and all(isinstance(v, dict) for v in value)
    raise AssertionError(key.type)


_TYPE_WORD = {"float": "a number", "int": "an integer", "bool": "true or false", "str": "a string",
              "path": "a file path string", "floats": "a list of numbers", "list": "a list of strings",
              "panels": "a list of [[surfaces.panels]] tables"}


def _nearest(name: str, valid) -> str:
    hit = difflib.get_close_matches(name, list(valid), n=1, cutoff=0.5)
    return f"; did you mean '{hit[0]}'?" if hit else f"; valid keys: {', '.join(sorted(valid))}"


def _non_finite(value: Any) -> bool:
    values = value if isinstance(value, list) else [value]
    return any(isinstance(v, float) and not math.isfinite(v) for v in values)


def _must_not_be_empty(key: Key) -> bool:
    """A path, text or list key with no "none" value and a non-empty default (or required): '' or [] is a mistake
    (an empty path would resolve to the current folder, an empty id names nothing, no format writes no layer)."""
    return (key.type in ("str", "path", "list") and key.none is _NEVER
            and (key.required or key.default not in ("", [])))


def _check_value(where: str, key: Key, value: Any, problems: list[str]) -> None:
    if not _type_ok(key, value):
        unit = f" [{key.unit}]" if key.unit else ""
        allowed = "" if key.choices or (key.lo is None and key.hi is None) else (
            f" >= {key.lo:g}" if key.hi is None else f" <= {key.hi:g}" if key.lo is None else
            f" in {key.range_text()}")
        problems.append(f"{where}: expected {_TYPE_WORD[key.type]}{unit}{allowed}, got {value!r}"
                        + ("; infinity and nan are not allowed, give a plain number" if _non_finite(value) else ""))
        return
    if _must_not_be_empty(key) and not (value.strip() if isinstance(value, str) else value):
        what = {"path": "path", "list": "list"}.get(key.type, "text")
        fix = ("give the file's path (relative to the job file's folder)" if key.type == "path" and key.required
               else f"give one, e.g. {toml_literal(key.default)}" if key.default else "give one")
        problems.append(f"{where}: expected a non-empty {what} ({key.doc}), got {value!r}; {fix}")
        return
    if key.none_outside_range() and value == key.none:
        return
    values = value if key.type in ("floats", "list") else [value]
    for v in values:
        if key.choices and v not in key.choices:
            problems.append(f"{where}: {v!r} is not allowed; use {key.range_text()}")
        elif key.type in ("float", "int", "floats") and (
            (key.lo is not None and v < key.lo) or (key.hi is not None and v > key.hi)
        ):
            problems.append(f"{where}: {v!r} [{key.unit}] is out of range; allowed {key.range_text()} {key.unit}")


def _check_panels(panels: list[dict], problems: list[str]) -> None:
    if not panels:
        problems.append("surfaces.panels: the catalogue is empty; add at least one [[surfaces.panels]] table")
    seen = set()
    for i, panel in enumerate(panels):
        where = f"surfaces.panels[{i}]"
        for name in panel:
            if name not in PANEL_KEYS:
                problems.append(f"{where}: unknown key '{name}'{_nearest(name, PANEL_KEYS)}")
        for name, key in PANEL_KEYS.items():
            if name in panel:
                _check_value(f"{where}.{name}", key, panel[name], problems)
            elif key.required:
                problems.append(f"{where}: missing key '{name}' ({key.doc}{', ' + key.unit if key.unit else ''})")
            else:
                panel[name] = key.default
        sid = panel.get("size_id")
        if sid in seen:
            problems.append(f"{where}.size_id: duplicate id {sid!r}; give every panel size its own id")
        seen.add(sid)


def _check_efficiency_curve(surfaces: dict, problems: list[str]) -> None:
    angles, values = surfaces["efficiency_angles_deg"], surfaces["efficiency_values"]
    if not (isinstance(angles, list) and isinstance(values, list)):
        return
    if len(angles) != len(values):
        problems.append(f"surfaces.efficiency_values: expected one efficiency per angle of "
                        f"surfaces.efficiency_angles_deg ({len(angles)}), got {len(values)}")
    elif any(b <= a for a, b in zip(angles, angles[1:])):
        problems.append(f"surfaces.efficiency_angles_deg: expected increasing angles, got {angles}")


def defaults() -> dict:
    """The full job with every default filled in (required keys are None)."""
    return {s: {k: copy.deepcopy(key.default) for k, key in keys.items()} for s, keys in SCHEMA.items()}


def parse_override(text: str) -> tuple[str, str, Any]:
    """Parse ``section.key=value``; the value is read as TOML (so ``true``, ``5``, ``[4, 8]`` work) or a string."""
    if "=" not in text or "." not in text.split("=", 1)[0]:
        raise JobError(f"--set {text!r}: expected section.key=value, e.g. --set budget.max_cost=20000", "--set")
    lhs, raw = text.split("=", 1)
    section, key = lhs.strip().split(".", 1)
    try:
        value = tomllib.loads(f"v = {raw.strip()}")["v"]
    except tomllib.TOMLDecodeError:
        value = raw.strip()
    return section, key, value


def _check_sections(raw: Mapping, job: dict, problems: list[str]) -> None:
    """Unknown sections and keys (with the nearest valid name), wrong types and ranges; copies values into ``job``."""
    for section, body in raw.items():
        if section == "scenarios":  # [[scenarios]]: read by siting.scenarios, not part of one job
            continue
        if section not in SCHEMA:
            problems.append(f"unknown section [{section}]{_nearest(section, SCHEMA).replace('keys', 'sections')}")
            continue
        if not isinstance(body, Mapping):
            problems.append(f"[{section}] must be a table of keys, got {body!r}")
            continue
        for name, value in body.items():
            key = SCHEMA[section].get(name)
            if key is None:
                problems.append(f"{section}.{name}: unknown key{_nearest(name, SCHEMA[section])}")
                continue
            _check_value(f"{section}.{name}", key, value, problems)
            job[section][name] = copy.deepcopy(value)


def _check_bbox(bbox: Any, problems: list[str]) -> None:
    if not (isinstance(bbox, list) and bbox):
        return
    if len(bbox) != 4 or not (bbox[0] < bbox[2] and bbox[1] < bbox[3]):
        problems.append(f"area.bbox: expected [min_lon, min_lat, max_lon, max_lat] with min < max, got {bbox}")
    elif not (-180 <= bbox[0] <= 180 and -180 <= bbox[2] <= 180 and -90 <= bbox[1] <= 90 and -90 <= bbox[3] <= 90):
        problems.append(f"area.bbox: {bbox} is not longitude/latitude in degrees; give WGS84 degrees")


def _resolve(path: Path) -> str:
    """The absolute path with links resolved; a link loop is kept as an absolute path (the file checks name it)."""
    try:
        return str(path.resolve())
    except (RuntimeError, OSError):  # Python 3.11 raises RuntimeError on a symlink loop
        return os.path.abspath(path)


def validate(raw: Mapping, base_dir: Path, source: str = "job") -> dict:
    """Check a raw job dict against :data:`SCHEMA`; return the resolved job (defaults filled, paths absolute).

    The result is the job in its file encoding (plain dicts and lists, ``0`` / ``''`` / ``[]`` for "none");
    :meth:`Job.from_dict` turns it into the typed, frozen :class:`Job`.
    """
    problems: list[str] = []
    job = defaults()
    _check_sections(raw, job, problems)
    for section, keys in SCHEMA.items():
        for name, key in keys.items():
            if key.required and job[section][name] is None:
                problems.append(f"{section}.{name}: required key is missing ({key.doc})")
    if isinstance(job["surfaces"]["panels"], list):
        _check_panels(job["surfaces"]["panels"], problems)
    _check_efficiency_curve(job["surfaces"], problems)
    heights = job["candidates"]["mount_heights_m"]
    if isinstance(heights, list) and not heights:
        problems.append("candidates.mount_heights_m: give at least one mounting height, e.g. [4.0, 8.0]")
    _check_bbox(job["area"]["bbox"], problems)
    if problems:
        raise JobError(problems, source)
    for section, keys in SCHEMA.items():
        for name, key in keys.items():
            if key.type == "path" and job[section][name]:
                job[section][name] = _resolve(base_dir / Path(job[section][name]).expanduser())
    return job


def link_loop_problem(path: str | Path, what: str) -> str | None:
    """One sentence when ``path`` is a symbolic link that never reaches a file (it points to itself, or links
    point to each other in a circle); None otherwise.  (``Path.exists`` says False there, as for a missing file.)"""
    p = Path(path)
    try:
        os.stat(p)
    except OSError as exc:
        if exc.errno == errno.ELOOP:
            return (f"{what} '{p}' is a symbolic link that points back to itself (a link loop); make the link point "
                    "to the real file, or replace it with the file")
    except ValueError:  # e.g. a NUL byte in the path: the other checks report it
        return None
    return None


def _read_toml(path: str | Path) -> dict:
    from .inputs.files import UTF8_BOM, file_problem, utf8_problem

    path = Path(path)
    problem = link_loop_problem(path, "job file") or file_problem(path, "job file")
    if problem and not path.exists() and not path.is_symlink():
        problem = f"job file '{path}' not found; check the path (relative to {Path.cwd()})"
    problem = problem or utf8_problem(path, "job file")
    if problem:
        raise JobError(problem, str(path))
    data = path.read_bytes()
    try:  # a leading byte-order mark is skipped (common practice: some Windows editors write one)
        return tomllib.loads(data[len(UTF8_BOM):].decode() if data.startswith(UTF8_BOM) else data.decode())
    except tomllib.TOMLDecodeError as exc:
        raise JobError(f"not valid TOML: {exc}; fix the syntax (https://toml.io)", str(path)) from None


def _apply(raw: dict, items) -> dict:
    """Set ``(section, key, value)`` items in a raw job (a non-table section is left for validation to report)."""
    for section, key, value in items:
        raw.setdefault(section, {})
        if isinstance(raw[section], dict):
            raw[section][key] = value
    return raw


def _section_items(sections: Mapping[str, Any]) -> list[tuple[str, str, Any]]:
    """``{"budget": {"max_cost": 1}}`` and ``budget__max_cost=1`` keyword overrides as (section, key, value)."""
    items = []
    for name, value in sections.items():
        if "__" in name:
            items.append((*name.split("__", 1), value))
        elif isinstance(value, Mapping):
            items += [(name, key, v) for key, v in value.items()]
        else:
            raise JobError(f"override {name}={value!r}: expected a table of keys, e.g. budget={{'max_cost': 20000}}",
                           "overrides")
    return items


def load_job(path: str | Path, overrides: list[str] | None = None, **api_overrides: Any) -> dict:
    """Read, override and validate a job file; the resolved job as a plain dict (see :meth:`Job.from_toml`).

    ``overrides`` are ``section.key=value`` strings (the CLI's ``--set``); ``api_overrides`` are
    ``section__key=value`` keyword arguments or ``section={key: value}`` tables, applied last.
    """
    raw = _read_toml(path)
    _apply(raw, [parse_override(o) for o in overrides or []])
    _apply(raw, _section_items(api_overrides))
    return validate(raw, Path(path).parent, str(path))


# ----------------------------------------------------------------------------------------------- typed job
def toml_literal(value: Any) -> str:
    """``value`` written as TOML: ``true``, ``"out"``, ``[4.0, 8.0]``, ``["geojson"]``."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return json.dumps(value)  # a TOML basic string uses the same escapes
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(toml_literal(v) for v in value) + "]"
    return repr(value)


_PY_TYPE: dict[str, Any] = {"float": float, "int": int, "bool": bool, "str": str, "path": str,
                            "floats": tuple[float, ...], "list": tuple[str, ...]}


def _to_typed(key: Key, value: Any) -> Any:
    """A resolved file value as the typed value: ``None`` for the key's "none" value, tuples for lists."""
    if key.none is not _NEVER and value == key.none:
        return None
    if key.type == "panels":
        return tuple(Panel(**{k: _to_typed(PANEL_KEYS[k], v) for k, v in panel.items()}) for panel in value)
    if key.type in ("floats", "list"):
        return tuple(float(v) if key.type == "floats" else v for v in value)
    return float(value) if key.type == "float" else value


def _to_file(key: Key, value: Any) -> Any:
    """The inverse of :func:`_to_typed`: the value as the job file (and :func:`validate`) writes it."""
    if value is None:
        return copy.deepcopy(key.none)
    if key.type == "panels":
        return [{f.name: _to_file(PANEL_KEYS[f.name], getattr(p, f.name)) for f in fields(p)} for p in value]
    return list(value) if key.type in ("floats", "list") else value


def _attributes_doc(keys: dict[str, Key]) -> str:
    lines = ["", "Attributes", "----------"]
    for name, key in keys.items():
        unit = f" [{key.unit}]" if key.unit else ""
        none = f"; ``None`` when the file omits it or gives {toml_literal(key.none)}" if key.none is not _NEVER else ""
        lines += [f"{name} : {key.type}{unit}", f"    {key.doc}{none}."]
    return "\n".join(lines)


def _section_class(class_name: str, keys: dict[str, Key], what: str) -> type:
    """A frozen dataclass with one typed field per key of ``keys`` (generated from the schema)."""
    spec = []
    for name, key in keys.items():
        tp = tuple[Any, ...] if key.type == "panels" else _PY_TYPE[key.type]
        spec.append((name, tp | None if key.none is not _NEVER else tp))
    cls = make_dataclass(class_name, spec, frozen=True)
    cls.__module__ = __name__  # (the keyword of make_dataclass needs Python 3.12)
    cls.__doc__ = f"{what} (frozen; generated from :data:`siting.job.SCHEMA`).\n" + _attributes_doc(keys)
    return cls


if TYPE_CHECKING:  # the classes are generated below; type checkers see them as Any
    Panel: TypeAlias = Any
    Inputs: TypeAlias = Any
    Area: TypeAlias = Any
    Candidates: TypeAlias = Any
    Demand: TypeAlias = Any
    Radio: TypeAlias = Any
    Surfaces: TypeAlias = Any
    Budget: TypeAlias = Any
    Solver: TypeAlias = Any
    Run: TypeAlias = Any
    Output: TypeAlias = Any
else:
    Panel = _section_class("Panel", PANEL_KEYS, "One panel size of the catalogue, ``[[surfaces.panels]]``")
    Inputs, Area, Candidates, Demand, Radio, Surfaces, Budget, Solver, Run, Output = (
        _section_class(name.capitalize(), SCHEMA[name], f"The job's ``[{name}]`` section") for name in SCHEMA)


@dataclass(frozen=True)
class Job:
    """A validated job: one frozen section object per ``[section]`` of the job file, ``None`` for "none".

    Build one with :meth:`from_toml` or :meth:`from_dict`; every key is checked against :data:`SCHEMA` (the
    same table ``siting keys`` prints).  Fields cannot be assigned (``dataclasses.FrozenInstanceError``); use
    :meth:`replace` for a changed copy, which is validated again.
    """

    inputs: Inputs
    area: Area
    candidates: Candidates
    demand: Demand
    radio: Radio
    surfaces: Surfaces
    budget: Budget
    solver: Solver
    run: Run
    output: Output

    @classmethod
    def from_dict(cls, raw: Mapping[str, Any], base_dir: str | Path = ".", source: str = "job") -> Job:
        """Validate a job given as nested tables (as in the TOML file); relative paths resolve against ``base_dir``."""
        return cls._from_resolved(validate(copy.deepcopy(dict(raw)), Path(base_dir), source))

    @classmethod
    def from_toml(cls, path: str | Path, overrides: list[str] | None = None, **sections: Any) -> Job:
        """Read and validate a job file.

        ``overrides`` are ``section.key=value`` strings (as the CLI's ``--set``); ``sections`` are tables such as
        ``budget={"max_cost": 20000}``, applied last.  Relative paths resolve against the job file's folder.
        """
        return cls._from_resolved(load_job(path, overrides, **sections))

    @classmethod
    def _from_resolved(cls, job: Mapping[str, Any]) -> Job:
        return cls(**{section: SECTION_CLASSES[section](**{name: _to_typed(key, job[section][name])
                                                            for name, key in keys.items()})
                      for section, keys in SCHEMA.items()})

    def to_dict(self) -> dict[str, dict[str, Any]]:
        """The job in its file encoding (lists, ``0`` / ``''`` / ``[]`` for "none"), e.g. to hash or print it."""
        return {section: {name: _to_file(key, getattr(getattr(self, section), name)) for name, key in keys.items()}
                for section, keys in SCHEMA.items()}

    def replace(self, **sections: Mapping[str, Any]) -> Job:
        """A validated copy with keys changed, e.g. ``job.replace(budget={"max_cost": 20000})``.

        Relative paths among the new values resolve against the current folder.
        """
        if not sections:
            return self
        return Job._from_resolved(validate(_apply(self.to_dict(), _section_items(sections)), Path.cwd(), "job"))


#: section name -> its generated frozen dataclass
SECTION_CLASSES: dict[str, Any] = {name: globals()[name.capitalize()] for name in SCHEMA}


def reference_markdown() -> str:
    """The job-file reference as a Markdown table (used in the README and by ``siting keys``).

    Defaults are TOML literals; a key whose default is its "none" value reads ``None`` in :class:`Job`.
    """
    head = ["| key | type | unit | default | range | meaning |", "|---|---|---|---|---|---|"]

    def default(key: Key) -> str:
        if key.required:
            return "required"
        text = f"`{toml_literal(key.default)}`"
        return text + " (none)" if key.none is not _NEVER and key.default == key.none else text

    def rows(keys: dict[str, Key]) -> list[str]:
        return [f"| `{name}` | {key.type} | {key.unit} | {default(key)} | {key.range_text()} | {key.doc} |"
                for name, key in keys.items()]

    lines = []
    for section, keys in SCHEMA.items():
        lines += [f"\n**[{section}]**\n", *head, *rows(keys)]
    lines += ["\n**[[surfaces.panels]]** (one table per catalogue size)\n", *head, *rows(PANEL_KEYS)]
    return "\n".join(lines)
