"""Grid definitions: edges from transforms and from cell centres, keys, refusals."""

from __future__ import annotations

import numpy as np
import pytest
from affine import Affine

from lakeloss.errors import CRSError, GridError
from lakeloss.zonal import GridSpec


def test_from_transform_north_up_edges_in_stored_order():
    grid = GridSpec.from_transform(Affine(0.25, 0, 100.0, 0, -0.25, 10.0), 4, 3, "EPSG:4326")
    np.testing.assert_array_equal(grid.x_edges, [100.0, 100.25, 100.5, 100.75, 101.0])
    np.testing.assert_array_equal(grid.y_edges, [10.0, 9.75, 9.5, 9.25])
    assert grid.shape == (3, 4) and grid.is_geographic
    assert grid.bounds == (100.0, 9.25, 101.0, 10.0)


def test_from_centres_infers_midpoint_edges_in_any_y_order():
    x = np.array([0.5, 1.5, 2.5])
    south_up = GridSpec.from_centres(x, [10.5, 11.5], "EPSG:4326")
    north_up = GridSpec.from_centres(x, [11.5, 10.5], "EPSG:4326")
    np.testing.assert_array_equal(south_up.x_edges, [0.0, 1.0, 2.0, 3.0])
    np.testing.assert_array_equal(south_up.y_edges, [10.0, 11.0, 12.0])
    np.testing.assert_array_equal(north_up.y_edges, [12.0, 11.0, 10.0])


def test_from_centres_mildly_irregular_and_clipped_at_the_pole():
    lat = np.array([89.5, 87.1, 85.0, 82.8])  # spacing 2.4, 2.1, 2.2 degrees
    grid = GridSpec.from_centres([0.0, 1.0], lat, "EPSG:4326")
    assert grid.y_edges[0] == 90.0  # 89.5 + 1.2 clipped to the pole
    np.testing.assert_allclose(grid.y_edges[1:], [88.3, 86.05, 83.9, 81.7])


def test_from_centres_refuses_a_gap():
    with pytest.raises(GridError, match="jump in spacing"):
        GridSpec.from_centres([0.0, 1.0, 2.0, 7.0], [0.0, 1.0], "EPSG:4326")


def test_refuses_missing_crs_unparsable_crs_and_unsorted_coordinates():
    with pytest.raises(GridError, match="no CRS"):
        GridSpec.from_centres([0.0, 1.0], [0.0, 1.0], None)
    with pytest.raises(CRSError, match="cannot interpret"):
        GridSpec.from_centres([0.0, 1.0], [0.0, 1.0], "EPSG:999999")
    with pytest.raises(GridError, match="not strictly monotonic"):
        GridSpec.from_centres([0.0, 2.0, 1.0], [0.0, 1.0], "EPSG:4326")
    with pytest.raises(GridError, match="rotated"):
        GridSpec.from_transform(Affine(1, 0.1, 0, 0, -1, 0), 2, 2, "EPSG:4326")


def test_key_is_stable_and_sensitive_to_crs_and_edges():
    transform = Affine(1000.0, 0, 0.0, 0, -1000.0, 5e5)
    a = GridSpec.from_transform(transform, 10, 10, "EPSG:3035")
    b = GridSpec.from_centres(
        500.0 + 1000.0 * np.arange(10), 5e5 - 500.0 - 1000.0 * np.arange(10), 3035
    )
    assert a.key() == b.key() and len(a.key()) == 64
    assert GridSpec.from_transform(transform, 10, 11, "EPSG:3035").key() != a.key()
    assert GridSpec.from_transform(transform, 10, 10, "EPSG:3034").key() != a.key()
