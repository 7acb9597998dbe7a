"""Unit normalisation, conversion to glossary units, and plausibility diagnoses."""

from __future__ import annotations

import dask.array as da
import numpy as np
import pytest
import xarray as xr

from lakeloss.errors import UnitsError
from lakeloss.io.units import convert, implausibility, normalise_unit

SHORTWAVE = "surface_downwelling_shortwave_flux_in_air"


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("m s-1", "m*s**-1"),
        ("W m-2", "W*m**-2"),
        ("W m**-2", "W*m**-2"),
        ("W m^-2", "W*m**-2"),
        ("kg m-2 s-1", "kg*m**-2*s**-1"),
        ("MJ m-2 d-1", "MJ*m**-2*day**-1"),
        ("mm/day", "mm/day"),
        ("K", "kelvin"),
        ("degrees_K", "kelvin"),
        ("deg C", "degC"),
        ("C", "degC"),
        ("degrees_Celsius", "degC"),
        ("%", "percent"),
        ("1", "dimensionless"),
        ("", "dimensionless"),
        ("fraction", "dimensionless"),
        ("knots", "knot"),
    ],
)
def test_normalise_unit(text, expected):
    assert normalise_unit(text) == expected


# Known values; sources: METHODS §1 conversion table (T_K = T + 273.15; W m-2 x 0.0864 =
# MJ m-2 d-1; km/h ÷ 3.6 = m/s; 1 kPa = 10 hPa) and §7.7 (1 kg m-2 s-1 = 86 400 mm d-1);
# 1 knot = 1852 m h-1 by definition of the nautical mile.
@pytest.mark.parametrize(
    ("value", "unit", "quantity", "expected"),
    [
        (293.15, "K", "air_temperature", 20.0),
        (0.0, "degK", "air_temperature_min", -273.15),
        (20.0, "deg C", "air_temperature", 20.0),
        (20.0, "degrees_Celsius", "dew_point_temperature", 20.0),
        (68.0, "degF", "air_temperature", 20.0),
        (0.45, "1", "relative_humidity", 45.0),
        (0.45, "fraction", "relative_humidity", 45.0),
        (0.45, "", "relative_humidity_max", 45.0),
        (45.0, "%", "relative_humidity", 45.0),
        (1.0, "MJ m-2 day-1", SHORTWAVE, 1.0 / 0.0864),
        (1.0, "MJ m-2 d-1", "surface_net_downward_radiative_flux", 1.0 / 0.0864),
        (100.0, "W m**-2", SHORTWAVE, 100.0),
        (1.0, "kg m-2 s-1", "precipitation_flux", 86_400.0),
        (1.0, "mm s-1", "precipitation", 86_400.0),
        (3.0, "mm day-1", "precipitation", 3.0),
        (3.0, "mm/day", "pan_evaporation", 3.0),
        (36.0, "km h-1", "wind_speed", 10.0),
        (1.0, "knots", "wind_speed", 1852.0 / 3600.0),
        (2.5, "m/s", "eastward_wind", 2.5),
        (1013.25, "hPa", "surface_air_pressure", 101_325.0),
        (1013.25, "mbar", "surface_air_pressure", 101_325.0),
        (101.325, "kPa", "surface_air_pressure", 101_325.0),
        (1.5, "kPa", "water_vapor_partial_pressure_in_air", 1500.0),
        (8.0, "g kg-1", "specific_humidity", 0.008),
        (0.008, "kg kg-1", "specific_humidity", 0.008),
        (120.0, "m", "elevation", 120.0),
    ],
)
def test_known_conversions(value, unit, quantity, expected):
    result = convert(np.array([value]), unit, quantity)
    np.testing.assert_allclose(result, [expected], rtol=1e-12, atol=1e-9)


@pytest.mark.parametrize(
    ("value", "unit", "quantity", "step_days", "expected"),
    [
        (8.64e6, "J m-2", SHORTWAVE, 1.0, 100.0),  # 8.64 MJ m-2 per day = 100 W m-2
        (3.0, "mm", "precipitation_amount", 1.0, 3.0),
        (3.0, "kg m-2", "precipitation_amount", 1.0, 3.0),  # rho_w = 1000 exactly (§7.7)
        (0.003, "m", "precipitation", 1.0, 3.0),  # metres of water equivalent
        (93.0, "mm", "pan_evaporation_amount", 31.0, 3.0),  # a monthly total over 31 days
    ],
)
def test_per_step_amounts_become_daily_rates(value, unit, quantity, step_days, expected):
    result = convert(np.array([value]), unit, quantity, step_days=step_days)
    np.testing.assert_allclose(result, [expected], rtol=1e-12)


