"""Threaded slices give exactly the single-call result, in order."""

from __future__ import annotations

import numpy as np
import shapely

from lakeloss.zonal import threads
from lakeloss.zonal.geometry import transform_geometry


def test_sliced_matches_one_call(monkeypatch, rng):
    monkeypatch.setattr(threads, "_MIN_ITEMS", 10)
    monkeypatch.setattr(threads, "workers", lambda: 3)
    ponds = shapely.buffer(shapely.points(rng.uniform(0, 1e4, (101, 2))), 25.0)
    expected = shapely.centroid(ponds)
    got = threads.sliced(shapely.centroid, ponds)
    assert shapely.equals_exact(got, expected, tolerance=0).all()
    moved = transform_geometry(ponds, "EPSG:3035", "EPSG:4326")
    one_call = shapely.transform(ponds, lambda xy: xy)  # same order, same sizes
    assert (
        shapely.get_num_coordinates(moved).tolist()
        == shapely.get_num_coordinates(one_call).tolist()
    )
    monkeypatch.setattr(threads, "workers", lambda: 1)
    np.testing.assert_array_equal(
        shapely.get_coordinates(transform_geometry(ponds, "EPSG:3035", "EPSG:4326")),
        shapely.get_coordinates(moved),
    )
