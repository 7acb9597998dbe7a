"""Water-body geometry: input checks, repair, true areas, centroids and reprojection to a grid."""

from __future__ import annotations

from dataclasses import dataclass

import geopandas as gpd
import numpy as np
import shapely
from pyproj import CRS, Transformer
from pyproj.crs import ProjectedCRS
from pyproj.crs.coordinate_operation import LambertAzimuthalEqualAreaConversion

from lakeloss.errors import CRSError, GeometryError
from lakeloss.zonal.grid import GridSpec
from lakeloss.zonal.threads import sliced

_POLYGONAL = np.array(
    [shapely.GeometryType.POLYGON, shapely.GeometryType.MULTIPOLYGON], dtype=np.int64
)
_COLLECTION = int(shapely.GeometryType.GEOMETRYCOLLECTION)
_POINT = int(shapely.GeometryType.POINT)

#: Key in ``reproject_to_grid(...).attrs`` recording which rows were repaired / are empty.
REPAIR_ATTRS = "lakeloss_repair"

# Projection methods that preserve ellipsoidal area, so planar area in them is true area.
# Spherical forms (and PROJ's Mollweide, which is spherical only) preserve the area of a
# sphere, not of the ellipsoid, and go through the local equal-area CRS instead.
_EQUAL_AREA_METHODS = ("equal area", "albers", "equal earth", "sinusoidal")


@dataclass(frozen=True)
class RepairedGeometry:
    """Polygons after the up-front checks and repair.

    Attributes
    ----------
    geometry : numpy.ndarray of shapely geometries
        Polygonal geometry per water body, empty polygons where the input was empty.
    repaired : numpy.ndarray of bool
        True where the input was invalid and has been repaired.
    empty : numpy.ndarray of bool
        True where the geometry is missing, empty, or lost all its area in the repair.
    """

    geometry: np.ndarray
    repaired: np.ndarray
    empty: np.ndarray


def check_layer(polygons: gpd.GeoDataFrame) -> CRS:
    """Refuse a layer without CRS or with geometries other than polygons and points; return
    its CRS."""
    if polygons.crs is None:
        raise CRSError(
            "the water-body layer has no CRS; expected a layer with a defined CRS; "
            "set it in the source file (e.g. a .prj file) or with GeoDataFrame.set_crs"
        )
    geometry = np.asarray(polygons.geometry.array, dtype=object)
    present = ~(shapely.is_missing(geometry) | shapely.is_empty(geometry))
    kinds = shapely.get_type_id(geometry)
    wrong = present & ~np.isin(kinds, _POLYGONAL) & (kinds != _POINT)
    if wrong.any():
        first = int(np.flatnonzero(wrong)[0])
        kind = shapely.get_type_id(geometry[first])
        raise GeometryError(
            f"{int(wrong.sum())} water bodies are not polygons (first at row {first}: "
            f"{shapely.GeometryType(kind).name.lower()}); expected Polygon, MultiPolygon or "
            "Point; buffer or drop the line features"
        )
    return polygons.crs


def _polygonal_part(geometry: np.ndarray) -> np.ndarray:
    """Keep only the polygonal parts of repaired geometries (drop collapsed lines/points)."""
    out = geometry.copy()
    for i in np.flatnonzero(shapely.get_type_id(geometry) == _COLLECTION):
        parts = shapely.get_parts(geometry[i])
        parts = parts[np.isin(shapely.get_type_id(parts), _POLYGONAL)]
        out[i] = shapely.union_all(parts) if parts.size else shapely.Polygon()
    return out


def repair_geometry(geometry: np.ndarray) -> RepairedGeometry:
    """Make invalid polygons valid, keeping their polygonal parts; mark empties.

    Parameters
    ----------
    geometry : numpy.ndarray of shapely geometries
        Polygons or multipolygons (missing and empty allowed).

    Returns
    -------
    RepairedGeometry
        Repaired geometry and the repaired / empty masks.
    """
    geometry = np.asarray(geometry, dtype=object).copy()
    missing = shapely.is_missing(geometry)
    geometry[missing] = shapely.Polygon()
    empty = shapely.is_empty(geometry)
    repaired = ~empty & ~sliced(shapely.is_valid, geometry)
    if repaired.any():
        fixed = shapely.make_valid(geometry[repaired], method="structure", keep_collapsed=False)
        geometry[repaired] = _polygonal_part(fixed)
    # a point has no area and is not empty: it stands for a body whose area is stated
    flat = (shapely.area(geometry) == 0) & (shapely.get_type_id(geometry) != _POINT)
    empty = shapely.is_empty(geometry) | flat
    return RepairedGeometry(geometry=geometry, repaired=repaired, empty=empty)


