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

A layer too large to hold is read a partition at a time: :func:`survey_waterbodies` checks
the whole layer without its geometry, then :func:`read_waterbody_rows` reads any run of
rows, giving exactly those rows of :func:`read_waterbodies`.
"""

from __future__ import annotations

import dataclasses
import difflib
import os
from dataclasses import dataclass, field
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
    settings = _AreaSettings(area_field, area_units, area_source)
    return _finish_layer(frame, chosen_id, settings, os.fspath(path), chosen, crs_assumed)


@dataclass(frozen=True)
class _AreaSettings:
    field: str | None
    units: str
    source: str


def _finish_layer(
    frame: geopandas.GeoDataFrame,
    id_field: str,
    area: _AreaSettings,
    path: str,
    layer: str | None,
    crs_assumed: bool,
) -> WaterBodyLayer:
    """Geometry normalised and flagged, stated areas, contiguity at 180 degrees: row by row."""
    flags = _normalise_geometries(frame, id_field)
    stated = usable = None
    if area.field is None:
        _refuse_points_without_area(frame, id_field)
    else:
        stated, usable = _stated_areas(frame, id_field, area.field, area.units, area.source)
    _unwrap_antimeridian(frame)
    return WaterBodyLayer(
        frame=frame,
        id_field=id_field,
        flags=flags,
        path=path,
        layer=layer,
        crs_assumed=crs_assumed,
        stated_area_m2=stated,
        field_area_m2=usable,
    )


# --- The layer a partition at a time -------------------------------------------------------
#
# A run of millions of bodies reads the layer twice over without ever holding it whole: a
# survey (no geometry unless the layer's own metadata leaves its geometry types or extent
# open) settles everything that depends on the whole layer, then each partition reads its
# own rows. Every per-row step of ``read_waterbodies`` (geometry normalisation and flags,
# stated areas, contiguity at 180 degrees) depends on the row alone, so a partition gets the
# rows of the whole read; what does depend on the whole layer (the CRS, the ids and their
# checks, the column dtypes, which pandas widens when a column holds an empty value anywhere)
# comes from the survey.

SURVEY_CHUNK_ROWS = 1 << 15
"""Rows the survey reads at a time: its memory apart from the ids is a chunk's."""

_PARQUET_BATCH_ROWS = 1 << 14
# GDAL drivers whose layer extent is that of the geometries (a FlatGeobuf written without
# its spatial index reports zeros).
_EXACT_EXTENTS = ("GPKG", "ESRI Shapefile", "GeoJSON")
# GDAL drivers that open a file without reading it all, so that reading it a chunk at a time
# costs the chunks only (GeoJSON, KML, GML, CSV are parsed whole on every opening).
_OPENED_CHEAPLY = ("GPKG", "ESRI Shapefile", "FlatGeobuf", "OpenFileGDB", "SQLite", "Parquet")
_PARQUET_BUFFER_BYTES = 1 << 20

_LINE_KINDS = (
    shapely.GeometryType.LINESTRING,
    shapely.GeometryType.LINEARRING,
    shapely.GeometryType.MULTILINESTRING,
)
_POINT_KINDS = (shapely.GeometryType.POINT, shapely.GeometryType.MULTIPOINT)
_TYPE_NAMES = {
    int(kind): name
    for kind, name in (
        (shapely.GeometryType.POINT, "Point"),
        (shapely.GeometryType.LINESTRING, "LineString"),
        (shapely.GeometryType.LINEARRING, "LinearRing"),
        (shapely.GeometryType.POLYGON, "Polygon"),
        (shapely.GeometryType.MULTIPOINT, "MultiPoint"),
        (shapely.GeometryType.MULTILINESTRING, "MultiLineString"),
        (shapely.GeometryType.MULTIPOLYGON, "MultiPolygon"),
        (shapely.GeometryType.GEOMETRYCOLLECTION, "GeometryCollection"),
    )
}


