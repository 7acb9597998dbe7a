"""Reading the layer of water bodies (polygons, or points with an area) from any vector
format GDAL reads.

The reader checks identifiers, geometry types and stated areas up front and leaves geometry
repair to the zonal engine: invalid and empty polygons are kept as they are. A point (a
register of farm dams or wells) has no area of its own: it needs ``[waterbodies]
area_field``, read here and converted to m2. A MultiPoint whose parts are all one location
is that point; one of several locations is refused, since lakeloss cannot know how the area
divides between them. Geometry collections keep
their polygonal parts, flagged ``collection_polygons_kept``; a null geometry becomes an empty
polygon, flagged ``geometry_null``. Longitude/latitude polygons that cross 180 degrees are
made contiguous (longitudes beyond 180) so that they land whole on the grid.
"""

from __future__ import annotations

import difflib
import os
from dataclasses import dataclass
from pathlib import Path

import geopandas
import numpy as np
import pandas as pd
import pyogrio
import pyogrio.errors
import pyproj
import shapely
from shapely.geometry import MultiPolygon, Polygon

from lakeloss.config import AREA_UNITS
from lakeloss.errors import ConfigError, CRSError, GeometryError, InputDataError

DEFAULT_ID_FIELD = "waterbody_id"
"""Name of the identifier column created (1..N in file order) when none is configured."""

_PARQUET_SUFFIXES = (".parquet", ".geoparquet")
_POLYGONAL = ("Polygon", "MultiPolygon")
_ACCEPTED = (*_POLYGONAL, "Point")
_EXAMPLES = 5

# What GDAL, its drivers and the parquet reader raise for unreadable input.
_READ_ERRORS = (
    pyogrio.errors.DataSourceError,
    pyogrio.errors.DataLayerError,
    pyogrio.errors.FieldError,
    pyogrio.errors.FeatureError,
    pyogrio.errors.GeometryError,
    pyogrio.errors.CRSError,
    OSError,
    ValueError,
    RuntimeError,
    TypeError,
    ImportError,
)


@dataclass(frozen=True)
class WaterBodyLayer:
    """The water bodies of a run, as read.

    Attributes
    ----------
    frame : geopandas.GeoDataFrame
        Every original attribute, original CRS, a RangeIndex and the geometry column
        ``geometry`` (polygons and multipolygons, possibly empty or invalid).
    id_field : str
        Column of ``frame`` holding the unique, non-null water-body identifier.
    flags : numpy.ndarray
        Per row, ``";"``-joined flag tokens (``""`` when clean).
    path : str
        Path the layer was read from.
    layer : str or None
        Layer name inside the source (None for single-layer formats such as GeoParquet).
    crs_assumed : bool
        True when the CRS came from the configuration because the file had none.
    stated_area_m2 : numpy.ndarray or None
        Per row, the area the run uses instead of the geometry's: the ``area_field`` value
        in m2 for points (and for polygons with ``area_source = "field"``), NaN where the
        geometry's own area applies. None without ``area_field``. [m2]
    field_area_m2 : numpy.ndarray or None
        Per row, the ``area_field`` value in m2 wherever it is a positive number (NaN
        elsewhere), used or not: polygons are compared with it. None without
        ``area_field``. [m2]
    """

    frame: geopandas.GeoDataFrame
    id_field: str
    flags: np.ndarray
    path: str
    layer: str | None
    crs_assumed: bool
    stated_area_m2: np.ndarray | None = None
    field_area_m2: np.ndarray | None = None

    def __len__(self) -> int:
        return len(self.frame)


def _is_parquet(path: Path) -> bool:
    return path.suffix.lower() in _PARQUET_SUFFIXES


def _check_exists(path: Path) -> None:
    if not path.exists():
        raise InputDataError(
            f"water-body layer {str(path)!r} does not exist; expected a vector file "
            "(GeoPackage, Shapefile, GeoJSON, GeoParquet); check [waterbodies] path"
        )


def _unreadable(path: Path, err: Exception) -> InputDataError:
    reason = " ".join(str(err).split()) or type(err).__name__
    kind = "a directory GDAL cannot open" if path.is_dir() else "unreadable, truncated or corrupt"
    return InputDataError(
        f"water-body layer {str(path)!r} is {kind} ({reason}); expected a readable vector "
        "file; re-export the layer or point [waterbodies] path at the right file"
    )


