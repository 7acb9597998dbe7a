"""One block of time steps: zonal means, evaporation, and sums into periods.

:func:`compute_block` is a pure function of its arguments (the block's context, the weights,
the per-body inputs, the block's time slice and, for stateful methods, the state the previous
block left), so every scheduler — this process's thread pool or a dask.distributed worker —
gives the same numbers; :func:`add_block` adds the results into :class:`RunningTotals`, in
block order, in fixed point so that any split of the time axis gives the same bits.

It is two steps, so that reading can run ahead of a state carried in time:
:func:`extract_filled` (read and average; any block, in any order) and :func:`finish_block`
(the physics and the sums; in time order when a method carries a state, see
:mod:`lakeloss.physics.stateful`).
"""

from __future__ import annotations

import copy
import threading
import weakref
from collections.abc import Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from lakeloss.gaps import BlockGaps, GapTally, count_block, fill_short_gaps, halo_needed
from lakeloss.physics import registry
from lakeloss.physics.stateful import State
from lakeloss.zonal import ZonalWeights

if TYPE_CHECKING:
    from lakeloss.io.climate import ClimateField


@dataclass
class PeriodTotals:
    """Totals per (period, water body) as float64, once every block is added."""

    depth: dict[str, np.ndarray]
    precip: np.ndarray
    valid_steps: np.ndarray
    coverage_sum: np.ndarray
    covered_steps: np.ndarray
    negatives: dict[str, int]
    negatives_per_body: np.ndarray
    steps: int = 0
    gaps: GapTally | None = None

    def for_members(self, member_of: np.ndarray) -> PeriodTotals:
        """The totals of every body from those of its group (``member_of``: group per body)."""
        return PeriodTotals(
            depth={name: values[:, member_of] for name, values in self.depth.items()},
            precip=self.precip[:, member_of],
            valid_steps=self.valid_steps[:, member_of],
            coverage_sum=self.coverage_sum[member_of],
            covered_steps=self.covered_steps[member_of],
            negatives=self.negatives,
            negatives_per_body=self.negatives_per_body[member_of],
            steps=self.steps,
            gaps=None if self.gaps is None else self.gaps.for_members(member_of),
        )


@dataclass(frozen=True)
class BlockContext:
    """What one block's computation needs: light enough to send to a cluster worker.

    The lazy climate fields travel by reference (xarray reopens the files on the worker);
    the weights and the per-body inputs are passed separately so a cluster can scatter them
    once.
    """

    fields: Mapping[str, ClimateField]
    field_grid: Mapping[str, str]
    methods: tuple[str, ...]
    primary: str
    parameters: Mapping[str, object]
    day_of_year: np.ndarray
    days: np.ndarray
    period_index: np.ndarray
    keep_series: bool = False
    body_count: np.ndarray | None = None
    """Bodies each column stands for (:mod:`lakeloss.grouping`); None: one each."""
    max_gap_steps: int = 0
    """Longest gap in a body's climate filled by interpolation (:mod:`lakeloss.gaps`)."""
    clip_negative: bool = True
    """Negative rates set to zero before they are summed (``[parameters] clip_negative``)."""

    @property
    def stateful(self) -> tuple[str, ...]:
        """The methods of the run that carry a state from step to step."""
        return tuple(name for name in self.methods if registry.carries_state(name))


RunState = dict[str, State]
"""The state of every stateful method of a run, by method name (empty when none)."""


def initial_states(context: BlockContext, static: Mapping[str, np.ndarray], n: int) -> RunState:
    """The state of each stateful method of ``context`` before the first step, ``n`` bodies."""
    params = dict(context.parameters)
    out: RunState = {}
    for name in context.stateful:
        method_params = {k: v for k, v in params.items() if k in registry.get(name).parameters}
        out[name] = registry.initial_state(name, static, method_params, n)
    return out