@dataclass(frozen=True)
class _RowAccess:
    """How to read rows ``[start, stop)`` of one layer, in the layer's own order.

    ``fid_range`` is (fid column, fid of row 0) for a GeoPackage whose fids are consecutive,
    read with a ``where`` on the fid (the primary key); other GDAL sources skip features.
    ``group_starts`` are the first rows of a GeoParquet file's row groups, then its length.
    ``driver`` is GDAL's name for the format.
    """

    path: Path
    layer: str | None
    fid_range: tuple[str, int] | None = None
    group_starts: tuple[int, ...] = ()
    driver: str = ""

    @property
    def parquet(self) -> bool:
        return _is_parquet(self.path)

    def read(
        self, start: int, stop: int, *, geometry: bool = True, attributes: bool = True
    ) -> pd.DataFrame:
        """The raw rows as the whole-layer reader converts them (a GeoDataFrame with geometry)."""
        try:
            if self.parquet:
                return self._read_parquet(start, stop, geometry, attributes)
            return self._read_gdal(start, stop, geometry, attributes)
        except _READ_ERRORS as err:
            raise _unreadable(self.path, err) from err

    def _read_gdal(self, start, stop, geometry, attributes) -> pd.DataFrame:
        rows: dict = {"skip_features": start, "max_features": stop - start}
        if self.fid_range is not None:
            name, first = self.fid_range
            quoted = '"' + name.replace('"', '""') + '"'
            rows = {"where": f"{quoted} >= {first + start} AND {quoted} < {first + stop}"}
        return geopandas.read_file(
            self.path,
            layer=self.layer,
            engine="pyogrio",
            ignore_geometry=not geometry,
            columns=None if attributes else [],
            **rows,
        )

    def _read_parquet(self, start, stop, geometry, attributes) -> pd.DataFrame:
        import pyarrow as pa

        handle, geo, columns = self._parquet_columns(geometry, attributes)
        starts = np.asarray(self.group_starts)
        first = int(np.searchsorted(starts, start, side="right")) - 1
        last = int(np.searchsorted(starts, stop, side="left"))
        # Batches, not whole row groups: geopandas writes up to 2**20 rows per group, and a
        # partition holds only its own rows, decoding the group's rows before it batch by batch.
        kept = []
        row = int(starts[first])
        batches = handle.iter_batches(
            batch_size=_PARQUET_BATCH_ROWS,
            row_groups=list(range(first, last)),
            columns=columns,
            use_pandas_metadata=True,
        )
        for batch in batches:
            low, high = max(start - row, 0), min(stop - row, batch.num_rows)
            if high > low:
                kept.append(batch.slice(low, high - low))
            row += batch.num_rows
            if row >= stop:
                break
        return _parquet_frame(pa.Table.from_batches(kept), geo, geometry)

    def _parquet_columns(self, geometry: bool, attributes: bool):
        import pyarrow.parquet as pq

        # Streamed page by page: by default pyarrow first buffers the row group's whole
        # column chunks (the geometry of up to 2**20 bodies) even for its first batch.
        handle = pq.ParquetFile(self.path, pre_buffer=False, buffer_size=_PARQUET_BUFFER_BYTES)
        geo = _geo_metadata(handle)
        covering = _covering_column(geo)
        columns = [
            name
            for name in handle.schema_arrow.names
            if name != covering
            and (geometry or name not in geo["columns"])
            and (attributes or name == geo["primary_column"])
        ]
        return handle, geo, columns

    def chunks(self, count: int, *, geometry: bool = True, attributes: bool = True):
        """Yield ``(start, stop, raw rows)`` through the whole layer, in order, a chunk at a time."""
        if not self.parquet:
            # Text formats are parsed whole on every opening: one reading, not one a chunk.
            size = SURVEY_CHUNK_ROWS if self.driver in _OPENED_CHEAPLY else count
            for start in range(0, count, size):
                stop = min(start + size, count)
                yield start, stop, self.read(start, stop, geometry=geometry, attributes=attributes)
            return
        import pyarrow as pa

        # One pass: chunks read by row range would decode a large row group again each time.
        try:
            handle, geo, columns = self._parquet_columns(geometry, attributes)
            start = 0
            for batch in handle.iter_batches(
                batch_size=SURVEY_CHUNK_ROWS, columns=columns, use_pandas_metadata=True
            ):
                frame = _parquet_frame(pa.Table.from_batches([batch]), geo, geometry)
                yield start, start + batch.num_rows, frame
                start += batch.num_rows
        except _READ_ERRORS as err:
            raise _unreadable(self.path, err) from err


