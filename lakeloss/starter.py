"""A first configuration drafted from a user's own layer and climate files.

:func:`draft` looks at the files (through :mod:`lakeloss.io.survey`), recognises each climate
variable by its CF ``standard_name`` (refined by ``cell_methods``), or else by the short
names products commonly use (:data:`lakeloss.glossary.SHORT_NAMES`), keeps it only if its
units can express the quantity, asks the method registry which methods the inputs allow,
and writes a commented TOML file. The written settings are loaded with the same validation
as ``lakeloss run`` before the file is written; every optional key is listed, commented out,
with the default the loader applies, taken from :mod:`lakeloss.config` itself.
"""

from __future__ import annotations

import dataclasses
import json
import os
import re
import tomllib
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from lakeloss import config as config_schema
from lakeloss.errors import GeometryError, MissingInputError, UnitsError
from lakeloss.glossary import QUANTITIES, SHORT_NAMES, STANDARD_NAME_SYNONYMS
from lakeloss.io import survey
from lakeloss.io import units as units_io
from lakeloss.physics import registry

# Methods in the order a draft proposes them (the first one the inputs allow is chosen).
_PREFERENCE = (
    "penman_open_water",
    "penman_monteith_open_water",
    "priestley_taylor",
    "energy_balance",
    "aerodynamic",
    "pan_coefficient",
)
# Inputs the run always has: from the layer, the time axis, or a parameter default.
_ALWAYS = ("latitude", "day_of_year", "area_m2", "elevation")
# Quantities never matched automatically: CF's surface_temperature is land or sea skin
# temperature in most products, not the temperature of the water bodies.
_NOT_GUESSED = frozenset({"water_surface_temperature"})
# Names that state their height: ERA5 u10/v10/si10 and CMIP's near-surface 10 m wind.
_NAMED_HEIGHT_M = {"u10": 10.0, "v10": 10.0, "si10": 10.0, "uas": 10.0, "vas": 10.0}
_WIND = ("wind_speed", "eastward_wind", "northward_wind")
_DEFAULT_WIND_HEIGHT_M = registry.parameter_specs()["wind_height_m"].default
_SHORT_TO_QUANTITY = {name: q for q, names in SHORT_NAMES.items() for name in names}
# Examples shown for optional keys that have no default value.
_EXAMPLES: dict[str, object] = {
    "layer": "layer name",
    "id_field": "field name",
    "crs": "EPSG:4326",
    "elevation_field": "field name",
    "area_field": "field name",
    "variable": "name in the file",
    "units": "unit, e.g. mm d-1",
    "height_m": 10.0,
    "start": "2000-01-01",
    "step": "day",
    "end": "2000-12-31",
    "format": "netcdf",
    "scheduler": "tcp://127.0.0.1:8786",
    "cache_dir": "lakeloss-cache",
    "date_pattern": "%Y%m%d",
    "max_gap_steps": 3,  # unset: 3 for daily steps, 0 for monthly (README "Gaps in the climate")
    "group_by": ["field name"],
    "extra_volume_units": list(config_schema.VOLUME_UNITS),
    "year_start_month": 7,  # unset: 7 (July-June) for period = "water_year"
    "period_table": "periods.csv",
}
# Words in a field name that suggest it holds an area, and units a name may state
# (tokens of the name split at non-letters and camel case; "m²" reads as "m2").
_AREA_WORDS = ("area", "surface", "size", "extent", "ha", "hectare", "hectares", "m2", "sqm",
               "km2", "sqkm", "acre", "acres")  # fmt: skip
_UNIT_WORDS = {
    "ha": "ha", "hectare": "ha", "hectares": "ha",
    "m2": "m2", "sqm": "m2", "sqmetres": "m2", "sqmeters": "m2",
    "km2": "km2", "sqkm": "km2",
    "acre": "acre", "acres": "acre", "ac": "acre",
}  # fmt: skip
_ID_WORDS = ("id", "fid", "no", "nr", "num", "number", "code", "key")
OUTPUT_DIR = "lakeloss-output"
"""Output folder written into a draft, next to the configuration file."""


