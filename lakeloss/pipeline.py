"""The batch run as named stages.

    load -> weights -> extract -> evaporate -> aggregate -> (write, in results.py)

``load`` asks ``io/`` for the water-body layer and lazy climate fields; ``weights`` builds
(or loads from the cache) one sparse weight matrix per distinct climate grid; ``extract`` and
``evaporate`` run block by block along time: each block of every variable is read, turned
into (time, water body) area-weighted means, fed to the physics methods and summed into the
reporting periods, so neither the (time, y, x) cube nor the (time, water body) result is ever
held whole. ``aggregate`` turns the period sums into the result tables.
"""

from __future__ import annotations

import atexit
import contextlib
import functools
import logging
import os
import shutil
import tempfile
import threading
import time
import warnings
from collections.abc import Callable, Iterator, Mapping
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyproj

from lakeloss import timeaxis
from lakeloss.config import RunConfig, load_config
from lakeloss.errors import (
    ConfigError,
    GeometryError,
    GeometryRepairedWarning,
    GridError,
    ImplausibleValuesWarning,
    LakelossWarning,
    MissingInputError,
    ValuesAdjustedWarning,
)
from lakeloss.io import climate as climate_io
from lakeloss.io import static as static_io
from lakeloss.io import vector as vector_io
from lakeloss.physics import registry
from lakeloss.zonal import GridSpec, WeightsCache, ZonalWeights, layer_key, partition

log = logging.getLogger(__name__)

# Bytes of (time, water body) float64 working arrays held per step of a block: the climate
# means, their valid fractions, the physics intermediates and one rate per method. A rough
# but deliberately generous count, used to size blocks.
_WORKING_ARRAYS = 24
_BLOCK_BUDGET_BYTES = 1.5e9
# Longer blocks make the zonal product slower per step (its time series are transposed and
# multiplied as one wide matrix): 16 steps ran a year of 10^5 bodies 35 % faster than 55
# (benchmarks/README.md, "End to end"), and still amortise the per-block preparation.
_MAX_BLOCK_STEPS = 16


@dataclass
class Inputs:
    """What the load stage found: the layer, the lazy climate fields and the time axis."""

    layer: vector_io.WaterBodyLayer
    fields: dict[str, climate_io.ClimateField]
    axis: timeaxis.TimeAxis
    periods: timeaxis.Periods
    grids: dict[str, GridSpec]
    field_grid: dict[str, str]
    warnings: list[str] = field(default_factory=list)
    static_fields: dict[str, tuple[Any, str]] = field(default_factory=dict)
    # Typed Any: inside this class `warnings` names the field above, not the module.
    recorded: list[Any] = field(default_factory=list)
    """The lakeloss ``warnings.WarningMessage`` objects behind ``warnings``, kept to re-issue
    with their categories."""

    @property
    def n_waterbodies(self) -> int:
        return len(self.layer.frame)


@dataclass
class PeriodSums:
    """Running sums per (period, water body), accumulated block by block."""

    depth: dict[str, np.ndarray]
    precip: np.ndarray
    valid_steps: np.ndarray
    coverage_sum: np.ndarray
    negatives: dict[str, int]
    negatives_per_body: np.ndarray
    steps: int = 0


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


# --------------------------------------------------------------------------- load


def _open_field(item: Any, step_hint: str | None = None) -> climate_io.ClimateField:
    if item.format == "netcdf":
        return climate_io.open_netcdf(
            item.path, item.variable, item.key, units=item.units, crs=item.crs
        )
    return climate_io.open_geotiff_stack(
        item.path,
        item.key,
        start=item.start,
        step=item.step,
        units=item.units,
        calendar=item.calendar,
        crs=item.crs,
        end=item.end,
    )


