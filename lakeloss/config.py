"""Typed, frozen run configuration, loaded from TOML (or a dict) and validated on load.

Every key a user can write is declared here once, with its type; an unknown key is an error
that suggests the nearest valid one, a wrong type names the key and the type expected.
Physics parameters are checked against the method registry's documented ranges.

Relative paths in a configuration file are resolved against the folder that holds the file
(wherever ``lakeloss`` is run from); a configuration given as a mapping (the Python API, no
file) resolves them against the current working directory.
"""

from __future__ import annotations

import datetime as _dt
import difflib
import os
import re
import tomllib
from collections.abc import Collection, Iterable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from lakeloss.errors import ConfigError, InputDataError
from lakeloss.glossary import ALIASES, QUANTITIES

PERIODS = ("day", "month", "year", "water_year", "season", "table")
OUTPUT_FORMATS = ("geopackage", "geoparquet")
"""``[output] format``: one GeoPackage file, or a GeoParquet dataset (a file per partition)."""
VOLUME_UNITS = {"ML": 1.0e-3, "acre_ft": 1.0 / 1233.48183754752}
"""Extra volume units: factor from m3. 1 acre-foot = 1233.48183754752 m3 (exact by definition
of the international foot and acre)."""

# Keys of [parameters] the pipeline itself owns (the rest belong to the physics registry):
# each becomes the RunConfig field of the same name, not an entry of RunConfig.parameters.
PIPELINE_PARAMETERS: dict[str, type] = {"clip_negative": bool}


@dataclass(frozen=True)
class WaterBodiesConfig:
    """Where the water-body layer is and how to read it."""

    path: Path
    layer: str | None = None
    id_field: str | None = None
    group_by: tuple[str, ...] = ()
    crs: str | None = None
    elevation_field: str | None = None
    area_field: str | None = None
    area_units: str = "m2"
    area_source: str = "geometry"


AREA_UNITS = {"m2": 1.0, "ha": 1.0e4, "km2": 1.0e6, "acre": 4046.8564224}
"""Units of ``[waterbodies] area_field``: factor to m2. The acre is the international acre,
exactly 4046.8564224 m2 (66 x 660 international feet of 0.3048 m)."""

AREA_SOURCES = ("geometry", "field")
"""Where a polygon's area comes from (``[waterbodies] area_source``); points always use the
field."""


@dataclass(frozen=True)
class ClimateInput:
    """One climate variable: a config key of ``[climate]`` and where to read it.

    ``key`` is what the user wrote (a CF standard name or alias); ``quantity`` is the
    glossary name it becomes at ingest (``precipitation_flux`` -> ``precipitation``).
    ``path`` is one file, store or glob pattern, or a tuple of them (joined along time by
    :mod:`lakeloss.io.multifile`).
    """

    key: str
    quantity: str
    path: Path | tuple[Path, ...]
    format: str
    variable: str | None = None
    units: str | None = None
    height_m: float | None = None
    start: str | None = None
    step: str | None = None
    end: str | None = None
    calendar: str = "standard"
    crs: str | None = None
    date_pattern: str | None = None


@dataclass(frozen=True)
class MethodConfig:
    """The primary method and the methods computed beside it."""

    name: str
    compare: tuple[str, ...] = ()

    @property
    def all(self) -> tuple[str, ...]:
        return (self.name, *[m for m in self.compare if m != self.name])


@dataclass(frozen=True)
class OutputConfig:
    """Where results go and how they are aggregated."""

    dir: Path
    period: str = "month"
    extra_volume_units: tuple[str, ...] = ()
    series: bool = False
    precipitation: bool = True
    year_start_month: int | None = None
    """First month of a water year (period ``water_year``); None: July (7)."""
    period_table: Path | None = None
    """CSV of custom periods (``name,start,end``); set, the period is ``"table"``."""
    format: str = "geopackage"
    """Format of the per-body outputs, one of :data:`OUTPUT_FORMATS`."""


