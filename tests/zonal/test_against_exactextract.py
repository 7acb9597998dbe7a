"""Per-polygon means from the zonal weights against exactextract as an independent oracle.

exactextract computes the exact coverage fraction of every cell under every polygon. On an
equal-area projected grid all cells have the same true area, so its plain ``mean`` is the
true-area-weighted mean. On a geographic grid cells shrink towards the pole, so the oracle is
its ``weighted_mean`` with a raster of true cell areas, which here come from pyproj's geodesic
polygon area (independent of lakeloss' closed-form band area).

Tolerance 1e-6 relative: both sides clip exactly in double precision; what remains is the
rounding of areas summed over a few hundred pieces.
"""

from __future__ import annotations

import numpy as np
from exactextract import exact_extract
from exactextract.raster import NumPyRasterSource
from pyproj import Geod

from lakeloss.zonal import build_weights, reproject_to_grid


def _raster(values_2d: np.ndarray, grid) -> NumPyRasterSource:
    xmin, ymin, xmax, ymax = grid.bounds
    return NumPyRasterSource(values_2d, xmin, ymin, xmax, ymax, srs_wkt=grid.crs.to_wkt(), name="v")


def _oracle_means(values_2d, grid, reprojected, op="mean", weights_2d=None) -> np.ndarray:
    frame = reprojected.to_frame("geometry").set_geometry("geometry")
    weights = None if weights_2d is None else _raster(weights_2d, grid)
    table = exact_extract(_raster(values_2d, grid), frame, [op], weights=weights, output="pandas")
    return table[op].to_numpy(dtype=np.float64)


def _geodesic_cell_areas(grid) -> np.ndarray:
    """Row-wise true area of the grid's cells from pyproj's geodesic polygon area. [m2]"""
    geod = Geod(ellps="WGS84")
    x = grid.x_edges
    areas = []
    for lat_a, lat_b in zip(grid.y_edges[:-1], grid.y_edges[1:], strict=True):
        # densified parallels so the geodesic edges follow the cell's parallels
        lon = np.r_[np.linspace(x[0], x[1], 50), np.linspace(x[1], x[0], 50)]
        lat = np.r_[np.full(50, lat_a), np.full(50, lat_b)]
        areas.append(abs(geod.polygon_area_perimeter(lon, lat)[0]))
    return np.repeat(np.array(areas)[:, np.newaxis], x.size - 1, axis=1)


def test_projected_grid_means_match_exactextract(projected_grid, projected_layer, rng):
    values = rng.uniform(0.0, 100.0, projected_grid.shape)
    reprojected = reproject_to_grid(projected_layer, projected_grid)
    weights = build_weights(projected_layer, projected_grid, reprojected=reprojected)
    means, fraction = weights.apply(values[np.newaxis])
    expected = _oracle_means(values, projected_grid, reprojected)
    np.testing.assert_allclose(means[0], expected, rtol=1e-6)
    np.testing.assert_allclose(fraction[0], 1.0, rtol=1e-12)
    # the layer really mixes the cases the comparison is meant to cover
    nnz_per_row = np.diff(weights.matrix.indptr)
    assert (nnz_per_row == 1).sum() > 10 and (nnz_per_row >= 4).sum() > 5
    assert nnz_per_row.max() > 40
    assert sum("partly_outside_grid" in f for f in weights.flags) == 2


def test_geographic_grid_means_match_exactextract_weighted_by_cell_area(
    geographic_grid, geographic_layer, rng
):
    values = rng.uniform(0.0, 100.0, geographic_grid.shape)
    reprojected = reproject_to_grid(geographic_layer, geographic_grid)
    weights = build_weights(geographic_layer, geographic_grid, reprojected=reprojected)
    means, _ = weights.apply(values[np.newaxis])
    inside = weights.grid_area_m2 > 0
    expected = _oracle_means(
        values,
        geographic_grid,
        reprojected[inside],
        op="weighted_mean",
        weights_2d=_geodesic_cell_areas(geographic_grid),
    )
    np.testing.assert_allclose(means[0, inside], expected, rtol=1e-6)
    assert np.diff(weights.matrix.indptr).max() > 20


def test_geographic_weights_differ_from_unweighted_coverage_mean(
    geographic_grid, geographic_layer, rng
):
    """Teeth: on a geographic grid, ignoring cell area shifts big-polygon means beyond 1e-6."""
    # a steep north-south gradient makes area weighting matter
    values = np.repeat(np.linspace(0.0, 100.0, geographic_grid.shape[0])[:, None], 36, axis=1)
    reprojected = reproject_to_grid(geographic_layer, geographic_grid)
    weights = build_weights(geographic_layer, geographic_grid, reprojected=reprojected)
    means, _ = weights.apply(values[np.newaxis])
    plain = _oracle_means(values, geographic_grid, reprojected)
    largest = int(np.argmax(np.diff(weights.matrix.indptr)))
    assert abs(means[0, largest] / plain[largest] - 1) > 1e-5
