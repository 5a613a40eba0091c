"""Reading vector layers: any OGR format through pyogrio, GeoParquet, and OpenStreetMap ``.osm.pbf``.

Every failure becomes an :class:`~siting.errors.InputDataError` naming the file; input files are hashed for
the run record.  GeoJSON is longitude/latitude by RFC 7946.
"""

from __future__ import annotations

import json
import warnings
from pathlib import Path

import geopandas as gpd
import pandas as pd
import shapely

from ..cache import file_sha256
from ..errors import InputDataError, SitingWarning
from .common import _listing
from .files import check_file, utf8_problem
from .geojson import GeoJSONFacts, check_geojson

_GEOJSON_SUFFIXES = (".geojson", ".json", ".geojsonl", ".geojsons")
_PARQUET_SUFFIXES = (".parquet", ".geoparquet")


def _hash_inputs(path: Path, hashes: dict[str, str]) -> None:
    if path.is_dir():  # e.g. a FileGDB folder
        for p in sorted(q for q in path.rglob("*") if q.is_file()):
            hashes[str(p)] = file_sha256(p)
        return
    hashes[str(path)] = file_sha256(path)
    if path.suffix.lower() == ".shp":
        for ext in (".shx", ".dbf", ".prj", ".cpg"):
            for side in (path.with_suffix(ext), path.with_suffix(ext.upper())):
                if side.exists():
                    hashes[str(side)] = file_sha256(side)


def _is_geojson(path: Path) -> bool:
    return path.suffix.lower() in _GEOJSON_SUFFIXES


def _is_pbf(path: Path) -> bool:
    return path.name.lower().endswith(".pbf")


def read_layer(path, *, layer: str | None = None, role: str = "layer", bbox_lonlat=None,
               id_keys: tuple[str, ...] = ("id",)) -> gpd.GeoDataFrame:
    """Read one vector layer, turning every failure into an :class:`InputDataError` naming the file.

    Parameters
    ----------
    path : str or Path
        Vector file (any OGR format, GeoParquet, or ``.osm.pbf`` for buildings).
    layer : str, optional
        Layer name for multi-layer files.  Without it a single-layer file is read; a multi-layer file is read
        from the layer named like ``role`` if there is one, else refused with the list of layers.
    role : str
        What the layer is for ("buildings", "base_stations", ...), used in messages and layer choice.
    bbox_lonlat : sequence of 4 floats, optional
        Only used for ``.osm.pbf``: passed to pyrosm as its bounding box.
    id_keys : tuple of str
        Properties holding a feature's id, used to name the features of a malformed GeoJSON file.

    A GeoJSON file is first checked feature by feature (:func:`siting.inputs.geojson.check_geojson`): features
    GDAL would skip or misread are refused by name, and JSON booleans in a column of numbers stay booleans
    (GDAL reads them as 1 and 0) so that the layer checks refuse them.  Warnings GDAL gives while reading become
    model notes naming the file.
    """
    path = Path(path)
    check_file(path, f"{role} file")
    facts: GeoJSONFacts | None = None
    if _is_geojson(path):
        problem = utf8_problem(path, f"{role} file")  # RFC 7946, section 11: GeoJSON is UTF-8
        if problem:
            raise InputDataError(problem)
        facts = check_geojson(path, role, id_keys)
    if _is_pbf(path):
        if role != "buildings":
            raise InputDataError(
                f"{role} file '{path}' is an OSM extract; only buildings can be read from .osm.pbf. "
                "Give the layer as GeoJSON, GeoPackage, Shapefile, FlatGeobuf or GeoParquet"
            )
        gdf = _read_osm_pbf(path, bbox_lonlat)
    elif path.suffix.lower() in _PARQUET_SUFFIXES:
        try:
            gdf = gpd.read_parquet(path)
        except Exception as exc:  # noqa: BLE001 - any reader failure becomes a clear message
            raise InputDataError(
                f"{role} file '{path}' could not be read as GeoParquet ({type(exc).__name__}: {exc}); "
                "check that it is a GeoParquet file with a geometry column"
            ) from exc
    else:
        gdf, layer = _read_ogr(path, layer, role)
    if not isinstance(gdf, gpd.GeoDataFrame) or gdf.geometry is None:
        raise InputDataError(f"{role} file '{path}' has no geometry column; give a layer with geometries")
    if len(gdf) == 0:
        where = f" (layer '{layer}')" if layer else ""
        raise InputDataError(
            f"{role} file '{path}'{where} has no features; check that the right file or layer was named and "
            "that the export did not filter everything out"
        )
    gdf = gdf.reset_index(drop=True)
    if facts is not None:
        gdf = _keep_booleans(gdf, facts, path, role)
    return _drop_z(gdf, path, role)


