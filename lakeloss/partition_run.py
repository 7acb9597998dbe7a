"""One partition of water bodies, computed through the whole time axis.

:func:`run_partition` is what a partition costs: its blocks of time steps in order (read
ahead on threads, a stateful method stepped in time order), then its rows of the layer and
of the period table (:func:`lakeloss.results.partition_tables`). It runs in this process, or
on a dask worker, where it also writes the partition's part files into the output's staging
directory, so that only the small :class:`lakeloss.partitions.PartitionOutcome` travels back
to the client.
"""

from __future__ import annotations

import dataclasses
import time
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

from lakeloss.body_facts import BodyFacts
from lakeloss.config import ComputeConfig, RunConfig
from lakeloss.errors import GeometryRepairedWarning
from lakeloss.inputs import Inputs
from lakeloss.io.vector import read_waterbody_rows
from lakeloss.partitions import PartitionOutcome
from lakeloss.run_warnings import repair_counts
from lakeloss.series_stream import SeriesSettings, SeriesStream, temporary_directory
from lakeloss.zonal import ZonalWeights

if TYPE_CHECKING:
    import geopandas as gpd
    import pandas as pd

    from lakeloss.progress import ProgressBar, ProgressFactory


@dataclass(frozen=True)
class PartitionTask:
    """Everything one partition needs; light enough to send to a cluster worker.

    ``inputs`` are the run's (the lazy climate, the survey of the layer without its ids);
    the partition reads its own rows of the layer and builds (or loads) its own weights.
    """

    config: RunConfig
    inputs: Inputs
    index: int
    rows: range
    series: SeriesSettings | None = None
    """Set when the run keeps the per-step series (``[output] series``)."""
    of: int = 1
    """How many partitions the run has."""


@dataclass
class PartitionDone:
    """A computed partition: its outcome, and its tables when they stayed in memory."""

    outcome: PartitionOutcome
    bodies: gpd.GeoDataFrame | None = None
    by_period: pd.DataFrame | None = None
    series_file: Path | None = None
    """The partition's series file (:class:`lakeloss.series_stream.SeriesStream`)."""
    part_dir: Path | None = None
    """Where the partition's part files are (:mod:`lakeloss.io.parts`), when written."""


@dataclass
class PartitionBars:
    """The progress bars of a run's partitions: weights (per partition), evaporation (steps)."""

    weights: ProgressBar | None = None
    evaporation: ProgressBar | None = None

    @classmethod
    def open(
        cls, progress: ProgressFactory | None, n_partitions: int, n_steps: int
    ) -> PartitionBars:
        if progress is None:
            return cls()
        return cls(
            progress(n_partitions, "weights"), progress(n_steps * n_partitions, "evaporation")
        )

    def close(self) -> None:
        for bar in (self.weights, self.evaporation):
            if bar is not None:
                bar.close()


def read_partition(
    task: PartitionTask,
) -> tuple[Inputs, dict[str, ZonalWeights], BodyFacts, bool, int, int]:
    """The partition's rows, weights and facts; whether every weight came from the cache;
    and how many of its polygons were repaired and how many are empty."""
    from lakeloss.pipeline import build_weights

    survey = task.inputs.survey
    assert survey is not None  # load_inputs surveys the layer
    layer = read_waterbody_rows(survey, task.rows.start, task.rows.stop)
    inputs = dataclasses.replace(task.inputs, layer=layer)
    with warnings.catch_warnings():
        # The run says once how many polygons were repaired, from every partition's count.
        warnings.simplefilter("ignore", GeometryRepairedWarning)
        weights, cached = build_weights(task.config, inputs, bounds=survey.bounds)
    facts = BodyFacts.gather(task.config, inputs, weights)
    repaired, empty = repair_counts(facts)
    return inputs, weights, facts, cached, repaired, empty


def run_partition(
    task: PartitionTask, bars: PartitionBars | None = None, series_dir: Path | None = None
) -> PartitionDone:
    """Compute one partition through the whole time axis; its tables stay in memory.

    Its series file, when the run keeps one, goes into ``series_dir`` (default: a
    temporary directory removed when the process exits).
    """
    from lakeloss.pipeline import compute_totals
    from lakeloss.results import partition_tables

    config = task.config
    bars = bars or PartitionBars()
    started = time.perf_counter()
    inputs, weights, facts, cached, repaired, empty = read_partition(task)
    if bars.weights is not None:
        bars.weights.update(1)
    read = time.perf_counter()
    collector = None
    if task.series is not None:
        directory = series_dir or temporary_directory()
        path = directory / f"series-{task.index:06d}.nc"
        collector = SeriesStream(config, inputs, path, task.series)
    sink = collector.add if collector else None
    totals = compute_totals(config, inputs, weights, facts, bars.evaporation, sink)
    assert totals.gaps is not None  # compute_totals always tallies the gaps
    bodies, by_period, outcome = partition_tables(
        config, inputs, facts, totals, totals.gaps.filled_per_body, task.index, task.rows
    )
    series_file = collector.close() if collector else None
    outcome.seconds = {"weights": read - started, "evaporate": time.perf_counter() - read}
    outcome.weights_cached, outcome.repaired, outcome.empty = cached, repaired, empty
    return PartitionDone(outcome, bodies, by_period, series_file)


def run_partition_on_worker(task: PartitionTask, staging: str) -> PartitionDone:
    """:func:`run_partition` on a cluster worker: blocks in this worker's process only.

    The partition's part files (and series file) are written into ``staging``/_parts/NNNNNN
    (the output's staging directory, on storage the client sees), and only the outcome goes
    back to the client.
    """
    from lakeloss.io.parts import write_part

    part_dir = part_directory(Path(staging), task.index)
    part_dir.mkdir(parents=True, exist_ok=True)
    local = dataclasses.replace(task.config, compute=_local(task.config.compute))
    done = run_partition(dataclasses.replace(task, config=local), series_dir=part_dir)
    assert done.bodies is not None and done.by_period is not None
    write_part(part_dir, done.bodies, done.by_period)
    return PartitionDone(done.outcome, series_file=done.series_file, part_dir=part_dir)


def part_directory(staging: Path, index: int) -> Path:
    """Where partition ``index`` keeps its part files in a staging directory."""
    return staging / "_parts" / f"{index:06d}"


def _local(compute: ComputeConfig) -> ComputeConfig:
    """The compute settings of a worker's own partition: no cluster of its own."""
    return dataclasses.replace(compute, workers=0, scheduler=None)