def repeat_repair(geometry: np.ndarray, repaired: np.ndarray, empty: np.ndarray):
    """Redo a repair whose outcome is known, touching only the rows it changed.

    :func:`reproject_to_grid` records which rows it repaired and which are empty
    (:data:`REPAIR_ATTRS` in the returned series' ``attrs``); the weights builder then needs
    the same repair in the layer's own CRS without checking a million polygons' validity
    again.
    """
    geometry = np.asarray(geometry, dtype=object).copy()
    fixable = repaired & ~empty
    if fixable.any():
        fixed = shapely.make_valid(geometry[fixable], method="structure", keep_collapsed=False)
        geometry[fixable] = _polygonal_part(fixed)
    geometry[empty] = shapely.Polygon()
    return RepairedGeometry(geometry=geometry, repaired=repaired.copy(), empty=empty.copy())


def is_equal_area(crs: CRS) -> bool:
    """True when ``crs`` is a projection that preserves area (so planar area is true area)."""
    if not crs.is_projected or crs.coordinate_operation is None:
        return False
    method = crs.coordinate_operation.method_name.lower()
    if "spherical" in method:
        return False
    return any(word in method for word in _EQUAL_AREA_METHODS)


def local_equal_area_crs(polygons_crs: CRS, total_bounds: np.ndarray) -> CRS:
    """A Lambert azimuthal equal-area CRS centred on the layer, on the layer's own datum."""
    lon, lat = _layer_centre(polygons_crs, total_bounds)
    return _azimuthal_equal_area(polygons_crs, lon, lat)


def _layer_centre(polygons_crs: CRS, total_bounds: np.ndarray) -> tuple[float, float]:
    """Longitude and latitude of the middle of the layer's bounding box. [degrees]"""
    to_lonlat = Transformer.from_crs(polygons_crs, _geodetic(polygons_crs), always_xy=True)
    xmin, ymin, xmax, ymax = total_bounds
    lon, lat = to_lonlat.transform(0.5 * (xmin + xmax), 0.5 * (ymin + ymax))
    return float(lon), float(lat)


def _geodetic(crs: CRS) -> CRS:
    geodetic = crs.geodetic_crs
    if geodetic is None:
        raise CRSError(
            f"CRS {crs.name!r} has no geodetic datum; expected a CRS on an ellipsoid; "
            "give the layer a full CRS (e.g. an EPSG code)"
        )
    return geodetic


def _azimuthal_equal_area(polygons_crs: CRS, lon: float, lat: float) -> CRS:
    conversion = LambertAzimuthalEqualAreaConversion(
        latitude_natural_origin=lat, longitude_natural_origin=lon
    )
    return ProjectedCRS(conversion=conversion, geodetic_crs=_geodetic(polygons_crs))


@dataclass(frozen=True)
class EqualAreaGeometry:
    """Geometries in CRSs where planar area is true area.

    Attributes
    ----------
    geometry : numpy.ndarray of shapely geometries
        Each geometry in ``crs``, or in ``far_crs`` where ``far`` is True.
    crs : pyproj.CRS
        The layer's own CRS when it preserves area, else a Lambert azimuthal equal-area
        projection centred on the layer (exact on the ellipsoid).
    far : numpy.ndarray of bool
        Geometries more than a quarter turn from the centre of ``crs``.
    far_crs : pyproj.CRS or None
        The azimuthal projection centred on the antipode, for the far geometries.
    metres_per_unit : float
        Length of one CRS unit. [m]
    """

    geometry: np.ndarray
    crs: CRS
    far: np.ndarray
    far_crs: CRS | None
    metres_per_unit: float

    def area(self) -> np.ndarray:
        """True area of each geometry. [m2]"""
        return shapely.area(self.geometry) * self.metres_per_unit**2

    def centroid_lonlat(self) -> tuple[np.ndarray, np.ndarray]:
        """Centroid of each geometry in WGS84 longitude and latitude (NaN when empty). [deg]"""
        lon, lat = centroid_lonlat(self.geometry, self.crs)
        if self.far_crs is not None and self.far.any():
            lon[self.far], lat[self.far] = centroid_lonlat(self.geometry[self.far], self.far_crs)
        return lon, lat


def _quarter_turn_away(geometry: np.ndarray, crs: CRS, lon0: float, lat0: float) -> np.ndarray:
    """Which geometries lie over 90° of arc from (lon0, lat0) [degrees].

    Judged on the sphere from each bounding box's middle; exact enough to choose a side.
    """
    bounds = shapely.bounds(geometry)
    to_lonlat = Transformer.from_crs(crs, _geodetic(crs), always_xy=True)
    lon, lat = to_lonlat.transform(
        0.5 * (bounds[:, 0] + bounds[:, 2]), 0.5 * (bounds[:, 1] + bounds[:, 3]), errcheck=False
    )
    lat, dlon, phi0 = np.radians(lat), np.radians(np.asarray(lon) - lon0), np.radians(lat0)
    cos_arc = np.sin(phi0) * np.sin(lat) + np.cos(phi0) * np.cos(lat) * np.cos(dlon)
    with np.errstate(invalid="ignore"):
        return cos_arc < 0.0