@dataclass(frozen=True)
class TimeConfig:
    """``[time]``: the window of the climate files a run covers (inclusive ISO dates)."""

    start: str | None = None
    end: str | None = None


@dataclass(frozen=True)
class ComputeConfig:
    """How the run is executed (issue-level details in the README)."""

    chunk_steps: int = 0
    workers: int = 0
    scheduler: str | None = None
    memory_limit: str = "auto"
    cache_dir: Path | None = None
    partition_bodies: int = 0
    """Water bodies per partition (rounded up to a multiple of 4096); 0 chooses."""


@dataclass(frozen=True)
class RunConfig:
    """The whole run, frozen. ``source`` keeps the configuration as written (for run.json)."""

    waterbodies: WaterBodiesConfig
    climate: tuple[ClimateInput, ...]
    method: MethodConfig
    parameters: Mapping[str, object]
    """The physics parameters (``[parameters]`` but the pipeline's own switches)."""
    output: OutputConfig
    compute: ComputeConfig = field(default_factory=ComputeConfig)
    time: TimeConfig = field(default_factory=TimeConfig)
    strict: bool = True
    max_gap_steps: int | None = None
    """``[checks] max_gap_steps``: longest climate gap filled by interpolation, in time
    steps; None: the default for the time step (:func:`lakeloss.pipeline.gap_limit`)."""
    clip_negative: bool = True
    """``[parameters] clip_negative``: negative daily rates (condensation, negative net
    radiation) are set to zero, and counted; False keeps them."""
    source: Mapping[str, Any] = field(default_factory=dict)
    config_path: Path | None = None

    @property
    def quantities(self) -> tuple[str, ...]:
        """Glossary names of the configured climate inputs (time series only)."""
        return tuple(c.quantity for c in self.climate if c.quantity != "elevation")

    def with_overrides(self, **compute: object) -> RunConfig:
        """A copy with ``[compute]`` settings replaced (used by the command line)."""
        fields = {k: v for k, v in compute.items() if v is not None}
        if not fields:
            return self
        new_compute = ComputeConfig(**{**self.compute.__dict__, **fields})
        return RunConfig(**{**self.__dict__, "compute": new_compute})

    def with_strict(self, strict: bool | None) -> RunConfig:
        if strict is None:
            return self
        return RunConfig(**{**self.__dict__, "strict": strict})


# --------------------------------------------------------------------------- schema helpers

_SECTIONS = (
    "waterbodies",
    "climate",
    "method",
    "parameters",
    "time",
    "output",
    "compute",
    "checks",
)
_WATERBODY_KEYS = {
    "path": str,
    "layer": str,
    "id_field": str,
    "group_by": list,
    "crs": str,
    "elevation_field": str,
    "area_field": str,
    "area_units": str,
    "area_source": str,
}
_CLIMATE_KEYS = {
    "path": str,  # or a list of str: read by _climate_path
    "variable": str,
    "units": str,
    "height_m": float,
    "format": str,
    "start": str,
    "step": str,
    "end": str,
    "calendar": str,
    "crs": str,
    "date_pattern": str,
}
_METHOD_KEYS = {"name": str, "compare": list}
_OUTPUT_KEYS = {
    "dir": str,
    "period": str,
    "extra_volume_units": list,
    "series": bool,
    "precipitation": bool,
    "year_start_month": int,
    "period_table": str,
    "format": str,
}
_TIME_KEYS = {"start": str, "end": str}
_COMPUTE_KEYS = {
    "chunk_steps": int,
    "workers": int,
    "scheduler": str,
    "memory_limit": str,
    "cache_dir": str,
    "partition_bodies": int,
}
_CHECKS_KEYS = {"strict": bool, "max_gap_steps": int}
_CLIMATE_NAMES = tuple(sorted({*QUANTITIES, *ALIASES}))


