"""Partitions of water bodies: contiguous runs of the layer's rows, each run through the
whole time axis on its own.

A partition holds ``[compute] partition_bodies`` rows of the layer (a multiple of
:data:`ALIGN`), in the layer's order, so the output rows keep that order and their bytes do
not depend on the number of partitions. Each partition is computed through every time block
in order, carrying the state of its stateful methods, and hands back its own tables (written
as it finishes) and a :class:`PartitionOutcome`: the little the run needs to finish the
summaries, the rank and run.json, none of it growing with the number of periods per body.

The summaries are sums over bodies. To make their bits independent of where partitions
start, every partition sums its bodies in chunks of :data:`ALIGN` bodies (one ``bincount``
per column over (chunk, group, period) cells, bodies in order within a chunk), and
:class:`SummaryMerger` adds the chunk sums one after another in layer order (a cumulative
sum, which numpy takes sequentially); partition boundaries fall on chunk boundaries.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from lakeloss.gaps import PartitionGaps

ALIGN = 64
"""Partition sizes are multiples of this many bodies; the summaries sum chunks of it."""

DEFAULT_PARTITION_BODIES = 16384 * ALIGN
"""Bodies per partition when ``[compute] partition_bodies = 0`` (1 048 576). A partition is
computed whole: the bigger, the fewer times the climate is read and the more identical bodies
are computed once (:mod:`lakeloss.grouping` groups within a partition); its tables are made
in pieces (:data:`lakeloss.partition_run.PIECE_BODIES`), so they do not grow with it
(benchmarks/README.md, "Partitions")."""


def partition_size(requested: int, n: int, workers: int = 0) -> int:
    """Bodies per partition: ``requested`` (0: the default) rounded up to :data:`ALIGN`.

    With ``workers`` > 0 the default is lowered so that every worker gets a partition.
    """
    size = requested or DEFAULT_PARTITION_BODIES
    if not requested and workers > 1:
        size = min(size, max(ALIGN, math.ceil(n / workers)))
    return max(ALIGN, -(-size // ALIGN) * ALIGN)


def partition_ranges(n: int, size: int) -> list[range]:
    """The row ranges of the partitions of ``n`` bodies, ``size`` each (the last shorter)."""
    return [range(start, min(start + size, n)) for start in range(0, n, size)] or [range(0)]


# --------------------------------------------------------------------------- summaries


class _Missing:
    """Stands for a missing group value in a key (NaN is not equal to itself)."""

    def __repr__(self) -> str:
        return "<missing>"

    def __eq__(self, other: object) -> bool:
        return isinstance(other, _Missing)

    def __hash__(self) -> int:
        return 0


MISSING = _Missing()


def _key_values(frame: pd.DataFrame) -> list[tuple[Any, ...]]:
    columns = [frame[c].astype(object).where(frame[c].notna(), MISSING) for c in frame.columns]
    return list(zip(*(c.tolist() for c in columns), strict=True))


@dataclass
class ChunkSums:
    """Sums over the valid (body, period) cells of a partition's chunks, per group key."""

    keys: list[tuple[Any, ...]]
    count: np.ndarray  # (groups, periods) int64, over the whole partition
    sums: dict[str, np.ndarray]  # name -> (chunks, groups, periods) float64
    key_frame: pd.DataFrame | None = None
    """The ``group_by`` values of ``keys``, one row each, in the layer's dtypes."""