def _parquet_frame(table, geo: dict, geometry: bool) -> pd.DataFrame:
    from geopandas.io.arrow import _arrow_to_geopandas  # what read_parquet converts with

    return _arrow_to_geopandas(table, geo) if geometry else table.to_pandas()


def _geo_metadata(handle) -> dict:
    import json

    raw = (handle.schema_arrow.metadata or {}).get(b"geo")
    if raw is None:
        raise ValueError("no 'geo' metadata: not a GeoParquet file")
    return json.loads(raw)


def _covering_column(geo: dict) -> str | None:
    covering = geo["columns"][geo["primary_column"]].get("covering")
    return None if not covering else covering["bbox"]["xmin"][0]


def _row_access(path: Path, layer: str | None) -> tuple[_RowAccess, int]:
    """How to read the layer's rows, and how many there are."""
    try:
        if _is_parquet(path):
            _require_pyarrow(path)
            import pyarrow.parquet as pq

            meta = pq.ParquetFile(path).metadata
            sizes = [meta.row_group(i).num_rows for i in range(meta.num_row_groups)]
            starts = tuple(int(v) for v in np.concatenate([[0], np.cumsum(sizes, dtype=np.int64)]))
            return _RowAccess(path, layer, group_starts=starts), starts[-1]
        info = pyogrio.read_info(os.fspath(path), layer=layer, force_feature_count=True)
        count = int(info["features"])
        fids = _consecutive_fids(path, layer, info, count)
        access = _RowAccess(path, layer, fid_range=fids, driver=str(info.get("driver") or ""))
    except _READ_ERRORS as err:
        raise _unreadable(path, err) from err
    return access, count


def _consecutive_fids(path: Path, layer: str | None, info: dict, count: int):
    """(fid column, first fid) of a GeoPackage whose fids run without a gap, else None."""
    name = info.get("fid_column") or ""
    if info.get("driver") != "GPKG" or not name or count == 0 or layer is None:
        return None
    quoted = '"' + name.replace('"', '""') + '"'
    table = '"' + layer.replace('"', '""') + '"'
    ends = pyogrio.read_dataframe(
        os.fspath(path), sql=f"SELECT MIN({quoted}) AS lo, MAX({quoted}) AS hi FROM {table}"
    )
    low, high = int(ends["lo"].iloc[0]), int(ends["hi"].iloc[0])
    return (name, low) if high - low + 1 == count else None


def _raw_frame(access: _RowAccess, start: int, stop: int) -> geopandas.GeoDataFrame:
    frame = access.read(start, stop)
    if not isinstance(frame, geopandas.GeoDataFrame) or frame.geometry is None:
        raise InputDataError(
            f"water-body layer {str(access.path)!r} has no geometry column; expected polygons"
        )
    if len(frame) != stop - start:
        raise InputDataError(
            f"water-body layer {str(access.path)!r} gave {len(frame)} features for rows "
            f"{start}..{stop - 1}, expected {stop - start}: the file changed while the run "
            "read it; run again once it is no longer being written"
        )
    frame = frame.reset_index(drop=True)
    if frame.geometry.name != "geometry":
        frame = frame.rename_geometry("geometry")
    frame.index = pd.RangeIndex(start, stop)
    return frame


