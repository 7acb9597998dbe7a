"""Weights built in spatial blocks equal the weights built in one go, wherever they run."""

from __future__ import annotations

import numpy as np
import pytest
import shapely
from builders import LAT, LON, pond_layer

from lakeloss.errors import GridError
from lakeloss.zonal import GridSpec, build_weights
from lakeloss.zonal.partition import build_weights_in_blocks, spatial_blocks

GRID = GridSpec.from_centres(LON, LAT, "EPSG:4326")


def _layer():
    layer = pond_layer(n_ponds=40, seed=5)
    crs = layer.crs
    # One body off the grid and one empty geometry: blocks must keep their rows and flags.
    layer.loc[len(layer)] = [900, "far", "west", shapely.Point(0.0, 0.0).buffer(50.0)]
    layer.loc[len(layer)] = [901, "empty", "west", shapely.Polygon()]
    # appending rows with .loc drops the geometry column's CRS in current geopandas
    return layer.set_crs(crs, allow_override=True)


def _assert_same(a, b):
    np.testing.assert_allclose(a.matrix.toarray(), b.matrix.toarray(), rtol=1e-9, atol=1e-9)
    for name in ("polygon_area_m2", "grid_area_m2", "grid_coverage"):
        np.testing.assert_allclose(getattr(a, name), getattr(b, name), rtol=1e-9)
    # Centroids are taken in an equal-area projection centred on the (sub-)layer, so a big
    # reservoir's moves by ~0.1 m between centres: irrelevant for the radiation latitude.
    np.testing.assert_allclose(a.centroid_lat, b.centroid_lat, atol=1e-5)
    assert list(a.flags) == list(b.flags)


def test_blocks_are_spatial_bands_covering_every_row():
    layer = _layer()
    blocks = spatial_blocks(layer, GRID, block_size=10)
    assert len(blocks) == 5
    assert sorted(np.concatenate(blocks)) == list(range(len(layer)))
    # bands along y: each band's centres lie north of the next band's (south-up is fine too)
    centre_lat = layer.geometry.centroid.to_crs(4326).y.to_numpy()
    medians = [np.nanmedian(centre_lat[b]) for b in blocks[:-1]]
    assert medians == sorted(medians)
    assert spatial_blocks(layer, GRID, block_size=1000)[0].tolist() == list(range(len(layer)))


# The empty geometry is flagged with a warning, as it should be; here it is expected.
QUIET = pytest.mark.filterwarnings("ignore::lakeloss.errors.GeometryRepairedWarning")


@QUIET
def test_block_build_equals_whole_build():
    layer = _layer()
    whole = build_weights(layer, GRID)
    blocked = build_weights_in_blocks(layer, GRID, block_size=7)
    _assert_same(whole, blocked)
    assert "outside_grid" in blocked.flags[-2] and "geometry_empty" in blocked.flags[-1]


def test_block_build_refuses_a_layer_off_the_grid():
    layer = _layer().iloc[-2:-1]
    layer = layer.loc[layer.index.repeat(30)].reset_index(drop=True)
    with pytest.raises(GridError, match="overlaps the climate grid"):
        build_weights_in_blocks(layer, GRID, block_size=7)


@QUIET
def test_block_build_on_a_local_cluster_equals_local_blocks():
    from distributed import Client, LocalCluster

    layer = _layer()
    local = build_weights_in_blocks(layer, GRID, block_size=9)
    with (
        LocalCluster(
            n_workers=2,
            threads_per_worker=1,
            processes=True,
            host="127.0.0.1",
            dashboard_address=None,
        ) as cluster,
        Client(cluster) as client,
    ):

        def on_cluster(func, *iterables):
            return client.gather(client.map(func, *iterables, pure=False))

        remote = build_weights_in_blocks(layer, GRID, block_size=9, map_blocks=on_cluster)
    assert (local.matrix != remote.matrix).nnz == 0  # bit-identical
    np.testing.assert_array_equal(local.polygon_area_m2, remote.polygon_area_m2)


@QUIET
def test_apply_into_a_reused_buffer_equals_fresh_results():
    layer = _layer()
    weights = build_weights(layer, GRID)
    rng = np.random.default_rng(3)
    values = rng.uniform(0.0, 10.0, (4, len(LAT), len(LON)))
    values[:, 0, 0] = np.nan  # a steady missing cell
    fresh, fresh_valid = weights.apply(values)
    buffer = np.full((weights.n_waterbodies, 4), -1.0)
    reused, reused_valid = weights.apply(values, out=buffer)
    np.testing.assert_array_equal(reused, fresh)
    np.testing.assert_array_equal(reused_valid, fresh_valid)
    assert np.shares_memory(reused, buffer)
    again, _ = weights.apply(values * 2.0, out=buffer)  # the next block overwrites it
    np.testing.assert_array_equal(again, fresh * 2.0)
