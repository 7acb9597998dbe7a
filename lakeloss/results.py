"""The result of a run: tables with documented columns and units, and how they are written.

:func:`assemble` turns the pipeline's period sums into a :class:`RunResult`;
:meth:`RunResult.write` writes it atomically through ``io/``. What run.json records is
shaped by :mod:`lakeloss.io.run_record`; the lines the command line prints at the end of a
run are in :mod:`lakeloss.report`.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import cftime
import numpy as np
import pandas as pd

from lakeloss.body_facts import BodyFacts
from lakeloss.config import VOLUME_UNITS, RunConfig
from lakeloss.errors import ConfigError
from lakeloss.gaps import PartitionGaps
from lakeloss.io.gpkg import FieldInfo
from lakeloss.partitions import (
    ChunkSums,
    PartitionOutcome,
    SummaryMerger,
    chunk_sums,
    flag_examples,
    merged_examples,
)
from lakeloss.progress import ProgressBar, ProgressFactory

if TYPE_CHECKING:
    import geopandas as gpd
    import xarray as xr

    from lakeloss.blocks import PeriodTotals
    from lakeloss.inputs import Inputs

# Result columns of the water-body layer: title, description, unit.
_BODY_FIELDS: dict[str, tuple[str, str, str | None]] = {
    "area_m2": (
        "Water-surface area",
        "area the run uses: true (ellipsoidal) area of the polygon, or the area attribute "
        "(area_field) for points and with area_source = field",
        "m2",
    ),
    "area_before_repair_m2": (
        "Area before repair",
        "true area of the invalid input polygon before repair; empty where none was needed",
        "m2",
    ),
    "evap_mm": (
        "Evaporation depth",
        "open-water evaporation over the whole run, primary method",
        "mm",
    ),
    "evap_m3": ("Evaporation volume", "evap_mm times area_m2, divided by 1000 (mm to m)", "m3"),
    "evap_mm_per_year": ("Annual evaporation", "evap_mm scaled to one calendar year", "mm/yr"),
    "precip_mm": ("Rain on the surface", "precipitation depth over the whole run", "mm"),
    "net_mm": ("Net loss depth", "evap_mm minus precip_mm (negative: net gain)", "mm"),
    "net_m3": ("Net loss volume", "net_mm times area_m2, divided by 1000 (mm to m)", "m3"),
    "climate_coverage": (
        "Climate coverage",
        "share of the polygon with valid climate data, averaged over time",
        "1",
    ),
    "loss_rank": ("Loss rank", "rank by evap_m3, 1 = largest loss", None),
    "qa_flags": (
        "QA flags",
        "';'-separated quality flags, empty when clean (see README, 'When inputs are wrong')",
        None,
    ),
}
# Columns of the per-period table: each row is one water body in one period, so every
# amount is the period's, not the run's.
_PERIOD_FIELDS: dict[str, tuple[str, str, str | None]] = {
    "period_label": (
        "Period",
        "name of the period: 2031-01 (month), 2031 (year), 2030-31 (water year), 2031-DJF "
        "(season, December counted to the next year), the date (day) or the custom name",
        None,
    ),
    "period_start": (
        "Period start",
        "first day of the period covered by the data (later than the period's own first day "
        "when period_complete is false)",
        None,
    ),
    "period_end": ("Period end", "last day of the period covered by the data, inclusive", None),
    "days": ("Days", "days of climate data in the period (the days summed)", "d"),
    "days_in_period": ("Days in period", "calendar days of the whole period", "d"),
    "period_complete": (
        "Period complete",
        "1 when the data cover every day of the period; 0 for a partial period at the ends "
        "of the data or of the time window (its totals cover only the days column)",
        None,
    ),
    "evap_mm": (
        "Evaporation depth",
        "open-water evaporation in this period, primary method",
        "mm",
    ),
    "evap_m3": (
        "Evaporation volume",
        "evaporation volume in this period: evap_mm times the layer's area_m2, divided by 1000",
        "m3",
    ),
    "precip_mm": ("Rain on the surface", "precipitation depth in this period", "mm"),
    "net_mm": (
        "Net loss depth",
        "evap_mm minus precip_mm in this period (negative: net gain)",
        "mm",
    ),
    "net_m3": (
        "Net loss volume",
        "net loss volume in this period: net_mm times the layer's area_m2, divided by 1000",
        "m3",
    ),
}


@dataclass
class RunResult:
    """Everything a run produced, in memory.

    Attributes
    ----------
    waterbodies : geopandas.GeoDataFrame or None
        The layer with its original attributes plus the result columns (see README); None
        for a run written as it went (:func:`lakeloss.pipeline.run_to_directory`).
    by_period : pandas.DataFrame or None
        One row per water body and period (table ``evaporation_by_period``), indexed by the
        water-body id; ``period_start`` / ``period_end`` as datetime64 (cftime dates for
        calendar days the Gregorian calendar lacks, see :func:`period_dates`); None for a
        run written as it went.
    summary_by_period : pandas.DataFrame
        Totals over all water bodies per period.
    summary_by_group : pandas.DataFrame or None
        Totals per ``group_by`` attribute value and period.
    series : xarray.Dataset or None
        Per-step rates (waterbody x time) when ``[output] series = true``.
    provenance : dict
        Config, inputs with sha256, versions, counts, warnings and timings (run.json).
    written_to : Path or None
        Directory of the last :meth:`write`, None before.
    """

    waterbodies: gpd.GeoDataFrame | None
    by_period: pd.DataFrame | None
    summary_by_period: pd.DataFrame
    summary_by_group: pd.DataFrame | None
    series: xr.Dataset | None
    provenance: dict[str, Any]
    config: RunConfig
    id_field: str
    field_info: dict[str, dict[str, FieldInfo]] = field(default_factory=dict)
    written_to: Path | None = None
    totals: dict[str, float] = field(default_factory=dict)
    """Whole-run volumes over the bodies with a result: ``evaporation``, and ``rain`` and
    ``net loss`` when the run has rain. [m3]"""
    flag_examples: dict[str, list[Any]] = field(default_factory=dict)
    """The first ids of the bodies with each qa flag."""

    def write(
        self,
        directory: str | Path | None = None,
        *,
        overwrite: bool = False,
        progress: bool | ProgressFactory | None = None,
    ) -> Path:
        """Write every output file into ``directory`` (default ``[output] dir``), atomically.

        Only for a result held in memory (:func:`lakeloss.run`); a run written as it went is
        in its directory already.

        ``progress``: True for progress bars (tqdm), or ``progress(total, label)`` returning
        a tqdm-like bar, advanced per file written.
        """
        from lakeloss.io.write_run import write_result

        if self.waterbodies is None or self.by_period is None:
            raise ValueError("this result was written as it was computed; its tables are there")
        target = Path(directory) if directory is not None else self.config.output.dir
        self.written_to = write_result(
            self, target, overwrite=overwrite, progress=progress_bars(progress)
        )
        return self.written_to

    def __repr__(self) -> str:
        """A few lines: what was computed, the totals, and where it was written."""
        counts = self.provenance.get("counts", {})
        method = self.provenance.get("method", {})
        compare = ", ".join(method.get("compare", [])) or "none"
        totals = self.totals
        written = "not yet (call .write())" if self.written_to is None else str(self.written_to)
        return "\n".join(
            [
                f"<lakeloss RunResult: {counts.get('waterbodies', 0):,} water bodies "
                f"({self.id_field}), "
                f"{counts.get('periods', 0)} periods ({self.config.output.period})",
                f"  time axis   : {self.provenance.get('time_axis', '')}",
                f"  method      : {method.get('primary', '')} (compare: {compare})",
                "  totals      : "
                + ", ".join(f"{k} {v:,.0f} m3" for k, v in totals.items())
                + f"; {counts.get('flagged', 0)} water bodies flagged",
                f"  written to  : {written}>",
            ]
        )


def progress_bars(progress: bool | ProgressFactory | None) -> ProgressFactory | None:
    """``progress`` as the pipeline takes it: a bar factory or None.

    True gives tqdm bars (notebook widgets where Jupyter's are available), False or None
    none; a callable ``progress(total, label)`` is used as it is.
    """
    if progress is None or progress is False:
        return None
    if progress is True:
        from tqdm.auto import tqdm

        def bars(total: int, label: str) -> ProgressBar:
            return tqdm(total=total, desc=label, leave=False)

        return bars
    if not callable(progress):
        raise ConfigError(
            f"progress is a {type(progress).__name__}; expected True, False, None or a "
            "callable progress(total, label) returning a tqdm-like bar"
        )
    return progress


def _year_length(calendar: str) -> float:
    return {
        "noleap": 365.0,
        "365_day": 365.0,
        "all_leap": 366.0,
        "366_day": 366.0,
        "360_day": 360.0,
    }.get(calendar, 365.2425)


# Below this share of valid climate a body is flagged even when it lies inside the grid
# (nodata cells under part of it); common practice, no source.
_COVERAGE_FLAG_BELOW = 0.995
_NO_RESULT_GEOMETRY = {"geometry_empty", "geometry_null", "outside_grid"}


def _flags(
    config: RunConfig,
    facts: BodyFacts,
    totals: PeriodTotals,
    coverage: np.ndarray,
    filled_steps: np.ndarray,
) -> np.ndarray:
    """Per-body QA flags: geometry flags, then climate-coverage and clipping flags.

    The conditions are found with array operations; only the (usually few) flagged bodies
    have their tokens joined one by one.
    """
    sources = (
        np.asarray(facts.layer_flags, dtype=object),
        np.asarray(facts.geometry_flags, dtype=object),
    )
    valid_steps = totals.valid_steps.sum(axis=0)
    no_climate = valid_steps == 0
    gaps = (valid_steps > 0) & (valid_steps < totals.steps)
    # Judged over the steps with data: a day missing on the whole grid is a gap (flagged as
    # such), not a part of the polygon without climate.
    spatial = facts.grid_coverage * totals.coverage_sum / np.maximum(totals.covered_steps, 1)
    partial = (coverage > 0.0) & (spatial < _COVERAGE_FLAG_BELOW)
    negative = totals.negatives_per_body > 0
    negative_token = "negative_rates_clipped" if config.clip_negative else "negative_rates_kept"
    filled = filled_steps > 0
    any_flag = no_climate | gaps | filled | partial | negative
    for source in sources:
        any_flag |= source != ""
    out = np.full(len(facts.area_m2), "", dtype=object)
    for i in np.flatnonzero(any_flag):
        tokens: list[str] = []
        for source in sources:
            tokens.extend(t for t in str(source[i]).split(";") if t and t not in tokens)
        # An empty or off-grid geometry already says why there is no result.
        if no_climate[i] and not _NO_RESULT_GEOMETRY.intersection(tokens):
            tokens.append("no_valid_climate")
        if gaps[i]:
            tokens.append("climate_gaps")
        if filled[i]:
            tokens.append("climate_gaps_filled")
        if partial[i] and "partly_outside_grid" not in tokens:
            tokens.append("partial_climate_coverage")
        if negative[i]:
            tokens.append(negative_token)
        out[i] = ";".join(tokens)
    return out


def _body_table(
    config: RunConfig,
    inputs: Inputs,
    facts: BodyFacts,
    totals: PeriodTotals,
    filled_steps: np.ndarray,
) -> gpd.GeoDataFrame:
    frame = inputs.bodies.frame.copy()
    area = facts.area_m2
    primary = config.method.name
    evap = totals.depth[primary].sum(axis=0)
    precip = (
        totals.precip.sum(axis=0) if config.output.precipitation else np.full(len(area), np.nan)
    )
    total_days = float(inputs.axis.days.sum())
    coverage = facts.grid_coverage * totals.coverage_sum / max(totals.steps, 1)
    frame["area_m2"] = area
    # Shown beside area_m2 so a geometry_repaired flag can be judged by what it changed.
    frame["area_before_repair_m2"] = facts.area_before_repair_m2
    frame["evap_mm"] = evap
    frame["evap_m3"] = evap * area / 1000.0
    frame["evap_mm_per_year"] = evap * _year_length(inputs.axis.calendar) / total_days
    frame["precip_mm"] = precip
    frame["net_mm"] = evap - precip
    frame["net_m3"] = (evap - precip) * area / 1000.0
    frame["climate_coverage"] = np.where(np.isfinite(coverage), coverage, 0.0)
    for name in config.method.compare:
        if name != primary:
            frame[f"evap_mm_{name}"] = totals.depth[name].sum(axis=0)
    for unit in config.output.extra_volume_units:
        frame[f"evap_{unit}"] = frame["evap_m3"] * VOLUME_UNITS[unit]
        frame[f"net_{unit}"] = frame["net_m3"] * VOLUME_UNITS[unit]
    # The rank is over every body of the run: filled when all partitions are done.
    frame["loss_rank"] = pd.array(np.full(len(frame), pd.NA), dtype="Int64")
    coverage = frame["climate_coverage"].to_numpy()
    frame["qa_flags"] = _flags(config, facts, totals, coverage, filled_steps)
    geometry = frame.geometry.name
    return frame[[c for c in frame.columns if c != geometry] + [geometry]]


def loss_rank(volume: np.ndarray, ids: pd.Series) -> pd.arrays.IntegerArray:
    """Rank 1 = largest loss; ties broken by id so the order is reproducible.

    A body without a volume (no result) gets no rank (null), not the last ones.
    """
    has = np.isfinite(volume)
    key = np.where(has, -volume, np.inf)
    order = np.lexsort((ids.to_numpy(), key))
    rank = np.empty(len(volume), dtype=np.int64)
    rank[order] = np.arange(1, len(volume) + 1)
    return pd.arrays.IntegerArray(rank, ~has)


_PERIOD_KEYS = (
    "period_label",
    "period_start",
    "period_end",
    "days",
    "days_in_period",
    "period_complete",
)
"""Columns that describe a period, first in the period table and the summaries."""
_PERIOD_NUMBERS = ["evap_mm", "evap_m3", "precip_mm", "net_mm", "net_m3"]


def _period_table(
    config: RunConfig, inputs: Inputs, facts: BodyFacts, totals: PeriodTotals
) -> pd.DataFrame:
    """One row per water body and period, indexed by the water-body id (rows by body)."""
    periods = inputs.periods
    # Segments between the periods of a custom table are summed but not reported.
    kept = periods.rows
    n_periods, n = len(kept), totals.depth[config.method.name].shape[1]
    ids = inputs.bodies.frame[inputs.bodies.id_field]
    body_of_row = np.repeat(np.arange(n), n_periods)
    period_of_row = np.tile(np.arange(n_periods), n)
    evap = totals.depth[config.method.name][kept].T
    precip = (
        totals.precip[kept].T if config.output.precipitation else np.full((n, n_periods), np.nan)
    )
    area = facts.area_m2[:, None]
    compared = config.method.all[1:]
    # Rows by water body, then period: the (period, body) sums transposed, so no sort of
    # n_periods x n rows is needed. The numbers are written once into one float block that
    # the frame adopts as it is, as separate columns would be copied once more
    # (benchmarks/README.md, "End to end", figures behind the code).
    names = _PERIOD_NUMBERS + [f"evap_mm_{name}" for name in compared]
    block = np.empty((len(names), n, n_periods))
    block[0] = evap
    np.divide(np.multiply(evap, area, out=block[1]), 1000.0, out=block[1])
    block[2] = precip
    np.subtract(evap, precip, out=block[3])
    np.divide(np.multiply(block[3], area, out=block[4]), 1000.0, out=block[4])
    for i, name in enumerate(compared, start=len(_PERIOD_NUMBERS)):
        block[i] = totals.depth[name][kept].T
    index = pd.Index(_repeat_rows(ids, body_of_row), name=inputs.bodies.id_field)
    table = pd.DataFrame(block.reshape(len(names), -1).T, columns=names, index=index, copy=False)
    starts, ends = period_dates(
        [periods.starts[k] for k in kept], [periods.ends[k] for k in kept], inputs.axis.calendar
    )
    labels = np.array([periods.labels[k] for k in kept] if periods.labels else [""] * len(kept))
    days_in = periods.days if periods.days_in_period is None else periods.days_in_period
    # Taken from the few labels' string array: validating 1.2e7 strings one by one (as
    # pd.array(..., dtype="string") does) took 2.7 s at 10^6 bodies, the take 0.09 s.
    table.insert(0, "period_label", pd.array(labels, dtype="string").take(period_of_row))
    table.insert(1, "period_start", starts.take(period_of_row))
    table.insert(2, "period_end", ends.take(period_of_row))
    table.insert(3, "days", np.rint(periods.days[kept]).astype(np.int64)[period_of_row])
    table.insert(4, "days_in_period", np.rint(days_in[kept]).astype(np.int64)[period_of_row])
    table.insert(5, "period_complete", periods.complete[kept][period_of_row])
    return table


def period_dates(
    starts: Sequence[str], ends: Sequence[str], calendar: str
) -> tuple[pd.Index, pd.Index]:
    """First and last days of the periods as dates a notebook computes with.

    ``datetime64[s]`` (pandas Timestamps; seconds, so years past 2262 fit) when every day
    exists in the Gregorian calendar, as in the standard, proleptic Gregorian and no-leap
    calendars; otherwise (a 360-day calendar's 30 February, an all-leap calendar's
    29 February of a common year) cftime dates of the run's calendar, for both columns.
    """
    try:
        return (
            pd.Index(np.array(starts, dtype="datetime64[s]")),
            pd.Index(np.array(ends, dtype="datetime64[s]")),
        )
    except ValueError:  # a day the Gregorian calendar lacks

        def dates(texts: Sequence[str]) -> pd.Index:
            values = np.empty(len(texts), dtype=object)
            values[:] = [
                cftime.datetime(*map(int, text.split("-")), calendar=calendar) for text in texts
            ]
            return pd.Index(values, dtype=object)

        return dates(starts), dates(ends)


def _repeat_rows(
    values: pd.Series, rows: np.ndarray
) -> pd.api.extensions.ExtensionArray | np.ndarray:
    """``values`` at positions ``rows``; string columns stay string arrays (no objects)."""
    if isinstance(values.dtype, pd.StringDtype):
        return values.array.take(rows)
    return values.to_numpy()[rows]


def _summary_chunks(
    config: RunConfig, bodies: gpd.GeoDataFrame, by_period: pd.DataFrame, n_periods: int
) -> tuple[ChunkSums, ChunkSums | None]:
    """The chunk sums behind the totals per period (and per group and period).

    ``by_period`` must be laid out as :func:`_period_table` builds it: ``n_periods`` rows per
    water body, bodies in the order of ``bodies``, periods in time order. Its columns are
    then (body, period) arrays, summed with one ``bincount`` per column and chunk
    (:func:`lakeloss.partitions.chunk_sums`), as a group-by is far slower on 10^7 rows
    (benchmarks/README.md, "End to end", figures behind the code).
    """
    n = len(bodies)
    area = bodies["area_m2"].to_numpy(dtype=float)

    def by_body(column: str) -> np.ndarray:
        return by_period[column].to_numpy(dtype=float, na_value=np.nan).reshape(n, n_periods)

    valid = np.isfinite(by_body("evap_mm"))
    columns = {
        "area_m2": np.broadcast_to(area[:, None], (n, n_periods)),
        "evap_m3": by_body("evap_m3"),
        "precip_m3": by_body("precip_mm") * area[:, None] / 1000.0,
        "net_m3": by_body("net_m3"),
    }
    for name in config.method.all[1:]:
        columns[f"evap_m3_{name}"] = by_body(f"evap_mm_{name}") * area[:, None] / 1000.0
    totals = chunk_sums(columns, valid, None)
    grouped = None
    if config.waterbodies.group_by:
        grouped = chunk_sums(columns, valid, bodies[list(config.waterbodies.group_by)])
    return totals, grouped


def field_info(config: RunConfig, id_field: str) -> dict[str, dict[str, FieldInfo]]:
    """Titles, descriptions and units of the columns of the layer and the period table."""
    body = {k: FieldInfo(*v) for k, v in _BODY_FIELDS.items()}
    for name in config.method.all[1:]:
        body[f"evap_mm_{name}"] = FieldInfo(
            f"Evaporation depth, {name}", f"evaporation over the whole run by method {name}", "mm"
        )
    for unit in config.output.extra_volume_units:
        body[f"evap_{unit}"] = FieldInfo("Evaporation volume", "evap_m3 in " + unit, unit)
        body[f"net_{unit}"] = FieldInfo("Net loss volume", "net_m3 in " + unit, unit)
    period = {
        id_field: FieldInfo(
            "Water body", f"{id_field} of the water body in the waterbodies layer (indexed)"
        )
    }
    period.update((k, FieldInfo(*v)) for k, v in _PERIOD_FIELDS.items())
    for name in config.method.all[1:]:
        period[f"evap_mm_{name}"] = FieldInfo(
            f"Evaporation depth, {name}", f"evaporation in this period by method {name}", "mm"
        )
    return {"waterbodies": body, "evaporation_by_period": period}


def partition_tables(
    config: RunConfig,
    inputs: Inputs,
    facts: BodyFacts,
    totals: PeriodTotals,
    filled_steps: np.ndarray,
    index: int,
    rows: range,
) -> tuple[gpd.GeoDataFrame, pd.DataFrame, PartitionOutcome]:
    """One partition's rows of the layer and of the period table, and its outcome.

    ``inputs`` and ``facts`` hold the partition's bodies only; ``loss_rank`` is left empty
    (:func:`loss_rank` fills it once every partition is done).
    """
    bodies = _body_table(config, inputs, facts, totals, filled_steps)
    by_period = _period_table(config, inputs, facts, totals)
    n_periods = len(inputs.periods.rows)
    summed, grouped = _summary_chunks(config, bodies, by_period, n_periods)
    assert totals.gaps is not None  # compute_totals always tallies the gaps
    area = bodies["area_m2"].to_numpy(dtype=float)
    rain = bodies["precip_mm"].to_numpy(dtype=float) * area / 1000.0
    has_rain = not np.isnan(rain).all()
    outcome = PartitionOutcome(
        volumes={
            "evaporation": float(np.nansum(bodies["evap_m3"].to_numpy(dtype=float))),
            "rain": float(np.nansum(rain)),
            "net loss": float(np.nansum(bodies["net_m3"].to_numpy(dtype=float))),
        },
        has_rain=has_rain,
        flag_examples=flag_examples(bodies["qa_flags"], bodies[inputs.bodies.id_field]),
        index=index,
        rows=rows,
        volume=bodies["evap_m3"].to_numpy(dtype=float),
        totals_chunks=summed,
        group_chunks=grouped,
        counts=_counts(config, inputs, bodies, totals, filled_steps),
        negatives=dict(totals.negatives),
        gaps=PartitionGaps.of(totals.gaps),
        periods=by_period[list(_PERIOD_KEYS)].iloc[:n_periods].reset_index(drop=True),
    )
    return bodies, by_period, outcome


def summaries(
    config: RunConfig, outcomes: Sequence[PartitionOutcome]
) -> tuple[pd.DataFrame, pd.DataFrame | None]:
    """Totals per period (and per group and period) of every partition, in layer order."""
    first = outcomes[0]
    assert first.periods is not None
    n_periods = len(first.periods)
    merged = SummaryMerger(n_periods)
    for outcome in outcomes:
        merged.add(outcome.totals_chunks)
    by_period = merged.table(first.periods, None)
    by_group = None
    if config.waterbodies.group_by:
        grouped = SummaryMerger(n_periods)
        for outcome in outcomes:
            assert outcome.group_chunks is not None
            grouped.add(outcome.group_chunks)
        by_group = grouped.table(first.periods, config.waterbodies.group_by)
    return by_period, by_group


def run_totals(outcomes: Sequence[PartitionOutcome]) -> dict[str, float]:
    """Whole-run volumes summed over the bodies with a result, partition by partition. [m3]"""
    sums = {"evaporation": 0.0, "rain": 0.0, "net loss": 0.0}
    rain = False
    for outcome in outcomes:
        for name, value in outcome.volumes.items():
            sums[name] += value
        rain = rain or outcome.has_rain
    return sums if rain else {"evaporation": sums["evaporation"]}


def summary_result(
    config: RunConfig,
    summary_period: pd.DataFrame,
    summary_group: pd.DataFrame | None,
    outcomes: Sequence[PartitionOutcome],
    provenance: dict[str, Any],
    id_field: str,
) -> RunResult:
    """The :class:`RunResult` of a run written as it went: summaries, no per-body tables."""
    return RunResult(
        waterbodies=None,
        by_period=None,
        summary_by_period=summary_period,
        summary_by_group=summary_group,
        series=None,
        provenance=provenance,
        config=config,
        id_field=id_field,
        field_info=field_info(config, id_field),
        totals=run_totals(outcomes),
        flag_examples=merged_examples(outcomes, list(provenance["counts"]["qa_flags"])),
    )


def gathered(
    config: RunConfig,
    parts: Sequence[tuple[gpd.GeoDataFrame, pd.DataFrame]],
    rank: pd.arrays.IntegerArray,
    outcomes: Sequence[PartitionOutcome],
    provenance: dict[str, Any],
    id_field: str,
    series: xr.Dataset | None = None,
) -> RunResult:
    """A :class:`RunResult` in memory from the tables of every partition (the API's run)."""
    import geopandas as gpd

    bodies = gpd.GeoDataFrame(pd.concat([p[0] for p in parts], ignore_index=True))
    bodies = bodies.set_crs(parts[0][0].crs, allow_override=True)
    bodies["loss_rank"] = rank
    by_period = pd.concat([p[1] for p in parts])
    summary_period, summary_group = summaries(config, outcomes)
    return RunResult(
        totals=run_totals(outcomes),
        flag_examples=merged_examples(outcomes, list(provenance["counts"]["qa_flags"])),
        waterbodies=bodies,
        by_period=by_period,
        summary_by_period=summary_period,
        summary_by_group=summary_group,
        series=series,
        provenance=provenance,
        config=config,
        id_field=id_field,
        field_info=field_info(config, id_field),
    )


def flag_counts(flags: pd.Series) -> dict[str, int]:
    """Water bodies per qa flag, most frequent first (only flags that occur)."""
    tokens = flags[flags != ""].astype(str).str.split(";").explode()
    counts = tokens[tokens != ""].value_counts(sort=False)
    ordered = sorted(counts.items(), key=lambda item: (-item[1], item[0]))
    return {str(flag): int(count) for flag, count in ordered}


def _counts(
    config: RunConfig,
    inputs: Inputs,
    bodies: gpd.GeoDataFrame,
    totals: PeriodTotals,
    filled_steps: np.ndarray,
) -> dict[str, Any]:
    """run.json's ``counts``: bodies, periods and steps, and how many of each kind of trouble."""
    flags = bodies["qa_flags"]
    primary = totals.depth[config.method.name]
    return {
        "waterbodies": int(len(bodies)),
        "periods": int(len(inputs.periods.rows)),
        "time_steps": int(len(inputs.axis.days)),
        "days": int(round(float(inputs.axis.days.sum()))),
        "flagged": int((flags != "").sum()),
        "without_result": int(bodies["evap_mm"].isna().sum()),
        "without_any_result": int((~np.isfinite(primary[inputs.periods.rows]).any(axis=0)).sum()),
        "qa_flags": flag_counts(flags),
        "no_valid_climate": int(flags.str.contains("no_valid_climate").sum()),
        "filled_climate_steps": int(filled_steps.sum()),
        "negative_rates": {k: int(v) for k, v in totals.negatives.items()},
        "negative_rates_clipped": int(sum(totals.negatives.values()))
        if config.clip_negative
        else 0,
    }