@dataclass(frozen=True)
class LayerSurvey:
    """What a run needs to know of the whole water-body layer, read without its geometry.

    Made by :func:`survey_waterbodies`; :func:`read_waterbody_rows` reads any run of rows
    from it. It holds no geometry and, of the attributes, only the ids.

    Attributes
    ----------
    path : str
        Path the layer is read from.
    layer : str or None
        Layer name inside the source (None for GeoParquet).
    n_rows : int
        Number of water bodies (rows of the layer).
    crs : pyproj.CRS
        CRS of the layer, from the file or, when it has none, from the configuration.
    crs_assumed : bool
        True when the CRS came from the configuration.
    bounds : tuple of float
        (xmin, ymin, xmax, ymax) in ``crs`` of the non-empty geometries of
        :func:`read_waterbodies`' frame (collections by their polygonal part, bodies across
        180 degrees contiguous, so xmax may pass 180): what the zonal engine centres its
        equal-area projection on and the grid-overlap check uses. The extent the format
        records (GeoPackage contents, Shapefile header, GeoParquet ``bbox``) where it is
        that, else computed from the geometry chunk by chunk (layers of mixed or point
        types, lon/lat layers spanning over 180 degrees). NaN when every geometry is empty.
    id_field : str
        Column holding the unique ids (``waterbody_id`` = 1..N when none is configured).
    ids_numbered : bool
        True when the ids are the row numbers 1..N lakeloss gives (no id field set).
    ids : pandas.Series or None
        The layer's ids in layer order (RangeIndex), checked unique and non-null: about
        20-30 bytes per body for short text ids, kept in a pyarrow-backed string array.
        None when ``ids_numbered``, or in a survey from :meth:`without_ids`.
    fields : dict of str to dtype
        Every attribute column of the frames the rows are read into, in column order, with
        the dtype :func:`read_waterbodies` gives it for the whole layer (the default id
        column included, the geometry column left out).
    columns : tuple of str
        Column order of those frames, ``"geometry"`` included.
    geometry_types : tuple of str
        Geometry types the layer holds: as declared by the format where it names only
        polygon types, else as found row by row (``"Unknown"`` where neither is known).
    has_points : bool
        Whether any row holds a (non-empty) Point or MultiPoint; such layers need
        ``area_field``.
    area_field, area_units, area_source : str or None, str, str
        The area settings the rows are read with (see :func:`read_waterbodies`).
    """

    path: str
    layer: str | None
    n_rows: int
    crs: pyproj.CRS
    crs_assumed: bool
    bounds: tuple[float, float, float, float]
    id_field: str
    ids_numbered: bool
    ids: pd.Series | None
    fields: dict
    columns: tuple[str, ...]
    geometry_types: tuple[str, ...]
    has_points: bool
    area_field: str | None
    area_units: str
    area_source: str
    access: _RowAccess

    def body_ids(self, start: int, stop: int) -> np.ndarray:
        """The ids of rows ``[start, stop)``."""
        if self.ids_numbered:
            return np.arange(start + 1, stop + 1)
        if self.ids is None:
            raise ValueError("this survey was stripped of its ids (LayerSurvey.without_ids)")
        return self.ids.iloc[start:stop].to_numpy()

    def without_ids(self) -> LayerSurvey:
        """This survey without the ids, all a partition's reader needs (small to send)."""
        return dataclasses.replace(self, ids=None)


def _wider(kept, found):
    """The dtype a whole column takes when one of its chunks came out as ``found``.

    pandas widens an integer column holding an empty value to float and a boolean one to
    object, chunk by chunk; the whole read does it for the whole column.
    """
    if kept is None or kept == found:
        return found
    numbers = "iuf"
    if isinstance(kept, np.dtype) and isinstance(found, np.dtype):
        if kept.kind in numbers and found.kind in numbers:
            return np.result_type(kept, found)
    return np.dtype(object)


def _compact_ids(ids: pd.Series) -> pd.Series:
    """Text ids in a pyarrow string array (about their length in bytes each, not ~60)."""
    if ids.dtype == object and pd.api.types.infer_dtype(ids, skipna=True) == "string":
        try:
            return ids.astype("string[pyarrow]")
        except ImportError:
            return ids
    return ids


