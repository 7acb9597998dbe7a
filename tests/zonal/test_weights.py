"""Invariants and edge cases of the zonal weights: areas, rows, NaN handling, bad input."""

from __future__ import annotations

import dask.array as da
import geopandas as gpd
import numpy as np
import pytest
import shapely
from affine import Affine
from pyproj import Geod

from lakeloss.errors import (
    CRSError,
    GeometryError,
    GeometryRepairedWarning,
    GridError,
    InputDataError,
)
from lakeloss.zonal import GridSpec, build_weights, reproject_to_grid
from lakeloss.zonal.grid import cell_true_area

GEOD = Geod(ellps="WGS84")


def _layer(geometries, crs) -> gpd.GeoDataFrame:
    return gpd.GeoDataFrame(geometry=list(geometries), crs=crs)


def _geodesic_areas(layer: gpd.GeoDataFrame) -> np.ndarray:
    lonlat = layer.to_crs(4326).geometry
    return np.array([abs(GEOD.geometry_area_perimeter(g)[0]) for g in lonlat])


def _row_sums(weights) -> np.ndarray:
    return np.asarray(weights.matrix.sum(axis=1)).ravel()


# --- true areas -------------------------------------------------------------------------


def test_polygon_areas_match_geodesic_area(geographic_layer, geographic_grid):
    """Polygon areas vs pyproj Geod(ellps="WGS84").geometry_area_perimeter to 0.01 %."""
    weights = build_weights(geographic_layer, geographic_grid)
    np.testing.assert_allclose(
        weights.polygon_area_m2, _geodesic_areas(geographic_layer), rtol=1e-4
    )


def test_planar_utm_area_would_fail_the_area_tolerance():
    """Teeth: UTM is conformal; near its central meridian planar area is ~0.08 % small.

    The scale factor on the central meridian is 0.9996 (UTM definition), so planar area is
    0.9996² = 0.99920 of the true area there; lakeloss must not use it.
    """
    utm = "EPSG:32734"  # central meridian 21 E
    centre = gpd.GeoSeries.from_xy([21.0], [-25.0], crs=4326).to_crs(utm).iloc[0]
    ponds = _layer([centre.buffer(r) for r in (300.0, 1200.0, 3000.0)], utm)
    geodesic = _geodesic_areas(ponds)
    planar = ponds.area.to_numpy()
    assert np.all(np.abs(planar / geodesic - 1) > 1e-4)
    np.testing.assert_allclose(planar / geodesic, 0.9996**2, rtol=2e-5)
    grid = GridSpec.from_transform(Affine(0.05, 0, 20.8, 0, -0.05, -24.8), 8, 8, "EPSG:4326")
    weights = build_weights(ponds, grid)
    np.testing.assert_allclose(weights.polygon_area_m2, geodesic, rtol=1e-6)


def test_geographic_cell_area_matches_geodesic_cell():
    grid = GridSpec.from_transform(Affine(0.5, 0, 10.0, 0, -0.5, 62.0), 2, 3, "EPSG:4326")
    rows, cols = np.array([0, 2]), np.array([1, 0])
    expected = []
    for row, col in zip(rows, cols, strict=True):
        west, east = grid.x_edges[col], grid.x_edges[col + 1]
        north, south = grid.y_edges[row], grid.y_edges[row + 1]
        lon = np.r_[np.linspace(west, east, 100), np.linspace(east, west, 100)]
        lat = np.r_[np.full(100, south), np.full(100, north)]
        expected.append(abs(GEOD.polygon_area_perimeter(lon, lat)[0]))
    np.testing.assert_allclose(cell_true_area(grid, rows, cols), expected, rtol=1e-8)


# --- rows and totals ---------------------------------------------------------------------


@pytest.mark.parametrize("which", ["projected", "geographic"])
def test_rows_sum_to_area_inside_grid_and_layer_area_is_conserved(which, request):
    grid = request.getfixturevalue(f"{which}_grid")
    layer = request.getfixturevalue(f"{which}_layer")
    weights = build_weights(layer, grid)
    np.testing.assert_allclose(_row_sums(weights), weights.grid_area_m2, rtol=1e-12)
    whole = ~np.array(["outside" in f for f in weights.flags])
    np.testing.assert_allclose(weights.grid_area_m2[whole], weights.polygon_area_m2[whole])
    np.testing.assert_allclose(weights.grid_coverage[whole], 1.0)
    partly = ~whole
    assert np.all((weights.grid_coverage[partly] > 0) & (weights.grid_coverage[partly] < 1))
    assert weights.matrix.sum() == pytest.approx(weights.grid_area_m2.sum(), rel=1e-12)
    assert weights.matrix.dtype == np.float64 and weights.matrix.format == "csr"


