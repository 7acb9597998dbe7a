"""Tiny synthetic grids and water-body layers for the zonal tests.

Every layer is invented: ponds are buffered points and star-shaped polygons placed at random
(fixed seeds) so that some sit inside one cell, some straddle a cell edge or a cell corner,
one reservoir spans many cells and has two islands, two water bodies are multipolygons, and a
few hang over the edge of the grid.
"""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pytest
import shapely
from affine import Affine

from lakeloss.zonal import GridSpec

# An equal-area projected grid: 1 km cells, 24 x 20, in EPSG:3035 (Lambert azimuthal
# equal-area) with an invented origin.
PROJECTED_CRS = "EPSG:3035"
PROJECTED_ORIGIN = (4_321_000.0, 3_210_000.0)  # upper-left corner [m]
PROJECTED_CELL = 1000.0  # [m]
PROJECTED_SHAPE = (20, 24)  # (ny, nx)

# A geographic grid: 0.05 degree cells, 30 x 36, at an invented place in the mid-south.
GEOGRAPHIC_ORIGIN = (20.0, -30.0)  # lon, lat of the upper-left corner [degrees]
GEOGRAPHIC_CELL = 0.05  # [degrees]
GEOGRAPHIC_SHAPE = (30, 36)


@pytest.fixture
def projected_grid() -> GridSpec:
    x0, y0 = PROJECTED_ORIGIN
    ny, nx = PROJECTED_SHAPE
    transform = Affine(PROJECTED_CELL, 0.0, x0, 0.0, -PROJECTED_CELL, y0)
    return GridSpec.from_transform(transform, nx, ny, PROJECTED_CRS)


@pytest.fixture
def geographic_grid() -> GridSpec:
    x0, y0 = GEOGRAPHIC_ORIGIN
    ny, nx = GEOGRAPHIC_SHAPE
    transform = Affine(GEOGRAPHIC_CELL, 0.0, x0, 0.0, -GEOGRAPHIC_CELL, y0)
    return GridSpec.from_transform(transform, nx, ny, "EPSG:4326")


def star(cx: float, cy: float, radius: float, rng: np.random.Generator, n: int = 11):
    """A valid star-shaped polygon with ``n`` vertices around (cx, cy). [CRS units]"""
    angle = np.sort(rng.uniform(0, 2 * np.pi, n))
    r = radius * rng.uniform(0.6, 1.0, n)
    return shapely.Polygon(np.column_stack([cx + r * np.cos(angle), cy + r * np.sin(angle)]))


def reservoir_with_islands(cx: float, cy: float, radius: float) -> shapely.Polygon:
    """A lobed reservoir of ~``radius`` with two islands (holes). [CRS units]"""
    angle = np.linspace(0, 2 * np.pi, 90, endpoint=False)
    r = radius * (1 + 0.25 * np.sin(3 * angle) + 0.1 * np.cos(7 * angle))
    outer = np.column_stack([cx + r * np.cos(angle), cy + r * np.sin(angle)])
    island_a = shapely.Point(cx + 0.3 * radius, cy).buffer(0.15 * radius).exterior.coords
    island_b = shapely.Point(cx - 0.35 * radius, cy + 0.2 * radius).buffer(0.1 * radius)
    return shapely.Polygon(outer, [island_a, island_b.exterior.coords])


def mixed_layer(
    x0: float, y0: float, cell: float, shape: tuple[int, int], crs: str, seed: int = 7
) -> gpd.GeoDataFrame:
    """The mixed test layer in a metric CRS over a grid of ``cell`` metres from (x0, y0).

    ``(x0, y0)`` is the grid's upper-left corner; rows run southwards.
    """
    rng = np.random.default_rng(seed)
    ny, nx = shape
    width, height = nx * cell, ny * cell
    shapes = []
    # tiny ponds anywhere (most stay inside one cell)
    for _ in range(30):
        shapes.append(
            star(x0 + rng.uniform(0, width), y0 - rng.uniform(0, height), rng.uniform(5, 60), rng)
        )
    # ponds on a vertical or horizontal cell edge
    for _ in range(15):
        col, row = rng.integers(1, nx), rng.integers(1, ny)
        if rng.random() < 0.5:
            cx, cy = x0 + col * cell, y0 - rng.uniform(0.1, ny - 0.1) * cell
        else:
            cx, cy = x0 + rng.uniform(0.1, nx - 0.1) * cell, y0 - row * cell
        shapes.append(star(cx, cy, rng.uniform(0.05, 0.3) * cell, rng))
    # ponds on a cell corner
    for _ in range(10):
        col, row = rng.integers(1, nx), rng.integers(1, ny)
        shapes.append(star(x0 + col * cell, y0 - row * cell, rng.uniform(0.05, 0.4) * cell, rng))
    # the reservoir with islands, well inside
    shapes.append(reservoir_with_islands(x0 + 0.5 * width, y0 - 0.5 * height, 0.18 * height))
    # multipolygons of two parts in different cells
    for _ in range(2):
        a = star(x0 + rng.uniform(0, width), y0 - rng.uniform(0, height), 0.1 * cell, rng)
        b = star(x0 + rng.uniform(0, width), y0 - rng.uniform(0, height), 0.2 * cell, rng)
        shapes.append(shapely.MultiPolygon([a, b]))
    # partly outside: on the west edge and on the south-east corner
    shapes.append(star(x0, y0 - 0.4 * height, 0.6 * cell, rng))
    shapes.append(star(x0 + width, y0 - height, 0.8 * cell, rng))
    return gpd.GeoDataFrame(
        {"name": [f"w{i}" for i in range(len(shapes))]}, geometry=shapes, crs=crs
    )


@pytest.fixture
def projected_layer() -> gpd.GeoDataFrame:
    return mixed_layer(*PROJECTED_ORIGIN, PROJECTED_CELL, PROJECTED_SHAPE, PROJECTED_CRS)


@pytest.fixture
def geographic_layer(geographic_grid) -> gpd.GeoDataFrame:
    """The mixed layer built in UTM zone 34S metres around the geographic grid."""
    utm = "EPSG:32734"
    corner = gpd.GeoSeries.from_xy([GEOGRAPHIC_ORIGIN[0]], [GEOGRAPHIC_ORIGIN[1]], crs=4326)
    x0, y0 = corner.to_crs(utm).iloc[0].coords[0]
    # cells are ~4.8 km wide and 5.5 km high here: lay the layer out on a 5 km pattern
    ny, nx = GEOGRAPHIC_SHAPE
    return mixed_layer(x0, y0, 5000.0, (int(ny * 1.1), int(nx * 0.96)), utm, seed=11)


@pytest.fixture
def rng() -> np.random.Generator:
    return np.random.default_rng(2024)