# Tables of a configuration file and the keys each takes; ``[climate.<name>]`` is any entry
# of [climate] (one climate variable).
_TABLE_KEYS: dict[str, Mapping[str, type]] = {
    "waterbodies": _WATERBODY_KEYS,
    "climate.<name>": _CLIMATE_KEYS,
    "method": _METHOD_KEYS,
    "time": _TIME_KEYS,
    "output": _OUTPUT_KEYS,
    "compute": _COMPUTE_KEYS,
    "checks": _CHECKS_KEYS,
}
_TYPE_NAMES = {
    str: "string",
    list: "list of strings",
    bool: "boolean",
    int: "integer",
    float: "number",
}


def reference_keys() -> dict[tuple[str, str], str]:
    """Every key a configuration file may hold, with the type of its value.

    The README's configuration reference table documents exactly these keys (a test compares
    the two both ways).

    Returns
    -------
    dict
        ``(table, key) -> type name``; tables are ``waterbodies``, ``climate`` (its keys are
        the climate variable names, each taking a table), ``climate.<name>`` (the keys of one
        climate entry), ``method``, ``parameters``, ``output``, ``compute`` and ``checks``.
    """
    from lakeloss.physics import registry

    keys = {
        (table, key): _TYPE_NAMES[kind]
        for table, schema in _TABLE_KEYS.items()
        for key, kind in schema.items()
    }
    keys.update({("climate", name): "table" for name in _CLIMATE_NAMES})
    keys[("climate.<name>", "path")] = "string or list of strings"  # see _climate_path
    for name, spec in registry.parameter_specs().items():
        keys[("parameters", name)] = "string" if spec.choices else "number"
    keys.update({("parameters", k): _TYPE_NAMES[v] for k, v in PIPELINE_PARAMETERS.items()})
    return keys


def _suggest(word: str, valid: Iterable[str]) -> str:
    close = difflib.get_close_matches(word, list(valid), n=1, cutoff=0.6)
    return f"; did you mean '{close[0]}'?" if close else ""


def _check_keys(table: Mapping[str, Any], valid: Collection[str], where: str) -> None:
    for key in table:
        if key not in valid:
            raise ConfigError(
                f"unknown key '{key}' in {where}{_suggest(key, valid)} "
                f"(valid keys: {', '.join(sorted(valid))})"
            )


def _typed(table: Mapping[str, Any], schema: Mapping[str, type], where: str) -> dict[str, Any]:
    """Check keys and types of one table; ints are accepted where floats are expected."""
    _check_keys(table, schema, where)
    out: dict[str, Any] = {}
    for key, value in table.items():
        expected = schema[key]
        ok = isinstance(value, expected) and not (expected is int and isinstance(value, bool))
        if expected is float and isinstance(value, int) and not isinstance(value, bool):
            value, ok = float(value), True
        if not ok:
            article = "an" if expected.__name__[0] in "aeiou" else "a"
            raise ConfigError(
                f"{where}.{key} must be {article} {expected.__name__}, "
                f"got {type(value).__name__} {value!r}"
            )
        out[key] = value
    return out


def _table(raw: Mapping[str, Any], name: str, required: bool) -> Mapping[str, Any]:
    value = raw.get(name)
    if value is None:
        if required:
            raise ConfigError(f"the configuration has no [{name}] section; add it")
        return {}
    if not isinstance(value, Mapping):
        raise ConfigError(f"[{name}] must be a table, got {type(value).__name__}")
    return value


def _require(table: Mapping[str, Any], key: str, where: str) -> Any:
    if key not in table:
        raise ConfigError(f"{where} has no '{key}'; add {key} = ... to it")
    return table[key]


def _str_list(values: list, where: str) -> tuple[str, ...]:
    if not all(isinstance(v, str) for v in values):
        raise ConfigError(f"{where} must be a list of strings, got {values!r}")
    return tuple(values)


