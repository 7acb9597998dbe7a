"""Building the exact (water body x grid cell) area weights."""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import geopandas as gpd
import numpy as np
import scipy.sparse as sp
import shapely
from pyproj import CRS

from lakeloss.errors import GeometryError, GeometryRepairedWarning, GridError
from lakeloss.zonal.clip import clipped_areas
from lakeloss.zonal.geometry import (
    REPAIR_ATTRS,
    EqualAreaGeometry,
    check_layer,
    repair_geometry,
    repeat_repair,
    reproject_to_grid,
    to_equal_area,
)
from lakeloss.zonal.grid import GridSpec, cell_true_area
from lakeloss.zonal.weights import ZonalWeights

# Polygons whose bounding box spans more cells than this first sort the cells into wholly
# inside / disjoint / on the boundary with a prepared geometry, and clip only the boundary
# ones: clipping a many-vertex reservoir against every cell of its box is what costs time.
_PREPARED_MIN_CELLS = 16

# Pieces smaller than this share of their cell are rounding noise of an edge that only
# touches the cell (the exact clip gives ~1e-15 there).
_NOISE_AREA = 1e-12

# Share of a polygon's area that may seem to fall outside the grid when the polygon is in
# fact inside: its area inside is measured on a densified copy, which differs from the
# polygon's own area by far less than this.
_OUTSIDE_TOLERANCE = 1e-6

_POINT = int(shapely.GeometryType.POINT)


