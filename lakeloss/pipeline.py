"""The batch run as named stages.

    load -> partitions (weights -> blocks of time -> tables, each) -> aggregate -> finish

``load`` surveys the water-body layer (no geometry) and opens the climate fields lazily;
``partitions`` cuts the layer into runs of rows and hands each to
:func:`lakeloss.execution.map_partitions`, which runs :mod:`lakeloss.partition_run` on it
(here, or on a cluster's workers): its own rows, weights and blocks of time steps, in order,
then its rows of the result tables, handed to a :class:`PartitionTables` sink as soon as it is
done (gathered in memory for :func:`run_stages`, written for :func:`run_to_directory`).
``aggregate`` merges what the partitions counted (warnings, gaps, run.json), and ``finish``
ranks the bodies over the whole run and writes the summaries. Neither the (time, y, x) cube,
nor the (time, water body) result, nor the per-body tables of the whole layer are ever held.

This module only wires the stages, in the order they run. What a run refuses is in
:mod:`lakeloss.checks`, what one partition does in :mod:`lakeloss.partition_run`, how the
partitions' outcomes merge in :mod:`lakeloss.partitions`, the streamed per-step series in
:mod:`lakeloss.series_stream`, and the warnings a run records in :mod:`lakeloss.run_warnings`.
"""

from __future__ import annotations

import concurrent.futures
import dataclasses
import logging
import time
import warnings
from collections.abc import Mapping, Sequence
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any, Protocol

import numpy as np
import pandas as pd

from lakeloss import timeaxis
from lakeloss.blocks import (  # noqa: F401 - compute_block & co. are part of this API
    BlockContext,
    BlockResult,
    FixedPointTotals,
    PeriodTotals,
    RunningTotals,
    add_block,
    compute_block,
    evaporate_block,
    extract_block,
    initial_states,
    zero_totals,
)
from lakeloss.checks import (
    check_attributes,
    check_methods,
    check_overlap,
    check_values,
    check_wind_grids,
    elevations,
    refuse_empty,
)
from lakeloss.config import ClimateInput, RunConfig, load_config
from lakeloss.errors import (
    ConfigError,
    ImplausibleValuesWarning,
    LakelossWarning,
    TimeAlignedWarning,
)
from lakeloss.execution import map_partitions
from lakeloss.gaps import merged_report as merged_gap_report
from lakeloss.inputs import Inputs
from lakeloss.io import climate as climate_io
from lakeloss.io import static as static_io
from lakeloss.io import vector as vector_io
from lakeloss.io.period_table import read_period_table
from lakeloss.io.run_record import inputs_provenance, run_record
from lakeloss.partition_run import (  # noqa: F401 - build_weights & co. are part of this API
    PIECE_BODIES,
    PartitionBars,
    PartitionDone,
    PartitionTask,
    block_context,
    build_weights,
    compute_totals,
    default_cache_dir,
    gap_limit,
    release_memory,
)
from lakeloss.partitions import (
    PartitionOutcome,
    merge_counts,
    partition_ranges,
    partition_size,
)
from lakeloss.progress import ProgressFactory
from lakeloss.run_warnings import gap_warnings, negative_warning, repair_warning, replay
from lakeloss.series_stream import SeriesSettings, open_series, temporary_directory
from lakeloss.sizing import read_steps
from lakeloss.zonal import GridSpec

if TYPE_CHECKING:
    import geopandas as gpd

    from lakeloss.results import RunResult

log = logging.getLogger(__name__)


def run_stages(
    config: str | Path | Mapping[str, Any] | RunConfig,
    *,
    progress: ProgressFactory | None = None,
    series: bool | None = None,
) -> RunResult:
    """Run every stage and return a :class:`lakeloss.results.RunResult` (nothing written).

    The tables of every partition are gathered in memory; :func:`run_to_directory` writes
    them as the partitions finish instead.
    """
    config = load_config(config)
    return _with_record(config, progress, series, GatheredTables())


