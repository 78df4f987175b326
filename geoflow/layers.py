"""Vector inputs at the edge of the pipeline: river centrelines and land-cover polygons.

Only this module opens vector files (GeoPackage, Shapefile, GeoJSON, ... through geopandas
with the pyogrio engine). Everything it returns is in the DEM's CRS: shapely geometries and
plain numpy arrays. Every problem with a file becomes one :class:`InputDataError` line that
names the file, the layer and the field at fault and says what to do.
"""
from __future__ import annotations

import difflib
from dataclasses import dataclass
from functools import cached_property
from pathlib import Path

import numpy as np
import pyogrio
import pyproj
import shapely
from shapely.geometry import LineString

from .errors import InputDataError
from .records import SurveyPoints

_LINE_TYPES = ("LineString", "MultiLineString")
_POLYGON_TYPES = ("Polygon", "MultiPolygon")
SURVEY_FIELD = "z_m"


@dataclass(frozen=True, eq=False)
class LandCover:
    """Land-cover polygons in the DEM CRS.

    ``geometries`` is a shapely geometry array and ``classes`` the class name (str) of each
    polygon, in layer order (overlaps are resolved to the first feature). ``path`` and
    ``layer`` are kept for messages. The spatial index is built on first use and is not
    pickled (Dask workers rebuild it).
    """

    geometries: np.ndarray
    classes: np.ndarray
    path: Path
    layer: str | None = None
    class_field: str = ""

    @cached_property
    def tree(self) -> shapely.STRtree:
        """STRtree over ``geometries`` (built lazily, once per object)."""
        return shapely.STRtree(self.geometries)

    def __getstate__(self) -> dict:
        state = dict(self.__dict__)
        state.pop("tree", None)
        return state


def read_centrelines(path, crs, layer: str | None = None, id_field: str = "reach_id",
                     problems: dict | None = None) -> list[tuple[str, LineString]]:
    """Read river centrelines (drawn in the direction of flow) as ``[(reach_id, LineString), ...]``.

    Lines are reprojected to ``crs`` (the DEM CRS), Z is dropped, and MultiLineStrings are
    joined with ``shapely.line_merge(directed=True)`` (parts are never reversed, so the flow
    direction is kept); a reach that stays multi-part is an error. Reach ids
    are strings (integral numbers lose their ``.0``) and must be unique and non-empty.

    With a ``problems`` dict, a bad geometry (null, empty, not a line, parts that do not join,
    zero length) makes only that reach unusable: it is left out of the result and its message
    is stored under its id, so a batch can go on with the others. Without one it raises.
    """
    path = Path(path)
    gdf, where = _read_layer(path, crs, layer, [id_field], _LINE_TYPES, "line", check=problems is None)
    ids = _reach_ids(gdf[id_field].to_numpy(), where, id_field)
    geoms = shapely.force_2d(np.asarray(gdf.geometry.values, dtype=object))
    bad: dict[str, str] = {}
    for i in np.flatnonzero(shapely.is_missing(geoms) | shapely.is_empty(geoms)):
        bad[ids[i]] = f"{where}: reach {ids[i]} has a null or empty geometry; redraw or delete it"
    kind = shapely.get_type_id(geoms)
    ok = ~np.isin(ids, list(bad))
    for i in np.flatnonzero(ok & ~np.isin(kind, [shapely.GeometryType.LINESTRING, shapely.GeometryType.MULTILINESTRING])):
        bad[ids[i]] = f"{where}: reach {ids[i]} is not a line; draw the centreline as a LineString"
    multi = np.flatnonzero(~np.isin(ids, list(bad)) & (kind == shapely.GeometryType.MULTILINESTRING))
    if multi.size:
        geoms[multi] = shapely.line_merge(geoms[multi], directed=True)  # never reverses a part
    for i in np.flatnonzero(~np.isin(ids, list(bad)) & (shapely.get_type_id(geoms) != shapely.GeometryType.LINESTRING)):
        bad[ids[i]] = (f"{where}: centreline of reach {ids[i]} has parts that do not join end to end in one "
                       "direction; draw each reach as one continuous line in the direction of flow")
    for i in np.flatnonzero(~np.isin(ids, list(bad))):
        if shapely.length(geoms[i]) <= 0.0:
            bad[ids[i]] = f"{where}: centreline of reach {ids[i]} has zero length; redraw or delete it"
    if bad and (problems is None or len(bad) == len(ids)):
        more = f" (and {len(bad) - 1} more reach(es))" if len(bad) > 1 else ""
        raise InputDataError(next(iter(bad.values())) + more)
    if problems is not None:
        problems.update(bad)
    return [(str(i), g) for i, g in zip(ids, geoms) if i not in bad]