def _check_methods(config: RunConfig) -> None:
    available = set(config.quantities) | {"latitude", "day_of_year", "area_m2", "elevation"}
    if {"eastward_wind", "northward_wind"} <= available:
        available.add("wind_speed")
    for name in config.method.all:
        missing = registry.missing_inputs(name, available)
        if missing:
            given = ", ".join(sorted(config.quantities)) or "nothing"
            raise MissingInputError(
                f"method '{name}' needs {'; '.join(missing)} in [climate], but the "
                f"configuration gives only: {given}"
            )


def _grid_of(item: climate_io.ClimateField) -> GridSpec:
    if item.transform is not None:
        return GridSpec.from_transform(item.transform, len(item.x), len(item.y), item.crs)
    return GridSpec.from_centres(item.x, item.y, item.crs)


def load_inputs(config: RunConfig) -> Inputs:
    """Read the layer, open every climate field lazily, and join their time axes."""
    _check_methods(config)
    wb = config.waterbodies
    layer = vector_io.read_waterbodies(wb.path, layer=wb.layer, id_field=wb.id_field, crs=wb.crs)
    _check_attributes(config, layer)
    caught: list[str] = []
    fields: dict[str, climate_io.ClimateField] = {}
    with warnings.catch_warnings(record=True) as seen:
        warnings.simplefilter("always", LakelossWarning)
        for item in config.climate:
            if item.quantity == "elevation":
                continue
            fields[item.quantity] = _open_field(item)
    recorded = [w for w in seen if issubclass(w.category, LakelossWarning)]
    caught.extend(str(w.message) for w in recorded)
    axis = timeaxis.require_identical(
        {q: timeaxis.from_times(f.times, f.calendar) for q, f in fields.items()}
    )
    if config.output.period == "day" and axis.step == "month":
        raise ConfigError("[output].period = 'day' needs daily climate; these inputs are monthly")
    grids: dict[str, GridSpec] = {}
    field_grid: dict[str, str] = {}
    for quantity, opened in fields.items():
        grid = _grid_of(opened)
        grids.setdefault(grid.key(), grid)
        field_grid[quantity] = grid.key()
    _check_wind_grids(fields, field_grid)
    static_fields = {}
    for item in config.climate:
        if item.quantity == "elevation":
            raster = static_io.read_static_raster(
                item.path, "elevation", variable=item.variable, units=item.units, crs=item.crs
            )
            height, width = raster.shape
            grid = GridSpec.from_transform(raster.transform, width, height, raster.crs)
            grids.setdefault(grid.key(), grid)
            static_fields["elevation"] = (raster, grid.key())
    return Inputs(
        layer=layer,
        fields=fields,
        axis=axis,
        periods=timeaxis.periods(axis, config.output.period),
        grids=grids,
        field_grid=field_grid,
        warnings=caught,
        static_fields=static_fields,
        recorded=recorded,
    )


def _check_attributes(config: RunConfig, layer: vector_io.WaterBodyLayer) -> None:
    columns = list(layer.frame.columns)
    wanted = list(config.waterbodies.group_by)
    if config.waterbodies.elevation_field:
        wanted.append(config.waterbodies.elevation_field)
    for name in wanted:
        if name not in columns:
            raise ConfigError(
                f"[waterbodies] names attribute '{name}', which the layer does not have "
                f"(attributes: {', '.join(c for c in columns if c != 'geometry')})"
            )
    if config.waterbodies.elevation_field:
        _elevations(layer.frame, config.waterbodies.elevation_field)  # refuse before computing


def _elevations(frame: Any, field_name: str) -> np.ndarray:
    """The elevation attribute as numbers [m]; empty or non-numeric values are refused."""
    values = pd.to_numeric(frame[field_name], errors="coerce").to_numpy(dtype=float)
    if not np.isfinite(values).all():
        raise ConfigError(
            f"elevation attribute '{field_name}' has {int((~np.isfinite(values)).sum())} "
            "empty or non-numeric values; fill them or use [parameters] elevation_m"
        )
    return values