def chunk_sums(
    columns: Mapping[str, np.ndarray],
    valid: np.ndarray,
    groups: pd.DataFrame | None,
) -> ChunkSums:
    """The sums of ``columns`` ((bodies, periods) each) over ``valid`` cells, per chunk.

    ``groups`` holds the ``group_by`` columns of the same bodies (None: one group). A
    missing value inside a valid cell counts as 0, as a skipping sum does.
    """
    n, n_periods = valid.shape
    key_frame = None
    if groups is None:
        keys: list[tuple[Any, ...]] = [()]
        codes = np.zeros(n, dtype=np.int64)
    else:
        # Groups numbered in order of their first body (a missing value is a group too).
        grouped = groups.groupby(list(groups.columns), sort=False, dropna=False)
        codes = grouped.ngroup().to_numpy(dtype=np.int64)
        _, first = np.unique(codes, return_index=True)
        key_frame = groups.iloc[first].reset_index(drop=True)
        keys = _key_values(key_frame) or [()]
    n_groups, n_chunks = len(keys), max(1, -(-n // ALIGN))
    chunk = np.arange(n) // ALIGN
    cell = ((chunk * n_groups + codes)[:, None] * n_periods + np.arange(n_periods)).ravel()
    size = n_chunks * n_groups * n_periods
    count = np.bincount(cell, weights=valid.ravel(), minlength=size).astype(np.int64)
    sums = {}
    for name, values in columns.items():
        kept = np.where(valid & ~np.isnan(values), values, 0.0).ravel()
        sums[name] = np.bincount(cell, kept, minlength=size).reshape(n_chunks, n_groups, -1)
    total_count = count.reshape(n_chunks, n_groups, n_periods).sum(axis=0)
    return ChunkSums(keys, total_count, sums, key_frame)


@dataclass
class SummaryMerger:
    """Running totals per group key, chunk sums added in layer order."""

    n_periods: int
    names: list[str] = field(default_factory=list)
    count: dict[tuple[Any, ...], np.ndarray] = field(default_factory=dict)
    sums: dict[tuple[Any, ...], dict[str, np.ndarray]] = field(default_factory=dict)
    key_rows: list[pd.DataFrame] = field(default_factory=list)

    def add(self, part: ChunkSums) -> None:
        """Add one partition's chunk sums (partitions in layer order)."""
        if not self.names:
            self.names = list(part.sums)
        for g, key in enumerate(part.keys):
            if key not in self.count:
                if part.key_frame is not None:
                    self.key_rows.append(part.key_frame.iloc[[g]])
                self.count[key] = np.zeros(self.n_periods, dtype=np.int64)
                self.sums[key] = {name: np.zeros(self.n_periods) for name in self.names}
            self.count[key] += part.count[g]
            for name in self.names:
                # running + chunk 1 + chunk 2 + ..., one after another (cumsum is sequential)
                stacked = np.concatenate([self.sums[key][name][None], part.sums[name][:, g]])
                self.sums[key][name] = np.cumsum(stacked, axis=0)[-1]

    def table(self, periods: pd.DataFrame, group_by: Sequence[str] | None) -> pd.DataFrame:
        """Groups (sorted, a missing value last) then periods, as ``results`` lays them out.

        Every group and period keeps its row, so one with no valid water body shows
        n_waterbodies = 0 and empty totals.
        """
        keys = list(self.count) or [()]
        if group_by:
            # the values as the layer holds them (their dtypes), one row per key
            names = pd.concat(self.key_rows, ignore_index=True)
            order = names.groupby(list(group_by), sort=True, dropna=False).ngroup().to_numpy()
            keys = [keys[i] for i in np.argsort(order, kind="stable")]
            names = names.take(np.argsort(order, kind="stable")).reset_index(drop=True)
        n_groups, n_periods = len(keys), self.n_periods
        empty = np.zeros(n_periods, dtype=np.int64)
        count = np.concatenate([self.count.get(key, empty) for key in keys])
        totals: dict[str, np.ndarray] = {"n_waterbodies": count}
        for name in self.names:
            values = np.concatenate(
                [self.sums[key][name] if key in self.sums else np.zeros(n_periods) for key in keys]
            )
            totals[name] = np.where(count > 0, values, np.nan)
        parts = [
            periods.take(np.tile(np.arange(n_periods), n_groups)).reset_index(drop=True),
            pd.DataFrame(totals),
        ]
        if group_by:
            rows = np.repeat(np.arange(n_groups), n_periods)
            parts.insert(0, names.take(rows).reset_index(drop=True))
        return pd.concat(parts, axis=1)


# --------------------------------------------------------------------------- outcome


@dataclass
class PartitionOutcome:
    """What a finished partition hands back besides its tables (small)."""

    index: int
    rows: range
    volume: np.ndarray
    """Whole-run evaporation volume per body, for the rank. [m3]"""
    totals_chunks: ChunkSums
    group_chunks: ChunkSums | None
    counts: dict[str, Any]
    negatives: dict[str, int]
    gaps: PartitionGaps
    periods: pd.DataFrame | None = None
    """The period columns of the period table (the first partition's)."""
    seconds: dict[str, float] = field(default_factory=dict)
    """Wall time of the partition's stages (weights, evaporate)."""
    weights_cached: bool = False
    repaired: int = 0
    """Polygons of the partition repaired by the zonal engine."""
    empty: int = 0
    """Polygons of the partition that are empty."""
    flag_examples: dict[str, list[Any]] = field(default_factory=dict)
    """The first few ids of the partition's bodies with each qa flag."""
    volumes: dict[str, float] = field(default_factory=dict)
    """Whole-run volumes summed over the partition's bodies with a result. [m3]"""
    has_rain: bool = False


_SUMMED_COUNTS = (
    "flagged",
    "without_result",
    "without_any_result",
    "no_valid_climate",
    "filled_climate_steps",
)


def merge_counts(parts: Sequence[Mapping[str, Any]], first: Mapping[str, Any]) -> dict[str, Any]:
    """run.json's ``counts`` of the whole run from those of its partitions, in key order."""
    out = dict(first)
    out["waterbodies"] = sum(int(p["waterbodies"]) for p in parts)
    for key in _SUMMED_COUNTS:
        out[key] = sum(int(p[key]) for p in parts)
    flags: dict[str, int] = {}
    for part in parts:
        for flag, count in part["qa_flags"].items():
            flags[flag] = flags.get(flag, 0) + int(count)
    out["qa_flags"] = dict(sorted(flags.items(), key=lambda item: (-item[1], item[0])))
    negatives: dict[str, int] = {}
    for part in parts:
        for name, count in part["negative_rates"].items():
            negatives[name] = negatives.get(name, 0) + int(count)
    out["negative_rates"] = negatives
    out["negative_rates_clipped"] = sum(int(p["negative_rates_clipped"]) for p in parts)
    return out


def merged_examples(
    outcomes: Sequence[PartitionOutcome], flags: Sequence[str], at_most: int = 5
) -> dict[str, list[Any]]:
    """The first ``at_most`` ids with each flag over the run (partitions in layer order)."""
    out: dict[str, list[Any]] = {}
    for flag in flags:
        ids: list[Any] = []
        for outcome in outcomes:
            ids.extend(outcome.flag_examples.get(flag, [])[: at_most - len(ids)])
            if len(ids) >= at_most:
                break
        out[flag] = ids
    return out


def flag_examples(flags: pd.Series, ids: pd.Series, at_most: int = 5) -> dict[str, list[Any]]:
    """The first ``at_most`` ids of the bodies with each flag (``;``-joined tokens)."""
    out: dict[str, list[Any]] = {}
    flagged = flags[flags != ""].astype(str)
    for position, text in zip(flagged.index, flagged.tolist(), strict=True):
        for token in text.split(";"):
            if token and len(out.setdefault(token, [])) < at_most:
                out[token].append(ids.loc[position])
    return out