@dataclass
class BlockResult:
    """One block's contribution to the period sums (only the periods it touches)."""

    block: slice
    periods: np.ndarray
    depth: dict[str, FixedPointTotals]
    precip: FixedPointTotals | None
    valid_steps: np.ndarray
    coverage_sum: np.ndarray
    covered_steps: np.ndarray
    negatives: dict[str, int]
    negatives_per_body: np.ndarray
    steps: int
    series: dict[str, np.ndarray] | None = None
    gaps: BlockGaps | None = None
    state: RunState | None = None
    """The state of the stateful methods after the block's last step (None when none)."""


Extracted = tuple[dict[str, np.ndarray], np.ndarray, BlockGaps]
"""What :func:`extract_filled` gives: zonal means, valid fraction and gaps of one block."""


def extract_block(
    context: BlockContext, weights: Mapping[str, ZonalWeights], block: slice
) -> tuple[dict[str, np.ndarray], np.ndarray, set[str]]:
    """Area-weighted means of every variable for one block of time steps.

    Returns the means, shape (time, water body), by glossary name; the smallest
    valid-area fraction over the variables (the share of each body with valid climate);
    and the variables whose missing cells are the same at every step of the block (then a
    body's mean is missing at every step or at none, which spares the search for gaps).
    """
    steady: set[str] = set()
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
        steps = items[0][1].shape[0]
        mean, valid, same = _apply_by_mask(weights[grid_key], grid_key, stacked, steps)
        for k, (quantity, _) in enumerate(items):
            if same[k]:
                steady.add(quantity)
            means[quantity] = mean[k * steps : (k + 1) * steps]
            rows = valid[k * steps : (k + 1) * steps]
            valid_min = rows if valid_min is None else np.minimum(valid_min, rows)
    assert valid_min is not None  # load_inputs guarantees at least one field
    return means, valid_min, steady


_BUFFERS = threading.local()
# Weights objects kept per missing-cell mask (each caches its renormalised weights), per
# thread: a few masks recur (a land mask per variable, a gap day), so a handful suffices.
_MASKS_KEPT = 8