@dataclass(frozen=True)
class Match:
    """A climate variable recognised as a glossary quantity.

    ``key`` is the ``[climate]`` key written (a glossary name or alias);
    ``units`` is a unit to write over the file's (None: the file's is used);
    ``notes`` are comment lines written above the entry.
    """

    key: str
    quantity: str
    variable: survey.VariableSummary
    time: survey.TimeSummary
    units: str | None = None
    notes: tuple[str, ...] = ()


@dataclass(frozen=True)
class Draft:
    """A drafted configuration: what was found, and the TOML text."""

    layer: survey.LayerSummary
    matches: tuple[Match, ...]
    unused: tuple[str, ...]
    methods: tuple[str, ...]
    text: str

    def summary(self) -> str:
        """A few lines for the terminal: what was recognised and what to do next."""
        found = ", ".join(f"{m.key} ({m.variable.name})" for m in self.matches)
        return (
            f"{self.layer.features} water bodies; climate: {found}; methods possible: "
            f"{', '.join(self.methods)}; {len(self.unused)} variables not used (see comments)"
        )


# ----------------------------------------------------------------------------- recognising


def identify(variable: survey.VariableSummary) -> str | None:
    """The glossary quantity a variable holds, from its metadata; None if unrecognised.

    The CF ``standard_name`` decides when present; daily maxima and minima are told apart by
    ``cell_methods`` (``time: maximum``) or by a short name of the same standard name
    (``tasmax``). Without a standard name, a common short name decides.
    """
    by_name = _SHORT_TO_QUANTITY.get(variable.name.lower())
    standard = variable.standard_name
    if standard:
        by_standard = _from_standard_name(standard)
        if by_standard is None:
            return None
        if by_name is not None and QUANTITIES[by_name].cf_standard_name == standard:
            return _usable(by_name)
        return _usable(_extreme(by_standard, variable.cell_methods))
    return None if by_name is None else _usable(by_name)


def _from_standard_name(standard: str) -> str | None:
    if standard in STANDARD_NAME_SYNONYMS:
        return STANDARD_NAME_SYNONYMS[standard]
    own = [q.name for q in QUANTITIES.values() if q.cf_standard_name == standard]
    return own[0] if own else None


def _extreme(quantity: str, cell_methods: str) -> str:
    methods = " ".join(cell_methods.split())
    for word, suffix in (("time: maximum", "_max"), ("time: minimum", "_min")):
        if word in methods and quantity + suffix in QUANTITIES:
            return quantity + suffix
    return quantity


def _usable(quantity: str) -> str | None:
    return None if quantity in _NOT_GUESSED else quantity


def config_key(quantity: str, units: str, calendar_months: bool) -> str:
    """The ``[climate]`` key for a quantity: precipitation is written as the CF form its units
    show (``precipitation_flux`` for kg m-2 s-1, ``precipitation_amount`` per step)."""
    if quantity != "precipitation":
        return quantity
    _, _, per_step = units_io.conversion_plan(units, quantity, calendar_months=calendar_months)
    if per_step:
        return "precipitation_amount"
    flux = units_io.registry().Quantity(1.0, "kg m-2 s-1").dimensionality
    return "precipitation_flux" if units_io.parse_unit(units).dimensionality == flux else quantity


# ----------------------------------------------------------------------------- matching


def join_series(variables: Iterable[survey.VariableSummary]) -> list[survey.VariableSummary]:
    """Variables of one name in files whose names differ only by dates (one file per year,
    per month, ...) as one variable over all those files, in the order first found."""
    groups: dict[tuple[str, str], list[survey.VariableSummary]] = {}
    for variable in variables:
        key = (variable.name, survey.series_key(variable.path))
        groups.setdefault(key, []).append(variable)
    return [
        group[0] if len(group) == 1
        else dataclasses.replace(group[0], paths=tuple(v.path for v in group))
        for group in groups.values()
    ]  # fmt: skip


