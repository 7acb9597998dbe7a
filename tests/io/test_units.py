"""Unit spellings, conversion to glossary units, and plausibility diagnoses."""

from __future__ import annotations

import dask.array as da
import numpy as np
import pandas as pd
import pint
import pytest
import xarray as xr

from lakeloss.errors import UnitsError
from lakeloss.io import climate as climate_io
from lakeloss.io.units import OWN_SPELLINGS, convert, implausibility, registry

SHORTWAVE = "surface_downwelling_shortwave_flux_in_air"
NET_RADIATION = "surface_net_downward_radiative_flux"

# Where each conversion factor comes from:
SI = "BIPM SI Brochure 9th ed. (2019): t/degC = T/K - 273.15 (sec. 2.3.1); min, h, d (Table 8)"
NIST = "NIST SP 811 (Thompson & Taylor 2008) App. B: t/degC = (t/degF - 32) / 1.8"
UDUNITS = "UDUNITS-2 unit database: percent = 0.01, knot = 1852 m/h, bar = 1e5 Pa"
WATER = "liquid-water-equivalent convention: 1 kg m-2 = 1 mm of water (rho_w = 1000 kg m-3)"
ERA5 = (
    "ECMWF ERA5 parameter documentation (Hersbach et al. 2020, QJRMS 146, 1999-2049): "
    "tp in m of water and ssrd in J m-2, accumulated over the step"
)
CMIP = "CMIP6 data request: pr in kg m-2 s-1, tas in K, hurs in %, rsds in W m-2"

