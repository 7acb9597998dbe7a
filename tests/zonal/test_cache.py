"""The weights cache: hit without rebuilding, atomic files, corrupt entries rebuilt."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

import lakeloss.zonal.build as build_module
from lakeloss.errors import InputDataError
from lakeloss.zonal import WeightsCache, ZonalWeights, build_weights, layer_key
from lakeloss.zonal.cache import geometry_digest


def _refuse_to_build(*args, **kwargs):
    raise AssertionError("build_weights was called although the cache holds the weights")


def _assert_same(a: ZonalWeights, b: ZonalWeights) -> None:
    assert (a.matrix != b.matrix).nnz == 0
    for name in ("polygon_area_m2", "grid_area_m2", "grid_coverage", "centroid_lon"):
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name))
    np.testing.assert_array_equal(a.area_before_repair_m2, b.area_before_repair_m2)
    assert list(a.flags) == list(b.flags) and a.grid_key == b.grid_key
    assert b.grid is not None and b.grid.key() == a.grid_key


def test_second_run_loads_without_calling_the_builder(
    tmp_path, projected_layer, projected_grid, monkeypatch
):
    cache = WeightsCache(tmp_path / "weights")
    built, loaded = cache.get_or_build(projected_layer, projected_grid)
    assert not loaded
    monkeypatch.setattr(build_module, "build_weights", _refuse_to_build)
    again, loaded = cache.get_or_build(projected_layer, projected_grid)
    assert loaded
    _assert_same(built, again)
    assert [p.name for p in (tmp_path / "weights").iterdir()] == [
        f"weights-{layer_key(projected_layer, projected_grid)}.npz"
    ]


def test_key_changes_with_geometry_and_grid(projected_layer, projected_grid, geographic_grid):
    key = layer_key(projected_layer, projected_grid)
    moved = projected_layer.copy()
    moved.loc[0, "geometry"] = moved.geometry.iloc[0].buffer(1.0)
    assert layer_key(moved, projected_grid) != key
    assert layer_key(projected_layer, geographic_grid) != key
    assert layer_key(projected_layer.copy(), projected_grid) == key


def test_key_counts_order_and_missing_geometry_positions(projected_layer, projected_grid):
    digest = geometry_digest(projected_layer)
    key = layer_key(projected_layer, projected_grid)
    assert layer_key(projected_layer, projected_grid, geometry=digest) == key
    swapped = projected_layer.iloc[[1, 0, *range(2, len(projected_layer))]]
    assert geometry_digest(swapped) != digest
    first, second = projected_layer.copy(), projected_layer.copy()
    first.loc[first.index[0], "geometry"] = None
    second.loc[second.index[1], "geometry"] = None
    assert len({digest, geometry_digest(first), geometry_digest(second)}) == 3
    # two polygons' bytes run together the same way only if their lengths say so
    merged = projected_layer.iloc[:2].copy()
    merged.loc[merged.index[0], "geometry"] = projected_layer.geometry.iloc[0].union(
        projected_layer.geometry.iloc[1]
    )
    assert geometry_digest(merged) != geometry_digest(projected_layer.iloc[:2])


def test_corrupt_entry_is_rebuilt_not_crashed_on(tmp_path, projected_layer, projected_grid):
    cache = WeightsCache(tmp_path)
    built, _ = cache.get_or_build(projected_layer, projected_grid)
    path = cache.path_for(layer_key(projected_layer, projected_grid))
    path.write_bytes(path.read_bytes()[:300])  # as if a copy was cut short
    with pytest.raises(InputDataError, match="unreadable"):
        ZonalWeights.load(path)
    rebuilt, loaded = cache.get_or_build(projected_layer, projected_grid)
    assert not loaded
    _assert_same(built, rebuilt)
    assert ZonalWeights.load(path).matrix.nnz == built.matrix.nnz


def test_save_is_atomic_and_readable_by_scipy(tmp_path, projected_layer, projected_grid):
    weights = build_weights(projected_layer, projected_grid)
    path = tmp_path / "w.npz"
    weights.save(path)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["w.npz"]  # no temp file left
    assert (sp.load_npz(path) != weights.matrix).nnz == 0
    _assert_same(weights, ZonalWeights.load(path))


def test_failed_save_leaves_no_entry(tmp_path, projected_layer, projected_grid, monkeypatch):
    weights = build_weights(projected_layer, projected_grid)

    def killed(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(np, "savez", killed)
    with pytest.raises(KeyboardInterrupt):
        weights.save(tmp_path / "w.npz")
    assert list(tmp_path.iterdir()) == []