def _where(variable: survey.VariableSummary) -> str:
    files = variable.files
    more = f" (and {len(files) - 1} more files)" if len(files) > 1 else ""
    return f"{variable.path.name}{more}: {variable.name}"


def _match(variable: survey.VariableSummary) -> tuple[Match | None, str | None]:
    """A match for the variable, or None and the reason it is not used."""
    quantity = identify(variable)
    where = _where(variable)
    if quantity is None:
        described = variable.standard_name or variable.long_name or "no standard_name"
        return None, f"{where} ({described}) is not a quantity lakeloss uses"
    if variable.units is not None:
        try:
            units_io.conversion_plan(variable.units, quantity, variable=variable.name)
        except UnitsError:
            return None, (
                f"{where} looks like {quantity} but its units {variable.units!r} cannot "
                f"express {QUANTITIES[quantity].unit}"
            )
    if quantity == "elevation":
        static = survey.TimeSummary(None, None, None, 0, None, "constant in time")
        return Match("elevation", quantity, variable, static), None
    time = survey.survey_time(variable, quantity, None)
    units, notes = _units_override(variable, quantity, time)
    if units is not None:
        time = survey.survey_time(variable, quantity, units)
    if len(variable.files) > 1:
        notes += (f"{variable.name}: {len(variable.files)} files joined along time",)
    if variable.units is None:
        notes += ("the file gives no units: set units = ... for this entry",)
    if quantity in _WIND and _height_of(variable) is None:
        notes += (
            f"{variable.name}: the file does not give the wind's height above ground; "
            f"{_DEFAULT_WIND_HEIGHT_M:g} m is assumed unless you set it",
        )
    key = config_key(quantity, units or variable.units or "", time.step == "month")
    return Match(key, quantity, variable, time, units, notes), None


def _units_override(
    variable: survey.VariableSummary, quantity: str, time: survey.TimeSummary
) -> tuple[str | None, tuple[str, ...]]:
    # ERA5 monthly means store accumulations as the month's mean daily amount while the
    # units attribute still names the amount ("m", "J m-2"); per step they would be /30.
    if not (variable.from_ecmwf and time.step == "month" and variable.units):
        return None, ()
    _, _, per_step = units_io.conversion_plan(variable.units, quantity, calendar_months=True)
    if not per_step:
        return None, ()
    return f"{variable.units} d-1", (
        f"ECMWF monthly means hold the mean daily amount although the file says "
        f"{variable.units!r}; units set to per day (check against your product's notes)",
    )


def match_variables(
    variables: Iterable[survey.VariableSummary],
) -> tuple[list[Match], list[str]]:
    """Recognise the variables; one per quantity (the first with a usable time axis)."""
    chosen: dict[str, Match] = {}
    unused: list[str] = []
    for variable in variables:
        match, reason = _match(variable)
        if match is None:
            unused.append(str(reason))
            continue
        earlier = chosen.get(match.quantity)
        if earlier is None or (earlier.time.problem and not match.time.problem):
            if earlier is not None:
                unused.append(_also_found(earlier))
            chosen[match.quantity] = match
        else:
            unused.append(_also_found(match))
    _drop_components_beside_speed(chosen, unused)
    return list(chosen.values()), unused


def _also_found(match: Match) -> str:
    return (
        f"{_where(match.variable)} is also {match.quantity}; one series per quantity is read "
        "(the first found is used)"
    )


def _drop_components_beside_speed(chosen: dict[str, Match], unused: list[str]) -> None:
    if "wind_speed" not in chosen:
        return
    for component in ("eastward_wind", "northward_wind"):
        match = chosen.pop(component, None)
        if match is not None:
            unused.append(
                f"{_where(match.variable)} ({component}) is not needed: wind_speed was found"
            )


def available_inputs(quantities: Iterable[str]) -> set[str]:
    """The input names the methods may use, given the climate quantities found."""
    have = {*quantities, *_ALWAYS}
    if {"eastward_wind", "northward_wind"} <= have:
        have.add("wind_speed")  # combined per cell at run time
    return have