# Every spelling lakeloss accepts for the glossary quantities, with the value it gives:
# (spelling, quantity, value in the file, step length [day] or None, glossary value, source).
# Glossary units: degC, percent, kg/kg, Pa, m/s, W/m**2, mm/day.
SPELLINGS = [
    # temperature [degC]
    ("K", "air_temperature", 293.15, None, 20.0, SI),
    ("kelvin", "air_temperature", 293.15, None, 20.0, SI),
    ("Kelvin", "air_temperature", 293.15, None, 20.0, SI),
    ("degK", "air_temperature_min", 0.0, None, -273.15, SI),
    ("deg_K", "air_temperature_min", 0.0, None, -273.15, SI),
    ("degrees_K", "air_temperature_max", 303.15, None, 30.0, SI),
    ("degree_K", "air_temperature_max", 303.15, None, 30.0, SI),
    ("deg K", "air_temperature", 293.15, None, 20.0, SI),
    ("degrees K", "air_temperature", 293.15, None, 20.0, SI),
    ("degC", "air_temperature", 20.0, None, 20.0, SI),
    ("Celsius", "air_temperature", 20.0, None, 20.0, SI),
    ("celsius", "air_temperature", 20.0, None, 20.0, SI),
    ("degree_Celsius", "dew_point_temperature", 12.0, None, 12.0, SI),
    ("degrees_Celsius", "dew_point_temperature", 12.0, None, 12.0, SI),
    ("degree_C", "air_temperature", 20.0, None, 20.0, SI),
    ("degrees_C", "air_temperature", 20.0, None, 20.0, SI),
    ("deg_C", "air_temperature", 20.0, None, 20.0, SI),
    ("degreeC", "air_temperature", 20.0, None, 20.0, SI),
    ("deg C", "air_temperature", 20.0, None, 20.0, SI),
    ("degree C", "air_temperature", 20.0, None, 20.0, SI),
    ("degrees C", "air_temperature", 20.0, None, 20.0, SI),
    ("degrees Celsius", "water_surface_temperature", 20.0, None, 20.0, SI),
    ("°C", "air_temperature", 20.0, None, 20.0, SI),
    ("C", "air_temperature", 20.0, None, 20.0, SI),
    ("degF", "air_temperature", 68.0, None, 20.0, NIST),
    ("degrees_F", "air_temperature", 68.0, None, 20.0, NIST),
    ("deg F", "air_temperature", 68.0, None, 20.0, NIST),
    # humidity [percent] and [kg/kg]
    ("1", "relative_humidity", 0.45, None, 45.0, UDUNITS),
    ("", "relative_humidity_max", 0.45, None, 45.0, UDUNITS),
    ("fraction", "relative_humidity", 0.45, None, 45.0, UDUNITS),
    ("-", "relative_humidity_min", 0.45, None, 45.0, UDUNITS),
    ("0.01", "relative_humidity", 45.0, None, 45.0, UDUNITS),
    ("%", "relative_humidity", 45.0, None, 45.0, UDUNITS),
    ("percent", "relative_humidity", 45.0, None, 45.0, UDUNITS),
    ("percentage", "relative_humidity", 45.0, None, 45.0, UDUNITS),
    ("kg kg-1", "specific_humidity", 0.008, None, 0.008, SI),
    ("kg/kg", "specific_humidity", 0.008, None, 0.008, SI),
    ("1", "specific_humidity", 0.008, None, 0.008, SI),
    ("g kg-1", "specific_humidity", 8.0, None, 0.008, SI),
    ("g/kg", "specific_humidity", 8.0, None, 0.008, SI),
    ("1e-3", "specific_humidity", 8.0, None, 0.008, SI),
    # pressure [Pa]
    ("Pa", "surface_air_pressure", 101_325.0, None, 101_325.0, SI),
    ("hPa", "surface_air_pressure", 1013.25, None, 101_325.0, SI),
    ("mbar", "surface_air_pressure", 1013.25, None, 101_325.0, UDUNITS),
    ("millibar", "surface_air_pressure", 1013.25, None, 101_325.0, UDUNITS),
    ("mb", "surface_air_pressure", 1013.25, None, 101_325.0, UDUNITS),
    ("kPa", "water_vapor_partial_pressure_in_air", 1.5, None, 1500.0, SI),
    # wind [m/s]
    ("m s-1", "wind_speed", 2.5, None, 2.5, SI),
    ("m s**-1", "wind_speed", 2.5, None, 2.5, SI),
    ("m s^-1", "eastward_wind", -2.5, None, -2.5, SI),
    ("m/s", "northward_wind", 2.5, None, 2.5, SI),
    ("m.s-1", "wind_speed", 2.5, None, 2.5, SI),
    ("km h-1", "wind_speed", 36.0, None, 10.0, SI),
    ("km/h", "wind_speed", 36.0, None, 10.0, SI),
    ("knots", "wind_speed", 1.0, None, 1852.0 / 3600.0, UDUNITS),
    ("knot", "wind_speed", 1.0, None, 1852.0 / 3600.0, UDUNITS),
    ("kt", "wind_speed", 1.0, None, 1852.0 / 3600.0, UDUNITS),
    ("kts", "wind_speed", 1.0, None, 1852.0 / 3600.0, UDUNITS),
    # radiation as a mean flux [W/m**2]
    ("W m-2", SHORTWAVE, 100.0, None, 100.0, SI),
    ("W m**-2", SHORTWAVE, 100.0, None, 100.0, SI),
    ("W m^-2", SHORTWAVE, 100.0, None, 100.0, SI),
    ("W/m2", SHORTWAVE, 100.0, None, 100.0, SI),
    ("W/m^2", NET_RADIATION, 100.0, None, 100.0, SI),
    ("W.m-2", NET_RADIATION, 100.0, None, 100.0, SI),
    ("MJ m-2 d-1", SHORTWAVE, 8.64, None, 100.0, SI),
    ("MJ m-2 day-1", NET_RADIATION, 8.64, None, 100.0, SI),
    ("MJ/m2/day", SHORTWAVE, 8.64, None, 100.0, SI),
    ("J m-2 s-1", SHORTWAVE, 100.0, None, 100.0, SI),
    # radiation accumulated over the step [J m-2 per step] -> mean flux over the step
    ("J m-2", SHORTWAVE, 8.64e6, 1.0, 100.0, ERA5),  # ERA5 ssrd summed over a day
    ("J m**-2", NET_RADIATION, 8.64e6, 1.0, 100.0, ERA5),
    ("J/m2", SHORTWAVE, 8.64e6, 1.0, 100.0, SI),
    ("W m-2 s", SHORTWAVE, 8.64e6, 1.0, 100.0, SI),
    ("MJ m-2", SHORTWAVE, 267.84, 31.0, 100.0, SI),  # a January total
    # precipitation as a rate [mm/day]
    ("kg m-2 s-1", "precipitation_flux", 1.0 / 86_400.0, None, 1.0, WATER),  # CMIP pr
    ("kg m**-2 s**-1", "precipitation_flux", 1.0, None, 86_400.0, WATER),
    ("kg m^-2 s^-1", "precipitation", 1.0, None, 86_400.0, WATER),
    ("kg/m2/s", "precipitation", 1.0, None, 86_400.0, WATER),
    ("kg.m-2.s-1", "precipitation", 1.0, None, 86_400.0, WATER),
    ("kg m-2 d-1", "precipitation", 3.0, None, 3.0, WATER),
    ("mm s-1", "precipitation", 1.0, None, 86_400.0, SI),
    ("m s-1", "precipitation", 1.0e-5, None, 864.0, SI),
    ("mm/day", "precipitation", 3.0, None, 3.0, SI),
    ("mm day-1", "precipitation", 3.0, None, 3.0, SI),
    ("mm d-1", "precipitation", 3.0, None, 3.0, SI),
    ("mm/d", "pan_evaporation", 3.0, None, 3.0, SI),
    ("mm.d-1", "pan_evaporation", 3.0, None, 3.0, SI),
    ("mm h-1", "precipitation", 0.5, None, 12.0, SI),
    ("mm/hr", "precipitation", 0.5, None, 12.0, SI),
    ("m d-1", "precipitation", 0.003, None, 3.0, SI),
    ("cm/day", "precipitation", 0.3, None, 3.0, SI),
    # precipitation accumulated over the step -> daily rate over the step
    ("mm", "precipitation_amount", 3.0, 1.0, 3.0, SI),
    ("kg m-2", "precipitation_amount", 3.0, 1.0, 3.0, WATER),
    ("kg/m2", "precipitation", 62.0, 31.0, 2.0, WATER),
    ("m", "precipitation", 0.003, 1.0, 3.0, ERA5),  # ERA5 tp summed over a day
    ("m of water equivalent", "precipitation", 0.003, 1.0, 3.0, ERA5),
    ("m water equivalent", "precipitation", 0.003, 1.0, 3.0, ERA5),
    ("mm of water equivalent", "pan_evaporation_amount", 93.0, 31.0, 3.0, ERA5),
    ("mm", "pan_evaporation_amount", 93.0, 31.0, 3.0, SI),  # a January total
    ("mm/month", "precipitation", 56.0, 28.0, 2.0, SI),  # February total, per its own days
    ("kg m-2 month-1", "precipitation", 93.0, 31.0, 3.0, WATER),
    # elevation [m]
    ("m", "elevation", 120.0, None, 120.0, SI),
    ("km", "elevation", 0.12, None, 120.0, SI),
    ("ft", "elevation", 1000.0, None, 304.8, NIST),
]