def _compact(crs: CRS, total_bounds: np.ndarray) -> bool:
    """Whether the layer fits in 60° of longitude and of latitude, so no part of it is near
    a quarter turn from its middle (then no geometry needs checking one by one)."""
    to_lonlat = Transformer.from_crs(crs, _geodetic(crs), always_xy=True)
    xmin, ymin, xmax, ymax = (float(v) for v in total_bounds)
    west, south, east, north = to_lonlat.transform_bounds(xmin, ymin, xmax, ymax, densify_pts=21)
    lon_span = east - west if east >= west else east - west + 360.0  # across 180°
    return bool(
        np.isfinite([lon_span, north - south]).all() and max(lon_span, north - south) <= 60.0
    )


def to_equal_area(
    geometry: np.ndarray,
    crs: CRS,
    bounds: tuple[float, float, float, float] | None = None,
    *,
    bounds_crs: CRS | None = None,
) -> EqualAreaGeometry:
    """Geometries in a CRS where planar area is true area (the input itself if it is one).

    The azimuthal projection is centred on the layer. Near the antipode of that centre it
    stretches shapes without bound (a layer with lakes on both sides of 180° is centred near
    0°), and straight edges between vertices no longer follow the polygon: geometries more
    than a quarter turn away go to a second projection centred on the antipode, so every
    geometry is within 90° of its projection's centre (scale distortion at most a factor 2).

    Parameters
    ----------
    geometry : numpy.ndarray of shapely geometries
        Geometries in ``crs`` (empty ones allowed).
    crs : pyproj.CRS
        Their CRS.
    bounds : tuple of float, optional
        (xmin, ymin, xmax, ymax) of the whole layer in ``bounds_crs``, as
        :func:`lakeloss.io.vector.survey_waterbodies` gives them (xmax may pass 180 on a
        lon/lat layer across 180°). The projection's centre and whether geometries are
        checked against its antipode then come from the layer, not from ``geometry``, so a
        geometry gets the same projected coordinates, to the last bit, whichever other
        geometries are projected with it. When None, the centre is the middle of
        ``geometry``'s own bounds.
    bounds_crs : pyproj.CRS, optional
        The CRS of ``bounds`` (default ``crs``): the layer's CRS when ``geometry`` has been
        reprojected to a grid.

    Returns
    -------
    EqualAreaGeometry
    """
    none_far = np.zeros(geometry.size, dtype=bool)
    if is_equal_area(crs):
        unit = crs.axis_info[0].unit_conversion_factor if crs.axis_info else 1.0
        return EqualAreaGeometry(geometry, crs, none_far, None, float(unit))
    present = ~shapely.is_empty(geometry)
    if not present.any():
        return EqualAreaGeometry(geometry, crs, none_far, None, 1.0)
    if bounds is None:
        extent_crs, total_bounds = crs, shapely.total_bounds(geometry[present])
    else:
        extent_crs, total_bounds = bounds_crs or crs, _layer_bounds(bounds)
    lon0, lat0 = _layer_centre(extent_crs, total_bounds)
    target = _azimuthal_equal_area(crs, lon0, lat0)
    far = np.zeros(geometry.size, dtype=bool)
    if not _compact(extent_crs, total_bounds):
        far = present & _quarter_turn_away(geometry, crs, lon0, lat0)
    projected = transform_geometry(geometry, crs, target)
    if not far.any():
        return EqualAreaGeometry(projected, target, far, None, 1.0)
    antipode = _azimuthal_equal_area(crs, (lon0 + 360.0) % 360.0 - 180.0, -lat0)
    projected[far] = transform_geometry(geometry[far], crs, antipode)
    return EqualAreaGeometry(projected, target, far, antipode, 1.0)


def _layer_bounds(bounds) -> np.ndarray:
    """The layer's (xmin, ymin, xmax, ymax) as float64; refused when not four finite values.

    Only a layer whose every geometry is empty has no bounds, and then nothing is projected.
    """
    values = np.asarray(bounds, dtype=np.float64)
    if values.shape != (4,) or not np.isfinite(values).all() or (values[2:] < values[:2]).any():
        raise GeometryError(
            f"layer bounds {tuple(values.ravel().tolist())} are not an extent of the "
            "geometries being projected; expected (xmin, ymin, xmax, ymax), finite, of the "
            "layer's non-empty geometries (survey_waterbodies(...).bounds)"
        )
    return values