def test_holes_are_excluded(projected_grid):
    x0, y0 = projected_grid.x_edges[0], projected_grid.y_edges[0]
    # a 5 x 5 km square with a 1-cell hole exactly on cell (row 2, col 2)
    outer = shapely.box(x0, y0 - 5000, x0 + 5000, y0)
    hole = shapely.box(x0 + 2000, y0 - 3000, x0 + 3000, y0 - 2000)
    donut = shapely.Polygon(outer.exterior.coords, [hole.exterior.coords])
    weights = build_weights(_layer([donut], projected_grid.crs), projected_grid)
    nx = projected_grid.shape[1]
    assert weights.matrix[0, 2 * nx + 2] == 0
    assert weights.matrix.nnz == 24
    assert weights.polygon_area_m2[0] == pytest.approx(24e6, rel=1e-12)
    values = np.zeros(projected_grid.shape)
    values[2, 2] = 1e6  # only the island's cell is hot: it must not leak into the mean
    means, _ = weights.apply(values)
    assert means[0, 0] == 0.0


def test_multipolygon_is_the_sum_of_its_parts(projected_grid):
    x0, y0 = projected_grid.x_edges[0], projected_grid.y_edges[0]
    a = shapely.Point(x0 + 1500, y0 - 1000).buffer(300)
    b = shapely.Point(x0 + 7200, y0 - 4300).buffer(450)
    weights = build_weights(_layer([shapely.MultiPolygon([a, b]), a, b], 3035), projected_grid)
    parts = (weights.matrix[1] + weights.matrix[2]).toarray()
    np.testing.assert_allclose(weights.matrix[0].toarray(), parts, rtol=1e-9)
    assert weights.polygon_area_m2[0] == pytest.approx(a.area + b.area, rel=1e-12)