@pytest.mark.parametrize(
    ("unit", "quantity", "value", "step_days", "expected", "source"), SPELLINGS
)
def test_every_accepted_spelling_gives_the_glossary_value(
    unit, quantity, value, step_days, expected, source
):
    result = convert(np.array([value]), unit, quantity, step_days=step_days)
    np.testing.assert_allclose(result, [expected], rtol=1e-12, atol=1e-12, err_msg=source)


@pytest.mark.parametrize(("spelling", "meaning"), sorted(OWN_SPELLINGS.items()))
def test_each_own_spelling_is_one_the_registry_gets_wrong(spelling, meaning):
    # The project keeps a spelling only while the UDUNITS-aware registry refuses it or reads
    # it as something else (e.g. "deg C" as an angle times a temperature).
    ureg = registry()
    try:
        read = ureg.parse_expression(spelling)
    except (pint.errors.PintError, ValueError, AssertionError, TypeError):
        return
    assert read != ureg.parse_expression(meaning)


def test_mean_month_of_unit_library_is_not_used_for_calendar_months():
    # 56 mm in February is 2 mm/day; a mean month of 30.44 days would give 1.84.
    rates = convert(np.array([[56.0], [62.0]]), "mm/month", "precipitation", step_days=[28, 31])
    np.testing.assert_allclose(rates, [[2.0], [2.0]], rtol=1e-12)
    # On daily steps "per month" is a rate with the registry's mean month (365.25 / 12 d).
    daily = convert(np.array([30.4375]), "mm/month", "precipitation", step_days=1.0)
    np.testing.assert_allclose(daily, [1.0], rtol=1e-12)


def _era5_daily_file(path, tp_m, ssrd_j_m2):
    """ERA5-shaped daily sums: valid_time/latitude/longitude names, tp [m], ssrd [J m-2]."""
    times = pd.date_range("2031-03-01", periods=len(tp_m), freq="D")
    shape = (len(times), 2, 3)
    coords = {
        "valid_time": ("valid_time", times),
        "latitude": ("latitude", [-30.0, -30.25], {"units": "degrees_north"}),
        "longitude": ("longitude", [146.0, 146.25, 146.5], {"units": "degrees_east"}),
    }
    dims = ("valid_time", "latitude", "longitude")
    xr.Dataset(
        {
            "tp": (dims, np.broadcast_to(np.reshape(tp_m, (-1, 1, 1)), shape), {"units": "m"}),
            "ssrd": (
                dims,
                np.broadcast_to(np.reshape(ssrd_j_m2, (-1, 1, 1)), shape),
                {"units": "J m**-2"},
            ),
        },
        coords=coords,
    ).to_netcdf(path, engine="netcdf4")
    return path


def test_era5_accumulations_read_from_a_file_become_rates(tmp_path):
    path = _era5_daily_file(tmp_path / "era5.nc", [0.0031, 0.0], [2.16e7, 8.64e6])
    with pytest.warns(Warning, match="assumed EPSG:4326"):
        rain = climate_io.open_netcdf(path, "tp", "precipitation")
        solar = climate_io.open_netcdf(path, "ssrd", SHORTWAVE)
    np.testing.assert_allclose(rain.data.values[:, 0, 0], [3.1, 0.0], rtol=1e-6)
    np.testing.assert_allclose(solar.data.values[:, 0, 0], [250.0, 100.0], rtol=1e-6)


def test_one_days_rain_in_four_spellings_gives_one_rate():
    # The same day's rain in four spellings gives one rate.
    spellings = {"m": 0.004, "mm": 4.0, "kg m-2": 4.0, "m of water equivalent": 0.004}
    rates = [
        float(convert(np.array([v]), u, "precipitation", step_days=1.0)[0])
        for u, v in spellings.items()
    ]
    np.testing.assert_allclose(rates, 4.0, rtol=1e-12)


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


def test_registry_leaves_pint_application_registry_alone():
    # Other libraries in the same process (metpy) build quantities on pint's application
    # registry; lakeloss's UDUNITS registry must not replace it.
    before = pint.get_application_registry().get()
    registry.cache_clear()
    ureg = registry()
    assert pint.get_application_registry().get() is before
    assert ureg is not before