def _apply_by_mask(
    weights: ZonalWeights, grid_key: str, stacked: np.ndarray, steps: int
) -> tuple[np.ndarray, np.ndarray, list[bool]]:
    """Zonal means of ``stacked`` (rows, ny, nx), each row as it would be computed alone.

    Rows that share one missing-cell mask go through one product with the weights
    renormalised for that mask, so a row's numbers depend only on its own cells, never on
    the other rows of the block: a gap day, or a variable with another nodata mask, gives
    the same bits however the time axis is cut into blocks. Also says, for each variable
    (``steps`` rows each), whether its mask is the same at all its steps.
    """
    rows = stacked.shape[0]
    buffer = _thread_buffer(grid_key, (weights.n_waterbodies, rows))
    mean, valid = weights.apply(stacked, out=buffer)
    # The usual case: the same missing cells at every step, where the zonal engine returns
    # the valid fraction as a broadcast view of one row (documented in ZonalWeights.apply).
    if rows <= 1 or valid.strides[0] == 0:
        return mean, valid, [True] * max(rows // max(steps, 1), 1)
    finite = np.isfinite(stacked.reshape(rows, -1))
    same = [bool((finite[k : k + steps] == finite[k]).all()) for k in range(0, rows, steps)]
    packed = np.packbits(finite, axis=1)
    masks, which = np.unique(packed, axis=0, return_inverse=True)
    mean = np.empty((rows, weights.n_waterbodies))
    valid = np.empty((rows, weights.n_waterbodies))
    for k in range(len(masks)):
        chosen = np.flatnonzero(which.ravel() == k)
        same_mask = _weights_for_mask(weights, grid_key, masks[k].tobytes())
        mean[chosen], valid[chosen] = same_mask.apply(stacked[chosen])
    return mean, valid, same


def _weights_for_mask(weights: ZonalWeights, grid_key: str, mask: bytes) -> ZonalWeights:
    """A shallow copy of ``weights`` kept for one mask, so its cached plan is not rebuilt."""
    store = _BUFFERS.__dict__.setdefault("masks", {})
    key = (grid_key, id(weights), mask)
    entry = store.get(key)
    if entry is None or entry[0]() is not weights:  # an id may be reused by new weights
        if len(store) >= _MASKS_KEPT:
            store.pop(next(iter(store)))
        entry = store[key] = (weakref.ref(weights), copy.copy(weights))
    return entry[1]


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


def extract_filled(
    context: BlockContext, weights: Mapping[str, ZonalWeights], block: slice
) -> Extracted:
    """:func:`extract_block` with the short gaps of every variable filled, and counted.

    When a gap touches an edge of the block, up to ``max_gap_steps`` steps on that side
    are read too, so the block sees the gap's neighbours as a run in one block would.
    """
    means, valid, steady = extract_block(context, weights, block)
    limit = context.max_gap_steps
    filled: dict[str, np.ndarray] = {}
    if limit > 0:
        needs = [halo_needed(v, limit, q in steady) for q, v in means.items()]
        wanted = (any(n[0] for n in needs), any(n[1] for n in needs))
        if any(wanted):
            # Copies first: reading the halo may reuse this thread's buffers.
            means = {q: np.array(v) for q, v in means.items()}
            valid = np.array(valid)
        before, after = _halo_means(context, weights, block, wanted)
        for quantity, values in means.items():
            head = before.get(quantity, values[:0])
            tail = after.get(quantity, values[:0])
            if quantity in steady and not (len(head) or len(tail)):
                continue  # each body missing at every step or at none: nothing to fill
            out, mask = fill_short_gaps(np.concatenate([head, values, tail]), limit)
            if mask.any():
                steps = slice(len(head), len(head) + len(values))
                means[quantity], filled[quantity] = out[steps], mask[steps]
    return means, valid, count_block(filled, means, steady, context.body_count)


def _halo_means(
    context: BlockContext,
    weights: Mapping[str, ZonalWeights],
    block: slice,
    wanted: tuple[bool, bool],
) -> tuple[dict[str, np.ndarray], dict[str, np.ndarray]]:
    """The means of up to ``max_gap_steps`` steps before and after ``block``, if wanted.

    Wanted only where a gap touches the block's edge (:func:`lakeloss.gaps.halo_needed`),
    which is almost no block.
    """
    limit = context.max_gap_steps
    sides = (
        slice(max(0, block.start - limit), block.start),
        slice(block.stop, min(len(context.days), block.stop + limit)),
    )
    out: list[dict[str, np.ndarray]] = [{}, {}]
    for k, side in enumerate(sides):
        if wanted[k] and side.stop > side.start:
            read = extract_block(context, weights, side)[0]
            out[k] = {q: np.array(v) for q, v in read.items()}
    return out[0], out[1]


def _grid_values(context: BlockContext, block: slice) -> dict[str, tuple[np.ndarray, str]]:
    # The synchronous scheduler: the block is already the unit of parallel work, and a
    # cluster worker must not hand its reads back to the cluster.
    # Kept in the stored precision: the zonal apply widens only the cells it uses to float64.
    values = {
        q: (
            np.asarray(f.data.isel(time=block).compute(scheduler="synchronous").values),
            context.field_grid[q],
        )
        for q, f in context.fields.items()
    }
    if "wind_speed" not in values and {"eastward_wind", "northward_wind"} <= set(values):
        # Speed from components on the grid, before averaging: the mean of the speed is
        # what the wind functions want, not the speed of the mean vector.
        east, key = values.pop("eastward_wind")
        north, _ = values.pop("northward_wind")
        values["wind_speed"] = (np.hypot(east.astype(np.float64), north.astype(np.float64)), key)
    return values


PHYSICS_COLUMNS = 4096
"""Water bodies per physics call: every input and temporary of a call, (steps, 4096) float64
= 512 KiB for a 16-step block, then stays in the CPU cache, which lets the formulas be
written plainly without losing speed (benchmarks/README.md, "Physics"); the numbers are
the same, each element being computed alone."""


def evaporate_block(
    context: BlockContext,
    means: Mapping[str, np.ndarray],
    static: Mapping[str, np.ndarray],
    day_of_year: np.ndarray,
) -> dict[str, np.ndarray]:
    """Evaporation rate [mm day-1] of every configured method for one block (no state)."""
    if context.stateful:
        raise ValueError(f"{', '.join(context.stateful)} carry a state; use evaporate_steps")
    steps = np.ones((len(day_of_year), 1))
    return evaporate_steps(context, means, static, day_of_year, steps, {})[0]


def evaporate_steps(
    context: BlockContext,
    means: Mapping[str, np.ndarray],
    static: Mapping[str, np.ndarray],
    day_of_year: np.ndarray,
    step_days: np.ndarray,
    state: RunState,
) -> tuple[dict[str, np.ndarray], RunState]:
    """Rates [mm day-1] of every configured method for one block, and the state after it.

    ``state`` holds the state of each stateful method before the block's first step
    (:func:`initial_states` for the first block); it is not modified. ``step_days`` is the
    length of each step, shape (steps, 1). [day]
    """
    physics_inputs: dict[str, np.ndarray] = {
        **means,
        **static,
        "day_of_year": day_of_year[:, np.newaxis],
        "step_days": np.asarray(step_days, dtype=float).reshape(-1, 1),
    }
    physics_inputs.pop("precipitation", None)
    params = dict(context.parameters)
    shape = next(iter(means.values())).shape
    rates = {}
    new_state: RunState = {}
    for name in context.methods:
        method_params = {k: v for k, v in params.items() if k in registry.get(name).parameters}
        rate = np.empty(shape)
        carried = state.get(name)
        if carried is not None:
            new_state[name] = {key: np.empty(shape[1]) for key in carried}
        for start in range(0, shape[1], PHYSICS_COLUMNS):
            columns = slice(start, start + PHYSICS_COLUMNS)
            part = {
                k: v[..., columns] if np.shape(v)[-1:] == shape[1:] else v
                for k, v in physics_inputs.items()
            }
            with np.errstate(invalid="ignore", divide="ignore"):
                if carried is None:
                    rate[:, columns] = registry.evaporate(name, part, method_params)
                    continue
                now = {key: values[columns] for key, values in carried.items()}
                rate[:, columns], after = registry.advance(name, now, part, method_params)
            for key, values in after.items():
                new_state[name][key][columns] = values
        rates[name] = rate
    return rates, new_state


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
class FixedPointTotals:
    """Totals per (period, water body) in fixed point, and where a missing value was met."""

    total: np.ndarray
    missing: np.ndarray

    @classmethod
    def zeros(cls, n_periods: int, n: int) -> FixedPointTotals:
        return cls(np.zeros((n_periods, n), dtype=np.int64), np.zeros((n_periods, n), bool))

    @classmethod
    def of_segments(
        cls, values: np.ndarray, period_index: np.ndarray
    ) -> tuple[np.ndarray, FixedPointTotals]:
        """The periods a block touches and its sums over each (NaN makes a sum missing)."""
        missing = ~np.isfinite(values)
        periods, total = _segment_sums(_to_fixed(np.where(missing, 0.0, values)), period_index)
        starts = np.flatnonzero(np.r_[True, period_index[1:] != period_index[:-1]])
        return periods, cls(total, np.logical_or.reduceat(missing, starts, axis=0))

    def add(self, periods: np.ndarray, part: FixedPointTotals) -> None:
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
    state: RunState | None = None,
) -> BlockResult:
    """Extract, evaporate and sum one block of time steps into its periods.

    A pure function of its arguments: the same block gives the same numbers wherever it
    runs, which is what makes local and cluster runs identical. ``state`` is the state the
    previous block left (:attr:`BlockResult.state`), or the initial one for the first block;
    None when no method carries one.
    """
    return finish_block(context, extract_filled(context, weights, block), static, block, state)