def _survey_attributes(access: _RowAccess, count: int, id_field: str | None):
    """Dtypes of the whole read for every attribute column, and the id column (chunked)."""
    dtypes: dict = {}
    pieces: list[pd.Series] = []
    hashes = np.zeros(count if id_field is not None else 0, dtype=np.uint64)
    for start, stop, chunk in access.chunks(count, geometry=False):
        chunk = chunk.reset_index(drop=True)
        for name in chunk.columns:
            dtypes[name] = _wider(dtypes.get(name), chunk[name].dtype)
        if id_field is not None and id_field in chunk.columns:
            pieces.append(_compact_ids(chunk[id_field]))
            hashes[start:stop] = _id_hashes(chunk[id_field])
    ids = None
    if pieces:
        ids = _compact_ids(pd.concat(pieces, ignore_index=True))
    return dtypes, ids, hashes


def _id_hashes(ids: pd.Series) -> np.ndarray:
    """64-bit hashes of ids: equal ids hash equal (0.0 and -0.0 included)."""
    values = ids.to_numpy()
    if values.dtype.kind == "f":
        values = values + 0.0
    return pd.util.hash_array(values, categorize=False)


def _check_many_ids(ids: pd.Series, hashes: np.ndarray, id_field: str) -> None:
    """:func:`_check_ids` (same refusals, same messages) in about 20 bytes per id.

    pandas finds duplicated text ids through Python objects, over 100 bytes an id. Here
    equal ids are found among equal hashes, sorted; only the ids of repeated hashes (the
    duplicates, and any rare collision of different ids) go on to :func:`_check_ids`,
    whose message names values and counts, not rows.
    """
    if ids.isna().any():
        _check_ids(ids, id_field)
    ordered = np.sort(hashes)
    repeated = ordered[1:][ordered[1:] == ordered[:-1]]
    del ordered
    if repeated.size:
        _check_ids(ids[np.isin(hashes, repeated)], id_field)


def _declared_geometry(access: _RowAccess) -> tuple[tuple[str, ...], tuple | None]:
    """Geometry types and extent the source's metadata records (None where it does not)."""
    if access.parquet:
        import pyarrow.parquet as pq

        geo = _geo_metadata(pq.ParquetFile(access.path))
        column = geo["columns"][geo["primary_column"]]
        kinds = tuple(column.get("geometry_types") or ()) or ("Unknown",)
        box = column.get("bbox")
        if box is not None and len(box) == 6:
            box = [box[0], box[1], box[3], box[4]]
        return kinds, None if box is None else tuple(float(v) for v in box)
    info = pyogrio.read_info(os.fspath(access.path), layer=access.layer)
    box = info.get("total_bounds") if access.driver in _EXACT_EXTENTS else None
    return (str(info.get("geometry_type") or "Unknown"),), (
        None if box is None else tuple(float(v) for v in box)
    )


def _declared_only(kinds: tuple[str, ...], allowed: tuple[str, ...]) -> bool:
    base = [k.replace("2.5D", "").replace(" ZM", "").replace(" Z", "").replace(" M", "").strip()
            for k in kinds]  # fmt: skip
    return all(k in allowed for k in base)


@dataclass
class _GeometryScan:
    """Geometry types, extent and misfit rows found chunk by chunk."""

    kinds: dict = field(default_factory=dict)
    bounds: np.ndarray = field(default_factory=lambda: np.full(4, np.nan))
    points: int = 0
    point_rows: list = field(default_factory=list)
    lines: dict = field(default_factory=dict)
    line_rows: list = field(default_factory=list)
    scattered: int = 0
    """MultiPoints of several locations (refused as the whole read refuses them)."""
    scattered_rows: list = field(default_factory=list)