def transform_geometry(geometry: np.ndarray, source: CRS, target: CRS) -> np.ndarray:
    """Reproject an array of geometries, vectorised over all coordinates at once."""

    def project(coords: np.ndarray) -> np.ndarray:
        # one transformer per call: pyproj transformers must not be shared between threads
        transformer = Transformer.from_crs(source, target, always_xy=True)
        x, y = transformer.transform(coords[:, 0], coords[:, 1])
        return np.column_stack([x, y])

    def project_slice(part: np.ndarray) -> np.ndarray:
        return shapely.transform(part, project)

    return sliced(project_slice, geometry)


def centroid_lonlat(equal_area: np.ndarray, crs: CRS) -> tuple[np.ndarray, np.ndarray]:
    """Centroid of each geometry in WGS84 longitude and latitude (NaN when empty). [degrees]"""
    centroid = sliced(shapely.centroid, equal_area)
    xy = shapely.get_coordinates(centroid)
    has_point = ~shapely.is_empty(centroid)
    lon = np.full(centroid.size, np.nan)
    lat = np.full(centroid.size, np.nan)
    if has_point.any():
        to_wgs84 = Transformer.from_crs(crs, CRS.from_epsg(4326), always_xy=True)
        lon[has_point], lat[has_point] = to_wgs84.transform(xy[:, 0], xy[:, 1])
    return lon, lat


def _unwrap_jumps(geometry: np.ndarray, turn: float) -> np.ndarray:
    """Make polygons whose longitudes jump across the antimeridian contiguous again.

    A polygon that crosses 180° in a projected layer comes out of the reprojection with its
    ring jumping from about +180 to -180, spanning nearly the whole globe. No water body is
    half a turn wide, so such a span can only mean this: western longitudes get a turn added.
    """
    bounds = shapely.bounds(geometry)
    with np.errstate(invalid="ignore"):
        jumping = np.flatnonzero(bounds[:, 2] - bounds[:, 0] > 0.5 * turn)
    if jumping.size == 0:
        return geometry

    def east_of_seam(coords: np.ndarray) -> np.ndarray:
        x = np.where(coords[:, 0] < 0.0, coords[:, 0] + turn, coords[:, 0])
        return np.column_stack([x, coords[:, 1]])

    unwrapped = geometry.copy()
    unwrapped[jumping] = [shapely.transform(g, east_of_seam) for g in geometry[jumping]]
    return unwrapped


def _shift_longitudes(geometry: np.ndarray, grid: GridSpec, turn: float) -> np.ndarray:
    """Move polygons by whole turns of longitude to the copy nearest the grid's centre.

    A grid stored in 0..360 receives polygons in -180..180 (and the reverse). A polygon that
    straddles the grid's seam keeps its far part beyond the grid's edge: on a grid that
    wraps (:attr:`GridSpec.wraps_longitude`) the weights find the cells there one turn
    away; on a regional grid that part is outside and flagged.
    """
    centre = 0.5 * (float(grid.x_edges.min()) + float(grid.x_edges.max()))
    bounds = shapely.bounds(geometry)
    turns = np.round((0.5 * (bounds[:, 0] + bounds[:, 2]) - centre) / turn)
    turns[~np.isfinite(turns)] = 0.0
    moving = turns != 0
    if not moving.any():
        return geometry
    shifted = geometry.copy()
    offsets = -turn * turns[moving]
    counts = shapely.get_num_coordinates(geometry[moving])
    per_coordinate = np.repeat(offsets, counts)

    def shift(coords: np.ndarray) -> np.ndarray:
        return np.column_stack([coords[:, 0] + per_coordinate, coords[:, 1]])

    shifted[moving] = shapely.transform(geometry[moving], shift)
    return shifted


def reproject_to_grid(polygons: gpd.GeoDataFrame, grid: GridSpec) -> gpd.GeoSeries:
    """Repair the water bodies and reproject them to the grid CRS.

    Parameters
    ----------
    polygons : geopandas.GeoDataFrame
        Water bodies in any CRS.
    grid : GridSpec
        Target grid.

    Returns
    -------
    geopandas.GeoSeries
        Repaired polygons in the grid CRS, same index and order as ``polygons``; on a
        geographic grid made contiguous across the antimeridian and shifted by whole turns
        of longitude into the grid's range (0..360 or -180..180).
    """
    crs = check_layer(polygons)
    repaired = repair_geometry(np.asarray(polygons.geometry.array, dtype=object))
    geometry = repaired.geometry
    if not CRS.from_user_input(crs).equals(grid.crs):
        geometry = transform_geometry(geometry, CRS.from_user_input(crs), grid.crs)
    turn = grid.full_turn
    if turn is not None:
        geometry = _shift_longitudes(_unwrap_jumps(geometry, turn), grid, turn)
    series = gpd.GeoSeries(geometry, index=polygons.index, crs=grid.crs)
    series.attrs[REPAIR_ATTRS] = {"repaired": repaired.repaired, "empty": repaired.empty}
    return series