def _resolve(written: str, base: Path | None) -> Path:
    """A path as written in the configuration, made absolute against ``base`` if relative."""
    path = Path(written).expanduser()
    # Lexically normalised so that messages and run.json show "out/demo", not "config/../out".
    return path if base is None or path.is_absolute() else Path(os.path.normpath(base / path))


def _input_path(written: str, base: Path | None, where: str) -> Path:
    """An input file's path, resolved; a relative one that is missing is refused here, where
    the message can say what it was resolved against."""
    path = _resolve(written, base)
    if base is None or Path(written).expanduser().is_absolute() or path.exists():
        return path
    hint = ""
    if Path(written).exists():
        hint = (
            f" ('{written}' exists in the current directory, which relative paths no longer "
            "refer to)"
        )
    raise InputDataError(
        f"{where} '{written}' does not exist, resolved against the config file's folder: "
        f"{path}{hint}; expected an existing file; write the path relative to the "
        "configuration file's folder, or give it in full"
    )


# --------------------------------------------------------------------------- sections


def _waterbodies(raw: Mapping[str, Any], base: Path | None) -> WaterBodiesConfig:
    table = _typed(_table(raw, "waterbodies", True), _WATERBODY_KEYS, "[waterbodies]")
    path = _input_path(_require(table, "path", "[waterbodies]"), base, "[waterbodies].path")
    return WaterBodiesConfig(
        path=path,
        layer=table.get("layer"),
        id_field=table.get("id_field"),
        group_by=_str_list(table.get("group_by", []), "[waterbodies].group_by"),
        crs=table.get("crs"),
        elevation_field=table.get("elevation_field"),
        area_field=table.get("area_field"),
        area_units=_choice(table, "area_units", AREA_UNITS, "m2"),
        area_source=_choice(table, "area_source", AREA_SOURCES, "geometry"),
    )


def _choice(table: Mapping[str, Any], key: str, allowed: Iterable[str], default: str) -> str:
    value = table.get(key, default)
    if value not in allowed:
        options = ", ".join(repr(v) for v in allowed)
        close = difflib.get_close_matches(str(value), list(allowed), n=1)
        hint = f" (did you mean {close[0]!r}?)" if close else ""
        raise ConfigError(
            f"[waterbodies].{key} is {value!r}{hint}; expected one of {options}; fix {key}"
        )
    return str(value)


_FORMATS = ("netcdf", "geotiff", "zarr")
_GLOB_CHARACTERS = re.compile(r"[*?\[]")


def _climate_path(value: Any, where: str, base: Path | None) -> Path | tuple[Path, ...]:
    """``path``: one file, store or glob pattern, or a list of them, each resolved against
    ``base``; a pattern is expanded (and refused if it matches nothing) when it is read."""
    entries = value if isinstance(value, list) else [value]
    if not entries or not all(isinstance(v, str) and v for v in entries):
        raise ConfigError(
            f"{where}.path must be a string or a non-empty list of strings, got {value!r}"
        )
    for entry in entries:
        if re.search(r"\{[^}]*\}", entry):
            raise ConfigError(
                f"{where}.path '{entry}' holds a {{placeholder}}; expected glob wildcards "
                "(e.g. 'rain/*/*.tif'); write * for the varying part, and date_pattern for "
                "GeoTIFF dates"
            )
    paths = tuple(
        _resolve(entry, base)
        if _GLOB_CHARACTERS.search(entry) and not _resolve(entry, base).exists()
        else _input_path(entry, base, f"{where}.path")
        for entry in entries
    )
    return paths[0] if len(paths) == 1 else paths


def _suffix_format(path: Path) -> str | None:
    suffix = path.suffix.lower()
    if suffix in (".nc", ".nc4", ".cdf", ".netcdf"):
        return "netcdf"
    if suffix in (".tif", ".tiff", ".gtiff"):
        return "geotiff"
    if suffix == ".zarr":
        return "zarr"
    return None


