"""Where the blocks of a run are computed: in this process, or on a dask.distributed cluster.

Every scheduler runs the same pure function, :func:`lakeloss.pipeline.compute_block`, on the
same blocks, and hands the results back in block order, so the merged sums (and every output
file) are identical whichever scheduler ran them.

* default: a small thread pool in this process (numpy and the sparse products release the
  GIL), at most ``window`` blocks in flight;
* ``workers = N``: a :class:`dask.distributed.LocalCluster` of N worker processes on
  loopback, with a memory limit per worker;
* ``scheduler = ADDRESS``: an existing cluster, by address (``tcp://host:8786``) or by the
  path of a scheduler file.

On a cluster the weights, the per-body inputs and the block context are scattered to every
worker once, not copied into each task; only this process merges results and writes files.
"""

from __future__ import annotations

import contextlib
import logging
import os
from collections.abc import Iterator, Mapping, Sequence
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import Any

from lakeloss.config import ComputeConfig
from lakeloss.errors import ClusterError

log = logging.getLogger(__name__)


def _local_threads() -> int:
    return max(1, min(2, os.cpu_count() or 1))


def _run_local(context: Any, weights: Any, static: Any, blocks: Sequence[slice]) -> Iterator[Any]:
    from lakeloss.pipeline import compute_block

    threads = _local_threads()
    if threads == 1 or len(blocks) == 1:
        for block in blocks:
            yield compute_block(context, weights, static, block)
        return
    with ThreadPoolExecutor(max_workers=threads) as pool:
        pending = [
            pool.submit(compute_block, context, weights, static, b) for b in blocks[:threads]
        ]
        for i in range(len(blocks)):
            part = pending[i].result()
            pending[i] = None  # release the block once merged
            nxt = i + threads
            if nxt < len(blocks):
                pending.append(pool.submit(compute_block, context, weights, static, blocks[nxt]))
            yield part


@contextlib.contextmanager
def _client(compute: ComputeConfig) -> Iterator[Any]:
    from distributed import Client, LocalCluster

    if compute.scheduler:
        target = compute.scheduler
        try:
            if Path(target).is_file():
                client = Client(scheduler_file=target, timeout="20s")
            else:
                client = Client(target, timeout="20s")
        except (OSError, TimeoutError, ValueError) as err:
            raise ClusterError(
                f"cannot connect to the dask scheduler at '{target}' ({err}); check the "
                "address (tcp://host:port) or scheduler file, and that the cluster is running"
            ) from err
        with client:
            yield client
        return
    cluster = LocalCluster(
        n_workers=compute.workers,
        threads_per_worker=1,
        processes=True,
        memory_limit=compute.memory_limit,
        host="127.0.0.1",
        dashboard_address=None,
    )
    with cluster, Client(cluster) as client:
        yield client


def _run_cluster(
    compute: ComputeConfig, context: Any, weights: Any, static: Any, blocks: Sequence[slice]
) -> Iterator[Any]:
    from distributed.client import FutureCancelledError
    from distributed.scheduler import KilledWorker

    from lakeloss.pipeline import compute_block

    with _client(compute) as client:
        n_workers = max(1, len(client.scheduler_info().get("workers", {})) or compute.workers)
        [context_f, weights_f, static_f] = client.scatter(
            [context, dict(weights), dict(static)], broadcast=True
        )
        window = 2 * n_workers

        def submit(block: slice) -> Any:
            return client.submit(
                compute_block, context_f, weights_f, static_f, block, retries=2, pure=False
            )

        futures = [submit(b) for b in blocks[:window]]
        for i in range(len(blocks)):
            try:
                part = futures[i].result()
            except (KilledWorker, FutureCancelledError) as err:
                raise ClusterError(
                    f"the cluster lost block {i + 1} of {len(blocks)} ({type(err).__name__}: "
                    f"{err}); no outputs were written — check worker memory limits and rerun"
                ) from err
            futures[i] = None
            if i + window < len(blocks):
                futures.append(submit(blocks[i + window]))
            yield part


def run_blocks(
    compute: ComputeConfig,
    context: Any,
    weights: Mapping[str, Any],
    static: Mapping[str, Any],
    blocks: Sequence[slice],
) -> Iterator[Any]:
    """Compute every block and yield the results in block order."""
    if compute.workers or compute.scheduler:
        yield from _run_cluster(compute, context, weights, static, blocks)
    else:
        yield from _run_local(context, weights, static, blocks)