@dataclass(frozen=True)
class _Axis:
    """Cell edges of one grid axis in ascending order, and how to map back to storage.

    On an axis that wraps (longitude of a global grid) ``edges`` holds three copies of one
    turn of stored cells (``period`` of them), one turn apart, so a polygon hanging over the
    storage seam on either side finds cells there; :meth:`stored` folds every copy back onto
    the stored columns. A last column that repeats the first is never used.
    """

    edges: np.ndarray
    flipped: bool
    stored_size: int
    period: int

    @classmethod
    def of(cls, stored_edges: np.ndarray, turn: tuple[float, int] | None = None) -> _Axis:
        """The axis of these stored edges; ``turn`` = (one turn, columns in it) to wrap."""
        flipped = bool(stored_edges[-1] < stored_edges[0])
        edges = stored_edges[::-1].copy() if flipped else np.asarray(stored_edges)
        stored_size = edges.size - 1
        if turn is None:
            return cls(edges, flipped, stored_size, stored_size)
        length, columns = turn
        # One turn of cells (a repeated last column left out), its seam closed exactly:
        # float32 coordinates miss it by ~1e-5 degrees.
        closed = edges[: columns + 1].astype(np.float64, copy=True)
        closed[-1] = closed[0] + length
        wrapped = np.concatenate([closed[:-1] - length, closed[:-1], closed + length])
        return cls(wrapped, flipped, stored_size, columns)

    @property
    def size(self) -> int:
        return self.edges.size - 1

    def span(self, low: np.ndarray, high: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """First and last ascending cell index touched by [low, high], clipped to the grid."""
        first = np.searchsorted(self.edges, low, side="right") - 1
        last = np.searchsorted(self.edges, high, side="left") - 1
        return np.clip(first, 0, self.size - 1), np.clip(last, 0, self.size - 1)

    def locate(self, value: np.ndarray) -> np.ndarray:
        """Ascending index of the cell holding each coordinate; -1 outside the grid.

        A coordinate on the edge between two cells goes to the cell above it (east on x,
        north on y, whichever way the file stores them); one on the grid's own last edge
        goes to the last cell, so the grid's outline is inside. On a wrapping axis the seam
        is an edge like any other: a point on it goes to the cell east of it.
        """
        index = np.searchsorted(self.edges, value, side="right") - 1
        index = np.where(value == self.edges[-1], self.size - 1, index)
        with np.errstate(invalid="ignore"):
            inside = (value >= self.edges[0]) & (value <= self.edges[-1])
        return np.where(inside, index, -1)

    def stored(self, index: np.ndarray) -> np.ndarray:
        index = index % self.period
        return self.stored_size - 1 - index if self.flipped else index


def _grid_axes(grid: GridSpec) -> tuple[_Axis, _Axis]:
    """The x and y axes of the grid; x wraps across the seam on a global grid."""
    columns, length = grid.turn_columns, grid.full_turn
    turn = None if columns is None or length is None else (length, columns)
    return _Axis.of(grid.x_edges, turn), _Axis.of(grid.y_edges)


@dataclass(frozen=True)
class _Centring:
    """Where the build's equal-area projections are centred.

    With the layer's total ``bounds`` (in the layer's ``crs``) every projection of the build
    is centred on the whole layer, so a body gets the same numbers in any subset of the
    layer; without them each projection is centred on the geometries it is given.
    """

    crs: CRS
    bounds: tuple[float, float, float, float] | None

    def equal_area(self, geometry: np.ndarray, crs: CRS | None = None) -> EqualAreaGeometry:
        """``geometry`` (in ``crs``, default the layer's) in an equal-area CRS."""
        if self.bounds is None:
            return to_equal_area(geometry, crs or self.crs)
        return to_equal_area(geometry, crs or self.crs, self.bounds, bounds_crs=self.crs)


@dataclass(frozen=True)
class _LayerAreas:
    """True-area facts about the repaired polygons, from an equal-area CRS."""

    area: np.ndarray
    area_before_repair: np.ndarray
    repaired: np.ndarray
    empty: np.ndarray
    centroid_lon: np.ndarray
    centroid_lat: np.ndarray
    point: np.ndarray

    @property
    def weight(self) -> np.ndarray:
        """What each body's weights sum to in the grid: its true area, or 1 for a point."""
        return np.where(self.point, 1.0, self.area)


def _repair_layer(original: np.ndarray, reprojected: gpd.GeoSeries | None):
    """The layer repaired in its own CRS, reusing what reproject_to_grid found out."""
    known = None if reprojected is None else reprojected.attrs.get(REPAIR_ATTRS)
    if known is not None and known["repaired"].size == original.size:
        return repeat_repair(original, known["repaired"], known["empty"])
    return repair_geometry(original)


def _layer_areas(polygons: gpd.GeoDataFrame, centring: _Centring, reprojected) -> _LayerAreas:
    original = np.asarray(polygons.geometry.array, dtype=object)
    repaired = _repair_layer(original, reprojected)
    equal_area = centring.equal_area(repaired.geometry)
    area = equal_area.area()
    area[repaired.empty] = 0.0
    before = np.full(area.size, np.nan)
    if repaired.repaired.any():
        before[repaired.repaired] = centring.equal_area(original[repaired.repaired]).area()
    lon, lat = equal_area.centroid_lonlat()
    lon[repaired.empty] = np.nan
    lat[repaired.empty] = np.nan
    point = ~repaired.empty & (shapely.get_type_id(repaired.geometry) == _POINT)
    return _LayerAreas(area, before, repaired.repaired, repaired.empty, lon, lat, point)


@dataclass
class _Pairs:
    """(water body, stored cell) pairs with their raw, not yet rescaled, weights."""

    body: np.ndarray
    row: np.ndarray
    col: np.ndarray
    raw: np.ndarray

    @classmethod
    def empty(cls) -> _Pairs:
        none = np.empty(0, dtype=np.int64)
        return cls(none, none, none, np.empty(0))


def _expand_boxes(first_col, last_col, first_row, last_row):
    """Every (body, row, col) inside each body's box of cells, vectorised."""
    ncols = last_col - first_col + 1
    counts = ncols * (last_row - first_row + 1)
    body = np.repeat(np.arange(counts.size), counts)
    start = np.cumsum(counts) - counts
    local = np.arange(body.size) - start[body]
    return body, first_row[body] + local // ncols[body], first_col[body] + local % ncols[body]


def _clip_areas(geometry: np.ndarray, body: np.ndarray, cells: np.ndarray, big: np.ndarray):
    """Planar area of geometry[body] ∩ cell per pair; big polygons skip what they can.

    For a polygon spanning many cells, a prepared geometry first finds the cells wholly
    inside (area = cell area) and the disjoint ones (dropped); only the cells on its
    boundary are clipped.
    """
    cell_area = (cells[:, 2] - cells[:, 0]) * (cells[:, 3] - cells[:, 1])
    area = np.zeros(body.size)
    to_clip = ~big[body]
    sorted_out = np.flatnonzero(big[body])
    if sorted_out.size:
        owners = geometry[body[sorted_out]]
        shapely.prepare(geometry[big])
        boxes = shapely.box(*cells[sorted_out].T)
        inside = shapely.contains_properly(owners, boxes)
        touches = shapely.intersects(owners, boxes)
        shapely.destroy_prepared(geometry[big])
        area[sorted_out[inside]] = cell_area[sorted_out[inside]]
        to_clip[sorted_out[touches & ~inside]] = True
    clip = np.flatnonzero(to_clip)
    area[clip] = clipped_areas(geometry, body[clip], cells[clip])
    return area, cell_area


def _valid_for_clipping(geometry: np.ndarray) -> np.ndarray:
    """Reprojection can nudge a vertex across an edge; re-repair so clipping stays exact."""
    broken = ~shapely.is_valid(geometry)
    if broken.any():
        geometry = geometry.copy()
        geometry[broken] = repair_geometry(geometry[broken]).geometry
    return geometry


def _clipped_pairs(geometry: np.ndarray, x: _Axis, y: _Axis, bounds: np.ndarray):
    """Pairs for polygons that cross cell edges, plus each one's planar area inside the grid."""
    geometry = _valid_for_clipping(geometry)
    first_col, last_col = x.span(bounds[:, 0], bounds[:, 2])
    first_row, last_row = y.span(bounds[:, 1], bounds[:, 3])
    body, row, col = _expand_boxes(first_col, last_col, first_row, last_row)
    cells = np.column_stack([x.edges[col], y.edges[row], x.edges[col + 1], y.edges[row + 1]])
    n_cells = (last_col - first_col + 1) * (last_row - first_row + 1)
    pieces, cell_area = _clip_areas(geometry, body, cells, n_cells >= _PREPARED_MIN_CELLS)
    # pieces of a cell the polygon only touches come out as rounding noise around zero
    keep = pieces > _NOISE_AREA * cell_area
    body, row, col = body[keep], row[keep], col[keep]
    coverage = pieces[keep] / cell_area[keep]
    inside_planar = np.bincount(body, weights=pieces[keep], minlength=geometry.size)
    return _Pairs(body, y.stored(row), x.stored(col), coverage), inside_planar


def _point_pairs(in_grid: np.ndarray, x: _Axis, y: _Axis, point: np.ndarray):
    """The cell each point falls in (weight 1), and whether it is inside the grid."""
    rows = np.flatnonzero(point)
    xy = shapely.get_coordinates(in_grid[rows])
    col, row = x.locate(xy[:, 0]), y.locate(xy[:, 1])
    inside = (col >= 0) & (row >= 0)
    share = np.zeros(in_grid.size)
    share[rows[inside]] = 1.0
    body = rows[inside]
    pairs = _Pairs(body, y.stored(row[inside]), x.stored(col[inside]), np.ones(body.size))
    return pairs, share


def _cell_pairs(in_grid: np.ndarray, grid: GridSpec, areas: _LayerAreas, centring: _Centring):
    """All (body, cell) pairs and the share of each body's true area inside the grid."""
    x, y = _grid_axes(grid)
    present = ~areas.empty & ~areas.point
    polygon_area = areas.area
    bounds = shapely.bounds(in_grid)
    with np.errstate(invalid="ignore"):
        within = (
            (bounds[:, 0] >= x.edges[0])
            & (bounds[:, 2] <= x.edges[-1])
            & (bounds[:, 1] >= y.edges[0])
            & (bounds[:, 3] <= y.edges[-1])
            & present
        )
        overlaps = (
            (bounds[:, 2] > x.edges[0])
            & (bounds[:, 0] < x.edges[-1])
            & (bounds[:, 3] > y.edges[0])
            & (bounds[:, 1] < y.edges[-1])
            & present
        )
    first_col, last_col = x.span(bounds[:, 0], bounds[:, 2])
    first_row, last_row = y.span(bounds[:, 1], bounds[:, 3])
    one_cell = within & (first_col == last_col) & (first_row == last_row)
    share = np.where(within, 1.0, 0.0)
    single = np.flatnonzero(one_cell)
    pairs = _Pairs(
        single, y.stored(first_row[single]), x.stored(first_col[single]), np.ones(single.size)
    )
    if areas.point.any():
        located, share_of_points = _point_pairs(in_grid, x, y, areas.point)
        share = np.where(areas.point, share_of_points, share)
        pairs = _concat(pairs, located)
    crossing = np.flatnonzero(overlaps & ~one_cell)
    if crossing.size:
        clipped, inside_planar = _clipped_pairs(in_grid[crossing], x, y, bounds[crossing])
        partial = crossing[~within[crossing] & (inside_planar > 0)]
        inside_area = _true_area_inside(in_grid[partial], grid, (x, y), centring)
        inside = inside_area / polygon_area[partial]
        # below the tolerance the difference is the two area computations, not real overhang
        share[partial] = np.where(inside > 1.0 - _OUTSIDE_TOLERANCE, 1.0, inside)
        clipped.body = crossing[clipped.body]
        pairs = _concat(pairs, clipped)
    return pairs, share, within


def _concat(first: _Pairs, second: _Pairs) -> _Pairs:
    return _Pairs(
        np.concatenate([first.body, second.body]),
        np.concatenate([first.row, second.row]),
        np.concatenate([first.col, second.col]),
        np.concatenate([first.raw, second.raw]),
    )


def _true_area_inside(
    geometry: np.ndarray, grid: GridSpec, axes: tuple[_Axis, _Axis], centring: _Centring
) -> np.ndarray:
    """True area of each polygon's part inside the grid's outline. [m2]

    Only the few polygons that hang over the grid's edge come here. The cut edge runs along
    a grid line (a parallel or meridian on a geographic grid), so the part is densified to a
    quarter cell before it goes to the equal-area CRS, where straight chords would cut
    corners. On a grid that wraps in longitude the outline is the axes' widened x range, so
    only the north and south edges cut.
    """
    x, y = axes
    outline = shapely.box(x.edges[0], y.edges[0], x.edges[-1], y.edges[-1])
    part = shapely.intersection(_valid_for_clipping(geometry), outline)
    step = 0.25 * min(np.abs(np.diff(grid.x_edges)).min(), np.abs(np.diff(grid.y_edges)).min())
    part = shapely.segmentize(part, step)
    return centring.equal_area(part, grid.crs).area()


def _flags(areas: _LayerAreas, share: np.ndarray) -> np.ndarray:
    tokens = (
        (areas.repaired, "geometry_repaired"),
        (areas.empty, "geometry_empty"),
        (~areas.empty & (share == 0), "outside_grid"),
        (~areas.empty & (share > 0) & (share < 1.0), "partly_outside_grid"),
    )
    flags = np.full(share.size, "", dtype=object)
    for mask, token in tokens:
        flags[mask] = np.where(flags[mask] == "", token, flags[mask] + ";" + token)
    return flags


def _warn_about_repairs(areas: _LayerAreas) -> None:
    n_repaired, n_empty = int(areas.repaired.sum()), int(areas.empty.sum())
    if n_repaired or n_empty:
        warnings.warn(
            f"{n_repaired} invalid water-body polygons were repaired and {n_empty} are empty "
            "(flagged geometry_repaired / geometry_empty; empty ones get NaN results)",
            GeometryRepairedWarning,
            stacklevel=3,
        )


def build_weights(
    polygons: gpd.GeoDataFrame,
    grid: GridSpec,
    *,
    reprojected: gpd.GeoSeries | None = None,
    require_overlap: bool = True,
    bounds: tuple[float, float, float, float] | None = None,
) -> ZonalWeights:
    """Build the exact (water body x cell) area weights.

    Parameters
    ----------
    polygons : geopandas.GeoDataFrame
        Water bodies (Polygon / MultiPolygon / Point, any CRS); row order is kept.
    grid : GridSpec
        The climate grid.
    reprojected : geopandas.GeoSeries, optional
        ``reproject_to_grid(polygons, grid)`` if already computed (it is shared with other
        stages, so the caller may pass it in rather than pay for it twice).
    require_overlap : bool, optional
        Refuse a layer that is all empty or misses the grid (default). A spatial block of a
        partitioned build (:mod:`lakeloss.zonal.partition`) passes False; the whole layer is
        checked once its blocks are combined.
    bounds : tuple of float, optional
        (xmin, ymin, xmax, ymax) of the whole layer in its CRS
        (:attr:`lakeloss.io.vector.LayerSurvey.bounds`) when ``polygons`` are some of its
        rows. Every equal-area projection of the build (true areas, areas before repair,
        parts inside the grid's edge, centroids) is then centred on the layer, so each
        body's weights, areas, centroid, coverage and flags are the same to the last bit
        whichever rows are built together. When None, the projections are centred on
        ``polygons`` themselves.

    Returns
    -------
    ZonalWeights
        The weights, true areas, coverage and flags.

    Notes
    -----
    A polygon whose bounding box lies within one cell goes to that cell with its full area,
    without clipping. Others are clipped against the cells of their box in grid coordinates;
    each piece's coverage fraction of its cell times the cell's true area is the raw weight,
    and each row is then rescaled to the polygon's true area inside the grid (measured in an
    equal-area CRS after cutting the polygon at the grid's outline). Means from these weights
    equal exactextract's means weighted by cell area, and row sums stay exact. Holes are
    excluded and the parts of a multipolygon summed because clipping works on the whole
    geometry.

    A point takes the one cell it falls in, with weight 1 (it has no area of its own: its
    true area is 0, and the run takes its area from an attribute); a point on the edge
    between two cells goes to the cell east or north of it (:meth:`_Axis.locate`), one
    outside the grid is flagged ``outside_grid``.

    A geographic grid spanning 360° of longitude (:attr:`GridSpec.wraps_longitude`) has no
    east or west edge: a polygon over its storage seam takes cells on both sides of it, the
    ones beyond the seam found one turn away and mapped back to their stored columns.
    """
    crs = CRS.from_user_input(check_layer(polygons))
    if reprojected is None:
        reprojected = reproject_to_grid(polygons, grid)
    if len(reprojected) != len(polygons):
        raise GeometryError(
            f"reprojected layer has {len(reprojected)} rows but the layer {len(polygons)}; "
            "expected reproject_to_grid(polygons, grid) of the same layer"
        )
    centring = _Centring(crs, bounds)
    areas = _layer_areas(polygons, centring, reprojected)
    if areas.empty.all() and require_overlap:
        raise GeometryError(
            f"all {areas.empty.size} water-body geometries are empty; expected at least one "
            "polygon with area; check the layer"
        )
    in_grid = np.asarray(reprojected.array, dtype=object)
    pairs, share, _ = _cell_pairs(in_grid, grid, areas, centring)
    if not pairs.body.size and require_overlap:
        raise GridError(
            f"none of the {int((~areas.empty).sum())} water bodies overlaps the climate grid "
            f"(grid bounds {tuple(round(b, 4) for b in grid.bounds)} in {grid.crs.name}); "
            "expected overlapping data; check the climate file's extent and CRS"
        )
    _warn_about_repairs(areas)
    return _assemble(pairs, share, areas, grid)


def _assemble(pairs: _Pairs, share: np.ndarray, areas: _LayerAreas, grid: GridSpec):
    n = share.size
    raw = pairs.raw * cell_true_area(grid, pairs.row, pairs.col)
    raw_total = np.bincount(pairs.body, weights=raw, minlength=n)
    grid_area = areas.weight * share
    with np.errstate(invalid="ignore", divide="ignore"):
        scale = np.where(raw_total > 0, grid_area / raw_total, 0.0)
        coverage = np.where(areas.empty, np.nan, grid_area / areas.weight)
    ny, nx = grid.shape
    weight = raw * scale[pairs.body]
    weight[areas.point[pairs.body]] = 1.0  # exactly, not cell area / cell area
    matrix = sp.csr_matrix((weight, (pairs.body, pairs.row * nx + pairs.col)), shape=(n, ny * nx))
    return ZonalWeights(
        matrix=matrix,
        polygon_area_m2=areas.area,
        grid_area_m2=grid_area,
        grid_coverage=coverage,
        area_before_repair_m2=areas.area_before_repair,
        flags=_flags(areas, share),
        centroid_lon=areas.centroid_lon,
        centroid_lat=areas.centroid_lat,
        grid_key=grid.key(),
        grid=grid,
    )
