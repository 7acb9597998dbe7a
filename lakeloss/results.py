"""The result of a run: tables with documented columns and units, and how they are written.

:func:`assemble` turns the pipeline's period sums into a :class:`RunResult`;
:meth:`RunResult.write` writes it atomically through ``io/``.
"""

from __future__ import annotations

import hashlib
import importlib.metadata
import platform
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import cftime
import numpy as np
import pandas as pd

from lakeloss import __version__
from lakeloss.config import VOLUME_UNITS, RunConfig
from lakeloss.errors import ConfigError
from lakeloss.io.gpkg import FieldInfo

CAUTION = (
    "Estimates for screening and water accounting only; not for design, licensing, "
    "allocation or dam-safety decisions. Defer to local codes, the regulator and licensed "
    "professional practice."
)

# Result columns of the water-body layer: title, description, unit.
_BODY_FIELDS: dict[str, tuple[str, str, str | None]] = {
    "area_m2": ("Water-surface area", "true (ellipsoidal) area of the polygon", "m2"),
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
    "period_start": ("Period start", "first day of the period", None),
    "period_end": ("Period end", "last day of the period, inclusive", None),
    "days": ("Days", "days of climate data in the period", "d"),
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
    waterbodies : geopandas.GeoDataFrame
        The layer with its original attributes plus the result columns (see README).
    by_period : pandas.DataFrame
        One row per water body and period (table ``evaporation_by_period``), indexed by the
        water-body id; ``period_start`` / ``period_end`` as datetime64 (cftime dates for
        calendar days the Gregorian calendar lacks, see :func:`period_dates`).
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

    waterbodies: Any
    by_period: pd.DataFrame
    summary_by_period: pd.DataFrame
    summary_by_group: pd.DataFrame | None
    series: Any
    provenance: dict[str, Any]
    config: RunConfig
    id_field: str
    field_info: dict[str, dict[str, FieldInfo]] = field(default_factory=dict)
    written_to: Path | None = None

    def write(
        self, directory: str | Path | None = None, *, overwrite: bool = False, progress: Any = None
    ) -> Path:
        """Write every output file into ``directory`` (default ``[output] dir``), atomically.

        ``progress``: True for progress bars (tqdm), or ``progress(total, label)`` returning
        a tqdm-like bar, advanced per file written.
        """
        from lakeloss.io.write_run import write_result

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
        layer = self.waterbodies
        area = layer["area_m2"].to_numpy(dtype=float)
        rain = layer["precip_mm"].to_numpy(dtype=float) * area / 1000.0
        totals = {"evaporation": np.nansum(layer["evap_m3"].to_numpy(dtype=float))}
        if not np.isnan(rain).all():  # without precipitation there is no rain or net total
            totals["rain"] = np.nansum(rain)
            totals["net loss"] = np.nansum(layer["net_m3"].to_numpy(dtype=float))
        written = "not yet (call .write())" if self.written_to is None else str(self.written_to)
        return "\n".join(
            [
                f"<lakeloss RunResult: {len(layer):,} water bodies ({self.id_field}), "
                f"{counts.get('periods', 0)} periods ({self.config.output.period})",
                f"  time axis   : {self.provenance.get('time_axis', '')}",
                f"  method      : {method.get('primary', '')} (compare: {compare})",
                "  totals      : "
                + ", ".join(f"{k} {v:,.0f} m3" for k, v in totals.items())
                + f"; {counts.get('flagged', 0)} water bodies flagged",
                f"  written to  : {written}>",
            ]
        )


def progress_bars(progress: Any) -> Any:
    """``progress`` as the pipeline takes it: a bar factory or None.

    True gives tqdm bars (notebook widgets where Jupyter's are available), False or None
    none; a callable ``progress(total, label)`` is used as it is.
    """
    if progress is None or progress is False:
        return None
    if progress is True:
        from tqdm.auto import tqdm

        def bars(total: int, label: str) -> Any:
            return tqdm(total=total, desc=label, leave=False)

        return bars
    if not callable(progress):
        raise ConfigError(
            f"progress is a {type(progress).__name__}; expected True, False, None or a "
            "callable progress(total, label) returning a tqdm-like bar"
        )
    return progress


def _sha256(path: Path) -> str | None:
    """sha256 hex digest of a file's bytes, or None if it cannot be read."""
    try:
        with open(path, "rb") as handle:
            return hashlib.file_digest(handle, "sha256").hexdigest()
    except OSError:
        return None


def _versions() -> dict[str, str]:
    names = [
        "lakeloss",
        "numpy",
        "scipy",
        "pandas",
        "geopandas",
        "shapely",
        "pyogrio",
        "pyproj",
        "rasterio",
        "xarray",
        "netCDF4",
        "pint",
        "dask",
    ]
    out = {}
    for name in names:
        try:
            out[name] = importlib.metadata.version(name)
        except importlib.metadata.PackageNotFoundError:
            out[name] = "not installed"
    out["python"] = platform.python_version()
    return out


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
    inputs: Any,
    weights: Any,
    sums: Any,
    coverage: np.ndarray,
    filled_steps: np.ndarray,
) -> np.ndarray:
    """Per-body QA flags: geometry flags, then climate-coverage and clipping flags.

    The conditions are found with array operations; only the (usually few) flagged bodies
    have their tokens joined one by one.
    """
    first = next(iter(weights.values()))
    sources = (np.asarray(inputs.layer.flags, dtype=object), np.asarray(first.flags, dtype=object))
    valid_steps = sums.valid_steps.sum(axis=0)
    no_climate = valid_steps == 0
    gaps = (valid_steps > 0) & (valid_steps < sums.steps)
    # Judged over the steps with data: a day missing on the whole grid is a gap (flagged as
    # such), not a part of the polygon without climate.
    spatial = first.grid_coverage * sums.coverage_sum / np.maximum(sums.covered_steps, 1)
    partial = (coverage > 0.0) & (spatial < _COVERAGE_FLAG_BELOW)
    negative = sums.negatives_per_body > 0
    negative_token = (
        "negative_rates_clipped"
        if config.parameters.get("clip_negative", True)
        else "negative_rates_kept"
    )
    filled = filled_steps > 0
    any_flag = no_climate | gaps | filled | partial | negative
    for source in sources:
        any_flag |= source != ""
    out = np.full(inputs.n_waterbodies, "", dtype=object)
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
    config: RunConfig, inputs: Any, weights: Any, sums: Any, filled_steps: np.ndarray
) -> Any:
    first = next(iter(weights.values()))
    frame = inputs.layer.frame.copy()
    area = first.polygon_area_m2
    primary = config.method.name
    evap = sums.depth[primary].sum(axis=0)
    precip = sums.precip.sum(axis=0) if config.output.precipitation else np.full(len(area), np.nan)
    total_days = float(inputs.axis.days.sum())
    coverage = first.grid_coverage * sums.coverage_sum / max(sums.steps, 1)
    frame["area_m2"] = area
    # Shown beside area_m2 so a geometry_repaired flag can be judged by what it changed.
    frame["area_before_repair_m2"] = first.area_before_repair_m2
    frame["evap_mm"] = evap
    frame["evap_m3"] = evap * area / 1000.0
    frame["evap_mm_per_year"] = evap * _year_length(inputs.axis.calendar) / total_days
    frame["precip_mm"] = precip
    frame["net_mm"] = evap - precip
    frame["net_m3"] = (evap - precip) * area / 1000.0
    frame["climate_coverage"] = np.where(np.isfinite(coverage), coverage, 0.0)
    for name in config.method.compare:
        if name != primary:
            frame[f"evap_mm_{name}"] = sums.depth[name].sum(axis=0)
    for unit in config.output.extra_volume_units:
        frame[f"evap_{unit}"] = frame["evap_m3"] * VOLUME_UNITS[unit]
        frame[f"net_{unit}"] = frame["net_m3"] * VOLUME_UNITS[unit]
    frame["loss_rank"] = _rank(frame["evap_m3"].to_numpy(), frame[inputs.layer.id_field])
    coverage = frame["climate_coverage"].to_numpy()
    frame["qa_flags"] = _flags(config, inputs, weights, sums, coverage, filled_steps)
    geometry = frame.geometry.name
    return frame[[c for c in frame.columns if c != geometry] + [geometry]]


