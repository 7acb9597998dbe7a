"""The blocks of time steps of one partition, in time order, on a small thread pool.

Every block is computed by the same pure functions, :func:`lakeloss.blocks.compute_block`
(read, average, physics, sums) or, when a method carries a state
(:mod:`lakeloss.physics.stateful`), :func:`lakeloss.blocks.extract_filled` ahead on the
pool and :func:`lakeloss.blocks.finish_block` here in time order, each block starting from
the state the one before it left. Results come back in block order; their sums are exact
(fixed point), so the numbers do not depend on the thread count or the block length.
"""

from __future__ import annotations

import os
from collections.abc import Iterator, Mapping, Sequence
from concurrent.futures import Future, ThreadPoolExecutor
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from lakeloss.blocks import BlockContext, BlockResult, Extracted, RunState
    from lakeloss.zonal import ZonalWeights


def run_blocks(
    context: BlockContext,
    weights: Mapping[str, ZonalWeights],
    static: Mapping[str, np.ndarray],
    blocks: Sequence[slice],
    state: RunState | None = None,
) -> Iterator[BlockResult]:
    """Compute every block of one partition in this process and yield them in block order.

    Parameters
    ----------
    context, weights, static
        Arguments of :func:`lakeloss.blocks.compute_block` shared by every block.
    blocks : sequence of slice
        Time-step ranges, in order.
    state : dict, optional
        The initial state of the stateful methods (:func:`lakeloss.blocks.initial_states`);
        required when ``context`` has one.

    Yields
    ------
    lakeloss.blocks.BlockResult
        One per block, in the order of ``blocks``, as soon as it (and every block before it)
        is done.
    """
    yield from _run_local(context, weights, static, blocks, state)


def _local_threads() -> int:
    return max(1, min(2, os.cpu_count() or 1))


def _run_local(
    context: BlockContext,
    weights: Mapping[str, ZonalWeights],
    static: Mapping[str, np.ndarray],
    blocks: Sequence[slice],
    state: RunState | None = None,
) -> Iterator[BlockResult]:
    from lakeloss.blocks import compute_block

    threads = _local_threads()
    if context.stateful:
        yield from _run_local_in_order(context, weights, static, blocks, state, threads)
        return
    if threads == 1 or len(blocks) == 1:
        for block in blocks:
            yield compute_block(context, weights, static, block)
        return
    with ThreadPoolExecutor(max_workers=threads) as pool:
        pending: list[Future[BlockResult] | None] = [
            pool.submit(compute_block, context, weights, static, b) for b in blocks[:threads]
        ]
        for i in range(len(blocks)):
            future = pending[i]
            assert future is not None
            part = future.result()
            pending[i] = None  # release the block once merged
            nxt = i + threads
            if nxt < len(blocks):
                pending.append(pool.submit(compute_block, context, weights, static, blocks[nxt]))
            yield part


def _extract_owned(
    context: BlockContext, weights: Mapping[str, ZonalWeights], block: slice
) -> Extracted:
    """:func:`lakeloss.blocks.extract_filled` with the means in memory of their own: the
    thread's reusable buffer is overwritten by its next block while this one is stepped
    on another thread."""
    from lakeloss.blocks import extract_filled

    means, valid, gaps = extract_filled(context, weights, block)
    return {q: np.array(v) for q, v in means.items()}, np.array(valid), gaps


def _run_local_in_order(
    context: BlockContext,
    weights: Mapping[str, ZonalWeights],
    static: Mapping[str, np.ndarray],
    blocks: Sequence[slice],
    state: RunState | None,
    threads: int,
) -> Iterator[BlockResult]:
    """Blocks read ahead on a thread pool, their physics stepped here in time order."""
    from lakeloss.blocks import finish_block

    with ThreadPoolExecutor(max_workers=max(1, threads)) as pool:
        pending: list[Future[Extracted] | None] = [
            pool.submit(_extract_owned, context, weights, b) for b in blocks[:threads]
        ]
        for i, block in enumerate(blocks):
            future = pending[i]
            assert future is not None
            extracted = future.result()
            pending[i] = None
            nxt = i + threads
            if nxt < len(blocks):
                pending.append(pool.submit(_extract_owned, context, weights, blocks[nxt]))
            part = finish_block(context, extracted, static, block, state)
            state = part.state
            yield part