def _layer_table(path: Path) -> list[tuple[str, str | None]]:
    _check_exists(path)
    if _is_parquet(path):
        return [(path.stem, "Unknown")]
    try:
        table = pyogrio.list_layers(os.fspath(path))
    except _READ_ERRORS as err:
        raise _unreadable(path, err) from err
    return [(str(name), None if kind is None else str(kind)) for name, kind in table]


def list_layers(path) -> list[str]:
    """Names of the layers in a vector data source.

    Parameters
    ----------
    path : str or os.PathLike
        Vector file (or a directory GDAL opens as one data source).

    Returns
    -------
    list of str
        Layer names in source order (the file stem for GeoParquet).

    Raises
    ------
    InputDataError
        Missing, unreadable or corrupt source.
    """
    return [name for name, _ in _layer_table(Path(path))]


def _choose_layer(path: Path, layer: str | None) -> str | None:
    table = _layer_table(path)
    names = [name for name, _ in table]
    listing = ", ".join(repr(n) for n in names)
    if _is_parquet(path):
        return None
    if not table:
        raise InputDataError(f"water-body layer {str(path)!r} contains no layers; expected one")
    if layer is not None:
        if layer not in names:
            raise ConfigError(
                f"layer {layer!r} is not in {str(path)!r}; the layers are {listing}; "
                "set [waterbodies] layer to one of them"
            )
        return layer
    # Attribute-only tables (no geometry type) cannot be the water bodies.
    spatial = [name for name, kind in table if kind is not None]
    if len(spatial) == 1:
        return spatial[0]
    raise ConfigError(
        f"{str(path)!r} has {len(names)} layers ({listing}) and none was chosen; "
        "set [waterbodies] layer to one of them"
    )


def _require_pyarrow(path: Path) -> None:
    # GeoParquet goes through pyarrow, an optional geopandas dependency lakeloss does not pin.
    try:
        import pyarrow.parquet  # noqa: F401
    except ImportError as err:
        raise InputDataError(
            f"water-body layer {str(path)!r} is GeoParquet, which needs the optional package "
            "pyarrow (not installed); install pyarrow or convert the layer to GeoPackage"
        ) from err


def _read_frame(path: Path, layer: str | None) -> geopandas.GeoDataFrame:
    try:
        if _is_parquet(path):
            _require_pyarrow(path)
            frame = geopandas.read_parquet(path)
        else:
            frame = geopandas.read_file(path, layer=layer, engine="pyogrio")
    except _READ_ERRORS as err:
        raise _unreadable(path, err) from err
    if not isinstance(frame, geopandas.GeoDataFrame) or frame.geometry is None:
        raise InputDataError(
            f"water-body layer {str(path)!r} has no geometry column; expected polygons"
        )
    frame = frame.reset_index(drop=True)
    if frame.geometry.name != "geometry":
        frame = frame.rename_geometry("geometry")
    return frame


def _apply_crs(frame: geopandas.GeoDataFrame, path: Path, crs: str | None):
    """Return the frame with a CRS and whether it came from the configuration."""
    override = None
    if crs is not None:
        try:
            override = pyproj.CRS.from_user_input(crs)
        except pyproj.exceptions.CRSError as err:
            raise CRSError(
                f"[waterbodies] crs {crs!r} is not a CRS pyproj understands; expected e.g. "
                '"EPSG:4326"; fix the crs setting'
            ) from err
    if frame.crs is None:
        if override is None:
            raise CRSError(
                f"water-body layer {str(path)!r} has no coordinate reference system; expected "
                'one in the file; set [waterbodies] crs = "EPSG:...." to the layer\'s CRS'
            )
        return frame.set_crs(override), True
    if override is not None and not pyproj.CRS(frame.crs).equals(override, ignore_axis_order=True):
        raise ConfigError(
            f"water-body layer {str(path)!r} declares CRS {frame.crs.to_string()!r} but "
            f"[waterbodies] crs is {crs!r}; expected them to agree; remove the crs setting "
            "or reproject the layer"
        )
    return frame, False


