"""How long a block of time steps is: sized so that a block's working arrays fit in memory,
and cut on the boundaries of the lazy reads so that no block reads more than it uses."""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np

from lakeloss.config import RunConfig
from lakeloss.inputs import Inputs

# Bytes of (time, water body) float64 working arrays held per step of a block: the climate
# means, their valid fractions, the physics intermediates and one rate per method. A rough
# but deliberately generous count, used to size blocks.
_WORKING_ARRAYS = 24
_BLOCK_BUDGET_BYTES = 1.5e9
# Longer blocks make the zonal product slower per step (its time series are transposed and
# multiplied as one wide matrix); 16 steps still amortise the per-block preparation
# (benchmarks/README.md, "End to end", figures behind the code).
_MAX_BLOCK_STEPS = 16


def block_steps(config: RunConfig, inputs: Inputs, columns: int | None = None) -> int:
    """Time steps per block: from the config, or sized so a block fits the memory budget.

    ``columns`` is how many water bodies a block computes (the groups of
    :mod:`lakeloss.grouping`); every body by default, which is the upper bound.
    """
    if config.compute.chunk_steps:
        return config.compute.chunk_steps
    n = max(inputs.n_waterbodies if columns is None else columns, 1)
    cells = sum(int(np.prod(g.shape)) for g in inputs.grids.values())
    per_step = 8.0 * (
        n * (_WORKING_ARRAYS + 2 * len(config.method.all)) + cells * len(inputs.fields)
    )
    return int(np.clip(_BLOCK_BUDGET_BYTES // per_step, 1, _MAX_BLOCK_STEPS))


def read_steps(config: RunConfig) -> int:
    """Time steps per lazy read of a climate field: the blocks, so no block reads more.

    A block reads whole chunks of the lazy field, so longer chunks would read (and convert)
    data the block does not use (benchmarks/README.md, "End to end", figures behind the code).
    """
    return config.compute.chunk_steps or _MAX_BLOCK_STEPS


def aligned(steps: int, steps_per_read: int) -> int:
    """The largest block length <= ``steps`` that divides ``steps_per_read`` (or a multiple)."""
    if steps >= steps_per_read:
        return steps - steps % steps_per_read
    return max(d for d in range(1, steps + 1) if steps_per_read % d == 0)


def iter_blocks(n_steps: int, steps: int) -> Iterator[slice]:
    for start in range(0, n_steps, steps):
        yield slice(start, min(start + steps, n_steps))
