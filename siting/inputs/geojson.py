"""Structural checks of a GeoJSON file (RFC 7946) before GDAL reads it.

GDAL skips a feature whose ``"type"`` is not ``"Feature"`` without a word, turns coordinates it cannot read
(strings, ``null``, one number, a missing or extra nesting level, an unknown geometry type) into a missing
geometry with at most a raw warning, reads JSON ``true``/``false`` in a column of numbers as 1 and 0, and fails on
an unclosed ring or a ``NaN`` vertex with a GEOS message naming no feature.  :func:`check_geojson` reads the JSON
once and names each such feature (its index and id), the member and what is wrong, with the section of RFC 7946
that says how it should be written.  It also returns where JSON booleans stand in the properties, so that the
layer checks can refuse a boolean given for a number.

A file that is not JSON at all, or whose top level is not a FeatureCollection, a Feature or a geometry, is left
to GDAL, whose message is clear for those.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import InputDataError
from .files import UTF8_BOM

_MAX_SHOWN = 10

#: Nesting depth of a position inside each geometry type's "coordinates" (RFC 7946 sections 3.1.2 - 3.1.7).
_DEPTH = {"Point": 0, "MultiPoint": 1, "LineString": 1, "MultiLineString": 2, "Polygon": 2, "MultiPolygon": 3}
_SECTION = {"Point": "3.1.2", "MultiPoint": "3.1.3", "LineString": "3.1.4", "MultiLineString": "3.1.5",
            "Polygon": "3.1.6", "MultiPolygon": "3.1.7", "GeometryCollection": "3.1.8"}
_SHAPE = {
    "Point": "one position [lon, lat]",
    "MultiPoint": "an array of positions",
    "LineString": "an array of two or more positions",
    "MultiLineString": "an array of LineString coordinate arrays",
    "Polygon": "an array of linear rings, each an array of positions",
    "MultiPolygon": "an array of Polygon coordinate arrays (rings of positions)",
}
_GEOMETRY_TYPES = (*_DEPTH, "GeometryCollection")


@dataclass
class GeoJSONFacts:
    """What the structural pass learned about a GeoJSON file that GDAL does not keep.

    Attributes
    ----------
    n_features : int
        Features in the file (a bare geometry or a single Feature counts 1).
    booleans : dict of str to dict of int to bool
        Property name -> {feature index: the JSON boolean given there}.
    """

    n_features: int
    booleans: dict[str, dict[int, bool]] = field(default_factory=dict)


def _short(value) -> str:
    text = json.dumps(value, allow_nan=True)
    return text if len(text) <= 40 else text[:37] + "..."


def _position_problem(p, where: str) -> str | None:
    if not isinstance(p, list):
        return f"{where} is {_short(p)}, but a position is an array of numbers [longitude, latitude] (RFC 7946 section 3.1.1)"
    if len(p) < 2:
        return (f"{where} is {_short(p)}, a position with {len(p)} number(s); a position needs longitude and "
                "latitude (RFC 7946 section 3.1.1)")
    for k, v in enumerate(p):
        if isinstance(v, list):
            return (f"{where} is an array of arrays where a position [lon, lat] belongs: one nesting level too many "
                    "(e.g. MultiPolygon coordinates under \"type\": \"Polygon\")")
        if isinstance(v, bool) or not isinstance(v, (int, float)):
            return f"{where}[{k}] is {_short(v)}, not a number (RFC 7946 section 3.1.1: positions are numbers)"
        if not math.isfinite(v):
            return f"{where}[{k}] is {_short(v)}, not a finite number; correct the coordinate"
    return None


def _array_problem(value, depth: int, gtype: str, where: str) -> str | None:
    """Problem of ``value``, which should hold positions ``depth`` levels down, as one sentence (None if fine)."""
    if depth == 0:
        return _position_problem(value, where)
    if not isinstance(value, list):
        return f"{where} is {_short(value)}, but {gtype} coordinates are {_SHAPE[gtype]} (RFC 7946 section {_SECTION[gtype]})"
    if not value:
        return (f"{where} is an empty array; {gtype} coordinates are {_SHAPE[gtype]} (RFC 7946 section "
                f"{_SECTION[gtype]}); give the coordinates or remove the feature")
    if depth == 1 and all(type(q) is list and len(q) >= 2 and all(_finite_number(v) for v in q) for q in value):
        return _run_problem(value, gtype, where)  # the common case: every position fine, check the run only
    for k, item in enumerate(value):
        if not isinstance(item, list):
            return (f"{where}[{k}] is {_short(item)} where an array belongs: a nesting level is missing ({gtype} "
                    f"coordinates are {_SHAPE[gtype]}, RFC 7946 section {_SECTION[gtype]})")
        problem = _array_problem(item, depth - 1, gtype, f"{where}[{k}]")
        if problem:
            return problem
    return _run_problem(value, gtype, where) if depth == 1 else None


def _finite_number(v) -> bool:
    """A JSON number that is finite (bool is not a number; NaN - NaN and inf - inf are NaN)."""
    return type(v) is int or (type(v) is float and v - v == 0.0)


def _run_problem(value: list, gtype: str, where: str) -> str | None:
    """Problem of a run of valid positions as a line or a linear ring (RFC 7946 sections 3.1.4, 3.1.6)."""
    if gtype in ("LineString", "MultiLineString") and len(value) < 2:
        return f"{where} has {len(value)} position; a line needs two or more (RFC 7946 section 3.1.4)"
    if gtype in ("Polygon", "MultiPolygon"):
        if len(value) < 4:
            return (f"{where} is a ring of {len(value)} position(s); a linear ring needs four or more, the first "
                    "and last the same (RFC 7946 section 3.1.6)")
        if value[0] != value[-1]:
            return (f"{where} is not closed: its first position {_short(value[0])} and last {_short(value[-1])} "
                    "differ; a linear ring ends where it starts (RFC 7946 section 3.1.6): repeat the first position "
                    "at the end")
    return None


def _geometry_problem(g, where: str, depth: int = 0) -> str | None:
    if g is None:
        return None  # an unlocated feature (RFC 7946 section 3.2): the layer checks decide
    if not isinstance(g, dict):
        return f"{where} is {_short(g)}, not a geometry object (RFC 7946 section 3.1)"
    gtype = g.get("type")
    if gtype not in _GEOMETRY_TYPES:
        got = "has no \"type\"" if "type" not in g else f"has \"type\": {_short(gtype)}"
        return f"{where} {got}; a geometry's type is one of {', '.join(_GEOMETRY_TYPES)} (RFC 7946 section 3.1)"
    if gtype == "GeometryCollection":
        members = g.get("geometries")
        if not isinstance(members, list) or not members:
            return (f"{where} is a GeometryCollection without a non-empty \"geometries\" array (RFC 7946 section "
                    "3.1.8)")
        for k, m in enumerate(members):
            problem = _geometry_problem(m, f"{where}.geometries[{k}]", depth + 1) if m is not None else (
                f"{where}.geometries[{k}] is null")
            if problem:
                return problem
        return None
    if "coordinates" not in g:
        return f"{where} ({gtype}) has no \"coordinates\" member (RFC 7946 section 3.1)"
    return _array_problem(g["coordinates"], _DEPTH[gtype], gtype, f"{where}.coordinates")


def _label(feature, index: int, id_keys: tuple[str, ...]) -> str:
    props = feature.get("properties") if isinstance(feature, dict) else None
    ident = None
    if isinstance(props, dict):
        ident = next((props[k] for k in id_keys if props.get(k) not in (None, "")), None)
    if ident is None and isinstance(feature, dict) and feature.get("id") not in (None, ""):
        ident = feature["id"]
    return f"feature {index}" + (f" (id {str(ident)!r})" if ident is not None else "")


def _feature_problem(feature, index: int, id_keys: tuple[str, ...]) -> str | None:
    label = _label(feature, index, id_keys)
    if not isinstance(feature, dict):
        return f"{label} is {_short(feature)}, not a Feature object (RFC 7946 section 3.2)"
    if feature.get("type") != "Feature":
        got = "has no \"type\" member" if "type" not in feature else f"has \"type\": {_short(feature.get('type'))}"
        return (f"{label} {got}; a feature needs \"type\": \"Feature\" (RFC 7946 section 3.2), and GDAL skips it "
                "otherwise")
    if "geometry" not in feature:
        return f"{label} has no \"geometry\" member (RFC 7946 section 3.2; null for a feature without a place)"
    props = feature.get("properties")
    if props is not None and not isinstance(props, dict):
        return f"{label}: \"properties\" is {_short(props)}, not an object or null (RFC 7946 section 3.2)"
    problem = _geometry_problem(feature["geometry"], "geometry")
    return f"{label}: {problem}" if problem else None


def _load(path: Path):
    """The parsed JSON document(s): a list of features for a GeoJSON text sequence, else the document; None when
    it is not JSON (GDAL then gives its own message)."""
    data = path.read_bytes()
    if data.startswith(UTF8_BOM):
        data = data[len(UTF8_BOM):]
    try:
        text = data.decode("utf-8")
        if path.suffix.lower() in (".geojsonl", ".geojsons"):  # one feature per line, RFC 8142 record separators
            return {"type": "FeatureCollection",
                    "features": [json.loads(line.strip("\x1e \t\r")) for line in text.splitlines()
                                 if line.strip("\x1e \t\r")]}
        return json.loads(text)
    except (UnicodeDecodeError, ValueError, RecursionError):
        return None


def check_geojson(path: Path, role: str, id_keys: tuple[str, ...] = ("id",)) -> GeoJSONFacts | None:
    """Refuse a GeoJSON file whose features GDAL would skip, empty or misread, naming every such feature.

    Parameters
    ----------
    path : the GeoJSON file (UTF-8, checked already).
    role : what the layer is for, used in the message ("buildings", "base_stations", ...).
    id_keys : properties that hold the feature's id, tried in order, for the messages.

    Returns
    -------
    GeoJSONFacts, or None when the file is not JSON or not a FeatureCollection, Feature or geometry (left to GDAL).

    Raises
    ------
    InputDataError
        Naming the file, up to ten bad features (index and id) with what is wrong, and the fix.
    """
    doc = _load(path)
    if not isinstance(doc, dict):
        return None
    kind = doc.get("type")
    if kind == "FeatureCollection":
        features = doc.get("features")
        if not isinstance(features, list):
            return None
    elif kind == "Feature":
        features = [doc]
    elif kind in _GEOMETRY_TYPES:
        features = [{"type": "Feature", "properties": None, "geometry": doc}]
    else:
        return None
    problems: list[str] = []
    booleans: dict[str, dict[int, bool]] = {}
    for i, feature in enumerate(features):
        problem = _feature_problem(feature, i, id_keys)
        if problem:
            problems.append(problem)
            continue
        props = feature.get("properties") or {}
        for key, value in props.items():
            if isinstance(value, bool):
                booleans.setdefault(key, {})[i] = value
    if problems:
        more = f"; and {len(problems) - _MAX_SHOWN} more" if len(problems) > _MAX_SHOWN else ""
        raise InputDataError(
            f"{role} file '{path}': {len(problems)} feature(s) are not valid GeoJSON, so they would be skipped or "
            f"misread: {'; '.join(problems[:_MAX_SHOWN])}{more}. Correct these features (or remove them) and run "
            "again (features are numbered from 0 in the file's order)"
        )
    return GeoJSONFacts(n_features=len(features), booleans=booleans)