def _check_wind_grids(fields: Mapping[str, Any], field_grid: Mapping[str, str]) -> None:
    if "wind_speed" not in fields and {"eastward_wind", "northward_wind"} <= set(fields):
        if field_grid["eastward_wind"] != field_grid["northward_wind"]:
            raise GridError("eastward_wind and northward_wind must be on the same grid")


def check_overlap(inputs: Inputs) -> None:
    """Refuse a layer whose bounding box misses a climate grid entirely, or has no area.

    Run by ``check`` and by the run itself, before the weights are built, so both refuse
    with the same message.
    """
    frame = inputs.layer.frame
    nonempty = frame.geometry[~frame.geometry.is_empty]
    if nonempty.empty:
        raise GeometryError(
            f"all {len(frame)} water-body geometries are empty; expected at least one "
            "polygon with area; check the layer"
        )
    bounds = nonempty.total_bounds
    for grid in inputs.grids.values():
        transformer = pyproj.Transformer.from_crs(frame.crs, grid.crs, always_xy=True)
        left, bottom, right, top = (float(v) for v in bounds)
        x0, y0, x1, y1 = transformer.transform_bounds(left, bottom, right, top, densify_pts=21)
        gx0, gx1 = float(np.min(grid.x_edges)), float(np.max(grid.x_edges))
        gy0, gy1 = float(np.min(grid.y_edges)), float(np.max(grid.y_edges))
        if grid.is_geographic and gx1 > 180.0 and x1 < 0.0:
            x0, x1 = x0 + 360.0, x1 + 360.0
        if x1 < gx0 or x0 > gx1 or y1 < gy0 or y0 > gy1:
            raise GridError(
                f"the water-body layer (bounds {x0:.4f}, {y0:.4f}, {x1:.4f}, {y1:.4f} in the "
                f"grid CRS) does not overlap the climate grid ({gx0:.4f}, {gy0:.4f}, "
                f"{gx1:.4f}, {gy1:.4f}); check both CRSs and the file paths"
            )


def check_values(config: RunConfig, inputs: Inputs) -> list[str]:
    """Scan every climate field for values that contradict their units.

    Strict runs raise :class:`ImplausibleValuesError`; lenient runs return the reasons,
    which become warnings in run.json.
    """
    reasons = []
    for item in inputs.fields.values():
        reason = climate_io.check_values(item, strict=config.strict)
        if reason:
            reasons.append(reason)
    return reasons


# --------------------------------------------------------------------------- weights


def default_cache_dir() -> Path:
    """Where zonal weights are cached: $LAKELOSS_CACHE_DIR, else the user cache directory."""
    if os.environ.get("LAKELOSS_CACHE_DIR"):
        return Path(os.environ["LAKELOSS_CACHE_DIR"])
    root = os.environ.get("XDG_CACHE_HOME")
    return (Path(root) if root else Path.home() / ".cache") / "lakeloss"


def build_weights(config: RunConfig, inputs: Inputs) -> tuple[dict[str, ZonalWeights], bool]:
    """One weight matrix per distinct climate grid, from the cache where possible."""
    from lakeloss.execution import cluster_map

    cache = WeightsCache(config.compute.cache_dir or default_cache_dir())
    frame = inputs.layer.frame
    out: dict[str, ZonalWeights] = {}
    missing = [
        key
        for key, grid in inputs.grids.items()
        if not cache.path_for(layer_key(frame, grid)).exists()
    ]
    # Large layers are built in spatial blocks, on the cluster when one is configured; the
    # cluster is only started when there is something to build.
    use_cluster = bool(missing) and len(frame) > partition.BLOCK_SIZE
    with cluster_map(config.compute) if use_cluster else contextlib.nullcontext() as mapper:
        builder = functools.partial(partition.build_weights_in_blocks, map_blocks=mapper)
        for key, grid in inputs.grids.items():
            out[key], _ = cache.get_or_build(frame, grid, builder=builder)
    return out, not missing


# --------------------------------------------------------------------------- extract + evaporate