def read_section_lines(path, crs, layer: str | None = None, id_field: str = "reach_id") -> dict[str, list[LineString]]:
    """Read user-drawn cross-section lines as ``{reach_id: [LineString, ...]}`` (file order kept).

    Lines are reprojected to ``crs`` (the DEM CRS) and Z is dropped; a MultiLineString whose
    parts join end to end becomes one line (``shapely.line_merge(directed=True)``), otherwise
    it is an error naming the feature. Many lines may share a reach id; null or empty ids are
    errors. Direction and order do not matter (see :func:`geoflow.sections.sections_from_lines`).
    """
    path = Path(path)
    gdf, where = _read_layer(path, crs, layer, [id_field], _LINE_TYPES, "line")
    ids = gdf[id_field].to_numpy()
    geoms = shapely.force_2d(np.asarray(gdf.geometry.values, dtype=object))
    multi = shapely.get_type_id(geoms) == shapely.GeometryType.MULTILINESTRING
    if np.any(multi):
        geoms[multi] = shapely.line_merge(geoms[multi], directed=True)
        still = np.flatnonzero(shapely.get_type_id(geoms) != shapely.GeometryType.LINESTRING)
        if still.size:
            raise InputDataError(f"{where}: section line feature {int(still[0])} has parts that do not join end to end; "
                                 "draw each section as one continuous line")
    out: dict[str, list[LineString]] = {}
    for i, (v, g) in enumerate(zip(ids, geoms)):
        text = "" if v is None or (isinstance(v, float) and not np.isfinite(v)) else _as_text(v)
        if not text:
            raise InputDataError(f"{where}: field {id_field!r} is empty for feature {i}; give every section line the "
                                 "id of the reach it crosses")
        if g.length <= 0.0:
            raise InputDataError(f"{where}: section line feature {i} (reach {text}) has zero length; redraw or delete it")
        out.setdefault(text, []).append(g)
    return out


def read_landcover(path, crs, class_field: str, layer: str | None = None, bbox=None) -> LandCover:
    """Read land-cover polygons and their class names, reprojected to ``crs`` (the DEM CRS).

    ``bbox`` = (left, bottom, right, top) in ``crs`` limits reading to features that touch
    that box (useful for large layers). Invalid polygons are repaired with
    ``shapely.make_valid``; empty class values are an error.
    """
    path = Path(path)
    gdf, where = _read_layer(path, crs, layer, [class_field], _POLYGON_TYPES, "polygon", bbox=bbox)
    values = gdf[class_field].to_numpy()
    missing = np.flatnonzero([v is None or (isinstance(v, float) and np.isnan(v)) or str(v).strip() == "" for v in values])
    if missing.size:
        raise InputDataError(
            f"{where}: field {class_field!r} is empty for {missing.size} feature(s) (first: feature {int(missing[0])}); "
            "give every land-cover polygon a class"
        )
    geoms = shapely.force_2d(np.asarray(gdf.geometry.values, dtype=object))
    invalid = ~shapely.is_valid(geoms)
    if np.any(invalid):
        geoms[invalid] = shapely.make_valid(geoms[invalid])
    classes = np.array([_as_text(v) for v in values], dtype=str)
    return LandCover(geometries=geoms, classes=classes, path=path, layer=layer, class_field=class_field)


def read_polygons(path, crs, layer: str | None = None) -> np.ndarray:
    """Read the polygons of a layer (no attributes needed), reprojected to ``crs``, repaired if invalid."""
    path = Path(path)
    gdf, _ = _read_layer(path, crs, layer, [], _POLYGON_TYPES, "polygon")
    geoms = shapely.force_2d(np.asarray(gdf.geometry.values, dtype=object))
    invalid = ~shapely.is_valid(geoms)
    if np.any(invalid):
        geoms[invalid] = shapely.make_valid(geoms[invalid])
    return geoms


