"""Unit conversion of climate inputs to the glossary units, once, at ingest.

Climate files declare units in CF/UDUNITS spelling (``"m s-1"``, ``"W m-2"``, ``"degC"``,
``"kg m-2 s-1"``, ``"mm d-1"``). They are parsed by the UDUNITS-aware pint registry of
cf_xarray (``cf_xarray.units``), which reads UDUNITS powers (``m-2``, ``m2``), ``%``,
``Celsius``/``degree_Celsius``, ``d`` for day and dotted products (``kg.m-2.s-1``). The few
spellings that registry misreads or does not know, but which real files carry
(``"deg C"``, ``"degrees_K"``, ``"fraction"``, ``"mb"``, ``"m of water equivalent"``), are
mapped here first; that table is kept to what the registry does not cover (measured, see the
tests).

What stays in this module is the glossary's own arithmetic, which no unit library knows:

* amounts accumulated over a time step (``"mm"``, ``"m"``, ``"kg m-2"``, ``"J m-2"``) become
  daily rates or mean fluxes by dividing by the step length, which the caller supplies;
* mass of water per area becomes depth with a water density of exactly 1000 kg m-3, the
  convention gridded products use (1 kg m-2 = 1 mm);
* a rate "per month" on calendar-month steps is the month's total, divided by that month's
  own length (a unit library's month is a mean month of 30.44 days, 8 % off for February).

:func:`convert` checks the dimensionality against the glossary quantity and applies the
(affine) conversion, and :func:`implausibility` looks at converted values for signs that the
declared unit is wrong (kelvin declared as Celsius, a fraction declared as percent).
"""

from __future__ import annotations

import functools
import logging

import numpy as np
import pint
import xarray as xr

from lakeloss.errors import UnitsError
from lakeloss.glossary import ALIASES, QUANTITIES

WATER_DENSITY = 1000.0
"""Density of liquid water used to turn kg m-2 into mm [kg m-3] (1 kg m-2 = 1 mm)."""

OWN_SPELLINGS: dict[str, str] = {
    # Blank-separated degree names: the registry reads "deg C" as an angle times a
    # temperature (274.15 degree kelvin) and "deg F" as an angle times a farad.
    "deg C": "degC",
    "degree C": "degC",
    "degrees C": "degC",
    "degree Celsius": "degC",
    "degrees Celsius": "degC",
    "deg K": "kelvin",
    "degrees K": "kelvin",
    "deg F": "degF",
    # Underscored forms UDUNITS knows and the registry does not.
    "degree_C": "degC",
    "degrees_C": "degC",
    "degree_K": "kelvin",
    "degrees_K": "kelvin",
    "degree_F": "degF",
    "degrees_F": "degF",
    "Kelvin": "kelvin",
    # Dimensionless spellings outside UDUNITS that products use for fractions.
    "fraction": "dimensionless",
    "-": "dimensionless",
    "percentage": "percent",
    # Millibar: UDUNITS and the registry read "mb" as millibarn (an area).
    "mb": "mbar",
    # Depth of water as ECMWF writes it for accumulated water.
    "m of water equivalent": "m",
    "m water equivalent": "m",
    "m of water": "m",
    "mm of water equivalent": "mm",
    "mm water equivalent": "mm",
    "mm of water": "mm",
}
"""Spellings mapped before parsing, each one the registry misreads or does not know
(``tests/io/test_units.py`` checks that every entry is still needed)."""

_OWN_SPELLINGS_FOLDED = {key.casefold(): value for key, value in OWN_SPELLINGS.items()}

# Quantities that may arrive as amounts per time step (converted to rates by step length).
_ACCUMULABLE = frozenset(
    {
        "precipitation",
        "pan_evaporation",
        "surface_downwelling_shortwave_flux_in_air",
        "surface_net_downward_radiative_flux",
        "heat_storage_flux",
    }
)

# Quantities that are depths of water, so kg m-2 may stand for mm.
_WATER_DEPTH = frozenset({"precipitation", "pan_evaporation"})

# Steps of 28..31 days are calendar months: a rate "per month" is then that month's total.
_CALENDAR_MONTH_DAYS = (28.0, 31.0)


@functools.cache
def registry() -> pint.UnitRegistry:
    """Return the UDUNITS-aware pint registry of cf_xarray (shared, built on first use)."""
    # Building it redefines a few pint units (percent, year, d, h) on purpose; pint logs
    # each redefinition as a warning, which users should not see. Importing it also makes it
    # pint's application registry, which breaks other libraries' quantities in the same
    # process (metpy's): the previous application registry is put back.
    pint_log = logging.getLogger("pint")
    level = pint_log.level
    previous = pint.get_application_registry().get()
    pint_log.setLevel(logging.ERROR)
    try:
        from cf_xarray.units import units
    finally:
        pint_log.setLevel(level)
        pint.set_application_registry(previous)
    return units