def choose_methods(quantities: Iterable[str]) -> list[str]:
    """Methods the inputs allow, the proposed one first.

    Raises
    ------
    MissingInputError
        No method can run; the message says what the simplest ones still need.
    """
    quantities = list(quantities)  # read twice: for the inputs and for the message
    have = available_inputs(quantities)
    possible = registry.runnable(have)
    if not possible:
        needs = "; ".join(
            f"{name} needs {', '.join(registry.missing_inputs(name, have))}"
            for name in ("energy_balance", "pan_coefficient")
        )
        found = ", ".join(sorted(set(quantities))) or "nothing"
        raise MissingInputError(
            f"the climate files give {found}, which allows no evaporation method ({needs}); "
            "add files with those variables"
        )
    ranked = [m for m in _PREFERENCE if m in possible]
    return ranked + [m for m in possible if m not in ranked]


# ----------------------------------------------------------------------------- layer


def id_candidates(layer: survey.LayerSummary) -> list[str]:
    """Unique integer or text fields, those named like an identifier first."""
    unique = [f.name for f in layer.fields if f.unique and f.kind in ("integer", "text")]
    return sorted(unique, key=lambda name: "id" not in name.lower())


def group_candidates(layer: survey.LayerSummary) -> list[str]:
    """Text fields that repeat values (classes such as catchment, owner, kind)."""
    return [
        f.name
        for f in layer.fields
        if f.kind == "text" and not f.unique and 1 <= f.distinct < layer.features
    ]


def _name_tokens(name: str) -> list[str]:
    spaced = re.sub(r"(?<=[a-z0-9])(?=[A-Z])", "_", name.replace("²", "2"))
    return [t for t in re.split(r"[^a-z0-9]+", spaced.lower()) if t]


def area_candidates(layer: survey.LayerSummary) -> list[str]:
    """Numeric fields that may hold each body's area, those named like an area first."""
    numeric = [f.name for f in layer.fields if f.kind in ("integer", "number")]

    def rank(name: str) -> tuple[bool, bool]:
        tokens = set(_name_tokens(name))
        return (not tokens & set(_AREA_WORDS), bool(tokens & set(_ID_WORDS)))

    return sorted(numeric, key=rank)


def area_units_of(name: str) -> str | None:
    """The area units a field's name states (``area_ha`` -> ``ha``), or None."""
    stated = {_UNIT_WORDS[t] for t in _name_tokens(name) if t in _UNIT_WORDS}
    return stated.pop() if len(stated) == 1 else None


def _point_area(layer: survey.LayerSummary) -> tuple[str, str] | None:
    """The area field and units proposed for a layer with points; None without points.

    Raises
    ------
    GeometryError
        The layer has points but no numeric field to take their area from.
    """
    if not layer.points:
        return None
    candidates = area_candidates(layer)
    if not candidates:
        raise GeometryError(
            f"water-body layer '{layer.path}' has {layer.points} points but no numeric field; "
            "expected points with an area attribute (e.g. surface area in m2 or ha); add one"
        )
    return candidates[0], area_units_of(candidates[0]) or "m2"


def elevation_candidates(layer: survey.LayerSummary) -> list[str]:
    words = ("elev", "alt", "height", "dem")
    return [
        f.name
        for f in layer.fields
        if f.kind in ("integer", "number") and any(w in f.name.lower() for w in words)
    ]


# ----------------------------------------------------------------------------- drafting


def draft(
    layer_path: Path,
    climate_paths: list[Path],
    config_path: Path,
    *,
    layer: str | None = None,
    overwrite: bool = False,
) -> Draft:
    """Look at the files, draft a configuration and write it to ``config_path``.

    Raises
    ------
    LakelossError
        A path that does not exist, no climate files, a layer without polygons or points,
        points without a numeric field for their area, no method possible with the variables
        found, or an existing ``config_path`` without
        ``overwrite``. Nothing is written then.
    """
    if config_path.exists() and not overwrite:
        survey.write_new_text(config_path, "", overwrite=False)  # raises the one-line error
    summary = survey.survey_layer(layer_path, layer)
    files = survey.climate_files(climate_paths)
    variables = [v for f in files if survey.is_netcdf(f) for v in survey.survey_netcdf(f)]
    matches, unused = match_variables(join_series(variables))
    unused += [f"{f.name}: GeoTIFF stacks need start and step; add it by hand" for f in files
               if not survey.is_netcdf(f)]  # fmt: skip
    methods = choose_methods(m.quantity for m in matches)
    result = Draft(summary, tuple(matches), tuple(unused), tuple(methods), "")
    text = render(result, config_path.absolute().parent)
    survey.write_new_text(config_path, text, overwrite=overwrite)
    return dataclasses.replace(result, text=text)