def read_survey_points(path, crs, layer: str | None = None) -> SurveyPoints:
    """Surveyed ground points (field ``z_m``, metres in the DEM's vertical datum), reprojected to ``crs``.

    ``dem_z`` is left NaN (the caller samples the DEM); ``fid`` is the feature's position in the
    layer. Missing or non-numeric ``z_m`` values are an error naming the features.
    """
    path = Path(path)
    gdf, where = _read_layer(path, crs, layer, [SURVEY_FIELD], ("Point",), "point")
    try:
        z = np.asarray(gdf[SURVEY_FIELD].to_numpy(), dtype=np.float64)
    except (TypeError, ValueError):
        raise InputDataError(f"{where}: field {SURVEY_FIELD!r} holds values that are not numbers; give the surveyed "
                             "ground elevation in metres (the DEM's vertical datum)") from None
    bad = np.flatnonzero(~np.isfinite(z))
    if bad.size:
        raise InputDataError(f"{where}: field {SURVEY_FIELD!r} is empty for {bad.size} point(s) (first: feature "
                             f"{int(bad[0])}); give every point its surveyed elevation in metres")
    xy = shapely.get_coordinates(np.asarray(gdf.geometry.values, dtype=object))
    return SurveyPoints(x=xy[:, 0].copy(), y=xy[:, 1].copy(), z=z, dem_z=np.full(z.size, np.nan),
                        fid=np.arange(z.size), source=where)


@dataclass(frozen=True, eq=False)
class Marks:
    """Observed water levels (points) in the DEM CRS: ``x``, ``y`` (m), ``event`` (names),
    ``wse`` (m) and ``feature`` (the feature's number in the layer, from 0), one per mark."""

    x: np.ndarray
    y: np.ndarray
    event: np.ndarray
    wse: np.ndarray
    feature: np.ndarray
    where: str = ""


def read_marks(path, crs, layer: str | None = None, event_field: str = "event", wse_field: str = "wse_m") -> Marks:
    """Read observed water levels: points with an event name and an observed level (m, DEM datum)."""
    path = Path(path)
    gdf, where = _read_layer(path, crs, layer, [event_field, wse_field], ("Point",), "point")
    events = []
    for i, v in enumerate(gdf[event_field].to_numpy()):
        text = "" if v is None or (isinstance(v, float) and not np.isfinite(v)) else _as_text(v)
        if not text:
            raise InputDataError(f"{where}: field {event_field!r} is empty for feature {i}; give every mark the name "
                                 "of the [[events]] it was left by")
        events.append(text)
    try:
        wse = np.asarray(gdf[wse_field].to_numpy(), dtype=float)
    except (TypeError, ValueError):
        raise InputDataError(f"{where}: field {wse_field!r} must hold numbers (observed water level, m)") from None
    bad = np.flatnonzero(~np.isfinite(wse))
    if bad.size:
        raise InputDataError(f"{where}: field {wse_field!r} is empty or not a number for feature {int(bad[0])}; give "
                             "every mark its observed water level in metres")
    xy = shapely.get_coordinates(shapely.force_2d(np.asarray(gdf.geometry.values, dtype=object)))
    return Marks(x=xy[:, 0], y=xy[:, 1], event=np.array(events, dtype=object), wse=wse,
                 feature=np.arange(len(gdf)), where=where)


def _read_layer(path: Path, crs, layer, fields, allowed_types, kind, bbox=None, check: bool = True):
    """Validate and read one layer; return (GeoDataFrame in ``crs``, 'file (layer x)' label)."""
    import geopandas as gpd  # heavy import kept at the edge

    target = _target_crs(crs, path)
    layer_name = _layer_name(path, layer)
    where = f"{path} (layer {layer_name!r})"
    _check_fields_and_crs(path, layer_name, where, fields)
    kwargs = {}
    if bbox is not None:
        kwargs["bbox"] = gpd.GeoSeries([shapely.box(*bbox)], crs=target)
    try:
        gdf = gpd.read_file(path, layer=layer_name, engine="pyogrio", columns=list(fields), **kwargs)
    except Exception as exc:
        raise InputDataError(f"{where}: cannot read features ({_one_line(exc)}); check the file is not damaged") from None
    if check:
        _check_geometries(gdf, where + (f" within {tuple(bbox)}" if bbox is not None else ""), allowed_types, kind)
    elif len(gdf) == 0:
        raise InputDataError(f"{where}: layer has no features; give a layer with {kind} features")
    if gdf.crs != target:
        gdf = gdf.to_crs(target)
    return gdf, where