def block_steps(config: RunConfig, inputs: Inputs) -> int:
    """Time steps per block: from the config, or sized so a block fits the memory budget."""
    if config.compute.chunk_steps:
        return config.compute.chunk_steps
    n = max(inputs.n_waterbodies, 1)
    cells = sum(int(np.prod(g.shape)) for g in inputs.grids.values())
    per_step = 8.0 * (
        n * (_WORKING_ARRAYS + 2 * len(config.method.all)) + cells * len(inputs.fields)
    )
    return int(np.clip(_BLOCK_BUDGET_BYTES // per_step, 1, _MAX_BLOCK_STEPS))


def iter_blocks(n_steps: int, steps: int) -> Iterator[slice]:
    for start in range(0, n_steps, steps):
        yield slice(start, min(start + steps, n_steps))


def _static_inputs(
    config: RunConfig, inputs: Inputs, weights: Mapping[str, ZonalWeights]
) -> dict[str, np.ndarray]:
    """Per-water-body inputs of the physics: latitude, area and elevation, shaped (1, n)."""
    first = next(iter(weights.values()))
    static = {
        "latitude": first.centroid_lat[np.newaxis, :],
        "area_m2": first.polygon_area_m2[np.newaxis, :],
    }
    field_name = config.waterbodies.elevation_field
    if field_name:
        static["elevation"] = _elevations(inputs.layer.frame, field_name)[np.newaxis, :]
    if "elevation" in inputs.static_fields:
        raster, key = inputs.static_fields["elevation"]
        mean, _ = weights[key].apply(raster.values[np.newaxis])
        # Bodies off the elevation raster fall back to the configured constant.
        fallback = float(config.parameters.get("elevation_m", 0.0))  # type: ignore[arg-type]
        static["elevation"] = np.where(np.isfinite(mean), mean, fallback)
    return static


@dataclass(frozen=True)
class BlockContext:
    """What one block's computation needs: light enough to send to a cluster worker.

    The lazy climate fields travel by reference (xarray reopens the files on the worker);
    the weights and the per-body inputs are passed separately so a cluster can scatter them
    once.
    """

    fields: Mapping[str, Any]
    field_grid: Mapping[str, str]
    methods: tuple[str, ...]
    primary: str
    parameters: Mapping[str, object]
    day_of_year: np.ndarray
    days: np.ndarray
    period_index: np.ndarray
    keep_series: bool = False


@dataclass
class BlockResult:
    """One block's contribution to the period sums (only the periods it touches)."""

    block: slice
    periods: np.ndarray
    depth: dict[str, FixedSums]
    precip: FixedSums | None
    valid_steps: np.ndarray
    coverage_sum: np.ndarray
    negatives: dict[str, int]
    negatives_per_body: np.ndarray
    steps: int
    series: dict[str, np.ndarray] | None = None


def block_context(config: RunConfig, inputs: Inputs, keep_series: bool = False) -> BlockContext:
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
    )


def extract_block(
    context: BlockContext, weights: Mapping[str, ZonalWeights], block: slice
) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """Area-weighted means of every variable for one block of time steps.

    Returns the means, shape (time, water body), by glossary name, and the smallest
    valid-area fraction over the variables (the share of each body with valid climate).
    """
    means: dict[str, np.ndarray] = {}
    valid_min: np.ndarray | None = None
    by_grid: dict[str, list[tuple[str, np.ndarray]]] = {}
    for quantity, (values, grid_key) in _grid_values(context, block).items():
        by_grid.setdefault(grid_key, []).append((quantity, values))
    for grid_key, items in by_grid.items():
        # One product per grid for all its variables, stacked along time: preparing the
        # weights is a fixed cost per call, large at 10^6 bodies. Each output row is
        # computed exactly as it would be alone.
        stacked = np.concatenate([v for _, v in items], axis=0)
        buffer = _thread_buffer(grid_key, (weights[grid_key].n_waterbodies, stacked.shape[0]))
        mean, valid = weights[grid_key].apply(stacked, out=buffer)
        steps = items[0][1].shape[0]
        for k, (quantity, _) in enumerate(items):
            means[quantity] = mean[k * steps : (k + 1) * steps]
            rows = valid[k * steps : (k + 1) * steps]
            valid_min = rows if valid_min is None else np.minimum(valid_min, rows)
    assert valid_min is not None  # load_inputs guarantees at least one field
    return means, valid_min


_BUFFERS = threading.local()


def _thread_buffer(grid_key: str, shape: tuple[int, int]) -> np.ndarray:
    """This thread's reusable (water body, step) buffer for the zonal means of a block.

    A block's means are used only while that block is computed, on the thread computing
    it, so the next block on the same thread may overwrite them; reusing the memory avoids
    faulting in hundreds of MB of fresh pages per block at 10^6 water bodies.
    """
    store = _BUFFERS.__dict__.setdefault("arrays", {})
    buffer = store.get(grid_key)
    if buffer is None or buffer.shape != shape:
        buffer = store[grid_key] = np.empty(shape)
    return buffer


def _grid_values(context: BlockContext, block: slice) -> dict[str, tuple[np.ndarray, str]]:
    # The synchronous scheduler: the block is already the unit of parallel work, and a
    # cluster worker must not hand its reads back to the cluster.
    values = {
        q: (
            np.asarray(
                f.data.isel(time=block).compute(scheduler="synchronous").values, dtype=np.float64
            ),
            context.field_grid[q],
        )
        for q, f in context.fields.items()
    }
    if "wind_speed" not in values and {"eastward_wind", "northward_wind"} <= set(values):
        # Speed from components on the grid, before averaging: the mean of the speed is
        # what the wind functions want, not the speed of the mean vector.
        east, key = values.pop("eastward_wind")
        north, _ = values.pop("northward_wind")
        values["wind_speed"] = (np.hypot(east, north), key)
    return values


def evaporate_block(
    context: BlockContext,
    means: Mapping[str, np.ndarray],
    static: Mapping[str, np.ndarray],
    day_of_year: np.ndarray,
) -> dict[str, np.ndarray]:
    """Evaporation rate [mm day-1] of every configured method for one block."""
    physics_inputs: dict[str, Any] = {**means, **static, "day_of_year": day_of_year[:, np.newaxis]}
    physics_inputs.pop("precipitation", None)
    params = {k: v for k, v in context.parameters.items() if k != "clip_negative"}
    shape = next(iter(means.values())).shape
    rates = {}
    for name in context.methods:
        method_params = {k: v for k, v in params.items() if k in registry.get(name).parameters}
        with np.errstate(invalid="ignore", divide="ignore"):
            rate = np.asarray(
                registry.evaporate(name, physics_inputs, method_params), dtype=np.float64
            )
        rates[name] = np.broadcast_to(rate, shape)
    return rates


def _segment_sums(values: np.ndarray, period_index: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Sums over runs of equal period index along axis 0 (the index is non-decreasing)."""
    starts = np.flatnonzero(np.r_[True, period_index[1:] != period_index[:-1]])
    return period_index[starts], np.add.reduceat(values, starts, axis=0)


# Amounts are summed in fixed point: each per-step value is rounded to a multiple of 2**-32
# (2.3e-10 mm, or of a valid-area fraction) and added as int64. Integer addition is exact and
# associative, so the totals are bit-identical however the time axis is cut into blocks and
# whichever scheduler ran them; float sums would differ in the last bits. Range: 2.1e9 mm.
_FIXED_POINT_SCALE = 2.0**32


def _to_fixed(values: np.ndarray) -> np.ndarray:
    return np.rint(np.asarray(values, dtype=np.float64) * _FIXED_POINT_SCALE).astype(np.int64)


@dataclass
class FixedSums:
    """Sums per (period, water body) in fixed point, and where a missing value was met."""

    total: np.ndarray
    missing: np.ndarray

    @classmethod
    def zeros(cls, n_periods: int, n: int) -> FixedSums:
        return cls(np.zeros((n_periods, n), dtype=np.int64), np.zeros((n_periods, n), bool))

    @classmethod
    def of_segments(
        cls, values: np.ndarray, period_index: np.ndarray
    ) -> tuple[np.ndarray, FixedSums]:
        """The periods a block touches and its sums over each (NaN makes a sum missing)."""
        missing = ~np.isfinite(values)
        periods, total = _segment_sums(_to_fixed(np.where(missing, 0.0, values)), period_index)
        starts = np.flatnonzero(np.r_[True, period_index[1:] != period_index[:-1]])
        return periods, cls(total, np.logical_or.reduceat(missing, starts, axis=0))

    def add(self, periods: np.ndarray, part: FixedSums) -> None:
        self.total[periods] += part.total
        self.missing[periods] |= part.missing

    def value(self) -> np.ndarray:
        """The sums as float64, NaN where a missing value was met. [unit of the values]"""
        return np.where(self.missing, np.nan, self.total / _FIXED_POINT_SCALE)


def compute_block(
    context: BlockContext,
    weights: Mapping[str, ZonalWeights],
    static: Mapping[str, np.ndarray],
    block: slice,
) -> BlockResult:
    """Extract, evaporate and sum one block of time steps into its periods.

    A pure function of its arguments: the same block gives the same numbers wherever it
    runs, which is what makes local and cluster runs identical.
    """
    means, valid = extract_block(context, weights, block)
    rates = evaporate_block(context, means, static, context.day_of_year[block])
    days = context.days[block][:, None]
    index = context.period_index[block]
    clip = bool(context.parameters.get("clip_negative", True))
    depth, negatives = {}, {}
    negatives_per_body = np.zeros(valid.shape[1], dtype=np.int64)
    periods = np.empty(0, dtype=np.int64)
    for name, rate in rates.items():
        negative = rate < 0
        negatives[name] = int(negative.sum())
        if name == context.primary:
            negatives_per_body = negative.sum(axis=0)
        if clip and negatives[name]:
            rate = np.where(negative, 0.0, rate)
        periods, depth[name] = FixedSums.of_segments(rate * days, index)
    precip = means.get("precipitation")
    precip_sums = FixedSums.of_segments(precip * days, index)[1] if precip is not None else None
    finite = np.isfinite(rates[context.primary]).astype(np.int64)
    series = None
    if context.keep_series:
        series = {"evaporation_rate": np.asarray(rates[context.primary], dtype=np.float32)}
        if precip is not None:
            series["precipitation_rate"] = precip.astype(np.float32)
    return BlockResult(
        block=block,
        periods=periods,
        depth=depth,
        precip=precip_sums,
        valid_steps=_segment_sums(finite, index)[1],
        coverage_sum=_to_fixed(valid).sum(axis=0),
        negatives=negatives,
        negatives_per_body=negatives_per_body,
        steps=block.stop - block.start,
        series=series,
    )


@dataclass
class RunningSums:
    """The period sums while blocks are merged: amounts in fixed point, counts as integers."""

    depth: dict[str, FixedSums]
    precip: FixedSums
    valid_steps: np.ndarray
    coverage_sum: np.ndarray
    negatives: dict[str, int]
    negatives_per_body: np.ndarray
    steps: int = 0

    def finish(self) -> PeriodSums:
        """The merged sums as float64 :class:`PeriodSums`."""
        return PeriodSums(
            depth={name: sums.value() for name, sums in self.depth.items()},
            precip=self.precip.value(),
            valid_steps=self.valid_steps,
            coverage_sum=self.coverage_sum / _FIXED_POINT_SCALE,
            negatives=self.negatives,
            negatives_per_body=self.negatives_per_body,
            steps=self.steps,
        )


def merge_block(sums: RunningSums, part: BlockResult) -> None:
    """Add one block's result into the running sums (in block order, though exact in any)."""
    for name, depth in part.depth.items():
        sums.depth[name].add(part.periods, depth)
        sums.negatives[name] = sums.negatives.get(name, 0) + part.negatives[name]
    if part.precip is not None:
        sums.precip.add(part.periods, part.precip)
    sums.valid_steps[part.periods] += part.valid_steps
    sums.coverage_sum += part.coverage_sum
    sums.negatives_per_body += part.negatives_per_body
    sums.steps += part.steps


def new_sums(config: RunConfig, n_periods: int, n: int) -> RunningSums:
    return RunningSums(
        depth={m: FixedSums.zeros(n_periods, n) for m in config.method.all},
        precip=FixedSums.zeros(n_periods, n),
        valid_steps=np.zeros((n_periods, n), dtype=np.int64),
        coverage_sum=np.zeros(n, dtype=np.int64),
        negatives={},
        negatives_per_body=np.zeros(n, dtype=np.int64),
    )


ProgressFactory = Callable[[int, str], Any]
SeriesSink = Callable[[slice, dict[str, np.ndarray]], None]


def compute_sums(
    config: RunConfig,
    inputs: Inputs,
    weights: Mapping[str, ZonalWeights],
    progress: ProgressFactory | None = None,
    series_sink: SeriesSink | None = None,
) -> PeriodSums:
    """Run every block (locally or on a cluster) and merge the results in time order."""
    from lakeloss.execution import run_blocks

    context = block_context(config, inputs, keep_series=series_sink is not None)
    static = _static_inputs(config, inputs, weights)
    sums = new_sums(config, len(inputs.periods.starts), inputs.n_waterbodies)
    blocks = list(iter_blocks(len(inputs.axis.days), block_steps(config, inputs)))
    bar = progress(len(inputs.axis.days), "evaporation") if progress else None
    for part in run_blocks(config.compute, context, weights, static, blocks):
        merge_block(sums, part)
        if series_sink is not None and part.series is not None:
            series_sink(part.block, part.series)
        if bar is not None:
            bar.update(part.steps)
    if bar is not None:
        bar.close()
    return sums.finish()


def negative_warning(config: RunConfig, sums: PeriodSums) -> str | None:
    total = sum(sums.negatives.values())
    if not total:
        return None
    verb = "set to zero" if config.parameters.get("clip_negative", True) else "kept"
    detail = ", ".join(f"{m}: {c}" for m, c in sums.negatives.items() if c)
    message = (
        f"{total} negative daily evaporation rates (condensation or negative net "
        f"radiation) were {verb} ({detail})"
    )
    warnings.warn(message, ValuesAdjustedWarning, stacklevel=2)
    return message


def run_stages(
    config: RunConfig | Any, *, progress: ProgressFactory | None = None, series: bool | None = None
) -> Any:
    """Run every stage and return a :class:`lakeloss.results.RunResult` (nothing written)."""
    from lakeloss.results import inputs_provenance

    config = load_config(config)
    # Hashing the inputs for run.json reads every file once more (GBs for a big run):
    # do it in the background, beside the stages; hashlib releases the GIL.
    with ThreadPoolExecutor(max_workers=1) as hasher:
        record = hasher.submit(inputs_provenance, config)
        return _stages(config, progress, series, record)


def _stages(
    config: RunConfig, progress: ProgressFactory | None, series: bool | None, record: Any
) -> Any:
    from lakeloss.results import assemble

    timer = Timer()
    with timer.stage("load"):
        inputs = load_inputs(config)
        check_overlap(inputs)
        value_warnings = check_values(config, inputs)
    # load_inputs and check_values record their warnings for run.json; show them as well.
    _replay(inputs.recorded)
    for reason in value_warnings:
        warnings.warn(reason, ImplausibleValuesWarning, stacklevel=2)
    with timer.stage("weights"), warnings.catch_warnings(record=True) as seen:
        warnings.simplefilter("always", LakelossWarning)
        weights, cached = build_weights(config, inputs)
    weight_warnings = _replay(seen)
    if not any(issubclass(w.category, GeometryRepairedWarning) for w in seen):
        weight_warnings += _repairs_from_cache(weights)
    keep_series = config.output.series if series is None else series
    collector = SeriesStream(config, inputs) if keep_series else None
    with timer.stage("evaporate"):
        sums = compute_sums(config, inputs, weights, progress, collector.add if collector else None)
    with timer.stage("aggregate"):
        run_warnings = [*inputs.warnings, *value_warnings, *weight_warnings]
        message = negative_warning(config, sums)
        if message:
            run_warnings.append(message)
        result = assemble(
            config,
            inputs,
            weights,
            sums,
            run_warnings,
            timer.seconds,
            series=collector.dataset() if collector else None,
            weights_cached=cached,
            inputs_record=record.result(),
        )
    return result


def _repairs_from_cache(weights: Mapping[str, ZonalWeights]) -> list[str]:
    """The repair warning for weights that came from the cache.

    The zonal engine warns about repaired and empty polygons when it builds the weights, so
    a run served from the cache would otherwise print and record nothing: say the same
    from the flags the weights keep (same wording as ``zonal.weights``).
    """
    tokens = [set(str(f).split(";")) for f in next(iter(weights.values())).flags]
    n_repaired = sum("geometry_repaired" in t for t in tokens)
    n_empty = sum("geometry_empty" in t for t in tokens)
    if not (n_repaired or n_empty):
        return []
    message = (
        f"{n_repaired} invalid water-body polygons were repaired and {n_empty} are empty "
        "(flagged geometry_repaired / geometry_empty; empty ones get NaN results)"
    )
    warnings.warn(message, GeometryRepairedWarning, stacklevel=3)
    return [message]


def _replay(seen: list[warnings.WarningMessage]) -> list[str]:
    """Re-issue recorded lakeloss warnings (so the CLI prints them); return their texts."""
    texts = []
    for item in seen:
        if issubclass(item.category, LakelossWarning):
            texts.append(str(item.message))
        warnings.warn_explicit(item.message, item.category, item.filename, item.lineno)
    return texts


class SeriesStream:
    """Streams per-step rates into a temporary CF NetCDF file, block by block.

    The whole (time, water body) array is never held: each block goes to disk as it is
    merged, and the result's ``series`` is the file opened lazily. ``RunResult.write`` copies
    it into the outputs; the temporary directory is removed when the process exits.
    """

    def __init__(self, config: RunConfig, inputs: Inputs) -> None:
        from lakeloss.io.series import SeriesWriter
        from lakeloss.results import CAUTION, SERIES_VARIABLES

        self.directory = Path(tempfile.mkdtemp(prefix="lakeloss-series-"))
        atexit.register(shutil.rmtree, self.directory, ignore_errors=True)
        self.path = self.directory / "series.nc"
        names = ["evaporation_rate"] + (
            ["precipitation_rate"] if "precipitation" in inputs.fields else []
        )
        self.writer = SeriesWriter(
            self.path,
            waterbody_ids=inputs.layer.frame[inputs.layer.id_field].to_numpy(),
            times=inputs.axis.times,
            calendar=inputs.axis.calendar,
            variables={name: SERIES_VARIABLES[name] for name in names},
            global_attrs={
                "title": "lakeloss per-step evaporation series",
                "source": f"lakeloss, method {config.method.name}",
                "comment": CAUTION,
            },
            chunk_times=block_steps(config, inputs),
        )

    def add(self, block: slice, values: Mapping[str, np.ndarray]) -> None:
        for name, value in values.items():
            self.writer.write(name, block, np.asarray(value, dtype=np.float32))

    def dataset(self) -> Any:
        import xarray as xr

        self.writer.close()
        coder = xr.coders.CFDatetimeCoder(use_cftime=True)
        return xr.open_dataset(self.path, engine="netcdf4", chunks={}, decode_times=coder)