def _climate_format(path: Path | tuple[Path, ...], given: str | None, where: str) -> str:
    if given is not None:
        if given not in _FORMATS:
            raise ConfigError(f"{where}.format must be one of {', '.join(_FORMATS)}, got '{given}'")
        return given
    entries = path if isinstance(path, tuple) else (path,)
    found = {_suffix_format(entry) for entry in entries}
    if len(found) > 1 and None not in found:
        raise ConfigError(
            f"{where}.path mixes formats ({', '.join(sorted(str(f) for f in found))}); "
            "expected files of one format for one variable; list one kind of file"
        )
    fmt = found.pop() if len(found) == 1 else None
    if fmt is None:
        raise ConfigError(
            f"{where}: cannot tell the format of '{entries[0]}' from its suffix; "
            'add format = "netcdf", format = "geotiff" or format = "zarr"'
        )
    return fmt


def _check_dates(table: Mapping[str, Any], fmt: str, key: str, where: str) -> None:
    """GeoTIFF dates come from start and step, or from the file names (date_pattern)."""
    if "date_pattern" in table:
        from lakeloss.filedates import compile_pattern

        if fmt != "geotiff":
            raise ConfigError(
                f"{where}.date_pattern only applies to GeoTIFF files ({fmt} files carry their "
                "own time stamps); remove it"
            )
        compile_pattern(table["date_pattern"])  # ConfigError naming what is wrong
        for unused in ("start", "end"):
            if unused in table:
                raise ConfigError(
                    f"{where}.{unused} cannot be used with date_pattern (the dates come from "
                    f"the file names); remove {unused}"
                )
    elif fmt == "geotiff" and key != "elevation":
        for needed in ("start", "step"):
            if needed not in table:
                raise ConfigError(
                    f"{where} reads a GeoTIFF stack and needs {needed} = ... "
                    "(band dates come from start and step; or set date_pattern to read "
                    "them from the file names)"
                )
    if "step" in table and table["step"] not in ("day", "month"):
        raise ConfigError(f"{where}.step must be 'day' or 'month', got '{table['step']}'")


def _climate_input(key: str, value: Any, base: Path | None) -> ClimateInput:
    where = f"[climate].{key}"
    if not isinstance(value, Mapping):
        raise ConfigError(
            f'{where} must be a table such as {{ path = "climate.nc", variable = "tas" }}'
        )
    table = _typed({k: v for k, v in value.items() if k != "path"}, _CLIMATE_KEYS, where)
    path = _climate_path(_require(value, "path", where), where, base)
    fmt = _climate_format(path, table.get("format"), where)
    if fmt in ("netcdf", "zarr") and "variable" not in table:
        raise ConfigError(
            f"{where} reads a {'Zarr store' if fmt == 'zarr' else 'NetCDF file'} and needs "
            'variable = "<name in file>"'
        )
    if key == "elevation" and isinstance(path, tuple):
        raise ConfigError(f"{where}.path must name one raster; elevation does not vary in time")
    _check_dates(table, fmt, key, where)
    if fmt == "geotiff" and isinstance(path, tuple) and "date_pattern" not in table:
        raise ConfigError(
            f"{where}.path lists several GeoTIFFs but no date_pattern; expected date_pattern "
            '(e.g. "%Y%m%d") so that each file\'s date comes from its name; add it'
        )
    if "height_m" in table and key != "wind_speed":
        raise ConfigError(f"{where}.height_m only applies to wind_speed")
    if "height_m" in table and not 0.5 <= table["height_m"] <= 100.0:
        raise ConfigError(f"{where}.height_m = {table['height_m']} is outside 0.5..100 m")
    return ClimateInput(
        key=key,
        quantity=ALIASES.get(key, key),
        path=path,
        format=fmt,
        variable=table.get("variable"),
        units=table.get("units"),
        height_m=table.get("height_m"),
        start=table.get("start"),
        step=table.get("step"),
        end=table.get("end"),
        calendar=table.get("calendar", "standard"),
        crs=table.get("crs"),
        date_pattern=table.get("date_pattern"),
    )