def spelled(text: str) -> str:
    """The unit text as the registry should read it: blanks collapsed, own spellings mapped.

    Parameters
    ----------
    text : str
        Unit as written in the file or config, e.g. ``"degrees_C"``, ``"W m-2"``.

    Returns
    -------
    str
        ``text`` with runs of blanks collapsed, or its entry in :data:`OWN_SPELLINGS`
        (looked up ignoring case).
    """
    collapsed = " ".join(str(text).split())
    return _OWN_SPELLINGS_FOLDED.get(collapsed.casefold(), collapsed)


def parse_unit(text: str) -> pint.Quantity:
    """Parse a CF/UDUNITS unit string into a pint quantity (scale factor times unit).

    Parameters
    ----------
    text : str
        Unit as written, e.g. ``"kg m-2 s-1"``, ``"mm d-1"``, ``"1e-3"``, ``"%"``.

    Returns
    -------
    pint.Quantity
        Magnitude is the scale factor the unit string carries (1 for most), e.g.
        ``0.001 dimensionless`` for ``"1e-3"``.

    Raises
    ------
    ValueError, pint.errors.PintError
        The registry cannot read the text.
    """
    ureg = registry()
    parsed = ureg.parse_expression(spelled(text))
    if not isinstance(parsed, pint.Quantity):  # a bare number such as "0.01"
        parsed = ureg.Quantity(float(parsed), "dimensionless")
    return parsed


def target_unit(quantity: str) -> str:
    """Return the glossary unit of ``quantity`` (after resolving config aliases)."""
    return QUANTITIES[_glossary_name(quantity)].unit


def _glossary_name(quantity: str) -> str:
    name = ALIASES.get(quantity, quantity)
    if name not in QUANTITIES:
        known = ", ".join(sorted(QUANTITIES))
        raise UnitsError(
            f"unknown quantity {quantity!r}; expected one of the glossary names ({known})"
        )
    return name


def _parse(unit: str, variable: str, expected: str) -> pint.Quantity:
    try:
        return parse_unit(unit)
    except (pint.errors.PintError, TypeError, ValueError, AttributeError, AssertionError) as err:
        raise UnitsError(
            f"variable {variable!r}: unit {unit!r} cannot be parsed; expected a unit convertible "
            f"to {expected}; fix the file's units attribute or set units in the config"
        ) from err


def conversion_plan(
    from_unit: str, quantity: str, *, variable: str | None = None, calendar_months: bool = False
) -> tuple[float, float, bool]:
    """Work out how values in ``from_unit`` become the glossary unit of ``quantity``.

    Parameters
    ----------
    from_unit : str
        Declared unit of the values.
    quantity : str
        Glossary name (or alias such as ``precipitation_amount``).
    variable : str, optional
        Name used in error messages (defaults to ``quantity``).
    calendar_months : bool
        True when the time steps are calendar months: a rate per month (``"mm/month"``) is
        then taken as the month's amount and divided by its own length.

    Returns
    -------
    scale, offset : float
        ``converted = values * scale + offset`` (before division by step length).
    per_step : bool
        True when the values are amounts per time step: the result of the affine map is a
        total per day and still has to be divided by the step length [day].

    Raises
    ------
    UnitsError
        Unit unparseable, or of a dimensionality that cannot express ``quantity``.
    """
    name = _glossary_name(quantity)
    variable = variable or quantity
    ureg = registry()
    target = ureg.Unit(QUANTITIES[name].unit)
    parsed = _parse(from_unit, variable, str(QUANTITIES[name].unit))
    factor, source = float(parsed.magnitude), parsed.units
    if calendar_months and dict(source._units).get("month") == -1:
        source = source * ureg.month  # the amount of one month, divided by its days below
    target_dimensionality = ureg.Quantity(1.0, target).dimensionality
    for per_step, via_density in _candidate_routes(name):
        unit = ureg.Quantity(factor, source)
        if via_density:
            unit = unit / ureg.Quantity(WATER_DENSITY, "kg/m**3")
        if per_step:
            unit = unit / ureg.Quantity(1.0, "day")
        if unit.dimensionality != target_dimensionality:
            continue
        if not per_step and not via_density:
            scale, offset = _affine(ureg, factor, source, target)
            return scale, offset, False
        return float(unit.to(target).magnitude), 0.0, per_step
    raise UnitsError(
        f"variable {variable!r}: unit {from_unit!r} has dimension {source.dimensionality}, "
        f"which cannot express {name} [{QUANTITIES[name].unit}]; "
        "fix the file's units attribute or set units in the config"
    )


def _candidate_routes(name: str) -> list[tuple[bool, bool]]:
    routes = [(False, False)]
    if name in _WATER_DEPTH:
        routes.append((False, True))
    if name in _ACCUMULABLE:
        routes.append((True, False))
    if name in _WATER_DEPTH and name in _ACCUMULABLE:
        routes.append((True, True))
    return routes


def _affine(ureg: pint.UnitRegistry, factor: float, source, target) -> tuple[float, float]:
    # Two points fix an affine map; this is what makes K -> degC offset-aware.
    zero = float(ureg.Quantity(0.0, source).to(target).magnitude)
    one = float(ureg.Quantity(factor, source).to(target).magnitude)
    return one - zero, zero


