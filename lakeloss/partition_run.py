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
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from lakeloss.body_facts import BodyFacts
from lakeloss.config import ComputeConfig, RunConfig
from lakeloss.inputs import Inputs
from lakeloss.partitions import PartitionOutcome
from lakeloss.series_stream import SeriesSettings, SeriesStream, temporary_directory
from lakeloss.zonal import ZonalWeights

if TYPE_CHECKING:
    import geopandas as gpd
    import pandas as pd

    from lakeloss.progress import ProgressBar


@dataclass(frozen=True)
class PartitionTask:
    """Everything one partition needs; light enough to send to a cluster worker."""

    config: RunConfig
    inputs: Inputs
    weights: Mapping[str, ZonalWeights]
    facts: BodyFacts
    index: int
    rows: range
    series: SeriesSettings | None = None
    """Set when the run keeps the per-step series (``[output] series``)."""


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


def slice_partition(
    inputs: Inputs, weights: Mapping[str, ZonalWeights], facts: BodyFacts, rows: range
) -> tuple[Inputs, dict[str, ZonalWeights], BodyFacts]:
    """The inputs, weights and facts of the bodies ``rows`` only (the same objects for all)."""
    if rows.start == 0 and rows.stop == inputs.n_waterbodies:
        return inputs, dict(weights), facts
    index = np.arange(rows.start, rows.stop)
    cut = slice(rows.start, rows.stop)
    layer = inputs.layer
    part_layer = dataclasses.replace(
        layer,
        frame=layer.frame.iloc[cut],
        flags=layer.flags[cut],
        stated_area_m2=None if layer.stated_area_m2 is None else layer.stated_area_m2[cut],
        field_area_m2=None if layer.field_area_m2 is None else layer.field_area_m2[cut],
    )
    part_facts = dataclasses.replace(
        facts,
        **{
            f.name: getattr(facts, f.name)[cut]
            for f in dataclasses.fields(facts)
            if getattr(facts, f.name) is not None
        },
    )
    part_weights = {key: w.take_rows(index) for key, w in weights.items()}
    return dataclasses.replace(inputs, layer=part_layer), part_weights, part_facts


def run_partition(
    task: PartitionTask, bar: ProgressBar | None = None, series_dir: Path | None = None
) -> PartitionDone:
    """Compute one partition through the whole time axis; its tables stay in memory.

    Its series file, when the run keeps one, goes into ``series_dir`` (default: a
    temporary directory removed when the process exits).
    """
    from lakeloss.pipeline import compute_totals
    from lakeloss.results import partition_tables

    config = task.config
    collector = None
    if task.series is not None:
        directory = series_dir or temporary_directory()
        path = directory / f"series-{task.index:06d}.nc"
        collector = SeriesStream(config, task.inputs, path, task.series)
    sink = collector.add if collector else None
    totals = compute_totals(config, task.inputs, task.weights, task.facts, bar, sink)
    assert totals.gaps is not None  # compute_totals always tallies the gaps
    bodies, by_period, outcome = partition_tables(
        config, task.inputs, task.facts, totals, totals.gaps.filled_per_body, task.index, task.rows
    )
    series_file = collector.close() if collector else None
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