def test_polygon_aligned_to_cell_edges(geographic_grid):
    x, y = geographic_grid.x_edges, geographic_grid.y_edges
    one_cell = shapely.segmentize(shapely.box(x[3], y[5], x[4], y[4]), 0.001)
    two_by_two = shapely.segmentize(shapely.box(x[3], y[7], x[5], y[5]), 0.001)
    weights = build_weights(_layer([one_cell, two_by_two], 4326), geographic_grid)
    nx = geographic_grid.shape[1]
    assert weights.matrix[0].nnz == 1 and weights.matrix[0, 4 * nx + 3] > 0
    row = weights.matrix[1].tocoo()
    assert sorted(row.col) == [5 * nx + 3, 5 * nx + 4, 6 * nx + 3, 6 * nx + 4]
    cell_area = cell_true_area(geographic_grid, row.col // nx, row.col % nx)
    np.testing.assert_allclose(row.data, cell_area, rtol=1e-6)
    assert list(weights.flags) == ["", ""]


def test_one_square_metre_pond(projected_grid):
    x0, y0 = projected_grid.x_edges[0], projected_grid.y_edges[0]
    pond = shapely.box(x0 + 3456.5, y0 - 789.5, x0 + 3457.5, y0 - 788.5)
    weights = build_weights(_layer([pond], 3035), projected_grid)
    assert weights.matrix.nnz == 1
    assert weights.matrix[0, 3] == pytest.approx(1.0, rel=1e-9)
    values = np.arange(np.prod(projected_grid.shape), dtype=float).reshape(projected_grid.shape)
    means, fraction = weights.apply(values)
    assert means[0, 0] == values[0, 3] and fraction[0, 0] == 1.0


def test_polygon_covering_the_whole_grid(geographic_grid):
    xmin, ymin, xmax, ymax = geographic_grid.bounds
    cover = shapely.segmentize(shapely.box(xmin - 0.2, ymin - 0.2, xmax + 0.2, ymax + 0.2), 0.01)
    weights = build_weights(_layer([cover], 4326), geographic_grid)
    ny, nx = geographic_grid.shape
    assert weights.matrix.nnz == ny * nx
    rows, cols = np.divmod(np.arange(ny * nx), nx)
    grid_area = cell_true_area(geographic_grid, rows, cols).sum()
    assert weights.grid_area_m2[0] == pytest.approx(grid_area, rel=1e-6)
    assert weights.flags[0] == "partly_outside_grid"
    assert 0.5 < weights.grid_coverage[0] < 1.0


# --- applying ----------------------------------------------------------------------------


def _two_cell_pond(grid):
    """A square pond of which 3/4 lie in cell (0, 1) and 1/4 in cell (0, 2)."""
    x0, y0 = grid.x_edges[0], grid.y_edges[0]
    return shapely.box(x0 + 1250, y0 - 900, x0 + 2250, y0 - 100)


def test_nan_cells_are_masked_and_weights_renormalised(projected_grid):
    weights = build_weights(_layer([_two_cell_pond(projected_grid)], 3035), projected_grid)
    values = np.ones((3, *projected_grid.shape))
    values[:, 0, 1], values[:, 0, 2] = 10.0, 20.0
    values[1, 0, 2] = np.nan  # one step without the small part
    values[2, 0, 1:3] = np.nan  # one step without any cell
    means, fraction = weights.apply(values)
    np.testing.assert_allclose(means[:, 0], [12.5, 10.0, np.nan])
    np.testing.assert_allclose(fraction[:, 0], [1.0, 0.75, 0.0])
    assert means.dtype == np.float64


def test_all_nan_cells_give_nan_and_zero_valid_fraction_never_zero(projected_grid):
    weights = build_weights(_layer([_two_cell_pond(projected_grid)], 3035), projected_grid)
    values = np.full((4, *projected_grid.shape), np.nan, dtype=np.float32)
    means, fraction = weights.apply(values)
    assert np.all(np.isnan(means)) and np.all(fraction == 0.0)


def test_apply_accepts_a_dask_chunk_and_2d_and_refuses_wrong_shape(projected_grid, rng):
    weights = build_weights(_layer([_two_cell_pond(projected_grid)], 3035), projected_grid)
    values = rng.random((5, *projected_grid.shape)).astype(np.float32)
    eager, _ = weights.apply(values)
    lazy, _ = weights.apply(da.from_array(values, chunks=(2, -1, -1)))
    np.testing.assert_array_equal(eager, lazy)
    single, _ = weights.apply(values[0])
    np.testing.assert_array_equal(single[0], eager[0])
    # float32 input, float64 accumulation: the mean equals the float64 reference
    expected = 0.75 * values[:, 0, 1].astype(np.float64) + 0.25 * values[:, 0, 2]
    np.testing.assert_allclose(eager[:, 0], expected, rtol=1e-10)
    with pytest.raises(InputDataError, match="do not fit"):
        weights.apply(values[:, :-1])


def test_south_up_and_north_up_give_identical_means(geographic_layer, rng):
    lon = 20.0 + 0.05 * (np.arange(36) + 0.5)
    lat_north_up = -30.0 - 0.05 * (np.arange(30) + 0.5)
    north_up = GridSpec.from_centres(lon, lat_north_up, "EPSG:4326")
    south_up = GridSpec.from_centres(lon, lat_north_up[::-1], "EPSG:4326")
    values = rng.random((2, 30, 36))
    means_n, _ = build_weights(geographic_layer, north_up).apply(values)
    means_s, _ = build_weights(geographic_layer, south_up).apply(values[:, ::-1, :])
    np.testing.assert_allclose(means_s, means_n, rtol=1e-12)


def test_grid_in_0_360_longitudes_matches_the_same_grid_in_180(rng):
    # an invented pond cluster west of the prime meridian, seen by two spellings of one grid
    centres = gpd.GeoSeries.from_xy(rng.uniform(-19.6, -18.4, 25), rng.uniform(40.1, 40.9, 25))
    ponds = gpd.GeoDataFrame(geometry=centres.buffer(0.01), crs=4326)
    ponds.loc[24, "geometry"] = shapely.Point(-20.0, 40.5).buffer(0.03)  # on the grid's west edge
    transform_180 = Affine(0.1, 0, -20.0, 0, -0.1, 41.0)
    transform_360 = Affine(0.1, 0, 340.0, 0, -0.1, 41.0)
    grid_180 = GridSpec.from_transform(transform_180, 20, 10, "EPSG:4326")
    grid_360 = GridSpec.from_transform(transform_360, 20, 10, "EPSG:4326")
    assert reproject_to_grid(ponds, grid_360).total_bounds[0] > 339.9
    values = rng.random((3, 10, 20))
    w180, w360 = build_weights(ponds, grid_180), build_weights(ponds, grid_360)
    # the +360 shift rounds coordinates at the 1e-14 level; areas move by ~1e-11
    np.testing.assert_allclose(w360.apply(values)[0], w180.apply(values)[0], rtol=1e-9)
    np.testing.assert_allclose(w360.grid_area_m2, w180.grid_area_m2, rtol=1e-9)
    assert w360.flags[24] == "partly_outside_grid"


# --- repair, empties and errors ----------------------------------------------------------


def test_bow_tie_is_repaired_and_flagged(projected_grid):
    x0, y0 = projected_grid.x_edges[0] + 5000, projected_grid.y_edges[0] - 5000
    bow_tie = shapely.Polygon([(x0, y0), (x0 + 200, y0 + 200), (x0 + 200, y0), (x0, y0 + 200)])
    assert not bow_tie.is_valid
    with pytest.warns(GeometryRepairedWarning, match="1 invalid"):
        weights = build_weights(_layer([bow_tie], 3035), projected_grid)
    assert weights.flags[0] == "geometry_repaired"
    # two triangles of 100 m x 200 m / 2 each; the crossed ring itself sums to zero area
    assert weights.polygon_area_m2[0] == pytest.approx(20_000.0, rel=1e-9)
    assert weights.area_before_repair_m2[0] == pytest.approx(0.0, abs=1e-6)
    assert weights.matrix.sum() == pytest.approx(20_000.0, rel=1e-9)


def test_empty_geometry_is_flagged_with_nan_results(projected_grid):
    pond = _two_cell_pond(projected_grid)
    layer = _layer([pond, shapely.Polygon(), None], 3035)
    with pytest.warns(GeometryRepairedWarning, match="2 are empty"):
        weights = build_weights(layer, projected_grid)
    assert list(weights.flags) == ["", "geometry_empty", "geometry_empty"]
    assert np.isnan(weights.grid_coverage[1:]).all() and np.isnan(weights.centroid_lat[1:]).all()
    assert np.isnan(weights.area_before_repair_m2).all()
    means, fraction = weights.apply(np.ones((2, *projected_grid.shape)))
    assert np.isnan(means[:, 1:]).all() and (fraction[:, 1:] == 0).all()
    assert np.isfinite(means[:, 0]).all()


def test_outside_water_body_is_flagged_and_gets_nan(projected_grid):
    x0, y0 = projected_grid.x_edges[0], projected_grid.y_edges[0]
    inside, outside = _two_cell_pond(projected_grid), shapely.Point(x0 - 9e3, y0).buffer(50)
    weights = build_weights(_layer([inside, outside], 3035), projected_grid)
    assert weights.flags[1] == "outside_grid" and weights.grid_coverage[1] == 0.0
    means, fraction = weights.apply(np.ones(projected_grid.shape))
    assert np.isnan(means[0, 1]) and fraction[0, 1] == 0.0


def test_centroids_are_wgs84_degrees(geographic_grid):
    pond = shapely.Point(20.5, -30.5).buffer(0.01)
    weights = build_weights(_layer([pond], 4326), geographic_grid)
    assert weights.centroid_lon[0] == pytest.approx(20.5, abs=1e-6)
    assert weights.centroid_lat[0] == pytest.approx(-30.5, abs=1e-6)


def test_layer_without_crs_is_refused(projected_grid):
    layer = gpd.GeoDataFrame(geometry=[_two_cell_pond(projected_grid)])
    with pytest.raises(CRSError, match="no CRS"):
        build_weights(layer, projected_grid)


def test_lines_are_refused(projected_grid):
    x0, y0 = projected_grid.x_edges[0], projected_grid.y_edges[0]
    line = shapely.LineString([(x0 + 10, y0 - 10), (x0 + 20, y0 - 20)])
    layer = _layer([_two_cell_pond(projected_grid), line], 3035)
    with pytest.raises(GeometryError, match="first at row 1: linestring"):
        build_weights(layer, projected_grid)


def test_point_takes_the_cell_it_falls_in_with_weight_one(projected_grid):
    """A point has no area: one cell, weight 1, true area 0 (its area is stated)."""
    x0, y0 = projected_grid.x_edges[0], projected_grid.y_edges[0]
    dx = projected_grid.x_edges[1] - x0
    dy = projected_grid.y_edges[1] - y0
    point = shapely.Point(x0 + 1.5 * dx, y0 + 0.5 * dy)
    weights = build_weights(_layer([_two_cell_pond(projected_grid), point], 3035), projected_grid)
    row = weights.matrix[1]
    assert row.indices.tolist() == [1] and row.data.tolist() == [1.0]
    assert weights.polygon_area_m2[1] == 0.0 and weights.grid_coverage[1] == 1.0


def test_layer_not_overlapping_the_grid_is_refused(projected_grid):
    far = shapely.Point(0.0, 0.0).buffer(500.0)
    with pytest.raises(GridError, match="none of the 1 water bodies overlaps"):
        build_weights(_layer([far], 3035), projected_grid)


def test_reprojected_of_another_layer_is_refused(projected_grid, projected_layer):
    reprojected = reproject_to_grid(projected_layer.iloc[:3], projected_grid)
    with pytest.raises(GeometryError, match="reprojected layer has 3 rows"):
        build_weights(projected_layer, projected_grid, reprojected=reprojected)


def test_user_reprojection_without_repair_record_still_flags_repairs(projected_grid):
    x0, y0 = projected_grid.x_edges[0] + 5000, projected_grid.y_edges[0] - 5000
    bow_tie = shapely.Polygon([(x0, y0), (x0 + 200, y0 + 200), (x0 + 200, y0), (x0, y0 + 200)])
    layer = _layer([bow_tie, _two_cell_pond(projected_grid)], 3035)
    # a caller's own reprojection carries no record of the repair reproject_to_grid did
    own = gpd.GeoSeries(shapely.make_valid(layer.geometry.array), crs=3035)
    with pytest.warns(GeometryRepairedWarning):
        weights = build_weights(layer, projected_grid, reprojected=own)
    assert list(weights.flags) == ["geometry_repaired", ""]


def test_empty_time_axis_gives_empty_results(projected_grid):
    weights = build_weights(_layer([_two_cell_pond(projected_grid)], 3035), projected_grid)
    means, fraction = weights.apply(np.empty((0, *projected_grid.shape)))
    assert means.shape == (0, 1) and fraction.shape == (0, 1)


@pytest.mark.parametrize(
    ("crs", "expected"),
    [
        ("EPSG:3035", True),
        ("EPSG:6933", True),
        ("EPSG:32734", False),
        ("ESRI:54009", False),
        ("EPSG:3410", False),
        ("EPSG:4326", False),
    ],
)
def test_equal_area_detection(crs, expected):
    """Only ellipsoidal equal-area projections may measure areas directly."""
    from pyproj import CRS

    from lakeloss.zonal.geometry import is_equal_area

    assert is_equal_area(CRS(crs)) is expected


def test_fixed_missing_cells_renormalise_every_step(projected_grid, rng):
    """A permanent gap (land/sea mask) takes the steady path; results as if computed per step."""
    x0, y0 = projected_grid.x_edges[0], projected_grid.y_edges[0]
    three_cells = shapely.box(x0 + 1500, y0 - 900, x0 + 3500, y0 - 100)  # 1/4, 1/2, 1/4
    layer = _layer([_two_cell_pond(projected_grid), three_cells], 3035)
    weights = build_weights(layer, projected_grid)
    values = rng.random((6, *projected_grid.shape))
    values[:, 0, 2] = np.nan  # the small part of pond 0, the middle of pond 1
    means, fraction = weights.apply(values)
    np.testing.assert_array_equal(means[:, 0], values[:, 0, 1])
    np.testing.assert_allclose(means[:, 1], 0.5 * (values[:, 0, 1] + values[:, 0, 3]))
    np.testing.assert_allclose(fraction, [[0.75, 0.5]] * 6)