def test_per_step_lengths_apply_along_time():
    totals = np.array([[[31.0, 62.0]], [[28.0, 56.0]]])  # two months, 1 x 2 cells
    result = convert(totals, "kg m-2", "precipitation_amount", step_days=[31.0, 28.0])
    np.testing.assert_allclose(result, [[[1.0, 2.0]], [[1.0, 2.0]]])


def test_per_step_amount_without_step_length_is_refused():
    with pytest.raises(UnitsError, match="'tp'.*'mm' is an amount per time step"):
        convert(np.array([1.0]), "mm", "precipitation", variable="tp")


def test_dataarray_stays_lazy_and_gets_units():
    lazy = xr.DataArray(da.full((3, 2, 2), 293.15, chunks=(1, 2, 2)), dims=("time", "y", "x"))
    result = convert(lazy, "K", "air_temperature")
    assert isinstance(result.data, da.Array)
    assert result.attrs["units"] == "degC"
    np.testing.assert_allclose(result.values, 20.0)


def test_dataarray_step_lengths_follow_time_dimension():
    totals = xr.DataArray(np.full((2, 1, 1), 60.0), dims=("time", "y", "x"))
    result = convert(totals, "kg m-2", "precipitation_amount", step_days=np.array([30.0, 20.0]))
    np.testing.assert_allclose(result.values.ravel(), [2.0, 3.0])


@pytest.mark.parametrize(
    ("unit", "quantity"),
    [
        ("m s-1", "air_temperature"),  # the dimensionality guard
        ("degC", "wind_speed"),
        ("Pa", "relative_humidity"),
        ("W m-2", "precipitation"),
        ("m", "wind_speed"),  # per-step amounts only for accumulating quantities
        ("kg m-2", "elevation"),
    ],
)
def test_wrong_dimensionality_is_refused(unit, quantity):
    with pytest.raises(UnitsError, match="cannot express"):
        convert(np.array([1.0]), unit, quantity, step_days=1.0, variable="v")


def test_unparseable_unit_names_variable_and_unit():
    with pytest.raises(UnitsError, match=r"variable 'tas2': unit 'blorps m-\?' cannot be parsed"):
        convert(np.array([1.0]), "blorps m-?", "air_temperature", variable="tas2")


def test_unknown_quantity_is_refused():
    with pytest.raises(UnitsError, match="unknown quantity 'sunshine'"):
        convert(np.array([1.0]), "h", "sunshine")


# Plausibility hints are common practice, no source; limits come from the glossary.
@pytest.mark.parametrize(
    ("quantity", "values", "unit", "words"),
    [
        ("air_temperature", [285.0, 301.0, np.nan], "degC", "look like kelvin"),
        ("relative_humidity", [0.2, 0.95], "%", "looks like a fraction"),
        ("relative_humidity", [20.0, 9500.0], "1", "looks like percent declared as a fraction"),
        ("relative_humidity", [20.0, 180.0], "%", "outside the plausible range 0..105"),
        ("wind_speed", [-0.5, 3.0], "m s-1", "outside the plausible range"),
        (SHORTWAVE, [-3.0, 200.0], "W m-2", "outside the plausible range -1..1400"),
    ],
)
def test_implausible_values_are_explained(quantity, values, unit, words):
    reason = implausibility(quantity, np.array(values), unit)
    assert reason is not None and words in reason
    assert "\n" not in reason


@pytest.mark.parametrize(
    ("quantity", "values", "unit"),
    [
        ("air_temperature", [-5.0, 35.0], "degC"),
        ("relative_humidity", [12.0, 100.0, np.nan], "%"),
        (SHORTWAVE, [-0.5, 350.0], "W m-2"),
        ("wind_speed", [np.nan, np.nan], "m s-1"),
    ],
)
def test_plausible_values_pass(quantity, values, unit):
    assert implausibility(quantity, np.array(values), unit) is None