def _rank(volume: np.ndarray, ids: pd.Series) -> pd.arrays.IntegerArray:
    """Rank 1 = largest loss; ties broken by id so the order is reproducible.

    A body without a volume (no result) gets no rank (null), not the last ones.
    """
    has = np.isfinite(volume)
    key = np.where(has, -volume, np.inf)
    order = np.lexsort((ids.to_numpy(), key))
    rank = np.empty(len(volume), dtype=np.int64)
    rank[order] = np.arange(1, len(volume) + 1)
    return pd.arrays.IntegerArray(rank, ~has)


_PERIOD_NUMBERS = ["evap_mm", "evap_m3", "precip_mm", "net_mm", "net_m3"]


def _period_table(config: RunConfig, inputs: Any, weights: Any, sums: Any) -> pd.DataFrame:
    """One row per water body and period, indexed by the water-body id (rows by body)."""
    first = next(iter(weights.values()))
    periods = inputs.periods
    n_periods, n = sums.depth[config.method.name].shape
    ids = inputs.layer.frame[inputs.layer.id_field]
    body_of_row = np.repeat(np.arange(n), n_periods)
    period_of_row = np.tile(np.arange(n_periods), n)
    evap = sums.depth[config.method.name].T
    precip = sums.precip.T if config.output.precipitation else np.full((n, n_periods), np.nan)
    area = first.polygon_area_m2[:, None]
    compared = config.method.all[1:]
    # Rows by water body, then period: the (period, body) sums transposed, so no sort of
    # n_periods x n rows is needed. The numbers are written once into one float block that
    # the frame adopts as it is: building it from separate columns copied 0.5 GB at 10^6.
    names = _PERIOD_NUMBERS + [f"evap_mm_{name}" for name in compared]
    block = np.empty((len(names), n, n_periods))
    block[0] = evap
    np.divide(np.multiply(evap, area, out=block[1]), 1000.0, out=block[1])
    block[2] = precip
    np.subtract(evap, precip, out=block[3])
    np.divide(np.multiply(block[3], area, out=block[4]), 1000.0, out=block[4])
    for i, name in enumerate(compared, start=len(_PERIOD_NUMBERS)):
        block[i] = sums.depth[name].T
    index = pd.Index(_repeat_rows(ids, body_of_row), name=inputs.layer.id_field)
    table = pd.DataFrame(block.reshape(len(names), -1).T, columns=names, index=index, copy=False)
    starts, ends = period_dates(periods.starts, periods.ends, inputs.axis.calendar)
    table.insert(0, "period_start", starts.take(period_of_row))
    table.insert(1, "period_end", ends.take(period_of_row))
    table.insert(2, "days", np.rint(periods.days).astype(np.int64)[period_of_row])
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


