"""Unit conversion of climate inputs to the glossary units, once, at ingest.

Climate files declare units in CF/UDUNITS spelling (``"m s-1"``, ``"W m-2"``, ``"degC"``,
``"kg m-2 s-1"``). :func:`normalise_unit` rewrites those into a form pint parses,
:func:`convert` checks the dimensionality against the glossary quantity and applies the
(affine) conversion, and :func:`implausibility` looks at converted values for signs that the
declared unit is wrong (kelvin declared as Celsius, a fraction declared as percent).

Amounts accumulated over a time step (``"mm"``, ``"kg m-2"``, ``"J m-2"``) are turned into
daily rates or mean fluxes by dividing by the step length, which the caller supplies.
Mass per area of water becomes depth with a water density of exactly 1000 kg m-3, the
convention gridded products use (METHODS §7.7).
"""

from __future__ import annotations

import functools
import re

import numpy as np
import pint
import xarray as xr

from lakeloss.errors import UnitsError
from lakeloss.glossary import ALIASES, QUANTITIES

WATER_DENSITY = 1000.0
"""Density of liquid water used to turn kg m-2 into mm [kg m-3] (METHODS §7.7)."""

# Whole-string spellings that pint would misread or not know. "C" alone is coulomb to
# pint and "deg C" parses as degree (angle) times coulomb, so temperatures are mapped here.
_WHOLE_SPELLINGS: dict[str, str] = {
    "k": "kelvin",
    "degk": "kelvin",
    "deg k": "kelvin",
    "degreek": "kelvin",
    "degree_k": "kelvin",
    "degrees_k": "kelvin",
    "degrees k": "kelvin",
    "kelvin": "kelvin",
    "kelvins": "kelvin",
    "c": "degC",
    "°c": "degC",
    "degc": "degC",
    "deg c": "degC",
    "deg_c": "degC",
    "degreec": "degC",
    "degree_c": "degC",
    "degrees_c": "degC",
    "degrees c": "degC",
    "degree c": "degC",
    "celsius": "degC",
    "degree_celsius": "degC",
    "degrees_celsius": "degC",
    "degrees celsius": "degC",
    "degree celsius": "degC",
    "%": "percent",
    "percent": "percent",
    "percentage": "percent",
    "": "dimensionless",
    "1": "dimensionless",
    "-": "dimensionless",
    "fraction": "dimensionless",
    "dimensionless": "dimensionless",
    "knots": "knot",
    "kts": "knot",
    "kt": "knot",
    "m of water equivalent": "m",
    "m water equivalent": "m",
    "mm of water equivalent": "mm",
}

# Single symbols CF files use that pint reads differently or not at all.
_SYMBOLS: dict[str, str] = {"d": "day", "hr": "hour", "sec": "s", "mb": "mbar"}

# CF writes "m-2" or "m^-2" for m**-2; a bare trailing integer is an exponent too ("m2").
_POWER_TOKEN = re.compile(r"^([A-Za-z_°]+)(?:\^|\*\*)?([+-]?\d+)?$")

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


@functools.cache
def registry() -> pint.UnitRegistry:
    """Return the shared pint registry (building one takes about a second)."""
    return pint.UnitRegistry(autoconvert_offset_to_baseunit=True)


def normalise_unit(text: str) -> str:
    """Rewrite a CF/UDUNITS unit string into a pint-parseable one.

    Parameters
    ----------
    text : str
        Unit as written in the file or config, e.g. ``"m s-1"``, ``"W m**-2"``,
        ``"degrees_Celsius"``, ``"1"``.

    Returns
    -------
    str
        Equivalent pint expression, e.g. ``"m*s**-1"``, ``"W*m**-2"``, ``"degC"``,
        ``"dimensionless"``.

    Notes
    -----
    Whole-string spellings are looked up first (case-insensitively) because pint reads
    ``"C"`` as coulomb and ``"deg C"`` as an angle times a charge. Otherwise the string
    is split on blanks and each ``name<exponent>`` token becomes ``name**exponent``;
    tokens already written with ``/`` or ``**`` pass through.
    """
    stripped = " ".join(text.strip().split())
    whole = _WHOLE_SPELLINGS.get(stripped.lower())
    if whole is not None:
        return whole
    tokens = stripped.replace("·", " ").split(" ")
    return "*".join(_normalise_token(token) for token in tokens)


def _normalise_token(token: str) -> str:
    match = _POWER_TOKEN.match(token)
    if match is None:
        return token  # already pint syntax ("m/s", "W/m**2") or a number
    name, power = match.groups()
    name = _SYMBOLS.get(name, name)
    return name if power is None else f"{name}**{int(power)}"


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


def _parse(unit: str, variable: str, expected: str) -> pint.Unit:
    try:
        return registry().Unit(normalise_unit(unit))
    except (pint.errors.PintError, TypeError, ValueError, AttributeError, AssertionError) as err:
        raise UnitsError(
            f"variable {variable!r}: unit {unit!r} cannot be parsed; expected a unit convertible "
            f"to {expected}; fix the file's units attribute or set units in the config"
        ) from err


def conversion_plan(
    from_unit: str, quantity: str, *, variable: str | None = None
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
    source = _parse(from_unit, variable, str(QUANTITIES[name].unit))
    for per_step, via_density in _candidate_routes(name):
        unit = ureg.Quantity(1.0, source)
        if via_density:
            unit = unit / ureg.Quantity(WATER_DENSITY, "kg/m**3")
        if per_step:
            unit = unit / ureg.Quantity(1.0, "day")
        if unit.dimensionality != ureg.Quantity(1.0, target).dimensionality:
            continue
        if not per_step and not via_density:
            scale, offset = _affine(ureg, source, target)
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


def _affine(ureg: pint.UnitRegistry, source: pint.Unit, target: pint.Unit) -> tuple[float, float]:
    # Two points fix an affine map; this is what makes K -> degC offset-aware.
    zero = float(ureg.Quantity(0.0, source).to(target).magnitude)
    one = float(ureg.Quantity(1.0, source).to(target).magnitude)
    return one - zero, zero


def convert(values, from_unit: str, quantity: str, *, step_days=None, variable: str | None = None):
    """Convert values to the glossary unit of ``quantity``.

    Parameters
    ----------
    values : numpy.ndarray or xarray.DataArray
        Values in ``from_unit``. A DataArray stays lazy if it is dask-backed.
    from_unit : str
        Declared unit (CF spelling accepted, see :func:`normalise_unit`).
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
    scale, offset, per_step = conversion_plan(from_unit, quantity, variable=variable)
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
    return normalise_unit(unit) == "percent"