def _climate(raw: Mapping[str, Any], base: Path | None) -> tuple[ClimateInput, ...]:
    table = _table(raw, "climate", True)
    _check_keys(table, _CLIMATE_NAMES, "[climate]")
    inputs = tuple(_climate_input(key, value, base) for key, value in table.items())
    seen: dict[str, str] = {}
    for item in inputs:
        if item.quantity in seen:
            raise ConfigError(
                f"[climate] gives {item.quantity} twice ('{seen[item.quantity]}' and "
                f"'{item.key}'); keep one"
            )
        seen[item.quantity] = item.key
    if not any(i.quantity != "elevation" for i in inputs):
        raise ConfigError("[climate] lists no climate variable; add at least one")
    return inputs


def _method(raw: Mapping[str, Any]) -> MethodConfig:
    from lakeloss.physics import registry

    table = _typed(_table(raw, "method", True), _METHOD_KEYS, "[method]")
    name = _require(table, "name", "[method]")
    compare = _str_list(table.get("compare", []), "[method].compare")
    for method in (name, *compare):
        registry.get(method)  # raises UnknownMethodError listing the valid names
    return MethodConfig(name=name, compare=compare)


def _parameters(
    raw: Mapping[str, Any], climate: tuple[ClimateInput, ...], method: MethodConfig
) -> tuple[dict[str, object], dict[str, Any]]:
    """The physics parameters, and the pipeline's own switches (:data:`PIPELINE_PARAMETERS`)."""
    from lakeloss.physics import registry

    table = dict(_table(raw, "parameters", False))
    specs = registry.parameter_specs()
    _check_keys(table, {*specs, *PIPELINE_PARAMETERS}, "[parameters]")
    pipeline = _typed(
        {k: table.pop(k) for k in list(table) if k in PIPELINE_PARAMETERS},
        PIPELINE_PARAMETERS,
        "[parameters]",
    )
    wind = next((c for c in climate if c.quantity == "wind_speed"), None)
    if wind is not None and wind.height_m is not None:
        if "wind_height_m" in table and float(table["wind_height_m"]) != wind.height_m:
            raise ConfigError(
                "[parameters].wind_height_m disagrees with [climate].wind_speed.height_m; "
                "give the height once"
            )
        table["wind_height_m"] = wind.height_m
    for name in method.all:
        registry.validate_parameters(name, table)  # ParameterRangeError names the parameter
    return table, pipeline


def _output(raw: Mapping[str, Any], base: Path | None) -> OutputConfig:
    table = _typed(_table(raw, "output", True), _OUTPUT_KEYS, "[output]")
    period = table.get("period", "table" if "period_table" in table else "month")
    if period not in PERIODS:
        raise ConfigError(f"[output].period must be one of {', '.join(PERIODS)}, got '{period}'")
    first_month, period_table = _period_settings(table, period, base)
    layer_format = table.get("format", "geopackage")
    if layer_format not in OUTPUT_FORMATS:
        raise ConfigError(
            f"[output].format must be one of {', '.join(OUTPUT_FORMATS)}, got '{layer_format}'"
        )
    units = _str_list(table.get("extra_volume_units", []), "[output].extra_volume_units")
    for unit in units:
        if unit not in VOLUME_UNITS:
            raise ConfigError(
                f"[output].extra_volume_units: unknown unit '{unit}'{_suggest(unit, VOLUME_UNITS)}"
                f" (valid: {', '.join(VOLUME_UNITS)})"
            )
    return OutputConfig(
        dir=_resolve(_require(table, "dir", "[output]"), base),
        period=period,
        extra_volume_units=units,
        series=table.get("series", False),
        precipitation=table.get("precipitation", True),
        year_start_month=first_month,
        period_table=period_table,
        format=layer_format,
    )