def _id_column(frame: geopandas.GeoDataFrame, path: Path, id_field: str | None) -> str:
    fields = [c for c in frame.columns if c != "geometry"]
    if id_field is None:
        if DEFAULT_ID_FIELD in frame.columns:
            raise ConfigError(
                f"water-body layer {str(path)!r} already has a {DEFAULT_ID_FIELD!r} column; "
                f'expected none when no id field is set; set [waterbodies] id_field = "{DEFAULT_ID_FIELD}"'
            )
        frame[DEFAULT_ID_FIELD] = np.arange(1, len(frame) + 1)
        return DEFAULT_ID_FIELD
    if id_field not in fields:
        close = difflib.get_close_matches(id_field, fields, n=1)
        hint = f"did you mean {close[0]!r}? " if close else ""
        raise ConfigError(
            f"id field {id_field!r} is not in {str(path)!r}; {hint}the fields are "
            f"{', '.join(repr(f) for f in fields) or 'none'}; set [waterbodies] id_field"
        )
    _check_ids(frame[id_field], id_field)
    return id_field


def _examples(values) -> str:
    shown = [repr(v) for v in list(values)[:_EXAMPLES]]
    return ", ".join(shown) + (", ..." if len(values) > _EXAMPLES else "")


def _check_ids(ids: pd.Series, id_field: str) -> None:
    nulls = ids.isna()
    if nulls.any():
        rows = np.flatnonzero(nulls.to_numpy())
        raise GeometryError(
            f"id field {id_field!r} is empty in {int(nulls.sum())} features (rows "
            f"{_examples(rows.tolist())}); expected an id on every feature; fill them in or "
            "leave id_field unset to number the features"
        )
    duplicated = ids[ids.duplicated(keep=False)]
    if len(duplicated):
        values = pd.unique(duplicated)
        raise GeometryError(
            f"id field {id_field!r} has {len(values)} duplicated values ({_examples(values.tolist())}) "
            f"on {len(duplicated)} features; expected unique ids; fix them or leave id_field unset"
        )


def _polygonal_part(geometry):
    """Polygonal content of a (possibly nested) collection, or None when there is none."""
    parts = [g for g in shapely.get_parts(geometry) if not g.is_empty]
    polygons: list[Polygon] = []
    for part in parts:
        if part.geom_type == "Polygon":
            polygons.append(part)
        elif part.geom_type == "MultiPolygon":
            polygons.extend(part.geoms)
        elif part.geom_type == "GeometryCollection":
            inner = _polygonal_part(part)
            polygons.extend([] if inner is None else shapely.get_parts(inner))
    if not polygons:
        return None
    return polygons[0] if len(polygons) == 1 else MultiPolygon(polygons)


def _single_points(geometries: np.ndarray, ids: pd.Series) -> None:
    """Make each MultiPoint of one location a Point in place; refuse those of several."""
    kinds = shapely.get_type_id(geometries)
    rows = np.flatnonzero(kinds == shapely.GeometryType.MULTIPOINT)
    scattered = []
    for row in rows:
        if geometries[row].is_empty:
            geometries[row] = Polygon()
            continue
        locations = np.unique(shapely.get_coordinates(geometries[row]), axis=0)
        if len(locations) == 1:
            geometries[row] = shapely.Point(locations[0])
        else:
            scattered.append(row)
    if scattered:
        raise GeometryError(
            f"water-body layer has {len(scattered)} MultiPoint features of several locations "
            f"(ids {_examples(ids.iloc[scattered].tolist())}); expected one point per water "
            "body; split them into single points, each with its own area"
        )


def _normalise_geometries(frame: geopandas.GeoDataFrame, id_field: str) -> np.ndarray:
    """Make every geometry a (multi)polygon or point in place; return the per-row flags."""
    flags = np.full(len(frame), "", dtype=object)
    geometries = frame.geometry.to_numpy().copy()
    nulls = np.array([g is None for g in geometries])
    geometries[nulls] = Polygon()
    flags[nulls] = "geometry_null"
    kinds = shapely.get_type_id(geometries)
    collections = np.flatnonzero(kinds == shapely.GeometryType.GEOMETRYCOLLECTION)
    barren = []
    for row in collections:
        if geometries[row].is_empty:
            geometries[row] = Polygon()
            continue
        polygonal = _polygonal_part(geometries[row])
        if polygonal is None:
            barren.append(row)
            continue
        geometries[row] = polygonal
        flags[row] = "collection_polygons_kept"
    if barren:
        raise GeometryError(
            f"{len(barren)} geometry collections have no polygon part (ids "
            f"{_examples(frame[id_field].iloc[barren].tolist())}); expected polygons; "
            "remove those features or replace them with their outlines as polygons"
        )
    _single_points(geometries, frame[id_field])
    empty_points = (shapely.get_type_id(geometries) == shapely.GeometryType.POINT) & (
        shapely.is_empty(geometries)
    )
    geometries[empty_points] = Polygon()
    _refuse_non_polygons(geometries, frame[id_field])
    frame["geometry"] = geopandas.GeoSeries(geometries, crs=frame.crs, index=frame.index)
    return flags