def finish_block(
    context: BlockContext,
    extracted: Extracted,
    static: Mapping[str, np.ndarray],
    block: slice,
    state: RunState | None = None,
) -> BlockResult:
    """The physics and the period sums of one block whose means are ``extracted``."""
    means, valid, gaps = extracted
    if context.stateful and state is None:
        raise ValueError("a run with a stateful method needs the state of the previous block")
    rates, after = evaporate_steps(
        context, means, static, context.day_of_year[block], context.days[block], state or {}
    )
    days = context.days[block][:, None]
    index = context.period_index[block]
    clip = context.clip_negative
    depth, negatives = {}, {}
    negatives_per_body = np.zeros(valid.shape[1], dtype=np.int64)
    periods = np.empty(0, dtype=np.int64)
    for name, rate in rates.items():
        negative = rate < 0
        per_body = negative.sum(axis=0)
        count = context.body_count
        negatives[name] = int(per_body.sum() if count is None else per_body @ count)
        if name == context.primary:
            negatives_per_body = per_body
        if clip and negatives[name]:
            rate = np.where(negative, 0.0, rate)
        periods, depth[name] = FixedPointTotals.of_segments(rate * days, index)
    precip = means.get("precipitation")
    precip_sums = (
        FixedPointTotals.of_segments(precip * days, index)[1] if precip is not None else None
    )
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
        covered_steps=(valid > 0).sum(axis=0),
        negatives=negatives,
        negatives_per_body=negatives_per_body,
        steps=block.stop - block.start,
        series=series,
        gaps=gaps,
        state=after if context.stateful else None,
    )