def _period_settings(
    table: Mapping[str, Any], period: str, base: Path | None
) -> tuple[int | None, Path | None]:
    """``[output] year_start_month`` and ``period_table``, checked against the period."""
    first_month = table.get("year_start_month")
    if first_month is not None:
        if not 1 <= first_month <= 12:
            raise ConfigError(
                f"[output].year_start_month is {first_month}; expected a month number 1..12 "
                "(7 = July-June, 10 = October-September)"
            )
        if period != "water_year":
            raise ConfigError(
                f"[output].year_start_month applies to period = 'water_year' only, but the "
                f"period is '{period}'; remove it or set period = \"water_year\""
            )
    written = table.get("period_table")
    if period == "table" and written is None:
        raise ConfigError(
            "[output].period = 'table' needs period_table = \"periods.csv\" (a CSV of "
            "name,start,end)"
        )
    if written is not None and period != "table":
        raise ConfigError(
            f"[output].period_table gives custom periods, but period is '{period}'; remove "
            "period (or set it to 'table') to report by the table"
        )
    path = None if written is None else _input_path(written, base, "[output].period_table")
    return first_month, path


_ISO_DAY = re.compile(r"^\d{4}-\d{2}-\d{2}$")


def _time(raw: Mapping[str, Any]) -> TimeConfig:
    """``[time] start`` and ``end``: ISO dates (TOML dates too), start <= end. Whether
    they exist in the files' calendar and lie inside the data is checked once the files
    are open."""
    written = dict(_table(raw, "time", False))
    for key, value in written.items():
        if isinstance(value, _dt.date) and not isinstance(value, _dt.datetime):
            written[key] = value.isoformat()  # start = 2031-01-01 unquoted is a TOML date
    table = _typed(written, _TIME_KEYS, "[time]")
    for key, value in table.items():
        if not _ISO_DAY.match(value.strip()):
            raise ConfigError(
                f"[time].{key} = {value!r} is not a date; expected YYYY-MM-DD, e.g. 2031-01-01"
            )
        table[key] = value.strip()
    start, end = table.get("start"), table.get("end")
    if start is not None and end is not None and start > end:
        raise ConfigError(f"[time].start {start} is after [time].end {end}; expected start <= end")
    return TimeConfig(start=start, end=end)


def _compute(raw: Mapping[str, Any], base: Path | None) -> ComputeConfig:
    table = _typed(_table(raw, "compute", False), _COMPUTE_KEYS, "[compute]")
    if table.get("chunk_steps", 0) < 0:
        raise ConfigError("[compute].chunk_steps must be 0 (automatic) or a positive number")
    if table.get("workers", 0) < 0:
        raise ConfigError("[compute].workers must be 0 (no cluster) or a positive number")
    if table.get("partition_bodies", 0) < 0:
        raise ConfigError(
            "[compute].partition_bodies must be 0 (automatic) or a positive number of bodies"
        )
    cache = table.pop("cache_dir", None)
    if _is_scheduler_file(table.get("scheduler")):
        table["scheduler"] = str(_resolve(table["scheduler"], base))
    return ComputeConfig(**table, cache_dir=_resolve(cache, base) if cache else None)


def _is_scheduler_file(scheduler: str | None) -> bool:
    # An address has a scheme (tcp://host:8786); a scheduler file is a .json path.
    return (
        scheduler is not None
        and "://" not in scheduler
        and (scheduler.endswith(".json") or "/" in scheduler or "\\" in scheduler)
    )


def _check_precipitation(climate: tuple[ClimateInput, ...], output: OutputConfig) -> None:
    has_rain = any(c.quantity == "precipitation" for c in climate)
    if output.precipitation and not has_rain:
        raise ConfigError(
            "no precipitation input: add precipitation_flux or precipitation_amount to "
            "[climate], or set [output] precipitation = false to report gross evaporation only"
        )


