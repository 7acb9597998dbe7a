"""Gaps in the climate: short ones filled by linear interpolation in time, long ones counted.

A gap is a time step at which a water body's area-weighted mean of one variable is missing
(every cell under the body is NaN at that step). The policy, per body and per variable:

* a run of at most ``limit`` missing steps with a valid value on both sides is filled by
  linear interpolation between those two values (the steps are regular, so in step index);
* a longer run, or one at the very start or end of the data (no valid neighbour on one
  side), is left missing: the periods it touches have no total, and neither has the run.

The filling is done on the zonal means of each block of time steps, read with enough steps
on each side to see a short gap's two neighbours (:func:`halo_needed`), so its result does
not depend on where the time axis is cut into blocks.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

DEFAULT_LIMIT = {"day": 3, "month": 0}
"""Default ``[checks] max_gap_steps`` per time step: three days for daily data (a weekend
and a holiday of a station-based product), none for monthly data (a month cannot be guessed
from its neighbours)."""


def fill_short_gaps(values: np.ndarray, limit: int) -> tuple[np.ndarray, np.ndarray]:
    """Fill runs of at most ``limit`` NaN steps that have a finite value on both sides.

    Parameters
    ----------
    values : numpy.ndarray
        ``(time, water body)`` series. [any unit]
    limit : int
        Longest run of missing steps that is filled. [step]

    Returns
    -------
    filled : numpy.ndarray
        ``values`` with the short gaps filled (the input itself when nothing is filled).
    was_filled : numpy.ndarray
        ``(time, water body)`` bool, True where a value was filled.

    Notes
    -----
    A missing step t between valid steps p < t < q is filled with
    v[p] + (v[q] - v[p]) (t - p) / (q - p) when q - p - 1 <= limit. The value depends only
    on v[p], v[q] and the offsets, so it is the same whichever window holds the run.
    """
    was_filled = np.zeros(values.shape, dtype=bool)
    if limit <= 0 or values.size == 0:
        return values, was_filled
    missing = np.isnan(values)
    columns = np.flatnonzero(missing.any(axis=0) & ~missing.all(axis=0))
    if columns.size == 0:
        return values, was_filled
    part, gap = values[:, columns], missing[:, columns]
    steps = part.shape[0]
    index = np.arange(steps)[:, np.newaxis]
    before = np.maximum.accumulate(np.where(gap, -1, index), axis=0)
    after = np.minimum.accumulate(np.where(gap, steps, index)[::-1], axis=0)[::-1]
    fill = gap & (before >= 0) & (after < steps) & (after - before - 1 <= limit)
    if not fill.any():
        return values, was_filled
    rows, cols = np.nonzero(fill)
    p, q = before[rows, cols], after[rows, cols]
    low, high = part[p, cols], part[q, cols]
    part[rows, cols] = low + (high - low) * ((rows - p) / (q - p))
    filled = values.copy()
    filled[:, columns] = part
    was_filled[:, columns] = fill
    return filled, was_filled


def halo_needed(values: np.ndarray, limit: int, steady: bool = False) -> tuple[bool, bool]:
    """Whether filling this block needs the steps before it, and the steps after it.

    Only a run of missing steps touching an edge of the block, and at most ``limit`` long
    inside it, may be a short gap whose neighbour lies outside; a longer one is long
    wherever it ends. ``limit`` steps on that side then hold the neighbour, or show that
    the run is longer than ``limit``. Reads only the ``limit + 1`` steps at each edge, or
    the first step when ``steady`` (the block's missing cells the same at every step, so
    a body is missing at all its steps or at none).
    """
    if limit <= 0 or values.size == 0:
        return False, False
    steps = values.shape[0]
    if steady:
        need = steps <= limit and bool(np.isnan(values[0]).any())
        return need, need

    def short_run_at(first: np.ndarray, edge: np.ndarray) -> bool:
        # Missing at the edge, and valid again within the edge's steps (or the block is
        # no longer than ``limit``, so even a run over all of it may be short).
        missing = np.isnan(first)
        if not missing.any():
            return False
        if steps <= limit:
            return True
        return bool((missing & np.isfinite(edge).any(axis=0)).any())

    return (
        short_run_at(values[0], values[1 : limit + 1]),
        short_run_at(values[-1], values[-limit - 1 : -1]),
    )


@dataclass
class BlockGaps:
    """One block's gaps: per body (all its steps), per step (all bodies), per variable.

    Body counts per step are weighted by the bodies each column stands for.
    """

    filled_per_body: np.ndarray
    filled_at_step: dict[str, np.ndarray] = field(default_factory=dict)
    missing_per_body: dict[str, np.ndarray] = field(default_factory=dict)
    missing_at_step: dict[str, np.ndarray] = field(default_factory=dict)


def count_block(
    filled: Mapping[str, np.ndarray],
    means: Mapping[str, np.ndarray],
    steady: set[str],
    body_count: np.ndarray | None,
) -> BlockGaps:
    """Count the filled and the still missing means of one block (after filling).

    For a variable in ``steady`` (same missing cells at every step) a body is missing at
    every step or at none, so its first step says all; the others are searched in full,
    only over the bodies missing somewhere.
    """
    steps, n = next(iter(means.values())).shape
    weight = np.ones(n, dtype=np.int64) if body_count is None else body_count
    any_filled = np.zeros(n, dtype=np.int64)
    out = BlockGaps(filled_per_body=any_filled)
    for name, values in means.items():
        if name in steady and name not in filled:
            missing_cols = np.flatnonzero(np.isnan(values[0]))
            per_body = np.zeros(n, dtype=np.int64)
            per_body[missing_cols] = steps
            out.missing_per_body[name] = per_body
            out.missing_at_step[name] = np.full(steps, int(weight[missing_cols].sum()), np.int64)
            continue
        missing = np.isnan(values)
        columns = np.flatnonzero(missing.any(axis=0))
        per_body = np.zeros(n, dtype=np.int64)
        per_body[columns] = np.count_nonzero(missing[:, columns], axis=0)
        out.missing_per_body[name] = per_body
        out.missing_at_step[name] = missing[:, columns].astype(np.int64) @ weight[columns]
    if filled:
        mask = np.logical_or.reduce([m for m in filled.values()])
        columns = np.flatnonzero(mask.any(axis=0))
        any_filled[columns] = np.count_nonzero(mask[:, columns], axis=0)
        for name, was_filled in filled.items():
            out.filled_at_step[name] = was_filled[:, columns].astype(np.int64) @ weight[columns]
    return out


@dataclass
class GapTally:
    """The gaps of the whole run, merged block by block (exact integer counts)."""

    n_steps: int
    n: int
    filled_per_body: np.ndarray = field(init=False)
    filled_at_step: dict[str, np.ndarray] = field(default_factory=dict)
    missing_per_body: dict[str, np.ndarray] = field(default_factory=dict)
    missing_at_step: dict[str, np.ndarray] = field(default_factory=dict)

    def __post_init__(self) -> None:
        self.filled_per_body = np.zeros(self.n, dtype=np.int64)

    def add(self, block: slice, part: BlockGaps) -> None:
        self.filled_per_body += part.filled_per_body
        for name, values in part.filled_at_step.items():
            self.filled_at_step.setdefault(name, np.zeros(self.n_steps, np.int64))[block] = values
        for name, values in part.missing_at_step.items():
            self.missing_at_step.setdefault(name, np.zeros(self.n_steps, np.int64))[block] = values
        for name, values in part.missing_per_body.items():
            self.missing_per_body.setdefault(name, np.zeros(self.n, np.int64))
            self.missing_per_body[name] += values

    def for_members(self, member_of: np.ndarray) -> GapTally:
        """The tally with per-body counts copied from each body's group."""
        out = GapTally(self.n_steps, member_of.size)
        out.filled_per_body = self.filled_per_body[member_of]
        out.filled_at_step = self.filled_at_step
        out.missing_at_step = self.missing_at_step
        out.missing_per_body = {k: v[member_of] for k, v in self.missing_per_body.items()}
        return out