def _are_calendar_months(step_days) -> bool:
    if step_days is None:
        return False
    steps = np.asarray(step_days, dtype=float)
    low, high = _CALENDAR_MONTH_DAYS
    return bool(steps.size) and bool(np.all((steps >= low) & (steps <= high)))


def convert(values, from_unit: str, quantity: str, *, step_days=None, variable: str | None = None):
    """Convert values to the glossary unit of ``quantity``.

    Parameters
    ----------
    values : numpy.ndarray or xarray.DataArray
        Values in ``from_unit``. A DataArray stays lazy if it is dask-backed.
    from_unit : str
        Declared unit (any CF/UDUNITS spelling, see :func:`parse_unit`).
    quantity : str
        Glossary name or alias (``precipitation_amount`` -> ``precipitation``).
    step_days : float or array_like, optional
        Length of each time step [day], needed for amounts per step. An array of one value
        per step applies along the first axis (numpy) or the ``time`` dimension (DataArray).
    variable : str, optional
        Variable name for error messages.

    Returns
    -------
    numpy.ndarray or xarray.DataArray
        Same type as ``values``, in ``QUANTITIES[quantity].unit``; a DataArray gets
        ``attrs["units"]`` set to that unit.

    Raises
    ------
    UnitsError
        Unit unparseable or of the wrong dimensionality, or a per-step amount without
        ``step_days``.
    """
    scale, offset, per_step = conversion_plan(
        from_unit, quantity, variable=variable, calendar_months=_are_calendar_months(step_days)
    )
    # Skip the identity parts: each is a full pass over a lazy (time, y, x) cube.
    converted = values * scale if scale != 1.0 else values
    if offset:
        converted = converted + offset
    if per_step:
        converted = converted / _step_divisor(values, step_days, from_unit, quantity, variable)
    if isinstance(converted, xr.DataArray):
        converted = converted.assign_attrs(units=target_unit(quantity))
    return converted


def _step_divisor(values, step_days, from_unit: str, quantity: str, variable: str | None):
    if step_days is None:
        raise UnitsError(
            f"variable {variable or quantity!r}: unit {from_unit!r} is an amount per time step "
            "but no step length was given; expected a rate, or a time axis to divide by"
        )
    steps = np.asarray(step_days, dtype=float)
    if steps.ndim == 0:
        return float(steps)
    if isinstance(values, xr.DataArray):
        return xr.DataArray(steps, dims=("time",))
    return steps.reshape((-1,) + (1,) * (np.ndim(values) - 1))


def implausibility(quantity: str, values, declared_unit: str) -> str | None:
    """Say why converted values contradict their declared unit, or return None.

    Parameters
    ----------
    quantity : str
        Glossary name or alias.
    values : array_like
        Values already converted to the glossary unit. NaNs are ignored.
    declared_unit : str
        Unit the source declared (used to phrase the diagnosis).

    Returns
    -------
    str or None
        One-line reason, or None when the values look plausible.
    """
    finite = np.asarray(values, dtype=float)
    finite = finite[np.isfinite(finite)]
    if finite.size == 0:
        return None
    return diagnose_range(quantity, float(finite.min()), float(finite.max()), declared_unit)


def diagnose_range(quantity: str, low: float, high: float, declared_unit: str) -> str | None:
    """Like :func:`implausibility` but from the minimum and maximum of converted values.

    Lets a chunked scan reduce to two numbers before judging. Limits are the glossary's;
    the "looks like ..." hints are common practice, no source.
    """
    name = _glossary_name(quantity)
    spec = QUANTITIES[name]
    lower, upper = spec.limits
    declared = f"declared {declared_unit!r}"
    is_temperature = spec.unit == "degC"
    if is_temperature and low > 150.0:
        return f"{name}: values {low:.4g}..{high:.4g} {spec.unit} ({declared}) look like kelvin"
    if is_temperature and high < -150.0:
        return f"{name}: values {low:.4g}..{high:.4g} {spec.unit} ({declared}) look like °C declared as kelvin"
    if spec.unit == "percent" and 0.0 <= high <= 1.5 and _is_percent(declared_unit):
        return f"{name}: maximum {high:.4g} % ({declared}) looks like a fraction, not percent"
    if (
        spec.unit == "percent"
        and high > upper
        and high <= 100.0 * upper
        and not _is_percent(declared_unit)
    ):
        return (
            f"{name}: maximum {high:.4g} % ({declared}) looks like percent declared as a fraction"
        )
    if low < lower or high > upper:
        return (
            f"{name}: values {low:.4g}..{high:.4g} {spec.unit} ({declared}) lie outside the "
            f"plausible range {lower:g}..{upper:g} {spec.unit}"
        )
    return None


def _is_percent(unit: str) -> bool:
    try:
        parsed = parse_unit(unit)
    except (pint.errors.PintError, TypeError, ValueError, AttributeError, AssertionError):
        return False
    return bool(parsed.units == registry().percent and float(parsed.magnitude) == 1.0)