def config_from_mapping(raw: Mapping[str, Any], config_path: Path | None = None) -> RunConfig:
    """Validate a configuration given as a nested mapping (the parsed TOML).

    With ``config_path``, relative paths are resolved against the file's folder and relative
    input paths must exist; without it they stay relative (to the current directory).
    """
    _check_keys(raw, _SECTIONS, "the configuration")
    base = None if config_path is None else Path(config_path).absolute().parent
    climate = _climate(raw, base)
    method = _method(raw)
    output = _output(raw, base)
    _check_precipitation(climate, output)
    checks = _typed(_table(raw, "checks", False), _CHECKS_KEYS, "[checks]")
    if checks.get("max_gap_steps", 0) < 0:
        raise ConfigError("[checks].max_gap_steps must be 0 (no filling) or a positive number")
    parameters, switches = _parameters(raw, climate, method)
    return RunConfig(
        waterbodies=_waterbodies(raw, base),
        climate=climate,
        method=method,
        parameters=parameters,
        output=output,
        compute=_compute(raw, base),
        time=_time(raw),
        strict=checks.get("strict", True),
        max_gap_steps=checks.get("max_gap_steps"),
        clip_negative=bool(switches.get("clip_negative", True)),
        source=raw,
        config_path=config_path,
    )


def load_config(config: str | Path | Mapping[str, Any] | RunConfig) -> RunConfig:
    """Load and validate a run configuration.

    Parameters
    ----------
    config : path, mapping or RunConfig
        A TOML file, an already parsed mapping with the same structure, or a config object
        (returned unchanged).

    Raises
    ------
    ConfigError
        The file is missing or not TOML, or a key, type or value is wrong.
    """
    if isinstance(config, RunConfig):
        return config
    if isinstance(config, Mapping):
        return config_from_mapping(config)
    path = Path(config)
    if path.is_dir():
        raise ConfigError(
            f"configuration path '{path}' is a directory; expected a TOML file; "
            "name the file itself"
        )
    if not path.is_file():
        raise ConfigError(f"configuration file '{path}' does not exist or is not a file")
    raw = _parse_toml(path)
    return config_from_mapping(raw, config_path=path)


_UTF8_BOM = b"\xef\xbb\xbf"
# Byte-order marks of encodings TOML does not allow (UTF-32 first: its LE mark starts with
# the UTF-16 LE one).
_OTHER_BOMS = {
    b"\xff\xfe\x00\x00": "UTF-32",
    b"\x00\x00\xfe\xff": "UTF-32",
    b"\xff\xfe": "UTF-16",
    b"\xfe\xff": "UTF-16",
}


def _parse_toml(path: Path) -> dict[str, Any]:
    """Parse a TOML file as Windows editors save it too: a UTF-8 byte-order mark is dropped,
    CRLF line ends are TOML; other encodings are refused with the fix."""
    try:
        data = path.read_bytes()
    except OSError as err:
        raise ConfigError(
            f"configuration file '{path}' cannot be read ({err.strerror or err}); expected a "
            "readable file; check its permissions"
        ) from err
    if data.startswith(_UTF8_BOM):
        data = data[len(_UTF8_BOM) :]
    encoding = next((name for mark, name in _OTHER_BOMS.items() if data.startswith(mark)), None)
    if encoding is None and b"\x00" in data:
        encoding = "UTF-16 or UTF-32"  # NUL bytes are never TOML text: a mark-less UTF-16 file
    if encoding is not None:
        raise ConfigError(
            f"configuration file '{path}' is saved as {encoding} text; expected UTF-8 "
            "(TOML files are UTF-8); save it again with the encoding UTF-8"
        )
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as err:
        line = data[: err.start].count(b"\n") + 1
        raise ConfigError(
            f"configuration file '{path}' is not UTF-8 text (byte 0x{data[err.start]:02x} on "
            f"line {line}; a Windows code page such as cp1252?); expected UTF-8 (TOML files are "
            "UTF-8); save it again with the encoding UTF-8"
        ) from err
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise ConfigError(f"configuration file '{path}' is not valid TOML: {err}") from err