def _finished_bounds(geometries: np.ndarray, geographic: bool) -> np.ndarray:
    """Total bounds of the non-empty geometries as the whole read finishes them.

    Collections count by their polygonal part; in longitude/latitude, a geometry spanning
    more than 180 degrees counts with its western longitudes moved east of 180, as
    ``_unwrap_antimeridian`` moves them. NaN when all are empty.
    """
    finished = geometries.copy()
    kinds = shapely.get_type_id(finished)
    for row in np.flatnonzero(kinds == shapely.GeometryType.GEOMETRYCOLLECTION):
        finished[row] = _polygonal_part(finished[row])
    present = finished[~shapely.is_empty(finished) & ~shapely.is_missing(finished)]
    if present.size == 0:
        return np.full(4, np.nan)
    boxes = shapely.bounds(present)
    if geographic:
        for row in np.flatnonzero((boxes[:, 2] - boxes[:, 0]) > 180.0):
            coords = shapely.get_coordinates(present[row])
            east = np.where(coords[:, 0] < 0.0, coords[:, 0] + 360.0, coords[:, 0])
            boxes[row] = [east.min(), coords[:, 1].min(), east.max(), coords[:, 1].max()]
    return np.array([*boxes[:, :2].min(axis=0), *boxes[:, 2:].max(axis=0)])


def _scan_geometry(access: _RowAccess, count: int, geographic: bool) -> _GeometryScan:
    scan = _GeometryScan()
    for start, _, chunk in access.chunks(count, attributes=False):
        geometries = chunk.geometry.to_numpy()
        present = np.array([g is not None for g in geometries])
        kinds = np.full(len(geometries), -1)
        kinds[present] = shapely.get_type_id(geometries[present])
        empty = ~present | shapely.is_empty(np.where(present, geometries, None))
        for kind in np.unique(kinds[present]):
            scan.kinds.setdefault(_TYPE_NAMES[int(kind)], True)
        box = _finished_bounds(geometries, geographic)
        scan.bounds = np.array(
            [np.fmin(scan.bounds[0], box[0]), np.fmin(scan.bounds[1], box[1]),
             np.fmax(scan.bounds[2], box[2]), np.fmax(scan.bounds[3], box[3])]
        )  # fmt: skip
        points = np.flatnonzero(np.isin(kinds, _POINT_KINDS) & ~empty)
        scan.points += points.size
        scan.point_rows.extend((points[:_EXAMPLES] + start).tolist())
        lines = np.flatnonzero(np.isin(kinds, _LINE_KINDS))
        for row in lines:
            name = geometries[row].geom_type
            scan.lines[name] = scan.lines.get(name, 0) + 1
        scan.line_rows.extend((lines[: _EXAMPLES + 1] + start).tolist())
        for row in np.flatnonzero((kinds == shapely.GeometryType.MULTIPOINT) & ~empty):
            if len(np.unique(shapely.get_coordinates(geometries[row]), axis=0)) > 1:
                scan.scattered += 1
                if len(scan.scattered_rows) < _EXAMPLES:
                    scan.scattered_rows.append(int(row) + start)
    return scan


def _ids_of(rows: list, ids: pd.Series | None) -> list:
    return [row + 1 for row in rows] if ids is None else ids.iloc[rows].tolist()


def _refuse_misfits(scan: _GeometryScan, ids: pd.Series | None, area_field: str | None) -> None:
    """The line and point refusals of the whole read, from the scan's counts."""
    if scan.lines:
        ranked = sorted(scan.lines.items(), key=lambda item: -item[1])  # stable: first seen
        summary = ", ".join(f"{n} {kind}" for kind, n in ranked)
        shown = _ids_of(scan.line_rows[: _EXAMPLES + 1], ids)
        raise GeometryError(
            f"water-body layer has {summary} features (ids {_examples(shown)}); "
            "expected polygons or multipolygons, or points with an area attribute; buffer "
            "or remove the lines"
        )
    if scan.scattered:
        shown = _ids_of(scan.scattered_rows, ids)
        raise GeometryError(
            f"water-body layer has {scan.scattered} MultiPoint features of several locations "
            f"(ids {_examples(shown)}); expected one point per water body; split them into "
            "single points, each with its own area"
        )
    if scan.points and area_field is None:
        shown = _ids_of(scan.point_rows[:_EXAMPLES], ids)
        more = ", ..." if scan.points > _EXAMPLES else ""
        raise GeometryError(
            f"water-body layer has {scan.points} Point features (ids "
            f"{', '.join(repr(v) for v in shown)}{more}) but no area attribute; expected "
            "polygons, or points with their area; set [waterbodies] area_field to the "
            "attribute holding each point's area (area_units for its units)"
        )