@dataclass
class RunningTotals:
    """The period totals while blocks are added: amounts in fixed point, counts as integers."""

    depth: dict[str, FixedPointTotals]
    precip: FixedPointTotals
    valid_steps: np.ndarray
    coverage_sum: np.ndarray
    covered_steps: np.ndarray
    negatives: dict[str, int]
    negatives_per_body: np.ndarray
    gaps: GapTally
    steps: int = 0

    def finish(self) -> PeriodTotals:
        """The added-up totals as float64 :class:`PeriodTotals`."""
        return PeriodTotals(
            depth={name: sums.value() for name, sums in self.depth.items()},
            precip=self.precip.value(),
            valid_steps=self.valid_steps,
            coverage_sum=self.coverage_sum / _FIXED_POINT_SCALE,
            covered_steps=self.covered_steps,
            negatives=self.negatives,
            negatives_per_body=self.negatives_per_body,
            steps=self.steps,
            gaps=self.gaps,
        )


def add_block(totals: RunningTotals, part: BlockResult) -> None:
    """Add one block's result into the running totals (in block order, though exact in any)."""
    for name, depth in part.depth.items():
        totals.depth[name].add(part.periods, depth)
        totals.negatives[name] = totals.negatives.get(name, 0) + part.negatives[name]
    if part.precip is not None:
        totals.precip.add(part.periods, part.precip)
    totals.valid_steps[part.periods] += part.valid_steps
    totals.coverage_sum += part.coverage_sum
    totals.covered_steps += part.covered_steps
    totals.negatives_per_body += part.negatives_per_body
    totals.steps += part.steps
    if part.gaps is not None:
        totals.gaps.add(part.block, part.gaps)


def zero_totals(
    methods: tuple[str, ...], n_periods: int, n: int, n_steps: int = 0
) -> RunningTotals:
    """Zero totals for ``methods`` over (period, water body), and no gaps over ``n_steps``."""
    return RunningTotals(
        depth={m: FixedPointTotals.zeros(n_periods, n) for m in methods},
        precip=FixedPointTotals.zeros(n_periods, n),
        valid_steps=np.zeros((n_periods, n), dtype=np.int64),
        coverage_sum=np.zeros(n, dtype=np.int64),
        covered_steps=np.zeros(n, dtype=np.int64),
        negatives={},
        negatives_per_body=np.zeros(n, dtype=np.int64),
        gaps=GapTally(n_steps, n),
    )