def run_to_directory(
    config: str | Path | Mapping[str, Any] | RunConfig,
    target: str | Path | None = None,
    *,
    overwrite: bool = False,
    progress: ProgressFactory | None = None,
) -> RunResult:
    """Run every stage and write the outputs into ``target`` (default ``[output] dir``).

    Each partition's tables go to the writer as soon as the partition is done, so memory
    does not grow with the number of bodies; the returned result holds the summaries and
    the provenance, not the per-body tables.
    """
    config = load_config(config)
    destination = Path(target) if target is not None else config.output.dir
    return _with_record(config, progress, None, StreamedTables(config, destination, overwrite))


def _with_record(
    config: RunConfig,
    progress: ProgressFactory | None,
    series: bool | None,
    tables: PartitionTables,
) -> RunResult:
    # Hashing the inputs for run.json reads every file once more (GBs for a big run):
    # do it in the background, beside the stages; hashlib releases the GIL.
    with ThreadPoolExecutor(max_workers=1) as hasher, tables:
        record = hasher.submit(inputs_provenance, config)
        return _stages(config, progress, series, record, tables)


class PartitionTables(Protocol):
    """Where each partition's tables go: gathered in memory, or written as they come.

    Used as a context manager around the run: leaving it with an exception discards what
    was written.
    """

    def __enter__(self) -> PartitionTables: ...

    def __exit__(self, *exc: Any) -> None: ...

    def start(self, survey: vector_io.LayerSurvey) -> None:
        """Called once the layer is surveyed, before the first partition."""

    @property
    def staging(self) -> Path:
        """Where cluster workers write their partitions' part files."""
        ...

    def add(self, done: PartitionDone) -> None: ...

    def finish(
        self,
        config: RunConfig,
        rank: Any,
        outcomes: Sequence[PartitionOutcome],
        provenance: dict[str, Any],
        id_field: str,
    ) -> RunResult: ...


class GatheredTables:
    """Every partition's tables kept in memory, joined into one :class:`RunResult`."""

    def __init__(self) -> None:
        self.parts: list[tuple[gpd.GeoDataFrame, Any]] = []
        self.series_files: list[Path] = []
        self._staging: Path | None = None

    @property
    def staging(self) -> Path:
        """A temporary directory for the part files of cluster workers."""
        if self._staging is None:
            self._staging = temporary_directory()
        return self._staging

    def __enter__(self) -> GatheredTables:
        return self

    def __exit__(self, *exc: Any) -> None:
        return None

    def start(self, survey: vector_io.LayerSurvey) -> None:
        return None

    def add(self, done: PartitionDone) -> None:
        if done.part_dir is not None:
            from lakeloss.io.parts import read_part

            done.bodies, done.by_period = read_part(done.part_dir)
        assert done.bodies is not None and done.by_period is not None
        self.parts.append((done.bodies, done.by_period))
        if done.series_file is not None:
            self.series_files.append(done.series_file)

    def finish(
        self,
        config: RunConfig,
        rank: Any,
        outcomes: Sequence[PartitionOutcome],
        provenance: dict[str, Any],
        id_field: str,
    ) -> RunResult:
        from lakeloss.results import gathered

        series = None
        if len(self.series_files) == 1:
            series = open_series(self.series_files[0])
        elif self.series_files:
            from lakeloss.io.series_join import join_series

            joined = temporary_directory() / "series.nc"
            join_series(self.series_files, joined)
            series = open_series(joined)
        return gathered(config, self.parts, rank, outcomes, provenance, id_field, series)


