"""Where a run is computed: partitions in this process, or on a dask.distributed cluster.

The unit of work is a partition of water bodies (:mod:`lakeloss.partition_run`) taken through
the whole time axis; its blocks of time steps run in order on a small thread pool
(:mod:`lakeloss.timeblocks`). Sums are exact (fixed point), so every output file is
identical whichever scheduler ran the partitions and however the time axis was cut.

* default: partitions one after another in this process, each one's blocks on a small
  thread pool (numpy and the sparse products release the GIL), at most two in flight;
* ``workers = N``: a :class:`dask.distributed.LocalCluster` of N worker processes on
  loopback, one thread each, with a memory limit per worker (``memory_limit``, default
  ``"auto"``: the machine's memory shared among the workers);
* ``scheduler = ADDRESS``: an existing cluster, by address (``tcp://host:8786``) or by the
  path of a scheduler file (``dask scheduler --scheduler-file``).

On a cluster each partition is one task (:func:`map_partitions`), at most ``2 x workers``
in flight, so finished partitions never pile up; a worker writes its partition's part files
into the output's staging directory when the run streams its outputs, and only the small
outcome comes back. A partition lost with a worker is recomputed by dask on another worker
(retries); one that cannot be computed becomes :class:`ClusterError`, naming the
partition's first water body, raised before anything is written. Each partition builds (or
loads) its own zonal weights where it runs.
"""

from __future__ import annotations

import contextlib
import logging
import os
import re
from collections.abc import Iterable, Iterator
from pathlib import Path
from typing import TYPE_CHECKING, Any

from lakeloss.config import ComputeConfig
from lakeloss.errors import ClusterError, InputDataError, LakelossError

if TYPE_CHECKING:
    from distributed import Client

    from lakeloss.partition_run import PartitionBars, PartitionDone, PartitionTask

log = logging.getLogger(__name__)

CONNECT_TIMEOUT_S = 20.0
"""How long to try to reach a scheduler, and to wait for its first worker. [s]"""

# Each partition may be retried this often after its worker died or failed (besides dask's own
# rescheduling of tasks lost with a worker, bounded by distributed.scheduler.allowed-failures).
_RETRIES = 2
# Partitions in flight per worker: one running, one queued, so a worker never idles.
_IN_FLIGHT_PER_WORKER = 2


def _one_line(err: BaseException) -> str:
    text = re.sub(r"\s+", " ", str(err)).strip()
    return f"{type(err).__name__}: {text}" if text else type(err).__name__


def _looks_like_file(target: str) -> bool:
    return "://" not in target and (target.endswith(".json") or os.sep in target)


def _connect(target: str) -> Client:
    """A client of the running cluster at ``target`` (address or scheduler file)."""
    from distributed import Client

    timeout = f"{CONNECT_TIMEOUT_S}s"
    if _looks_like_file(target) and not Path(target).is_file():
        raise ClusterError(
            f"the dask scheduler file '{target}' does not exist; give the path the scheduler "
            "wrote (dask scheduler --scheduler-file PATH) or its address (tcp://host:port)"
        )
    try:
        if Path(target).is_file():
            return Client(scheduler_file=target, timeout=timeout)
        return Client(target, timeout=timeout)
    except (OSError, TimeoutError, ValueError) as err:
        raise ClusterError(
            f"cannot connect to the dask scheduler at '{target}' ({_one_line(err)}); check "
            "the address (tcp://host:port) or scheduler file, and that the cluster is running"
        ) from err


def _wait_for_workers(client: Client, target: str) -> None:
    try:
        client.wait_for_workers(1, timeout=CONNECT_TIMEOUT_S)
    except (OSError, TimeoutError) as err:
        raise ClusterError(
            f"the dask scheduler at '{target}' has no workers after {CONNECT_TIMEOUT_S:g} s; "
            "start workers (dask worker ADDRESS) or use --workers N for a local cluster"
        ) from err


@contextlib.contextmanager
def _client(compute: ComputeConfig) -> Iterator[Client]:
    from distributed import Client, LocalCluster

    if compute.scheduler:
        client = _connect(compute.scheduler)
        with client:
            _wait_for_workers(client, compute.scheduler)
            yield client
        return
    try:
        cluster = LocalCluster(
            n_workers=compute.workers,
            threads_per_worker=1,
            processes=True,
            memory_limit=compute.memory_limit,
            host="127.0.0.1",
            dashboard_address=None,
        )
    except (OSError, TimeoutError, ValueError) as err:
        raise ClusterError(
            f"cannot start a local dask cluster of {compute.workers} workers ({_one_line(err)});"
            " check [compute] memory_limit and free memory, or run without --workers"
        ) from err
    with cluster, Client(cluster) as client:
        yield client


