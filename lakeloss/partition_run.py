"""One partition of water bodies, computed through the whole time axis.

:func:`run_partition` is what a partition costs, stage by stage: its rows of the layer
(:func:`read_partition`), its zonal weights (:func:`build_weights`, cached, centred on the
whole layer) and facts, its blocks of time steps in order (:func:`compute_totals`: read
ahead on threads, a stateful method stepped in time order), then its rows of the layer and
of the period table (:func:`lakeloss.results.partition_tables`). It runs in this process, or
on a dask worker, where it also writes the partition's part files into the output's staging
directory, so that only the small :class:`lakeloss.partitions.PartitionOutcome` travels back
to the client.
"""

from __future__ import annotations

import ctypes
import dataclasses
import functools
import gc
import os
import time
import warnings
from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from lakeloss import timeaxis
from lakeloss.blocks import (
    BlockContext,
    PeriodTotals,
    add_block,
    initial_states,
    zero_totals,
)
from lakeloss.body_facts import BodyFacts
from lakeloss.config import ComputeConfig, RunConfig
from lakeloss.errors import GeometryRepairedWarning
from lakeloss.gaps import DEFAULT_LIMIT
from lakeloss.grouping import group_bodies, inputs_used
from lakeloss.inputs import Inputs
from lakeloss.io.vector import read_waterbody_rows
from lakeloss.partitions import ALIGN, PartitionOutcome
from lakeloss.run_warnings import repair_counts
from lakeloss.series_stream import SeriesSettings, SeriesStream, temporary_directory
from lakeloss.sizing import aligned, block_steps, iter_blocks, read_steps
from lakeloss.zonal import WeightsCache, ZonalWeights, layer_key, partition
from lakeloss.zonal.cache import geometry_digest

if TYPE_CHECKING:
    import geopandas as gpd
    import pandas as pd

    from lakeloss.progress import ProgressBar, ProgressFactory

SeriesSink = Callable[[slice, dict[str, np.ndarray]], None]
"""Where a partition's per-step series go, block by block: ``sink(block, values)``."""


PIECE_BODIES = 4096 * ALIGN
"""Bodies per piece of a partition's tables (262 144): a partition is computed whole, its
result tables are made and written this many bodies at a time."""


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
    piece_bodies: int = PIECE_BODIES
    """Bodies per piece of the partition's tables (:func:`run_partition`)."""
    first_piece: int = 0
    """The number of the partition's first piece in the run (pieces are numbered in order)."""


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
) -> Iterator[PartitionDone]:
    """Compute one partition through the whole time axis, then yield its tables in pieces.

    The partition is computed whole (its groups of identical bodies, its reads of the
    climate); its tables are made and handed on :data:`PIECE_BODIES` bodies at a time, each
    piece with its own outcome, so the tables in memory do not grow with the partition.
    Its series file, when the run keeps one, goes into ``series_dir`` (default: a temporary
    directory removed when the process exits) and comes with the first piece.
    """
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
    del weights
    series_file = collector.close() if collector else None
    seconds = {"weights": read - started, "evaporate": time.perf_counter() - read}
    size = len(task.rows)
    for k, start in enumerate(range(0, max(size, 1), task.piece_bodies)):
        rows = slice(start, min(start + task.piece_bodies, size))
        part = totals.of_rows(rows)
        assert part.gaps is not None  # compute_totals always tallies the gaps
        piece = range(task.rows.start + rows.start, task.rows.start + rows.stop)
        bodies, by_period, outcome = partition_tables(
            config,
            _rows_of(inputs, rows),
            _facts_of(facts, rows),
            part,
            part.gaps.filled_per_body,
            task.first_piece + k,
            piece,
        )
        del part
        if k == 0:
            outcome.seconds = seconds
            outcome.weights_cached, outcome.repaired, outcome.empty = cached, repaired, empty
        yield PartitionDone(outcome, bodies, by_period, series_file if k == 0 else None)
        del bodies, by_period


