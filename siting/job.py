"""Job file: schema, defaults, validation and command-line overrides.

A job is a TOML file (read with the standard library's ``tomllib``) with one section per stage.  Every key is
declared once in :data:`SCHEMA` with its type, unit, default, allowed range and meaning; that table is also the
job-file reference printed in the README (``siting keys`` prints it).  Validation collects every problem and
raises them together in one :class:`~siting.errors.JobError`: an unknown key names the nearest valid key, a
wrong type or out-of-range value names the key, its unit and the allowed range.  Relative paths resolve against
the folder of the job file.  Overrides stack: file -> ``--set section.key=value`` -> keyword arguments of the API.
"""

from __future__ import annotations

import copy
import difflib
import math
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from .errors import JobError


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

    def range_text(self) -> str:
        if self.choices:
            return "one of " + ", ".join(repr(c) for c in self.choices)
        if self.lo is None and self.hi is None:
            return ""
        lo = "-inf" if self.lo is None else f"{self.lo:g}"
        hi = "inf" if self.hi is None else f"{self.hi:g}"
        return f"{lo} .. {hi}"


PANEL_KEYS: dict[str, Key] = {
    "size_id": Key("str", None, doc="catalogue id, unique", required=True),
    "width_m": Key("float", None, "m", 0.05, 20.0, "panel width along the wall", required=True),
    "height_m": Key("float", None, "m", 0.05, 20.0, "panel height", required=True),
    "cost": Key("float", None, "currency", 0.0, None, "panel cost", required=True),
    "install_cost": Key("float", 0.0, "currency", 0.0, None, "installation cost per panel"),
}