def _relative(path: Path, base: Path) -> str:
    try:
        return Path(os.path.relpath(path.absolute(), base)).as_posix()
    except ValueError:  # another drive on Windows
        return path.absolute().as_posix()


def _path_setting(variable: survey.VariableSummary, base: Path) -> str | list[str]:
    """One file's relative path; for several, a glob matching exactly them, else their list."""
    files = list(variable.files)
    if len(files) == 1:
        return _relative(files[0], base)
    return survey.common_glob(files, base) or [_relative(f, base) for f in files]


def _height_of(variable: survey.VariableSummary) -> float | None:
    if variable.height_m is not None:
        return variable.height_m
    return _NAMED_HEIGHT_M.get(variable.name.lower())


def _wind_height(matches: Iterable[Match]) -> float | None:
    for match in matches:
        if match.quantity in _WIND:
            return _height_of(match.variable)
    return None


def settings(result: Draft, base: Path) -> dict[str, Any]:
    """The active settings of a draft as a mapping (what the TOML sets, comments aside)."""
    layer = result.layer
    waterbodies: dict[str, Any] = {"path": _relative(layer.path, base)}
    if layer.layer is not None:
        waterbodies["layer"] = layer.layer
    area = _point_area(layer)
    ids = [name for name in id_candidates(layer) if area is None or name != area[0]]
    if ids:
        waterbodies["id_field"] = ids[0]
    if area is not None:
        waterbodies["area_field"], waterbodies["area_units"] = area
    climate: dict[str, Any] = {}
    height = _wind_height(result.matches)
    for match in result.matches:
        entry: dict[str, Any] = {"path": _path_setting(match.variable, base)}
        if survey.is_zarr(match.variable.path) and match.variable.path.suffix.lower() != ".zarr":
            entry["format"] = "zarr"
        entry["variable"] = match.variable.name
        if match.units is not None:
            entry["units"] = match.units
        if match.quantity == "wind_speed" and height is not None:
            entry["height_m"] = height
        climate[match.key] = entry
    mapping: dict[str, Any] = {
        "waterbodies": waterbodies,
        "climate": climate,
        "method": {"name": result.methods[0]},
        "output": {"dir": OUTPUT_DIR},
    }
    if "wind_speed" not in climate and "eastward_wind" in climate and height is not None:
        mapping["parameters"] = {"wind_height_m": height}
    if not any(m.quantity == "precipitation" for m in result.matches):
        mapping["output"]["precipitation"] = False
    return mapping


# ----------------------------------------------------------------------------- TOML text


