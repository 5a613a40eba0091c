"""GIS layers of a plan: GeoJSON (RFC 7946) files and, on request, one GeoPackage holding every layer.

Layers (WGS84 longitude/latitude, coordinates rounded to 7 decimals, about 1 cm):

``surfaces``        Point per chosen site, in rank order, with the survey fields.
``surface_walls``   LineString along the wall, centred on the spot, as long as the panel is wide.
``demand``          Point per demand point: direct SNR, SNR with the plan, covered before / after, serving site,
                    ``reason`` (why it is or is not covered) and ``shortfall_db`` (target minus SNR when not covered).
``links``           LineString base station -> surface -> user for every user a surface serves
                    (surface -> user when the feeding base station is unknown).
``candidates``      Point per candidate spot considered (only when asked, for quality checks).

GeoJSON has no infinity: an SNR of -inf (no base station in range) is written as ``null``; so is an unknown
value.  A missing serving site or an unknown element count is ``null`` in GeoJSON and -1 in the GeoPackage.
No polygon is written, so the right-hand rule of RFC 7946 section 3.1.6 has nothing to apply to.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pyproj
import shapely

from . import atomic
from .derive import PlanFigures
from .values import currency_label, to_lonlat

LONLAT_DECIMALS = 7


@dataclass
class Layer:
    """A layer ready to write: ``coords`` is a list of (n_i, 2) lon/lat arrays (one per feature)."""

    name: str
    geometry_type: str
    coords: list
    properties: pd.DataFrame

    def geometries(self) -> np.ndarray:
        """Shapely geometries (lon/lat) of the features."""
        if not self.coords:
            return np.empty(0, dtype=object)
        xy = np.concatenate(self.coords)
        if self.geometry_type == "Point":
            return shapely.points(xy)
        idx = np.repeat(np.arange(len(self.coords)), [len(c) for c in self.coords])
        return shapely.linestrings(xy, indices=idx)


def _points(lon, lat) -> list:
    xy = np.column_stack([np.asarray(lon, float), np.asarray(lat, float)])
    return [xy[i:i + 1] for i in range(len(xy))]


def _lines(crs, x, y, n_vertices: np.ndarray) -> list:
    lon, lat = to_lonlat(crs, x, y)
    xy = np.column_stack([lon, lat])
    return np.split(xy, np.cumsum(n_vertices)[:-1]) if len(n_vertices) else []


def build_layers(bundle, fig: PlanFigures) -> list[Layer]:
    """All layers of a plan (``candidates`` only when ``bundle.include_candidates``)."""
    s = fig.sites
    surf_cols = ["rank", "site_id", "building_id", "name", "address", "size_id", "width_m", "height_m",
                 "area_m2", "elements", "facing_deg", "facing", "mount_height_m", "cost", "currency", "weight_gained",
                 "exclusive_weight", "shared_weight", "cumulative_covered_weight", "cumulative_covered_share", "n_users_served",
                 "served_weight", "median_snr_gain_db", "serving_bs_id", "backup_site_ids", "feed_below_peak_db",
                 "guessed_height_links", "exposure_w_m2", "exposure_share", "lon", "lat", "notes"]
    props = s.assign(currency=currency_label(getattr(bundle, "currency", "")))[surf_cols].reset_index(drop=True)
    layers = [Layer("surfaces", "Point", _points(s["lon"], s["lat"]), props)]

    # the panel's width drawn along the wall: wall direction = normal turned 90 deg
    az = np.radians(s["facing_deg"].to_numpy(float))
    ax, ay = np.cos(az), -np.sin(az)  # unit vector along the wall (east, north components)
    half = s["width_m"].to_numpy(float) / 2
    x0, y0 = s["x"].to_numpy(float), s["y"].to_numpy(float)
    wx = np.column_stack([x0 - half * ax, x0 + half * ax]).ravel()
    wy = np.column_stack([y0 - half * ay, y0 + half * ay]).ravel()
    layers.append(Layer("surface_walls", "LineString", _lines(bundle.crs, wx, wy, np.full(len(s), 2)),
                        s[["rank", "site_id", "size_id", "width_m", "facing_deg", "facing"]].reset_index(drop=True)))

    u = fig.users
    dem = pd.DataFrame({
        "user_id": u["user_id"], "kind": u["kind"], "weight": u["weight"],
        "snr_direct_db": u["snr_direct_db"].round(2), "snr_plan_db": u["snr_plan_db"].round(2),
        "covered_before": u["covered_before"], "covered_after": u["covered_after"],
        "newly_covered": u["newly_covered"], "direct_bs_id": u["direct_bs_id"],
        "serving_site_id": u["serving_site_id"], "serving_rank": u["serving_rank"],
        "reason": u["reason"], "shortfall_db": u["shortfall_db"],
    })
    layers.append(Layer("demand", "Point", _points(u["lon"], u["lat"]), dem))

    lk = fig.links
    if len(lk):
        bsx, bsy = bundle.base_stations["x"].to_numpy(float), bundle.base_stations["y"].to_numpy(float)
        sx, sy = bundle.sites["x"].to_numpy(float), bundle.sites["y"].to_numpy(float)
        ux, uy = bundle.users["x"].to_numpy(float), bundle.users["y"].to_numpy(float)
        bi, si, ui = lk["bs_idx"].to_numpy(), lk["site_id"].to_numpy(), lk["user_id"].to_numpy()
        has_bs = bi >= 0
        # three vertices per link, the first dropped where no base station is known
        X = np.column_stack([np.where(has_bs, bsx[np.maximum(bi, 0)] if len(bsx) else np.nan, np.nan), sx[si], ux[ui]])
        Y = np.column_stack([np.where(has_bs, bsy[np.maximum(bi, 0)] if len(bsy) else np.nan, np.nan), sy[si], uy[ui]])
        keep = np.column_stack([has_bs, np.ones_like(has_bs), np.ones_like(has_bs)]).ravel()
        coords = _lines(bundle.crs, X.ravel()[keep], Y.ravel()[keep], np.where(has_bs, 3, 2))
    else:
        coords = []
    layers.append(Layer("links", "LineString", coords,
                        lk[["rank", "site_id", "user_id", "bs_id", "snr_db"]].assign(snr_db=lk["snr_db"].round(2))
                        .reset_index(drop=True)))
    if bundle.include_candidates:
        c = fig.candidates
        layers.append(Layer("candidates", "Point", _points(c["lon"], c["lat"]),
                            c.drop(columns=["lon", "lat"]).reset_index(drop=True)))
    return layers


def _jsonable(v):
    """A JSON-safe Python value: numpy scalars unwrapped, NaN / inf / NA -> None."""
    if v is None or v is pd.NA:
        return None
    if isinstance(v, (bool, np.bool_)):
        return bool(v)
    if isinstance(v, (int, np.integer)):
        return int(v)
    if isinstance(v, (float, np.floating)):
        f = float(v)
        return f if math.isfinite(f) else None
    if isinstance(v, str):
        return v
    try:
        if pd.isna(v):
            return None
    except (TypeError, ValueError):
        pass
    return str(v)


def _column_values(col: pd.Series, null_negative: bool = False) -> list:
    """One column as JSON-safe Python values (as :func:`_jsonable` gives them), whole-column for numpy dtypes;
    ``null_negative``: negative numbers become None (ids where -1 means "none")."""
    dtype = col.dtype
    if isinstance(dtype, np.dtype) and dtype.kind in "biuf":
        arr = col.to_numpy()
        bad = ~np.isfinite(arr) if dtype.kind == "f" else np.zeros(len(arr), bool)
        if null_negative and dtype.kind in "iuf":
            bad |= arr < 0
        if not bad.any():
            return arr.tolist()
        out = arr.astype(object)
        out[bad] = None
        return [v if v is None else (float(v) if dtype.kind == "f" else int(v)) for v in out.tolist()]
    values = [_jsonable(v) for v in col.to_numpy(object)]
    if null_negative:
        values = [None if isinstance(v, (int, float)) and not isinstance(v, bool) and v < 0 else v for v in values]
    return values


def _records(df: pd.DataFrame, null_keys: tuple[str, ...] = ()) -> list[dict]:
    cols = list(df.columns)
    columns = [_column_values(df[c], c in null_keys) for c in cols]
    return [dict(zip(cols, row)) for row in zip(*columns)] if cols else [{} for _ in range(len(df))]


def feature_collection(layer: Layer, null_site_ids: bool = True) -> dict:
    """The layer as an RFC 7946 FeatureCollection dict (no 'crs' member: WGS84 is implied)."""
    props = _records(layer.properties, ("serving_site_id", "elements") if null_site_ids else ())
    if layer.geometry_type == "Point":  # one (1, 2) array per feature: rounded all at once
        xy = np.round(np.concatenate(layer.coords), LONLAT_DECIMALS).tolist() if layer.coords else []
        geoms = [{"type": "Point", "coordinates": c} for c in xy]
    else:
        geoms = [{"type": layer.geometry_type, "coordinates": np.round(c, LONLAT_DECIMALS).tolist()}
                 for c in layer.coords]
    feats = [{"type": "Feature", "geometry": g, "properties": p} for g, p in zip(geoms, props)]
    out = {"type": "FeatureCollection", "features": feats}
    if layer.coords:
        xy = np.concatenate(layer.coords)
        out["bbox"] = np.round([xy[:, 0].min(), xy[:, 1].min(), xy[:, 0].max(), xy[:, 1].max()],
                               LONLAT_DECIMALS).tolist()
    return out


def _dump_geojson(fc: dict, fh) -> None:
    """Write one FeatureCollection to an open text file, one feature per line (diff- and stream-friendly)."""
    head = {k: v for k, v in fc.items() if k != "features"}
    fh.write(json.dumps(head, allow_nan=False)[:-1] + ', "features": [\n')
    n = len(fc["features"])
    for i, f in enumerate(fc["features"]):
        fh.write(json.dumps(f, allow_nan=False, ensure_ascii=False) + (",\n" if i < n - 1 else "\n"))
    fh.write("]}\n")


def write_geojson(path, layer: Layer) -> Path:
    """Write ``layer`` to ``path`` as GeoJSON, atomically."""
    fc = feature_collection(layer)
    return atomic.write_with(path, lambda fh: _dump_geojson(fc, fh))


def _gpkg_frame(layer: Layer):
    import geopandas as gpd

    props = layer.properties.copy()
    for c in props.columns:
        if props[c].dtype == object or pd.api.types.is_string_dtype(props[c]):
            props[c] = props[c].astype(object).where(props[c].notna(), "").astype(str)
        elif pd.api.types.is_float_dtype(props[c]):
            props[c] = props[c].where(np.isfinite(props[c].to_numpy(float)))
    return gpd.GeoDataFrame(props, geometry=layer.geometries(), crs=pyproj.CRS("EPSG:4326"))


def write_gpkg(path, layers: list[Layer]) -> Path:
    """Write every layer into one GeoPackage at ``path`` (a temporary file first, then a rename)."""
    import pyogrio

    with atomic.atomic_path(path, suffix=".gpkg") as tmp:
        tmp.unlink()  # GDAL must create the file itself
        for i, layer in enumerate(layers):
            pyogrio.write_dataframe(_gpkg_frame(layer), tmp, layer=layer.name, driver="GPKG",
                                    geometry_type=layer.geometry_type, append=i > 0)
    return Path(path)