class StreamedTables:
    """Each partition's tables written into the output's staging directory as it comes.

    A context manager around :class:`lakeloss.io.atomic.OutputDirectory`: the outputs
    appear in ``target`` only when the run finishes; a failure leaves the previous outputs
    as they were. A partition is written on a thread of its own while the next one is
    computed, so memory holds at most two partitions' tables, and the writes stay in
    partition order (each waits for the one before).
    """

    def __init__(self, config: RunConfig, target: Path, overwrite: bool) -> None:
        from lakeloss.io.atomic import OutputDirectory

        self.config = config
        self.directory = OutputDirectory(target, overwrite=overwrite)
        self.directory.check()
        self._staging: Path | None = None
        self._stream: Any = None
        self.series_files: list[Path] = []
        self._writer = ThreadPoolExecutor(max_workers=1, thread_name_prefix="lakeloss-writer")
        self._writing: Future[None] | None = None

    def __enter__(self) -> StreamedTables:
        self._staging = self.directory.__enter__()
        return self

    def __exit__(self, *exc: Any) -> None:
        try:
            if self._writing is not None and exc[0] is not None:
                # the run failed: let the write in flight end, its error is not the news
                concurrent.futures.wait([self._writing])
            else:
                self._wait()
        finally:
            self._writer.shutdown(wait=True)
            self.directory.__exit__(*exc)

    def _wait(self) -> None:
        """Wait for the partition being written; its error is raised here."""
        if self._writing is not None:
            writing, self._writing = self._writing, None
            writing.result()

    @property
    def staging(self) -> Path:
        assert self._staging is not None  # entered
        return self._staging

    def start(self, survey: vector_io.LayerSurvey) -> None:
        from lakeloss.io.gpkg import LayerGeometry
        from lakeloss.io.write_run import OutputStream
        from lakeloss.results import field_info

        self._stream = OutputStream(
            self.staging,
            id_field=survey.id_field,
            field_info=field_info(self.config, survey.id_field),
            layer_geometry=LayerGeometry.of_types(survey.geometry_types),
            layer_format=self.config.output.format,
        )

    def add(self, done: PartitionDone) -> None:
        self._wait()
        self._writing = self._writer.submit(self._write, done)

    def _write(self, done: PartitionDone) -> None:
        from lakeloss.io.parts import part_directory, write_part

        if done.part_dir is None and self.config.output.format == "geoparquet":
            # the GeoParquet dataset is made of the part files
            assert done.bodies is not None and done.by_period is not None
            done.part_dir = part_directory(self.staging, done.outcome.index)
            write_part(done.part_dir, done.bodies, done.by_period)
            done.bodies = done.by_period = None  # read back from the part files below
        if done.part_dir is not None:
            self._stream.add_part(done.part_dir)
        else:
            assert done.bodies is not None and done.by_period is not None
            self._stream.add_tables(done.bodies, done.by_period)
        if done.series_file is not None:
            self.series_files.append(done.series_file)
        done.bodies = done.by_period = None
        release_memory()  # this thread's freed memory, too

    def finish(
        self,
        config: RunConfig,
        rank: Any,
        outcomes: Sequence[PartitionOutcome],
        provenance: dict[str, Any],
        id_field: str,
    ) -> RunResult:
        from lakeloss.results import summaries, summary_result

        self._wait()
        summary_period, summary_group = summaries(config, outcomes)
        series = None
        if self.series_files:
            from lakeloss.io.series_join import join_series

            join_series(self.series_files, self.staging / "series.nc")
        self._stream.finish(
            loss_rank=rank,
            summary_by_period=summary_period,
            summary_by_group=summary_group,
            series=series,
            provenance=provenance,
        )
        return summary_result(config, summary_period, summary_group, outcomes, provenance, id_field)


