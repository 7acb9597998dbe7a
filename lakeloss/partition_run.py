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
from lakeloss.zonal import ZonalWeights

if TYPE_CHECKING:
    import geopandas as gpd
    import pandas as pd
    import xarray as xr

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
    keep_series: bool = False


@dataclass
class PartitionDone:
    """A computed partition: its outcome, and its tables when they stayed in memory."""

    outcome: PartitionOutcome
    bodies: gpd.GeoDataFrame | None = None
    by_period: pd.DataFrame | None = None
    series: xr.Dataset | None = None
    part_dir: Path | None = None


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


def run_partition(task: PartitionTask, bar: ProgressBar | None = None) -> PartitionDone:
    """Compute one partition through the whole time axis; its tables stay in memory."""
    from lakeloss.pipeline import compute_totals
    from lakeloss.results import partition_tables
    from lakeloss.series_stream import SeriesStream

    config = task.config
    collector = SeriesStream(config, task.inputs) if task.keep_series else None
    sink = collector.add if collector else None
    totals = compute_totals(config, task.inputs, task.weights, task.facts, bar, sink)
    assert totals.gaps is not None  # compute_totals always tallies the gaps
    bodies, by_period, outcome = partition_tables(
        config, task.inputs, task.facts, totals, totals.gaps.filled_per_body, task.index, task.rows
    )
    series = collector.dataset() if collector else None
    return PartitionDone(outcome, bodies, by_period, series)


def run_partition_on_worker(task: PartitionTask, staging: str | None) -> PartitionDone:
    """:func:`run_partition` on a cluster worker: blocks in this worker's process only.

    With ``staging`` (the output's staging directory, on storage the client sees), the
    partition's part files are written there and only the outcome goes back; without, the
    tables go back with it.
    """
    local = dataclasses.replace(task.config, compute=_local(task.config.compute))
    done = run_partition(dataclasses.replace(task, config=local))
    if staging is None:
        return done
    from lakeloss.io.parts import write_part

    part_dir = Path(staging) / "_parts" / f"{task.index:06d}"
    assert done.bodies is not None and done.by_period is not None
    write_part(part_dir, done.bodies, done.by_period)
    if done.series is not None:
        done.series.to_netcdf(part_dir / "series.nc", engine="netcdf4")
    return PartitionDone(done.outcome, part_dir=part_dir)


def _local(compute: ComputeConfig) -> ComputeConfig:
    """The compute settings of a worker's own partition: no cluster of its own."""
    return dataclasses.replace(compute, workers=0, scheduler=None)