SCHEMA: dict[str, dict[str, Key]] = {
    "inputs": {
        "buildings": Key("path", None, doc="building footprints: GeoJSON, GeoPackage, Shapefile, FlatGeobuf, "
                         "GeoParquet or .osm.pbf (needs the osm extra)", required=True),
        "buildings_layer": Key("str", "", doc="layer name inside a multi-layer file ('' = the first layer)"),
        "building_id_column": Key("str", "id", doc="column holding building ids (falls back to id/osm_id, then "
                                  "the feature index)"),
        "height_column": Key("str", "", doc="column with roof height in metres, tried first ('' = none)"),
        "storey_height_m": Key("float", 3.0, "m", 2.0, 6.0, "height per storey for building:levels"),
        "default_height_m": Key("float", 9.0, "m", 2.0, 300.0, "height for buildings with no usable tag"),
        "height_uncertainty_m": Key("float", 3.0, "m", 0.0, 100.0, "height band (+/-) of buildings whose height "
                                    "came from building:levels or the default; links that depend on it are "
                                    "flagged"),
        "base_stations": Key("path", None, doc="point layer of base stations (bs_id, z_m, tx_power_dbm, "
                             "max_gain_dbi, azimuth_deg, downtilt_deg, pattern)", required=True),
        "sites": Key("path", "", doc="optional point layer of given facade spots, snapped to walls"),
        "users": Key("path", "", doc="optional point layer of given demand points"),
        "user_weight_column": Key("str", "weight", doc="column of the users layer holding the demand weight"),
        "crs": Key("str", "", doc="projected CRS for all metric work, e.g. 'EPSG:25832' ('' = local UTM zone)"),
    },
    "area": {
        "bbox": Key("floats", [], "deg", doc="[min_lon, min_lat, max_lon, max_lat] clip box ([] = whole layer)"),
        "polygon": Key("path", "", doc="polygon layer bounding the area of interest ('' = none)"),
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
        "street_weight": Key("float", 1.0, "weight", 0.0, None, "weight of one street point"),
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
        "load_cap_weight": Key("float", 0.0, "weight", 0.0, None, "most weight one surface may carry (0 = no cap)"),
        "panels": Key("panels", None, doc="panel catalogue: [[surfaces.panels]] tables with size_id, width_m, "
                      "height_m, cost, install_cost", required=True),
    },
    "budget": {
        "max_cost": Key("float", 0.0, "currency", 0.0, None, "spending limit (0 = no cost limit)"),
        "max_panels": Key("int", 0, "panels", 0, None, "panel count limit (0 = no count limit)"),
        "min_spacing_m": Key("float", 0.0, "m", 0.0, 100.0, "least distance between chosen spots on one wall"),
        "target_share": Key("float", 0.0, "share", 0.0, 1.0, "if > 0: find the cheapest plan covering this "
                            "share of the weight the surfaces can reach, instead of maximising coverage"),
        "sweep_budgets": Key("floats", [], "currency", 0.0, None, "budgets for the coverage-versus-budget curve"),
    },
    "solver": {
        "name": Key("str", "highs", choices=("highs", "cbc"), doc="integer-programming solver"),
        "time_limit_s": Key("float", 120.0, "s", 1.0, 604800.0, "wall-clock limit per solve"),
        "mip_gap": Key("float", 1e-4, "share", 0.0, 0.5, "relative optimality gap at which to stop"),
        "threads": Key("int", 0, "threads", 0, 256, "solver threads (0 = solver default)"),
    },
    "run": {
        "tile_m": Key("float", 500.0, "m", 0.0, 100000.0, "tile size for checkpoints and parallel work "
                      "(0 = one tile)"),
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


def _check_value(where: str, key: Key, value: Any, problems: list[str]) -> None:
    if not _type_ok(key, value):
        unit = f" [{key.unit}]" if key.unit else ""
        problems.append(f"{where}: expected {_TYPE_WORD[key.type]}{unit}, got {value!r}")
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


def validate(raw: dict, base_dir: Path, source: str = "job") -> dict:
    """Check a raw job dict against :data:`SCHEMA`; return the resolved job (defaults filled, paths absolute)."""
    problems: list[str] = []
    job = defaults()
    for section, body in raw.items():
        if section not in SCHEMA:
            problems.append(f"unknown section [{section}]{_nearest(section, SCHEMA).replace('keys', 'sections')}")
            continue
        if not isinstance(body, dict):
            problems.append(f"[{section}] must be a table of keys, got {body!r}")
            continue
        for name, value in body.items():
            key = SCHEMA[section].get(name)
            if key is None:
                problems.append(f"{section}.{name}: unknown key{_nearest(name, SCHEMA[section])}")
                continue
            _check_value(f"{section}.{name}", key, value, problems)
            job[section][name] = copy.deepcopy(value)
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
    bbox = job["area"]["bbox"]
    if isinstance(bbox, list) and bbox:
        if len(bbox) != 4 or not (bbox[0] < bbox[2] and bbox[1] < bbox[3]):
            problems.append(f"area.bbox: expected [min_lon, min_lat, max_lon, max_lat] with min < max, got {bbox}")
        elif not (-180 <= bbox[0] <= 180 and -180 <= bbox[2] <= 180 and -90 <= bbox[1] <= 90 and -90 <= bbox[3] <= 90):
            problems.append(f"area.bbox: {bbox} is not longitude/latitude in degrees; give WGS84 degrees")
    if problems:
        raise JobError(problems, source)
    for section, keys in SCHEMA.items():
        for name, key in keys.items():
            if key.type == "path" and job[section][name]:
                job[section][name] = str((base_dir / job[section][name]).resolve())
    return job


def load_job(path: str | Path, overrides: list[str] | None = None, **api_overrides: Any) -> dict:
    """Read, override and validate a job file.

    ``overrides`` are ``section.key=value`` strings (the CLI's ``--set``); ``api_overrides`` are
    ``section__key=value`` keyword arguments applied last.
    """
    path = Path(path)
    if not path.is_file():
        raise JobError(f"job file {str(path)!r} not found; check the path (relative to {Path.cwd()})", str(path))
    try:
        raw = tomllib.loads(path.read_text(encoding="utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise JobError(f"not valid TOML: {exc}; fix the syntax (https://toml.io)", str(path)) from None
    items = [parse_override(o) for o in overrides or []]
    items += [(*k.split("__", 1), v) for k, v in api_overrides.items()]
    for section, key, value in items:
        raw.setdefault(section, {})
        if isinstance(raw[section], dict):
            raw[section][key] = value
    return validate(raw, path.parent, str(path))


def reference_markdown() -> str:
    """The job-file reference as a Markdown table (used in the README and by ``siting keys``)."""
    head = ["| key | type | unit | default | range | meaning |", "|---|---|---|---|---|---|"]

    def rows(keys: dict[str, Key]) -> list[str]:
        return [f"| `{name}` | {key.type} | {key.unit} | {'required' if key.required else repr(key.default)} | "
                f"{key.range_text()} | {key.doc} |" for name, key in keys.items()]

    lines = []
    for section, keys in SCHEMA.items():
        lines += [f"\n**[{section}]**\n", *head, *rows(keys)]
    lines += ["\n**[[surfaces.panels]]** (one table per catalogue size)\n", *head, *rows(PANEL_KEYS)]
    return "\n".join(lines)