def _rows_of(inputs: Inputs, rows: slice) -> Inputs:
    """``inputs`` with the partition's bodies ``rows`` only."""
    layer = inputs.bodies
    if rows == slice(0, len(layer.frame)):
        return inputs
    piece = dataclasses.replace(
        layer,
        frame=layer.frame.iloc[rows],
        flags=layer.flags[rows],
        stated_area_m2=None if layer.stated_area_m2 is None else layer.stated_area_m2[rows],
        field_area_m2=None if layer.field_area_m2 is None else layer.field_area_m2[rows],
    )
    return dataclasses.replace(inputs, layer=piece)


def _facts_of(facts: BodyFacts, rows: slice) -> BodyFacts:
    """``facts`` of the partition's bodies ``rows`` only."""
    cut = {
        f.name: getattr(facts, f.name)[rows]
        for f in dataclasses.fields(facts)
        if getattr(facts, f.name) is not None
    }
    return dataclasses.replace(facts, **cut)


def run_partition_on_worker(task: PartitionTask, staging: str) -> list[PartitionDone]:
    """:func:`run_partition` on a cluster worker: blocks in this worker's process only.

    Each piece's part files (and the series file) are written into ``staging``/_parts/
    (the output's staging directory, on storage the client sees), and only the outcomes go
    back to the client.
    """
    from lakeloss.io.parts import part_directory, write_part

    local = dataclasses.replace(task.config, compute=_local(task.config.compute))
    series_dir = part_directory(Path(staging), task.first_piece)
    series_dir.mkdir(parents=True, exist_ok=True)
    out = []
    for done in run_partition(dataclasses.replace(task, config=local), series_dir=series_dir):
        part_dir = part_directory(Path(staging), done.outcome.index)
        assert done.bodies is not None and done.by_period is not None
        write_part(part_dir, done.bodies, done.by_period)
        out.append(PartitionDone(done.outcome, series_file=done.series_file, part_dir=part_dir))
        del done
        release_memory()
    return out


def release_memory() -> None:
    """Hand memory freed by a finished partition back to the operating system.

    glibc keeps freed blocks in its per-thread arenas, and Arrow's allocator (the part files
    and GeoParquet go through it) keeps its own, so a process that has computed one
    partition would otherwise keep that partition's peak as its resident size; without
    glibc only Arrow's is released.
    """
    import pyarrow

    gc.collect()  # arrays held in reference cycles would wait for a full collection
    pyarrow.default_memory_pool().release_unused()
    try:
        ctypes.CDLL("libc.so.6").malloc_trim(0)
    except (OSError, AttributeError):
        pass


def _local(compute: ComputeConfig) -> ComputeConfig:
    """The compute settings of a worker's own partition: no cluster of its own."""
    return dataclasses.replace(compute, workers=0, scheduler=None)


# --------------------------------------------------------------------------- weights


def default_cache_dir() -> Path:
    """Where zonal weights are cached: $LAKELOSS_CACHE_DIR, else the user cache directory."""
    if os.environ.get("LAKELOSS_CACHE_DIR"):
        return Path(os.environ["LAKELOSS_CACHE_DIR"])
    root = os.environ.get("XDG_CACHE_HOME")
    return (Path(root) if root else Path.home() / ".cache") / "lakeloss"


def build_weights(
    config: RunConfig,
    inputs: Inputs,
    *,
    bounds: tuple[float, float, float, float] | None = None,
) -> tuple[dict[str, ZonalWeights], bool]:
    """One weight matrix per distinct climate grid for ``inputs.layer``, cached.

    ``bounds`` are the whole layer's (:attr:`lakeloss.io.vector.LayerSurvey.bounds`): with
    them a partition's weights are those its bodies get in a build of the whole layer
    (the equal-area projection is centred on the layer, not on the partition), so results do
    not depend on the partitions; they enter the cache key. Also says whether every matrix
    came from the cache.
    """
    cache = WeightsCache(config.compute.cache_dir or default_cache_dir())
    layer = inputs.bodies
    frame = layer.frame
    out: dict[str, ZonalWeights] = {}
    geometry = geometry_digest(frame)  # every vertex once, whatever the number of grids
    keys = {
        key: layer_key(frame, grid, geometry=geometry, bounds=bounds)
        for key, grid in inputs.grids.items()
    }
    missing = [key for key in inputs.grids if not cache.path_for(keys[key]).exists()]
    builder = functools.partial(
        partition.build_weights_in_blocks, bounds=bounds, require_overlap=bounds is None
    )
    for key, grid in inputs.grids.items():
        out[key], _ = cache.get_or_build(frame, grid, builder=builder, key=keys[key])
    if layer.stated_area_m2 is not None and layer.field_area_m2 is not None:
        # the cache keeps geometry only; the stated areas join every run afresh
        stated, field = layer.stated_area_m2, layer.field_area_m2
        out = {key: w.with_stated_areas(stated, field) for key, w in out.items()}
    return out, not missing