def _stages(
    config: RunConfig,
    progress: ProgressFactory | None,
    series: bool | None,
    record: Future[list[dict[str, Any]]],
    tables: PartitionTables,
) -> RunResult:
    from lakeloss.results import loss_rank

    timer = Timer()
    with timer.stage("load"):
        inputs = load_inputs(config)
        check_overlap(inputs)
        value_warnings = check_values(config, inputs)
    # load_inputs and check_values record their warnings for run.json; show them as well.
    replay(inputs.recorded)
    for reason in value_warnings:
        warnings.warn(reason, ImplausibleValuesWarning, stacklevel=2)
    keep_series = config.output.series if series is None else series
    settings = SeriesSettings.of(config, inputs) if keep_series else None
    n = inputs.n_waterbodies
    size = partition_size(config.compute.partition_bodies, n, config.compute.workers)
    ranges = partition_ranges(n, size)
    piece = min(size, PIECE_BODIES)
    pieces_each = -(-size // piece)
    outcomes: list[PartitionOutcome] = []
    bars = PartitionBars.open(progress, len(ranges), len(inputs.axis.days))
    assert inputs.survey is not None  # load_inputs surveys the layer
    tables.start(inputs.survey)
    client_inputs = dataclasses.replace(inputs, survey=_for_workers(inputs.survey))
    tasks = (
        PartitionTask(
            config,
            client_inputs,
            index,
            rows,
            settings,
            of=len(ranges),
            piece_bodies=piece,
            first_piece=index * pieces_each,
        )  # fmt: skip
        for index, rows in enumerate(ranges)
    )
    with timer.stage("evaporate"):
        on_cluster = bool(config.compute.workers or config.compute.scheduler)
        staging = tables.staging if on_cluster else None
        for done in map_partitions(config.compute, tasks, bars, staging):
            tables.add(done)
            outcomes.append(done.outcome)
            del done
            release_memory()
    bars.close()
    for stage in ("weights", "evaporate"):
        # the partitions' own stage times; "evaporate" above also counted their weights
        timer.seconds[stage] = sum(o.seconds.get(stage, 0.0) for o in outcomes)
    weight_warnings = repair_warning(
        sum(o.repaired for o in outcomes), sum(o.empty for o in outcomes)
    )
    cached = all(o.weights_cached for o in outcomes)
    with timer.stage("aggregate"):
        run_warnings = [*inputs.warnings, *value_warnings, *weight_warnings]
        negatives: dict[str, int] = {}
        for outcome in outcomes:
            for name, count in outcome.negatives.items():
                negatives[name] = negatives.get(name, 0) + count
        message = negative_warning(config, negatives)
        if message:
            run_warnings.append(message)
        gaps = merged_gap_report(
            [o.gaps for o in outcomes], inputs.axis.starts, gap_limit(config, inputs.axis)
        )
        run_warnings += gap_warnings(gaps)
        counts = merge_counts([o.counts for o in outcomes], outcomes[0].counts)
        provenance = run_record(
            config,
            time_axis=inputs.axis.describe(),
            counts=counts,
            gaps=gaps,
            weights_cached=cached,
            run_warnings=run_warnings,
            timings=timer.seconds,
            inputs_record=record.result(),
        )
        provenance["partitions"] = {"count": len(ranges), "bodies_each": size}
    for note in provenance["notes"]:
        log.warning(note)
    refuse_empty(provenance["counts"])
    volume = np.concatenate([o.volume for o in outcomes]) if outcomes else np.zeros(0)
    assert inputs.survey is not None  # load_inputs surveys the layer
    rank = loss_rank(volume, pd.Series(inputs.survey.body_ids(0, n)))
    return tables.finish(config, rank, outcomes, provenance, inputs.survey.id_field)


def _for_workers(survey: vector_io.LayerSurvey | None) -> vector_io.LayerSurvey | None:
    """The survey a partition needs (without the ids, which only the rank reads)."""
    return None if survey is None else survey.without_ids()


# --------------------------------------------------------------------------- load


def _open_field(item: ClimateInput, chunk_steps: int) -> climate_io.ClimateField:
    # config.py refuses a NetCDF or Zarr entry without variable.
    if item.format in ("netcdf", "zarr"):
        assert item.variable is not None
        return climate_io.open_netcdf(
            item.path, item.variable, item.key, units=item.units, crs=item.crs,
            chunk_steps=chunk_steps,
        )  # fmt: skip
    return climate_io.open_geotiff_stack(
        item.path,
        item.key,
        start=item.start,
        step=item.step,
        units=item.units,
        calendar=item.calendar,
        crs=item.crs,
        end=item.end,
        chunk_steps=chunk_steps,
        date_pattern=item.date_pattern,
    )


def _grid_of(item: climate_io.ClimateField) -> GridSpec:
    if item.transform is not None:
        return GridSpec.from_transform(item.transform, len(item.x), len(item.y), item.crs)
    return GridSpec.from_centres(item.x, item.y, item.crs)


def load_inputs(config: RunConfig, whole_layer: bool = False) -> Inputs:
    """Survey the layer, open every climate field lazily, and join their time axes.

    The layer is surveyed without its geometry (:func:`lakeloss.io.vector.survey_waterbodies`);
    a run's partitions read their own rows. ``whole_layer`` also reads every row
    (``lakeloss check``, and callers that build the weights of the whole layer).
    """
    check_methods(config)
    wb = config.waterbodies
    survey = vector_io.survey_waterbodies(
        wb.path,
        layer=wb.layer,
        id_field=wb.id_field,
        crs=wb.crs,
        area_field=wb.area_field,
        area_units=wb.area_units,
        area_source=wb.area_source,
    )
    check_attributes(config, survey.columns)
    layer = vector_io.read_waterbody_rows(survey, 0, survey.n_rows) if whole_layer else None
    if layer is not None and config.waterbodies.elevation_field:
        elevations(layer.frame, config.waterbodies.elevation_field)  # refuse before computing
    caught: list[str] = []
    fields: dict[str, climate_io.ClimateField] = {}
    with warnings.catch_warnings(record=True) as seen:
        warnings.simplefilter("always", LakelossWarning)
        for item in config.climate:
            if item.quantity == "elevation":
                continue
            fields[item.quantity] = _open_field(item, read_steps(config))
        axes = {q: timeaxis.from_times(f.times, f.calendar) for q, f in fields.items()}
        axis = timeaxis.require_identical(axes)
        note = timeaxis.alignment_note(axes)
        if note:
            warnings.warn(note, TimeAlignedWarning, stacklevel=2)
    recorded = [w for w in seen if issubclass(w.category, LakelossWarning)]
    caught.extend(str(w.message) for w in recorded)
    if config.output.period == "day" and axis.step == "month":
        raise ConfigError("[output].period = 'day' needs daily climate; these inputs are monthly")
    axis, fields = _in_window(config, axis, fields)
    periods = _periods(config, axis)
    grids: dict[str, GridSpec] = {}
    field_grid: dict[str, str] = {}
    for quantity, opened in fields.items():
        grid = _grid_of(opened)
        grids.setdefault(grid.key(), grid)
        field_grid[quantity] = grid.key()
    check_wind_grids(fields, field_grid)
    static_fields = {}
    for item in config.climate:
        if item.quantity == "elevation":
            assert isinstance(item.path, Path)  # the configuration allows one raster
            raster = static_io.read_static_raster(
                item.path, "elevation", variable=item.variable, units=item.units, crs=item.crs
            )
            height, width = raster.shape
            grid = GridSpec.from_transform(raster.transform, width, height, raster.crs)
            grids.setdefault(grid.key(), grid)
            static_fields["elevation"] = (raster, grid.key())
    return Inputs(
        layer=layer,
        survey=survey,
        fields=fields,
        axis=axis,
        periods=periods,
        grids=grids,
        field_grid=field_grid,
        warnings=caught,
        static_fields=static_fields,
        recorded=recorded,
    )


def _in_window(
    config: RunConfig, axis: timeaxis.TimeAxis, fields: dict[str, climate_io.ClimateField]
) -> tuple[timeaxis.TimeAxis, dict[str, climate_io.ClimateField]]:
    """The axis and the lazy fields cut to ``[time] start``..``end``: only those steps are
    ever read (gap filling too sees only the window's steps)."""
    window = config.time
    if window.start is None and window.end is None:
        return axis, fields
    steps = timeaxis.window(axis, window.start, window.end)
    if steps == slice(0, len(axis)):
        return axis, fields
    cut = {
        q: dataclasses.replace(f, data=f.data.isel(time=steps), times=f.times[steps])
        for q, f in fields.items()
    }
    return axis.take(steps), cut


def _periods(config: RunConfig, axis: timeaxis.TimeAxis) -> timeaxis.Periods:
    output = config.output
    table = None
    if output.period_table is not None:
        table = read_period_table(output.period_table)
    return timeaxis.periods(
        axis,
        output.period,
        year_start_month=output.year_start_month,
        table=table,
        table_name=f"period table '{output.period_table}'",
    )


@dataclass
class Timer:
    """Wall time of each named stage, in seconds, for run.json."""

    seconds: dict[str, float] = field(default_factory=dict)

    def stage(self, name: str) -> _Stage:
        return _Stage(self, name)


class _Stage:
    def __init__(self, timer: Timer, name: str) -> None:
        self.timer, self.name = timer, name

    def __enter__(self) -> None:
        self.start = time.perf_counter()
        log.info("stage %s ...", self.name)

    def __exit__(self, *exc: object) -> None:
        elapsed = time.perf_counter() - self.start
        self.timer.seconds[self.name] = self.timer.seconds.get(self.name, 0.0) + elapsed