def _survey_id(fields: list[str], path: Path, id_field: str | None) -> str:
    """The id column's name, refused as :func:`read_waterbodies` refuses it."""
    if id_field is None:
        if DEFAULT_ID_FIELD in fields:
            raise ConfigError(
                f"water-body layer {str(path)!r} already has a {DEFAULT_ID_FIELD!r} column; "
                f'expected none when no id field is set; set [waterbodies] id_field = "{DEFAULT_ID_FIELD}"'
            )
        return DEFAULT_ID_FIELD
    if id_field not in fields:
        close = difflib.get_close_matches(id_field, fields, n=1)
        hint = f"did you mean {close[0]!r}? " if close else ""
        raise ConfigError(
            f"id field {id_field!r} is not in {str(path)!r}; {hint}the fields are "
            f"{', '.join(repr(f) for f in fields) or 'none'}; set [waterbodies] id_field"
        )
    return id_field


def _refuse_missing_area_field(fields: list[str], area_field: str | None) -> None:
    if area_field is None or area_field in fields:
        return
    close = difflib.get_close_matches(area_field, fields, n=1)
    hint = f"did you mean {close[0]!r}? " if close else ""
    raise ConfigError(
        f"area field {area_field!r} is not in the water-body layer; {hint}the fields are "
        f"{', '.join(repr(f) for f in fields) or 'none'}; set [waterbodies] area_field"
    )