def _refuse_non_polygons(geometries: np.ndarray, ids: pd.Series) -> None:
    types = pd.Series([g.geom_type for g in geometries], index=ids.index)
    wrong = ~types.isin(_ACCEPTED)
    if not wrong.any():
        return
    counts = types[wrong].value_counts()
    summary = ", ".join(f"{n} {kind}" for kind, n in counts.items())
    raise GeometryError(
        f"water-body layer has {summary} features (ids {_examples(ids[wrong].tolist())}); "
        "expected polygons or multipolygons, or points with an area attribute; buffer "
        "or remove the lines"
    )


def _is_point(frame: geopandas.GeoDataFrame) -> np.ndarray:
    return shapely.get_type_id(frame.geometry.to_numpy()) == shapely.GeometryType.POINT


def _refuse_points_without_area(frame: geopandas.GeoDataFrame, id_field: str) -> None:
    points = _is_point(frame)
    if points.any():
        raise GeometryError(
            f"water-body layer has {int(points.sum())} Point features (ids "
            f"{_examples(frame[id_field][points].tolist())}) but no area attribute; expected "
            "polygons, or points with their area; set [waterbodies] area_field to the "
            "attribute holding each point's area (area_units for its units)"
        )


def _stated_areas(
    frame: geopandas.GeoDataFrame,
    id_field: str,
    area_field: str,
    area_units: str,
    area_source: str,
) -> tuple[np.ndarray, np.ndarray]:
    """The area each body states (NaN where its geometry's applies) and every usable value.

    Returns (stated, field) in m2; see :class:`WaterBodyLayer`. The rows whose area the run
    takes from the field (points; every polygon with a geometry when ``area_source`` is
    "field") must hold a positive number.
    """
    fields = [c for c in frame.columns if c != "geometry"]
    if area_field not in fields:
        close = difflib.get_close_matches(area_field, fields, n=1)
        hint = f"did you mean {close[0]!r}? " if close else ""
        raise ConfigError(
            f"area field {area_field!r} is not in the water-body layer; {hint}the fields are "
            f"{', '.join(repr(f) for f in fields) or 'none'}; set [waterbodies] area_field"
        )
    raw = frame[area_field]
    values = pd.to_numeric(raw, errors="coerce").to_numpy(dtype=float)
    present = ~shapely.is_empty(frame.geometry.to_numpy())
    used = _is_point(frame) | (present & (area_source == "field"))
    problems = (
        (raw.notna().to_numpy() & np.isnan(values), "non-numeric"),
        (raw.isna().to_numpy(), "empty (NaN)"),
        (np.isinf(values), "infinite"),
        (values == 0, "zero"),
        (values < 0, "negative"),
    )
    for mask, kind in problems:
        bad = used & mask
        if bad.any():
            raise GeometryError(
                f"area field {area_field!r} is {kind} for {int(bad.sum())} water bodies that "
                f"take their area from it (ids {_examples(frame[id_field][bad].tolist())}); "
                f"expected a positive area in {area_units}; fix those values or remove "
                "those features"
            )
    with np.errstate(invalid="ignore"):
        usable = np.isfinite(values) & (values > 0)
    field_m2 = np.where(usable, values * AREA_UNITS[area_units], np.nan)
    return np.where(used, field_m2, np.nan), field_m2


