"""The vectorised Green's-theorem clip against GEOS intersection areas.

GEOS (through shapely) clips geometrically; the two must agree to rounding (1e-9 of the
cell area) on rings of either orientation, holes, multipolygons, cells that only touch a
polygon, cells aligned with polygon edges and vertical / horizontal edges.
"""

from __future__ import annotations

import numpy as np
import shapely

from lakeloss.zonal import clip
from lakeloss.zonal.clip import clipped_areas


def _shapes(rng: np.random.Generator, n: int) -> np.ndarray:
    shapes = []
    for i in range(n):
        cx, cy, r = rng.uniform(0, 10), rng.uniform(0, 10), rng.uniform(0.05, 2.0)
        shape = shapely.Point(cx, cy).buffer(r, quad_segs=int(rng.integers(1, 8)))
        if i % 3 == 0:  # an island
            shape = shape.difference(shapely.Point(cx + 0.2 * r, cy).buffer(0.3 * r))
        if i % 4 == 0:  # clockwise exterior
            shape = shapely.reverse(shape)
        if i % 5 == 0:  # a second, axis-aligned part
            part = shapely.box(cx + 2 * r, cy, cx + 2.5 * r, cy + 0.7 * r)
            shape = shapely.MultiPolygon([shape, part])
        shapes.append(shape)
    return np.array(shapes, dtype=object)


def test_clipped_areas_match_geos(rng, monkeypatch):
    monkeypatch.setattr(clip, "_CHUNK", 5000)  # several chunks, and pairs split across them
    shapes = _shapes(rng, 300)
    body = np.sort(rng.integers(0, shapes.size, 3000))
    bounds = shapely.bounds(shapes[body])
    west = rng.uniform(bounds[:, 0] - 0.5, bounds[:, 2])
    south = rng.uniform(bounds[:, 1] - 0.5, bounds[:, 3])
    cells = np.column_stack(
        [
            west,
            south,
            west + rng.uniform(0.01, 1.5, body.size),
            south + rng.uniform(0.01, 1.5, body.size),
        ]
    )
    cells[:40] = bounds[:40]  # cells exactly on the polygon's bounding box
    cells[40:60, 0] = bounds[40:60, 2]  # cells that only touch the polygon's east end
    cells[40:60, 2] = bounds[40:60, 2] + 1.0
    expected = shapely.area(shapely.intersection(shapes[body], shapely.box(*cells.T)))
    cell_area = (cells[:, 2] - cells[:, 0]) * (cells[:, 3] - cells[:, 1])
    got = clipped_areas(shapes, body, cells)
    np.testing.assert_allclose(got, expected, rtol=0, atol=1e-9 * cell_area.max())
    assert np.all(np.abs(got[40:60]) < 1e-12)
    assert (expected > 0).sum() > 1500  # most pairs really cut


def test_clipped_area_of_a_square_in_a_cell_corner():
    square = np.array([shapely.box(0.0, 0.0, 2.0, 2.0)], dtype=object)
    cells = np.array([[1.0, 1.0, 3.0, 3.0], [-1.0, -1.0, 0.5, 3.0], [2.0, 0.0, 3.0, 2.0]])
    np.testing.assert_allclose(clipped_areas(square, np.zeros(3, int), cells), [1.0, 1.0, 0.0])