def _repeat_rows(values: pd.Series, rows: np.ndarray) -> Any:
    """``values`` at positions ``rows``; string columns stay string arrays (no objects)."""
    if isinstance(values.dtype, pd.StringDtype):
        return values.array.take(rows)
    return values.to_numpy()[rows]


def _summaries(
    config: RunConfig, bodies: Any, by_period: pd.DataFrame, n_periods: int
) -> tuple[pd.DataFrame, pd.DataFrame | None]:
    """Totals per period (and per group and period) of the period table.

    ``by_period`` must be laid out as :func:`_period_table` builds it: ``n_periods`` rows per
    water body, bodies in the order of ``bodies``, periods in time order. Its columns are
    then (body, period) arrays, and the totals are counted with one ``bincount`` per column
    over integer (group, period) codes: for 10^7 rows many times faster than a group-by.
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
    keys = ["period_start", "period_end", "days"]
    periods = by_period[keys].iloc[:n_periods].reset_index(drop=True)
    by_period_total = _totals(np.zeros(n, dtype=np.int64), None, valid, columns, periods)
    by_group = None
    if config.waterbodies.group_by:
        group_by = list(config.waterbodies.group_by)
        # Groups in sorted order, a missing value as a group of its own (last).
        grouped = bodies[group_by].groupby(group_by, sort=True, dropna=False)
        codes = grouped.ngroup().to_numpy(dtype=np.int64)
        names = grouped.size().index.to_frame(index=False)
        by_group = _totals(codes, names, valid, columns, periods)
    return by_period_total, by_group


def _totals(
    codes: np.ndarray,
    names: pd.DataFrame | None,
    valid: np.ndarray,
    columns: Mapping[str, np.ndarray],
    periods: pd.DataFrame,
) -> pd.DataFrame:
    """Sums over the valid (body, period) cells per (group, period), groups then periods.

    Every group and period keeps its row, so one with no valid water body shows
    n_waterbodies = 0 and empty totals instead of vanishing from the table; a missing
    value inside a valid cell counts as 0 (as a skipping sum does).
    """
    n_groups = 1 if names is None else len(names)
    n_periods = valid.shape[1]
    cell = (codes[:, None] * n_periods + np.arange(n_periods)[None, :]).ravel()
    size = n_groups * n_periods
    count = np.bincount(cell, weights=valid.ravel(), minlength=size).astype(np.int64)
    totals: dict[str, np.ndarray] = {"n_waterbodies": count}
    for name, values in columns.items():  # area_m2, the volumes, then compare methods
        kept = np.where(valid & ~np.isnan(values), values, 0.0).ravel()
        totals[name] = np.where(count > 0, np.bincount(cell, kept, minlength=size), np.nan)
    parts = [
        periods.take(np.tile(np.arange(n_periods), n_groups)).reset_index(drop=True),
        pd.DataFrame(totals),
    ]
    if names is not None:
        rows = np.repeat(np.arange(n_groups), n_periods)
        parts.insert(0, names.take(rows).reset_index(drop=True))
    return pd.concat(parts, axis=1)


SERIES_VARIABLES: dict[str, dict[str, str]] = {
    # CF's lwe_water_evaporation_rate (canonical m s-1) is evaporation as a depth of liquid
    # water per time; CF accepts any units convertible to the canonical ones, so mm day-1.
    "evaporation_rate": {
        "units": "mm day-1",
        "long_name": "open-water evaporation rate from the water surface, primary method",
        "standard_name": "lwe_water_evaporation_rate",
    },
    "precipitation_rate": {
        "units": "mm day-1",
        "long_name": "precipitation rate on the water surface",
        "standard_name": "lwe_precipitation_rate",
    },
}
"""Per-step series variables (series.nc) and their CF attributes."""


def series_history(config: RunConfig) -> str:
    """CF ``history`` line of series.nc: when and by what the file was made."""
    stamp = datetime.now(UTC).isoformat(timespec="seconds")
    return f"{stamp} lakeloss {__version__}, method {config.method.name}"


def _field_info(config: RunConfig, bodies: Any, id_field: str) -> dict[str, dict[str, FieldInfo]]:
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


def inputs_provenance(config: RunConfig) -> list[dict[str, Any]]:
    """Every input file with its sha256 (for run.json); each file is read once."""
    digests: dict[Path, str | None] = {}  # one read per file: variables often share one

    def sha256(path: Path) -> str | None:
        if path not in digests:
            digests[path] = _sha256(path)
        return digests[path]

    items = [
        {
            "role": "waterbodies",
            "path": str(config.waterbodies.path),
            "sha256": sha256(config.waterbodies.path),
        }
    ]
    for item in config.climate:
        items.append(
            {
                "role": item.key,
                "path": str(item.path),
                "variable": item.variable,
                "sha256": sha256(item.path),
            }
        )
    return items


def _per_body_sources(config: RunConfig) -> dict[str, str]:
    # As the pipeline reads them: a raster elevation replaces an attribute's.
    sources = {}
    if config.waterbodies.elevation_field:
        sources["elevation"] = "field"
    if any(item.quantity == "elevation" for item in config.climate):
        sources["elevation"] = "raster"
    return sources


def effective_parameters(config: RunConfig) -> dict[str, dict[str, Any]]:
    """Every parameter the run used, with its value, unit, source and methods (run.json)."""
    from lakeloss.physics import registry

    used = registry.effective_parameters(
        config.method.all, config.parameters, _per_body_sources(config)
    )
    written = config.source.get("parameters", {})
    used["clip_negative"] = {
        "value": bool(config.parameters.get("clip_negative", True)),
        "unit": "1",
        "source": "config" if "clip_negative" in written else "default",
        "methods": list(config.method.all),
    }
    return used


def run_notes(config: RunConfig) -> list[str]:
    """Assumptions the run made from defaults, one sentence each (run.json and stderr)."""
    from lakeloss.physics import registry

    available = [*config.quantities, *_per_body_sources(config)]
    return registry.assumption_notes(config.method.all, config.parameters, available)


def assemble(
    config: RunConfig,
    inputs: Any,
    weights: Any,
    sums: Any,
    run_warnings: list[str],
    timings: Mapping[str, float],
    *,
    series: Any = None,
    weights_cached: bool = False,
    inputs_record: list[dict[str, Any]] | None = None,
    gaps: Any = None,
) -> RunResult:
    """Build the result tables and the provenance from the period sums.

    ``inputs_record`` is :func:`inputs_provenance`'s result when the caller already has it
    (the pipeline hashes the inputs in a background thread while it computes); ``gaps`` the
    :class:`lakeloss.gaps.GapReport` of the run.
    """
    filled_steps = (
        gaps.filled_steps_per_body if gaps is not None else np.zeros(len(inputs.layer.frame), int)
    )
    bodies = _body_table(config, inputs, weights, sums, filled_steps)
    by_period = _period_table(config, inputs, weights, sums)
    summary_period, summary_group = _summaries(
        config, bodies, by_period, len(inputs.periods.starts)
    )
    flags = bodies["qa_flags"]
    provenance = {
        "lakeloss_version": __version__,
        "created": datetime.now(UTC).isoformat(timespec="seconds"),
        "caution": CAUTION,
        "config": _jsonable(config.source),
        "inputs": inputs_provenance(config) if inputs_record is None else inputs_record,
        "versions": _versions(),
        "method": {
            "primary": config.method.name,
            "compare": list(config.method.compare),
            "parameters": _jsonable(dict(config.parameters)),
            "effective_parameters": _jsonable(effective_parameters(config)),
        },
        "notes": run_notes(config),
        "time_axis": inputs.axis.describe(),
        "counts": {
            "waterbodies": int(len(bodies)),
            "periods": int(len(inputs.periods.starts)),
            "time_steps": int(len(inputs.axis.days)),
            "flagged": int((flags != "").sum()),
            "without_result": int(bodies["evap_mm"].isna().sum()),
            "without_any_result": int(
                (~np.isfinite(sums.depth[config.method.name]).any(axis=0)).sum()
            ),
            "qa_flags": flag_counts(flags),
            "no_valid_climate": int(flags.str.contains("no_valid_climate").sum()),
            "filled_climate_steps": int(filled_steps.sum()),
            "negative_rates": {k: int(v) for k, v in sums.negatives.items()},
            "negative_rates_clipped": int(sum(sums.negatives.values()))
            if config.parameters.get("clip_negative", True)
            else 0,
        },
        "climate_gaps": _gaps_record(gaps),
        "weights_from_cache": bool(weights_cached),
        "warnings": list(run_warnings),
        "timings_s": {k: round(v, 3) for k, v in timings.items()},
    }
    return RunResult(
        waterbodies=bodies,
        by_period=by_period,
        summary_by_period=summary_period,
        summary_by_group=summary_group,
        series=series,
        provenance=provenance,
        config=config,
        id_field=inputs.layer.id_field,
        field_info=_field_info(config, bodies, inputs.layer.id_field),
    )


def no_total_message(result: RunResult, target: Path) -> str | None:
    """Why a run that wrote its outputs must still fail: no body has a whole-run total.

    Some periods have results (a run without any is refused before writing), so the outputs
    are kept for them; the exit status tells scripts that the run's totals are missing.
    """
    counts = result.provenance["counts"]
    if not counts["waterbodies"] or counts["without_result"] < counts["waterbodies"]:
        return None
    return (
        f"none of the {counts['waterbodies']} water bodies has a whole-run evaporation total "
        f"(gaps in the climate too long to fill, see the warnings above); the periods that "
        f"have results are written to {target}; fill the gaps (raise [checks] max_gap_steps) "
        "or limit the run to the dates with data"
    )


def summary_line(result: RunResult, target: Path) -> str:
    """One line for the end of a run: what was computed, over what span, what is missing.

    The volume is the sum over the bodies with a result, over the whole run; its span is
    named, and a run of more than a year gives the volume per year as well.
    """
    counts = result.provenance["counts"]
    bodies = result.waterbodies
    n_periods = int(counts["periods"])
    periods = result.by_period.iloc[:n_periods]
    days = int(periods["days"].sum())
    years = days / 365.2425
    with_result = int(bodies["evap_mm"].notna().sum())
    total = float(bodies["evap_m3"].sum(skipna=True))
    # Dates are Timestamps or cftime dates in the API; the line names the calendar days.
    first, last = periods["period_start"].iloc[0], periods["period_end"].iloc[-1]
    span = f"{str(first)[:10]}..{str(last)[:10]}"
    over = f"over {days} days" if years < 0.95 else f"over {years:.1f} years"
    per_year = f", {total / years:,.0f} m3 per year" if years >= 1.5 else ""
    head = f"{counts['waterbodies']} water bodies, {n_periods} periods ({span}): "
    method = result.config.method.name
    volume = (
        f"{total:,.0f} m3 evaporated {over}{per_year} ({method}) "
        f"by the {with_result} with a whole-run result"
        if with_result
        else f"no whole-run evaporation volume ({method})"
    )
    return f"{head}{volume}; {without_result(counts)}; {counts['flagged']} flagged; outputs in {target}"


def without_result(counts: Mapping[str, Any]) -> str:
    """How many bodies have no whole-run result, and how many of those have some periods."""
    text = f"{counts['without_result']} without"
    some = int(counts["without_result"]) - int(counts["without_any_result"])
    return text + (f" ({some} of them with results for some periods)" if some else "")


def flag_notes(result: RunResult, examples: int = 5) -> list[str]:
    """One note per qa flag that occurs: how many bodies, and the first ids."""
    flags = result.waterbodies["qa_flags"].astype(str)
    ids = result.waterbodies[result.id_field]
    notes = []
    tokens = flags[flags != ""].str.split(";")
    for flag, count in result.provenance["counts"]["qa_flags"].items():
        first = ids.loc[tokens.index[tokens.map(lambda t, f=flag: f in t)]].head(examples)
        more = ", ..." if count > examples else ""
        shown = ", ".join(str(v) for v in first)
        notes.append(
            f"{count} water bodies flagged {flag} ({result.id_field} {shown}{more}); "
            "see qa_flags in the outputs"
        )
    if result.provenance["counts"]["without_result"]:
        notes.append(
            f"{result.provenance['counts']['without_result']} water bodies have no "
            "whole-run result (evap_mm empty) and no loss_rank"
        )
    return notes


def flag_counts(flags: pd.Series) -> dict[str, int]:
    """Water bodies per qa flag, most frequent first (only flags that occur)."""
    tokens = flags[flags != ""].astype(str).str.split(";").explode()
    counts = tokens[tokens != ""].value_counts(sort=False)
    ordered = sorted(counts.items(), key=lambda item: (-item[1], item[0]))
    return {str(flag): int(count) for flag, count in ordered}


def _gaps_record(gaps: Any) -> dict[str, Any]:
    """run.json's ``climate_gaps``: per variable, the steps filled and the steps left out."""
    if gaps is None:
        return {"filled": {}, "not_filled": {}}
    return {
        "max_gap_steps": gaps.limit,
        "filled": _jsonable(gaps.filled),
        "not_filled": _jsonable(gaps.long),
    }


def _jsonable(value: Any) -> Any:
    if isinstance(value, Mapping):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_jsonable(v) for v in value]
    if isinstance(value, Path):
        return str(value)
    if isinstance(value, np.generic):
        return value.item()
    return value
