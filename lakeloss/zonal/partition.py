"""Weights for very large layers, built in spatial blocks that can run in parallel.

The layer is cut into bands of similar size along the grid's y axis (by the centre of each
polygon's bounding box in grid coordinates), each band's weights are built on its own —
in this process, or on a dask.distributed cluster through the ``map_blocks`` callable — and
the rows are put back in layer order. A band is independent of the others because a
polygon's weights depend only on that polygon, the grid and where the equal-area
projections are centred: given the layer's bounds, on the layer, so the blocks reproduce the
whole build to the last bit.

The block size depends only on the number of polygons, never on the scheduler, so a layer
gets the same blocks — and the same weights, to the last bit — wherever it is built.
"""

from __future__ import annotations

import dataclasses
import functools
import math
from collections.abc import Callable, Iterable, Sequence

import geopandas as gpd
import numpy as np
import shapely
from pyproj import Transformer

from lakeloss.errors import GeometryError, GridError
from lakeloss.zonal.build import build_weights
from lakeloss.zonal.grid import GridSpec
from lakeloss.zonal.weights import ZonalWeights, concat_rows

BLOCK_SIZE = 250_000
"""Water bodies per spatial block. Our own choice: big enough that per-block overhead is
small, small enough that a block's build stays well under 1 GB."""

MapBlocks = Callable[
    [Callable[..., ZonalWeights], Sequence[gpd.GeoDataFrame], Sequence[GridSpec]],
    Iterable[ZonalWeights],
]


def spatial_blocks(
    polygons: gpd.GeoDataFrame, grid: GridSpec, block_size: int = BLOCK_SIZE
) -> list[np.ndarray]:
    """Row indices of each spatial block (bands along the grid's y axis).

    Returns one block holding every row when the layer has at most ``block_size`` rows.
    Empty geometries (no bounding box) go to the last band.
    """
    n = len(polygons)
    count = max(1, math.ceil(n / block_size))
    if count == 1:
        return [np.arange(n)]
    bounds = shapely.bounds(np.asarray(polygons.geometry.array, dtype=object))
    centre_x = (bounds[:, 0] + bounds[:, 2]) / 2.0
    centre_y = (bounds[:, 1] + bounds[:, 3]) / 2.0
    to_grid = Transformer.from_crs(polygons.crs, grid.crs, always_xy=True)
    _, y = to_grid.transform(centre_x, centre_y)
    y = np.where(np.isfinite(y), y, np.inf)
    order = np.argsort(y, kind="stable")
    return [np.sort(part) for part in np.array_split(order, count)]


def _build_block(
    block: gpd.GeoDataFrame,
    grid: GridSpec,
    *,
    bounds: tuple[float, float, float, float] | None = None,
) -> ZonalWeights:
    return build_weights(block, grid, require_overlap=False, bounds=bounds)


def combine_blocks(
    blocks: Sequence[np.ndarray],
    parts: Sequence[ZonalWeights],
    grid: GridSpec,
    *,
    require_overlap: bool = True,
) -> ZonalWeights:
    """Stack the blocks' weights and put their rows back in layer order."""
    index = np.concatenate(blocks)
    order = np.empty_like(index)
    order[index] = np.arange(index.size)
    combined = concat_rows(parts).take_rows(order)
    if not require_overlap:
        return dataclasses.replace(combined, grid_key=grid.key(), grid=grid)
    if all("geometry_empty" in str(flag).split(";") for flag in combined.flags):
        raise GeometryError(
            f"all {index.size} water-body geometries are empty; expected at least one polygon "
            "with area; check the layer"
        )
    if combined.matrix.nnz == 0:
        raise GridError(
            f"none of the {index.size} water bodies overlaps the climate grid (grid bounds "
            f"{tuple(round(b, 4) for b in grid.bounds)} in {grid.crs.name}); check the "
            "climate file's extent and CRS"
        )
    return dataclasses.replace(combined, grid_key=grid.key(), grid=grid)


def build_weights_in_blocks(
    polygons: gpd.GeoDataFrame,
    grid: GridSpec,
    *,
    block_size: int = BLOCK_SIZE,
    map_blocks: MapBlocks | None = None,
    bounds: tuple[float, float, float, float] | None = None,
    require_overlap: bool = True,
) -> ZonalWeights:
    """Build the weights block by block; ``map_blocks(func, frames, grids)`` may run them
    anywhere (default: one after another in this process).

    ``require_overlap`` False accepts a set of bodies all empty or off the grid (a
    partition of a layer whose overlap with the grid is checked as a whole).

    With ``bounds``, the whole layer's bounds in its CRS (see
    :func:`lakeloss.zonal.build_weights`), every block centres its equal-area projections on
    the layer, and the result equals ``build_weights(polygons, grid, bounds=bounds)`` to the
    last bit; without them each block is centred on its own bodies.
    """
    blocks = spatial_blocks(polygons, grid, block_size)
    if len(blocks) == 1:
        return build_weights(polygons, grid, bounds=bounds, require_overlap=require_overlap)
    frames = [polygons.iloc[rows].reset_index(drop=True) for rows in blocks]
    mapper = map_blocks or map
    build_block = functools.partial(_build_block, bounds=bounds)
    parts = list(mapper(build_block, frames, [grid] * len(frames)))
    return combine_blocks(blocks, parts, grid, require_overlap=require_overlap)