def _layer_name(path: Path, layer) -> str:
    """The layer to read: the one named, or the only one the file holds."""
    if not path.exists():
        raise InputDataError(f"{path}: file not found; check the path in the config (relative to the config file)")
    try:
        layers = [str(name) for name in pyogrio.list_layers(path)[:, 0]]
    except Exception as exc:  # pyogrio raises several GDAL-backed error types
        raise InputDataError(f"{path}: cannot open as a vector file ({_one_line(exc)}); give a GeoPackage, "
                             "Shapefile or GeoJSON") from None
    if layer is None:
        if len(layers) != 1:
            raise InputDataError(f"{path}: holds {len(layers)} layers ({', '.join(layers) or 'none'}); name the "
                                 "layer to read in the config")
        return layers[0]
    if str(layer) not in layers:
        raise InputDataError(f"{path}: layer {layer!r} not found; layers present: {', '.join(layers) or 'none'}")
    return str(layer)


def _check_fields_and_crs(path: Path, layer_name: str, where: str, fields) -> None:
    try:
        info = pyogrio.read_info(path, layer=layer_name)
    except Exception as exc:
        raise InputDataError(f"{where}: cannot read layer ({_one_line(exc)}); check the file is not damaged") from None
    present = [str(f) for f in info["fields"]]
    for field in fields:
        if field not in present:
            hint = difflib.get_close_matches(field, present, n=1)
            extra = f" (did you mean {hint[0]!r}?)" if hint else ""
            raise InputDataError(f"{where}: field {field!r} not found{extra}; fields present: "
                                 f"{', '.join(present) or 'none'}")
    if info["crs"] is None:
        raise InputDataError(f"{where}: layer has no coordinate reference system; assign one (e.g. with ogr2ogr "
                             "-a_srs) and retry")


def _check_geometries(gdf, where: str, allowed_types, kind: str) -> None:
    geoms = np.asarray(gdf.geometry.values, dtype=object)
    if geoms.size == 0:
        raise InputDataError(f"{where}: layer has no features; give a layer with {kind} features")
    null = shapely.is_missing(geoms) | shapely.is_empty(geoms)
    if np.any(null):
        first = int(np.flatnonzero(null)[0])
        raise InputDataError(
            f"{where}: {int(null.sum())} feature(s) have a null or empty geometry (first: feature {first}); delete or redraw them"
        )
    types = shapely.get_type_id(geoms)
    names = np.array(["Point", "LineString", "LinearRing", "Polygon", "MultiPoint", "MultiLineString",
                      "MultiPolygon", "GeometryCollection"])[types]
    bad = ~np.isin(names, allowed_types)
    if np.any(bad):
        found = ", ".join(sorted(set(names[bad])))
        raise InputDataError(f"{where}: holds {found} geometries; a {kind} layer is needed ({' or '.join(allowed_types)})")


def _reach_ids(values: np.ndarray, where: str, id_field: str) -> np.ndarray:
    """Reach ids as strings; null, empty and duplicate ids are errors."""
    out = []
    for i, v in enumerate(values):
        if v is None or (isinstance(v, float) and not np.isfinite(v)):
            raise InputDataError(f"{where}: field {id_field!r} is empty for feature {i}; give every centreline a reach id")
        s = _as_text(v)
        if not s:
            raise InputDataError(f"{where}: field {id_field!r} is empty for feature {i}; give every centreline a reach id")
        out.append(s)
    ids = np.array(out, dtype=object)
    uniq, counts = np.unique(ids.astype(str), return_counts=True)
    if np.any(counts > 1):
        dup = ", ".join(uniq[counts > 1][:5])
        raise InputDataError(f"{where}: field {id_field!r} has duplicate reach id(s) {dup}; give each centreline its own id")
    return ids


def _as_text(value) -> str:
    """Attribute value as stripped text; integral floats lose their '.0' (3.0 -> '3')."""
    if isinstance(value, (float, np.floating)) and float(value).is_integer():
        value = int(value)
    return str(value).strip()


def _target_crs(crs, path: Path) -> pyproj.CRS:
    if crs is None:
        raise InputDataError(f"{path}: no target CRS given to reproject to; open the DEM first and pass its CRS")
    try:
        return pyproj.CRS.from_user_input(crs)
    except pyproj.exceptions.CRSError as exc:
        raise InputDataError(f"{path}: target CRS {crs!r} is not understood ({_one_line(exc)}); pass the DEM's CRS") from None


def _one_line(exc: Exception) -> str:
    return " ".join(str(exc).split())