def survey_waterbodies(
    path,
    *,
    layer: str | None = None,
    id_field: str | None = None,
    crs: str | None = None,
    area_field: str | None = None,
    area_units: str = "m2",
    area_source: str = "geometry",
) -> LayerSurvey:
    """Survey the layer of water bodies without holding its geometry.

    Reads the attributes in chunks of :data:`SURVEY_CHUNK_ROWS` rows (keeping only the
    ids), and the geometry, chunk by chunk, only where the format's metadata does not settle
    the geometry types or the extent: a layer declared as mixed, or as points without
    ``area_field``; a GeoParquet file without ``geometry_types`` or ``bbox``; a FlatGeobuf
    or other format whose extent is not reliable; a lon/lat layer spanning more than 180
    degrees (it may hold bodies across 180). Memory: the ids (a pyarrow string or a number
    each) and 16 bytes a body while they are checked, besides one chunk. It refuses what
    :func:`read_waterbodies` refuses for the whole layer, with the same messages: no
    features, the CRS, the id field, null and duplicate ids, a missing area field, and,
    where the geometry is scanned, line features and points without ``area_field``.
    Per-row refusals (collections without polygons, MultiPoints of several locations,
    unusable area values, and points or lines in a layer declared as polygons) come from
    :func:`read_waterbody_rows`, counted over the rows it reads.

    Parameters are those of :func:`read_waterbodies`.

    Returns
    -------
    LayerSurvey

    Raises
    ------
    InputDataError, ConfigError, CRSError, GeometryError
        As :func:`read_waterbodies`, for the whole-layer checks above.
    """
    source = Path(path)
    chosen = _choose_layer(source, layer)
    access, count = _row_access(source, chosen)
    if count == 0:
        raise InputDataError(
            f"water-body layer {str(source)!r} has no features; expected at least one polygon; "
            "check the layer name and any filter used to export it"
        )
    first, crs_assumed = _apply_crs(_raw_frame(access, 0, 1), source, crs)
    fields = [c for c in first.columns if c != "geometry"]
    chosen_id = _survey_id(fields, source, id_field)
    dtypes, ids, hashes = _survey_attributes(access, count, id_field)
    if ids is not None:
        _check_many_ids(ids, hashes, chosen_id)
    del hashes
    columns = tuple(first.columns)
    for name in columns:  # further geometry columns (GeoParquet), not read with the attributes
        dtypes.setdefault(name, first[name].dtype)
    if id_field is None:
        dtypes[DEFAULT_ID_FIELD] = np.dtype(np.int64)
        columns = (*columns, DEFAULT_ID_FIELD)
    _refuse_missing_area_field([c for c in columns if c != "geometry"], area_field)
    try:
        kinds, bounds = _declared_geometry(access)
    except _READ_ERRORS as err:
        raise _unreadable(source, err) from err
    has_points = _declared_only(kinds, ("Point", "MultiPoint"))
    # A register of points with their areas needs no scan; without areas, the scan counts
    # the points the refusal names.
    settled = _declared_only(kinds, _POLYGONAL) or (has_points and area_field is not None)
    geographic = pyproj.CRS(first.crs).is_geographic
    # A layer of lon/lat spanning over 180 degrees may hold bodies across 180, whose
    # contiguous shapes reach past the stored extent.
    wide = bounds is not None and geographic and bounds[2] - bounds[0] > 180.0
    if not settled or wide or bounds is None or not np.all(np.isfinite(bounds)):
        scan = _scan_geometry(access, count, geographic)
        _refuse_misfits(scan, ids, area_field)
        kinds = tuple(scan.kinds) or kinds
        bounds = tuple(float(v) for v in scan.bounds)
        has_points = scan.points > 0
    assert bounds is not None
    return LayerSurvey(
        path=os.fspath(path),
        layer=chosen,
        n_rows=count,
        crs=pyproj.CRS(first.crs),
        crs_assumed=crs_assumed,
        bounds=(bounds[0], bounds[1], bounds[2], bounds[3]),
        id_field=chosen_id,
        ids_numbered=id_field is None,
        ids=ids,
        fields={name: dtypes[name] for name in columns if name != "geometry"},
        columns=columns,
        geometry_types=kinds,
        has_points=has_points,
        area_field=area_field,
        area_units=area_units,
        area_source=area_source,
        access=access,
    )


def read_waterbody_rows(survey: LayerSurvey, start: int, stop: int) -> WaterBodyLayer:
    """Read rows ``[start, stop)`` of a surveyed layer: those rows of :func:`read_waterbodies`.

    The frame, flags and stated areas equal the whole read's sliced ``[start, stop)``, its
    index included (``RangeIndex(start, stop)``); only the rows asked for are read
    (GeoPackage by fid range or offset, GeoParquet by row group, other formats by skipping
    features).

    Parameters
    ----------
    survey : LayerSurvey
        The layer, from :func:`survey_waterbodies`.
    start, stop : int
        First row and one past the last, ``0 <= start < stop <= survey.n_rows``.

    Returns
    -------
    WaterBodyLayer

    Raises
    ------
    ValueError
        A row range outside the layer (a programming error, not bad input).
    InputDataError
        The source became unreadable.
    GeometryError
        The per-row refusals of :func:`read_waterbodies`, counted over these rows.
    """
    if not 0 <= start < stop <= survey.n_rows:
        raise ValueError(f"rows [{start}, {stop}) are not within the layer's {survey.n_rows}")
    frame = _raw_frame(survey.access, start, stop)
    if frame.crs is None:
        frame = frame.set_crs(survey.crs)
    if survey.ids_numbered:
        frame[DEFAULT_ID_FIELD] = np.arange(start + 1, stop + 1)
    for name, dtype in survey.fields.items():
        if frame[name].dtype != dtype:
            frame[name] = frame[name].astype(dtype)
    settings = _AreaSettings(survey.area_field, survey.area_units, survey.area_source)
    return _finish_layer(
        frame, survey.id_field, settings, survey.path, survey.layer, survey.crs_assumed
    )