def _unwrap_antimeridian(frame: geopandas.GeoDataFrame) -> None:
    """Make polygons that cross 180 degrees of longitude contiguous, in place.

    A layer in longitude/latitude may store such a water body split into parts at +-180
    (as GeoJSON asks) or with its ring jumping from +179.9 to -179.9. Either way its
    extent seems to span the globe. Western longitudes of those geometries get +360, so
    each becomes one contiguous shape east of 180 that the zonal engine can place on a
    grid stored in -180..180 or 0..360. No water body is half the globe wide, so a span
    over 180 degrees can only mean this.
    """
    if frame.crs is None or not pyproj.CRS(frame.crs).is_geographic:
        return
    geometries = frame.geometry.to_numpy()
    bounds = shapely.bounds(geometries)
    crossing = np.flatnonzero((bounds[:, 2] - bounds[:, 0]) > 180.0)
    if crossing.size == 0:
        return

    def east_of_180(coords: np.ndarray) -> np.ndarray:
        return np.column_stack(
            [np.where(coords[:, 0] < 0.0, coords[:, 0] + 360.0, coords[:, 0]), coords[:, 1]]
        )

    unwrapped = geometries.copy()
    unwrapped[crossing] = [shapely.transform(g, east_of_180) for g in geometries[crossing]]
    # Parts split at +-180 now touch along the meridian: dissolve them into one polygon
    # (parts that are themselves invalid are left to the zonal engine's repair and flag).
    for row in crossing:
        if shapely.is_valid(shapely.get_parts(unwrapped[row])).all():
            unwrapped[row] = shapely.union_all(shapely.get_parts(unwrapped[row]))
    frame["geometry"] = geopandas.GeoSeries(unwrapped, crs=frame.crs, index=frame.index)


def read_waterbodies(
    path,
    *,
    layer: str | None = None,
    id_field: str | None = None,
    crs: str | None = None,
    area_field: str | None = None,
    area_units: str = "m2",
    area_source: str = "geometry",
) -> WaterBodyLayer:
    """Read and check the layer of water bodies (polygons, or points with an area).

    Parameters
    ----------
    path : str or os.PathLike
        Any vector source GDAL reads (GeoPackage, Shapefile, GeoJSON, ...) or a GeoParquet
        file (``.parquet`` / ``.geoparquet``).
    layer : str, optional
        Layer to read; required when the source has several spatial layers.
    id_field : str, optional
        Attribute holding unique ids; when None, ``waterbody_id`` = 1..N in file order.
    crs : str, optional
        CRS to use when the file has none (e.g. ``"EPSG:28355"``).
    area_field : str, optional
        Attribute holding each body's area; required when the layer has points.
    area_units : str, optional
        Units of ``area_field``: "m2" (default), "ha", "km2" or "acre".
    area_source : str, optional
        "geometry" (default): polygons keep their own area; "field": polygons take
        ``area_field`` as well. Points always take ``area_field``.

    Returns
    -------
    WaterBodyLayer

    Raises
    ------
    InputDataError
        Missing, unreadable, truncated or corrupt source, or no features.
    ConfigError
        Layer not chosen or unknown, id field missing, or ``crs`` contradicting the file.
    CRSError
        No CRS in the file and none configured, or an unparseable ``crs``.
    GeometryError
        Null or duplicate ids; line features; MultiPoints of several locations; points
        without ``area_field``; collections without polygons; an ``area_field`` value that
        is used and is not a positive number.
    """
    source = Path(path)
    chosen = _choose_layer(source, layer)
    frame = _read_frame(source, chosen)
    if len(frame) == 0:
        raise InputDataError(
            f"water-body layer {str(source)!r} has no features; expected at least one polygon; "
            "check the layer name and any filter used to export it"
        )
    frame, crs_assumed = _apply_crs(frame, source, crs)
    chosen_id = _id_column(frame, source, id_field)
    flags = _normalise_geometries(frame, chosen_id)
    stated = field = None
    if area_field is None:
        _refuse_points_without_area(frame, chosen_id)
    else:
        stated, field = _stated_areas(frame, chosen_id, area_field, area_units, area_source)
    _unwrap_antimeridian(frame)
    return WaterBodyLayer(
        frame=frame,
        id_field=chosen_id,
        flags=flags,
        path=os.fspath(path),
        layer=chosen,
        crs_assumed=crs_assumed,
        stated_area_m2=stated,
        field_area_m2=field,
    )