# --------------------------------------------------------------------------- extract + evaporate


def block_context(
    config: RunConfig,
    inputs: Inputs,
    keep_series: bool = False,
    body_count: np.ndarray | None = None,
) -> BlockContext:
    return BlockContext(
        fields=inputs.fields,
        field_grid=dict(inputs.field_grid),
        methods=config.method.all,
        primary=config.method.name,
        parameters=dict(config.parameters),
        day_of_year=inputs.axis.day_of_year,
        days=inputs.axis.days,
        period_index=inputs.periods.index,
        keep_series=keep_series,
        body_count=body_count,
        max_gap_steps=gap_limit(config, inputs.axis),
        clip_negative=config.clip_negative,
    )


def gap_limit(config: RunConfig, axis: timeaxis.TimeAxis) -> int:
    """Longest climate gap filled by interpolation [step]: ``[checks] max_gap_steps``, or
    the default for the time step (:data:`lakeloss.gaps.DEFAULT_LIMIT`)."""
    if config.max_gap_steps is not None:
        return config.max_gap_steps
    return DEFAULT_LIMIT[axis.step]


def compute_totals(
    config: RunConfig,
    inputs: Inputs,
    weights: Mapping[str, ZonalWeights],
    facts: BodyFacts,
    bar: ProgressBar | None = None,
    series_sink: SeriesSink | None = None,
) -> GroupTotals:
    """Run every block in time order and merge the results.

    ``bar`` is advanced by the steps of each block done.

    The blocks are computed for one representative of each group of bodies with identical
    inputs (:func:`lakeloss.grouping.group_bodies`); :meth:`GroupTotals.of_rows` copies the
    sums to the members, a run of rows at a time.
    """
    from lakeloss.timeblocks import run_blocks

    static = facts.physics_inputs()
    groups = group_bodies(weights, static, inputs_used(config.method.all))
    context = block_context(config, inputs, series_sink is not None, groups.count)
    n_steps = len(inputs.axis.days)
    totals = zero_totals(config.method.all, len(inputs.periods.starts), groups.n_groups, n_steps)
    steps = aligned(block_steps(config, inputs, groups.n_groups), read_steps(config))
    blocks = list(iter_blocks(len(inputs.axis.days), steps))
    shared = (groups.group_weights(weights), groups.group_values(static))
    state = initial_states(context, shared[1], groups.n_groups)
    for part in run_blocks(context, *shared, blocks, state):
        add_block(totals, part)
        if series_sink is not None and part.series is not None:
            series_sink(part.block, {k: groups.body_values(v) for k, v in part.series.items()})
        if bar is not None:
            bar.update(part.steps)
    return GroupTotals(totals.finish(), groups.member_of, groups.one_body_each)


@dataclass
class GroupTotals:
    """The period totals of a partition's groups of identical bodies, and who is in which."""

    groups: PeriodTotals
    member_of: np.ndarray
    one_body_each: bool

    def of_rows(self, rows: slice) -> PeriodTotals:
        """The totals of the partition's bodies ``rows`` (positions in the partition)."""
        if self.one_body_each and rows == slice(0, self.member_of.size):
            return self.groups
        return self.groups.for_members(self.member_of[rows])