def toml_value(value: object) -> str:
    """A value as TOML: strings quoted with JSON escapes (valid TOML basic strings)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int | float):
        return repr(float(value)) if isinstance(value, float) else str(value)
    if isinstance(value, Path):
        return json.dumps(value.as_posix(), ensure_ascii=False)
    if isinstance(value, list | tuple):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    return json.dumps(str(value), ensure_ascii=False)


def _commented(key: str, default: object, example: object = None) -> str:
    if default is dataclasses.MISSING and key == "format":
        return f"# {key} = {toml_value(_EXAMPLES[key])}  # by default told by the file suffix"
    if default is None or default is dataclasses.MISSING or default == () or default == []:
        example = _EXAMPLES.get(key) if example is None else example
        shown = f"# {key} = {toml_value(example)}" if example is not None else f"# {key} ="
        return f"{shown}  # not set by default"
    return f"# {key} = {toml_value(default)}  # default"


def _section_defaults(obj: object, keys: Iterable[str]) -> dict[str, object]:
    values = {}
    for key in keys:
        value = getattr(obj, key)
        values[key] = value.as_posix() if isinstance(value, Path) else value
    return values


def render(result: Draft, base: Path) -> str:
    """The commented TOML text of a draft, with paths relative to ``base``.

    The active settings are validated with :func:`lakeloss.config.config_from_mapping` and
    the defaults shown for the optional keys are read from the configuration it returns.
    """
    mapping = settings(result, base)
    loaded = config_schema.config_from_mapping(tomllib.loads(_active_toml(mapping)))
    lines = _header(result)
    lines += _waterbodies_lines(result.layer, mapping["waterbodies"], loaded)
    lines += _climate_lines(result, mapping["climate"])
    lines += _method_lines(result, mapping, loaded)
    lines += _table_lines("time", {}, _section_defaults(loaded.time, config_schema._TIME_KEYS))
    lines += _table_lines(
        "output", mapping["output"], _section_defaults(loaded.output, config_schema._OUTPUT_KEYS)
    )
    lines += _table_lines(
        "compute", {}, _section_defaults(loaded.compute, config_schema._COMPUTE_KEYS)
    )
    lines += _table_lines("checks", {}, _section_defaults(loaded, config_schema._CHECKS_KEYS))
    return "\n".join(lines).rstrip() + "\n"


def _active_toml(mapping: Mapping[str, Any]) -> str:
    lines = []
    for section, table in mapping.items():
        if section == "climate":
            for key, entry in table.items():
                lines.append(f"[climate.{key}]")
                lines += [f"{k} = {toml_value(v)}" for k, v in entry.items()]
        else:
            lines.append(f"[{section}]")
            lines += [f"{k} = {toml_value(v)}" for k, v in table.items()]
    return "\n".join(lines) + "\n"


def _header(result: Draft) -> list[str]:
    lines = [
        "# lakeloss configuration drafted by `lakeloss draft-config` from your layer and climate",
        "# files. Check it, then run `lakeloss check` and `lakeloss run` on it. Paths are relative to",
        "# this file's folder. Figures lakeloss computes are estimates for screening and water",
        "# accounting, not for design, licensing or dam-safety decisions.",
        "# Optional keys are shown commented out with the default that applies.",
        "",
    ]
    if result.unused:
        lines.append("# Variables found but not used:")
        lines += [f"#   {reason}" for reason in result.unused]
        lines.append("")
    return lines


def _table_lines(
    section: str,
    active: Mapping[str, object],
    defaults: Mapping[str, object],
    examples: Mapping[str, object] | None = None,
) -> list[str]:
    examples = examples or {}
    lines = [f"[{section}]"]
    lines += [f"{key} = {toml_value(value)}" for key, value in active.items()]
    lines += [_commented(k, v, examples.get(k)) for k, v in defaults.items() if k not in active]
    return [*lines, ""]


def _waterbodies_lines(
    layer: survey.LayerSummary, active: Mapping[str, object], loaded: config_schema.RunConfig
) -> list[str]:
    ids = [name for name in id_candidates(layer) if name != active.get("area_field")]
    groups = group_candidates(layer)
    heights = elevation_candidates(layer)
    points = f" ({layer.points} points)" if layer.points else ""
    lines = [
        f"# {layer.features} features{points}; CRS {layer.crs or 'none (set crs below)'}",
        f"# id candidates (unique integer or text fields): {', '.join(ids) or 'none'}"
        + ("" if ids else "; the features are numbered 1..N"),
        f"# group_by candidates (text fields with repeated values): {', '.join(groups) or 'none'}",
    ]
    if heights:
        lines.append(f"# elevation_field candidates: {', '.join(heights)}")
    lines += _area_lines(layer, active)
    defaults = _section_defaults(loaded.waterbodies, config_schema._WATERBODY_KEYS)
    examples = {"group_by": groups[:1] or None, "elevation_field": heights[0] if heights else None}
    return lines + _table_lines("waterbodies", active, defaults, examples)


def _area_lines(layer: survey.LayerSummary, active: Mapping[str, object]) -> list[str]:
    candidates = area_candidates(layer)
    field = active.get("area_field")
    if field is None:
        named = [c for c in candidates if set(_name_tokens(c)) & set(_AREA_WORDS)]
        if not named:
            return []
        return [
            f"# area_field candidates: {', '.join(named)}; optional for polygons, which use",
            '# their true area unless area_source = "field" (then area_field, in area_units)',
        ]
    others = [c for c in candidates if c != field]
    lines = [
        f"# The layer has {layer.points} points: each takes its area from area_field; proposed "
        f"{field!r}, the first numeric field named like an area",
        f"# other area_field candidates (numeric fields): {', '.join(others) or 'none'}",
    ]
    if area_units_of(str(field)) is None:
        lines.append(
            f"# CHECK area_units: the name {field!r} does not say its units; m2 is written, "
            "change it to ha, km2 or acre if the values are in those"
        )
    else:
        lines.append(f"# area_units {active['area_units']!r} read from the field's name")
    if layer.points < layer.features:
        lines.append(
            '# The polygons use their true area; area_source = "field" makes them use '
            "area_field too"
        )
    return lines


def _climate_lines(result: Draft, climate: Mapping[str, Mapping[str, object]]) -> list[str]:
    optional = [
        f.name for f in dataclasses.fields(config_schema.ClimateInput)
        if f.name in config_schema._CLIMATE_KEYS and f.name not in ("path", "variable")
    ]  # fmt: skip
    defaults = {f.name: f.default for f in dataclasses.fields(config_schema.ClimateInput)}
    lines = ["# Each entry also takes these keys (shown with their defaults):"]
    lines += ["#   " + _commented(k, defaults.get(k))[2:] for k in optional]
    lines += _time_lines(result.matches)
    lines.append("")
    for match in result.matches:
        lines += [f"# {note}" for note in match.notes]
        if match.time.problem:
            lines.append(f"# problem: {match.time.problem}")
        lines.append(f"[climate.{match.key}]")
        lines += [f"{k} = {toml_value(v)}" for k, v in climate[match.key].items()]
        lines.append("")
    return lines


def _time_lines(matches: Iterable[Match]) -> list[str]:
    spans = {m.time.description for m in matches if m.time.description and m.time.step}
    if len(spans) == 1:
        return [f"# Time axis found: {spans.pop()}"]
    if not spans:
        return ["# Time axis: none usable found (see the problems noted below)"]
    return [
        "# The variables have different time axes; a run needs one common axis:",
        *[f"#   {m.key}: {m.time.description}" for m in matches if m.time.description],
    ]


def _method_lines(
    result: Draft, mapping: Mapping[str, Any], loaded: config_schema.RunConfig
) -> list[str]:
    others = list(result.methods[1:])
    lines = [
        f"# Methods your inputs allow: {', '.join(result.methods)}",
        "[method]",
        *[f"{key} = {toml_value(value)}" for key, value in mapping["method"].items()],
        f"# compare = {toml_value(others)}  # not set by default: methods computed beside it",
        "",
    ]
    lines += _parameter_lines(result.methods[0], mapping.get("parameters", {}), loaded)
    return lines


def _parameter_lines(
    method: str, active: Mapping[str, object], loaded: config_schema.RunConfig
) -> list[str]:
    specs = registry.get(method).parameters
    defaults: dict[str, object] = {name: spec.default for name, spec in specs.items()}
    for name in config_schema.PIPELINE_PARAMETERS:
        defaults[name] = getattr(loaded, name)  # a RunConfig field of the same name
    lines = [f"# Parameters of {method} (`lakeloss methods` lists every method's)"]
    if "elevation_m" in defaults and "elevation_m" not in active:
        lines.append(
            "# elevation_m: set your water bodies' height above sea level (or elevation_field);"
            " at the default 0 m the air pressure is that of sea level, 3 % high at 250 m"
        )
    return lines + _table_lines("parameters", active, defaults)