def map_partitions(
    compute: ComputeConfig,
    tasks: Iterable[PartitionTask],
    bars: PartitionBars | None = None,
    staging: Path | None = None,
) -> Iterator[PartitionDone]:
    """Compute every partition and yield them in partition order.

    Locally one after another in this process (each one's blocks on the thread pool);
    on a cluster each partition is one task on a worker, at most ``2 x workers`` in flight,
    writing its part files into ``staging``. ``bars`` advance per partition (weights) and
    by time steps (evaporation).
    """
    if compute.workers or compute.scheduler:
        assert staging is not None  # workers write their part files there
        yield from _on_cluster(compute, tasks, bars, staging)
    else:
        yield from _here(tasks, bars)


def _here(tasks: Iterable[PartitionTask], bars: PartitionBars | None) -> Iterator[PartitionDone]:
    """The partitions one after another in this process."""
    from lakeloss.partition_run import run_partition

    for task in tasks:
        pieces = run_partition(task, bars)
        while True:
            try:
                done = next(pieces, None)
            except LakelossError as err:
                if task.of == 1:
                    raise  # the run's own error: one partition needs no naming
                raise _failed_partition(task, err) from err
            except (OSError, RuntimeError) as err:  # a file unreadable halfway through
                raise _failed_partition(task, err) from err
            if done is None:
                break
            yield done


def _on_cluster(
    compute: ComputeConfig,
    tasks: Iterable[PartitionTask],
    bars: PartitionBars | None,
    staging: Path,
) -> Iterator[PartitionDone]:
    """Each partition a task on the cluster's workers, results in partition order."""
    from distributed.client import FutureCancelledError
    from distributed.scheduler import KilledWorker

    from lakeloss.partition_run import run_partition_on_worker

    with _client(compute) as client:
        n_workers = max(1, len(client.scheduler_info().get("workers", {})))
        log.info("dask cluster %s with %d workers", client.scheduler.address, n_workers)
        window = _IN_FLIGHT_PER_WORKER * n_workers
        pending: list[tuple[PartitionTask, Any]] = []
        where = str(staging)
        iterator = iter(tasks)

        def submit() -> None:
            task = next(iterator, None)
            if task is not None:
                future = client.submit(
                    run_partition_on_worker, task, where, retries=_RETRIES, pure=False
                )
                pending.append((task, future))

        for _ in range(window):
            submit()
        while pending:
            task, future = pending.pop(0)
            try:
                pieces = future.result()
            except LakelossError as err:
                # the partition's own error (bad input data), raised as on a local run
                if task.of == 1:
                    raise
                raise _failed_partition(task, err) from err
            except (KilledWorker, FutureCancelledError, OSError, TimeoutError) as err:
                raise _lost_partition(task, err) from err
            submit()
            if bars is not None and bars.weights is not None:
                bars.weights.update(1)
            if bars is not None and bars.evaporation is not None:
                bars.evaporation.update(len(task.inputs.axis.days))
            yield from pieces


def _lost_partition(task: PartitionTask, err: BaseException) -> ClusterError:
    first = _first_id(task)
    return ClusterError(
        f"the cluster lost partition {task.index + 1} (first water body {first}; "
        f"{_one_line(err)}); no outputs were written; check worker memory limits and logs, "
        "then rerun"
    )


def _failed_partition(task: PartitionTask, err: BaseException) -> LakelossError:
    """``err`` of one partition as one line naming the partition and its first water body."""
    where = f"partition {task.index + 1} of {task.of} (first water body {_first_id(task)})"
    if isinstance(err, LakelossError):
        return type(err)(f"{where}: {err}")
    return InputDataError(
        f"{where} could not be computed ({_one_line(err)}); no outputs were written; check "
        "that the input files are whole and were not changed during the run, then rerun"
    )


def _first_id(task: PartitionTask) -> object:
    """The id of a partition's first water body (read from its file: the task has no ids)."""
    from lakeloss.io.vector import read_waterbody_rows

    survey = task.inputs.survey
    if survey is None or not len(task.rows):
        return "none"
    try:
        layer = read_waterbody_rows(survey, task.rows.start, task.rows.start + 1)
    except (LakelossError, OSError):
        return f"row {task.rows.start + 1}"
    return layer.frame[layer.id_field].iloc[0]