@dataclass(frozen=True)
class GapReport:
    """What the run says about its gaps (run.json, warnings, flags)."""

    filled: dict[str, dict[str, Any]]
    """Per variable: filled ``steps`` (time steps), ``values`` (body-steps), ``dates``."""
    long: dict[str, dict[str, Any]]
    """Per variable with gaps left missing: ``steps``, ``bodies``, ``dates``."""
    limit: int
    """The ``max_gap_steps`` of the run."""


def date_ranges(starts: tuple[str, ...], mask: np.ndarray, at_most: int = 5) -> str:
    """The steps where ``mask`` holds as ranges: ``2031-06-14..2031-06-16, 2031-09-02``."""
    edges = np.flatnonzero(np.diff(np.r_[0, mask.astype(np.int8), 0]))
    runs = list(zip(edges[::2], edges[1::2] - 1, strict=True))
    parts = [starts[a] if a == b else f"{starts[a]}..{starts[b]}" for a, b in runs[:at_most]]
    if len(runs) > at_most:
        parts.append(f"and {len(runs) - at_most} more")
    return ", ".join(parts)


def steps_text(count: int) -> str:
    """``1 time step`` / ``5 time steps``."""
    return f"{count} time step" + ("" if count == 1 else "s")


def merged_report(parts: Sequence[PartitionGaps], starts: tuple[str, ...], limit: int) -> GapReport:
    """:func:`report` of a run from the gap counts of its partitions (:class:`PartitionGaps`).

    The per-body filled steps stay with the partitions (they flag their own bodies).
    """
    filled_at: dict[str, np.ndarray] = {}
    missing_at: dict[str, np.ndarray] = {}
    never: dict[str, int] = {}
    some: dict[str, int] = {}
    for part in parts:
        for name, values in part.filled_at_step.items():
            filled_at[name] = filled_at.get(name, 0) + values
        for name, values in part.missing_at_step.items():
            missing_at[name] = missing_at.get(name, 0) + values
        for name, count in part.never.items():
            never[name] = never.get(name, 0) + count
        for name, count in part.some.items():
            some[name] = some.get(name, 0) + count
    filled = {}
    for name, at_step in filled_at.items():
        if at_step.any():
            filled[name] = {
                "steps": int((at_step > 0).sum()),
                "values": int(at_step.sum()),
                "dates": date_ranges(starts, at_step > 0),
            }
    long = {}
    for name, bodies in some.items():
        at_step = missing_at[name] - never.get(name, 0)
        if bodies:
            long[name] = {
                "steps": int((at_step > 0).sum()),
                "bodies": bodies,
                "dates": date_ranges(starts, at_step > 0),
            }
    return GapReport(filled, long, limit)


@dataclass(frozen=True)
class PartitionGaps:
    """The gap counts of one partition that the run's report adds up."""

    filled_at_step: dict[str, np.ndarray]
    missing_at_step: dict[str, np.ndarray]
    never: dict[str, int]
    """Per variable, bodies missing it at every step (no climate, not a gap)."""
    some: dict[str, int]
    """Per variable, bodies missing it at some steps but not all (long gaps)."""

    @classmethod
    def of(cls, tally: GapTally) -> PartitionGaps:
        never = {k: v == tally.n_steps for k, v in tally.missing_per_body.items()}
        return cls(
            filled_at_step=dict(tally.filled_at_step),
            missing_at_step=dict(tally.missing_at_step),
            never={k: int(v.sum()) for k, v in never.items()},
            some={k: int(((v > 0) & ~never[k]).sum()) for k, v in tally.missing_per_body.items()},
        )