def _read_ogr(path: Path, layer: str | None, role: str) -> tuple[gpd.GeoDataFrame, str | None]:
    """One layer of a file GDAL reads (pyogrio), and the layer's name (None: the only layer)."""
    import pyogrio

    try:
        layers = pyogrio.list_layers(path)
    except Exception as exc:  # noqa: BLE001
        raise InputDataError(
            f"{role} file '{path}' could not be opened ({type(exc).__name__}: {exc}); expected a vector "
            "file GDAL reads (GeoJSON, GeoPackage, Shapefile, FlatGeobuf) or GeoParquet; check the file "
            "is complete and in one of these formats"
        ) from exc
    names = [str(n) for n in layers[:, 0]] if len(layers) else []
    if layer is None and len(names) > 1:
        if role in names:
            layer = role
        else:
            raise InputDataError(
                f"{role} file '{path}' has {len(names)} layers ({_listing(names)}); name the one to use "
                f"(e.g. buildings_layer = '{names[0]}')"
            )
    if layer is not None and layer not in names:
        raise InputDataError(
            f"{role} file '{path}' has no layer '{layer}'; its layers are {_listing(names)}"
        )
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            # mixed-type properties (e.g. height 12 and "12 m") come back as strings: that is what we parse
            warnings.filterwarnings("ignore", message="Could not parse column", category=UserWarning)
            gdf = pyogrio.read_dataframe(path, layer=layer)
    except Exception as exc:  # noqa: BLE001
        raise InputDataError(
            f"{role} file '{path}' could not be read ({type(exc).__name__}: {exc}); check the file is a "
            "complete, valid vector file"
        ) from exc
    for w in caught:  # GDAL's own warnings (e.g. a coordinate it could not read): a note naming the file
        if issubclass(w.category, RuntimeWarning):
            warnings.warn(f"{role} file '{path.name}': GDAL warned while reading it: {w.message}",
                          SitingWarning, stacklevel=2)
        else:
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    return gdf, layer


def _keep_booleans(gdf: gpd.GeoDataFrame, facts: GeoJSONFacts, path: Path, role: str) -> gpd.GeoDataFrame:
    """The layer with the JSON booleans GDAL read as 1 / 0 in a column of numbers put back as booleans."""
    if len(gdf) != facts.n_features:
        raise InputDataError(
            f"{role} file '{path}' holds {facts.n_features} features, but GDAL read {len(gdf)}; check the file "
            "with 'ogrinfo -al -so' and write it again (e.g. 'ogr2ogr -f GeoJSON out.geojson in.geojson')"
        )
    numeric = [c for c in facts.booleans if c in gdf.columns and pd.api.types.is_numeric_dtype(gdf[c])
               and not pd.api.types.is_bool_dtype(gdf[c])]
    if not numeric:
        return gdf
    gdf = gdf.copy()
    for col in numeric:
        values = gdf[col].astype(object)
        rows = list(facts.booleans[col])
        values.iloc[rows] = [facts.booleans[col][r] for r in rows]
        gdf[col] = values
    return gdf


def _drop_z(gdf: gpd.GeoDataFrame, path: Path, role: str) -> gpd.GeoDataFrame:
    """The layer with 3-D coordinates made 2-D, with one model note: heights come from the attributes
    (building height rules, ``z_m``), never from the Z of the coordinates."""
    geoms = gdf.geometry.values
    has_z = shapely.has_z(geoms)
    if not has_z.any():
        return gdf
    where = "buildings' height rules" if role == "buildings" else "'z_m' property"
    warnings.warn(f"{role} file '{path.name}' has 3-D coordinates in {int(has_z.sum())} feature(s); the Z values "
                  f"were dropped: heights come from the {where}, not from Z.", SitingWarning, stacklevel=3)
    gdf = gdf.copy()
    gdf[gdf.geometry.name] = gpd.GeoSeries(shapely.force_2d(geoms), index=gdf.index, crs=gdf.crs)
    return gdf


def _read_osm_pbf(path: Path, bbox_lonlat) -> gpd.GeoDataFrame:
    try:
        import pyrosm
    except ImportError as exc:
        raise InputDataError(
            f"reading buildings from the OSM extract '{path}' needs pyrosm, which is not installed; install "
            "the 'osm' extra (pip install 'siting[osm]') or convert the extract to GeoPackage first"
        ) from exc
    try:
        osm = pyrosm.OSM(str(path), bounding_box=list(bbox_lonlat) if bbox_lonlat is not None else None)
        gdf = osm.get_buildings()
    except Exception as exc:  # noqa: BLE001
        raise InputDataError(
            f"OSM extract '{path}' could not be read by pyrosm ({type(exc).__name__}: {exc}); check the file "
            "is a complete .osm.pbf"
        ) from exc
    if gdf is None or len(gdf) == 0:
        raise InputDataError(f"OSM extract '{path}' holds no buildings (in the area asked for); check the extract")
    gdf = gdf.reset_index(drop=True)
    # Tags pyrosm does not expand into columns stay in the JSON 'tags' column: pull out the ones we use.
    if "tags" in gdf.columns:
        tags = gdf["tags"]
        for key in ("height", "building:levels", "levels", "name", "address", "addr:street", "addr:housenumber"):
            if key in gdf.columns:
                continue
            hit = tags.notna() & tags.astype(str).str.contains(f'"{key}"', regex=False)
            if hit.any():
                col = pd.Series(None, index=gdf.index, dtype=object)
                col[hit] = [json.loads(t).get(key) for t in tags[hit]]
                gdf[key] = col
    if "osm_type" in gdf.columns and "id" in gdf.columns:
        gdf["id"] = gdf["osm_type"].astype(str) + "/" + gdf["id"].astype(str)
    if gdf.crs is None:
        gdf = gdf.set_crs(4326)
    return gdf
