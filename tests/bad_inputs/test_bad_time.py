"""Time axes that disagree between variables, and GeoTIFF stacks whose band count does not
match their dates. lakeloss never resamples inputs: axes that differ in calendar, step or
dates are refused. Daily stamps at other times of the same day (monthly: other days of the
same month) are aligned by calendar date (month), and run.json says so.
"""

from __future__ import annotations

import json

import cftime
import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
from bad_inputs.corpus import BASE_FIELDS, TIMES, refused_everywhere
from builders import climate_dataset, temperature_stack, write_geotiff

TEMPERATURE = {"tas": BASE_FIELDS["tas"]}

# Time stamps of the air temperature file, each disagreeing with the others' 4 daily steps
# at 00:00 of 2031-01-01..04 in the standard calendar.
OTHER_AXES = {
    "later-start": pd.date_range("2031-01-02", periods=4, freq="D"),
    "shorter": pd.date_range("2031-01-01", periods=3, freq="D"),
    "monthly": pd.date_range("2031-01-01", periods=4, freq="MS"),
    "noleap-calendar": np.array([cftime.DatetimeNoLeap(2031, 1, d) for d in range(1, 5)]),
}


@pytest.mark.parametrize("kind", OTHER_AXES)
def test_time_axes_that_disagree(case, kind):
    case.write_climate(climate_dataset(OTHER_AXES[kind], TEMPERATURE), "tas_other.nc")
    case.climate_entry("air_temperature")["path"] = str(case.tmp / "tas_other.nc")
    line = refused_everywhere(case, "different time axes", "air_temperature: ")
    # The variables that agree are named together, so the odd one out stands out.
    assert (
        "surface_net_downward_radiative_flux, relative_humidity, wind_speed: "
        "2031-01-01..2031-01-04, daily, calendar standard, stamps at 00:00" in line
    )


def test_irregular_time_steps(case):
    times = pd.DatetimeIndex(["2031-01-01", "2031-01-02", "2031-01-04", "2031-01-05"])
    case.write_climate(climate_dataset(times, TEMPERATURE), "tas_gap.nc")
    case.climate_entry("air_temperature")["path"] = str(case.tmp / "tas_gap.nc")
    refused_everywhere(case, "tas_gap.nc", "'tas'", "2031-01-02", "2031-01-04")


def test_undecodable_time_units(case):
    ds = climate_dataset(TIMES, BASE_FIELDS)
    ds["time"] = ("time", np.arange(4.0), {"units": "fortnights after launch"})
    case.write_climate(ds)
    refused_everywhere(case, "fortnights after launch", "cannot be decoded")


@pytest.mark.parametrize(("bands", "end"), [(3, "2031-01-04"), (5, "2031-01-04")])
def test_geotiff_band_count_contradicts_end(case, bands, end):
    temperature_stack(case.tmp / "tas.tif", bands)
    case.config["climate"]["air_temperature"] = {
        "path": str(case.tmp / "tas.tif"),
        "start": "2031-01-01",
        "step": "day",
        "end": end,
    }
    refused_everywhere(case, "tas.tif", f"{bands} bands", "imply 4 day steps")


def test_geotiff_stack_longer_than_the_other_inputs(case):
    # Without `end` the band count sets the axis, which then disagrees with the NetCDF files.
    temperature_stack(case.tmp / "tas.tif", 6)
    case.config["climate"]["air_temperature"] = {
        "path": str(case.tmp / "tas.tif"),
        "start": "2031-01-01",
        "step": "day",
    }
    refused_everywhere(case, "air_temperature", "time")


def test_geotiff_start_that_is_not_a_date(case):
    temperature_stack(case.tmp / "tas.tif", 4)
    case.config["climate"]["air_temperature"] = {
        "path": str(case.tmp / "tas.tif"),
        "start": "first of January",
        "step": "day",
    }
    refused_everywhere(case, "tas.tif", "first of January", "ISO date")


def test_daily_output_from_monthly_inputs(case):
    months = pd.date_range("2031-01-01", periods=3, freq="MS")
    case.write_climate(climate_dataset(months, BASE_FIELDS))
    case.config["output"]["period"] = "day"
    refused_everywhere(case, "period = 'day'", "monthly")


# --------------------------------------------------------------------------- stamp conventions

# Air temperature that changes from day to day (so a step paired with another day would show).
DAILY_KELVIN = np.array([293.15, 298.15, 303.15, 288.15])[:, None, None]


def _temperature() -> dict:
    return {"tas": (DAILY_KELVIN, "K", "air_temperature")}


def _evaporation(case) -> list[float]:
    return gpd.read_file(case.out / "waterbodies.gpkg")["evap_mm"].tolist()


def _reference_run(case) -> list[float]:
    case.write_climate(climate_dataset(TIMES, _temperature()), "tas_ref.nc")
    case.climate_entry("air_temperature")["path"] = str(case.tmp / "tas_ref.nc")
    outcome = case.invoke("run")
    assert outcome.code == 0, outcome.stderr
    return _evaporation(case)


@pytest.mark.filterwarnings("always::lakeloss.errors.LakelossWarning")
def test_noon_stamps_beside_midnight_stamps_align_by_date_and_say_so(case):
    expected = _reference_run(case)
    noon = pd.date_range("2031-01-01 12:00", periods=4, freq="D")
    case.write_climate(climate_dataset(noon, _temperature()), "tas_noon.nc")
    case.climate_entry("air_temperature")["path"] = str(case.tmp / "tas_noon.nc")
    outcome = case.invoke("run")
    assert outcome.code == 0, outcome.stderr
    assert "warning: daily steps aligned by calendar date" in outcome.stderr
    recorded = json.loads((case.out / "run.json").read_text())["warnings"]
    note = next(w for w in recorded if "aligned by calendar date" in w)
    assert "air_temperature stamped 2031-01-01 12:00" in note
    assert "wind_speed stamped 2031-01-01 00:00" in note
    assert _evaporation(case) == expected


@pytest.mark.filterwarnings("always::lakeloss.errors.LakelossWarning")
def test_geotiff_with_start_date_only_beside_noon_stamped_netcdf(case):
    # The README's GeoTIFF example: start = "2031-01-01", no time of day; the NetCDF files
    # of the other variables are stamped at noon (as the demo's are).
    expected = _reference_run(case)
    noon = pd.date_range("2031-01-01 12:00", periods=4, freq="D")
    case.write_climate(climate_dataset(noon, BASE_FIELDS))
    write_geotiff(case.tmp / "tas.tif", np.broadcast_to(DAILY_KELVIN, (4, 6, 8)), "K")
    case.config["climate"]["air_temperature"] = {
        "path": str(case.tmp / "tas.tif"),
        "start": "2031-01-01",
        "step": "day",
    }
    outcome = case.invoke("run")
    assert outcome.code == 0, outcome.stderr
    recorded = json.loads((case.out / "run.json").read_text())["warnings"]
    assert any("air_temperature stamped 2031-01-01 00:00" in w for w in recorded), recorded
    assert _evaporation(case) == expected


def test_end_of_day_stamps_are_refused_with_the_fix(case):
    # 00:00 of the next day for each day's value, beside stamps at 12:00.
    noon = pd.date_range("2031-01-01 12:00", periods=4, freq="D")
    case.write_climate(climate_dataset(noon, BASE_FIELDS))
    ends = pd.date_range("2031-01-02", periods=4, freq="D")
    case.write_climate(climate_dataset(ends, _temperature()), "tas_end.nc")
    case.climate_entry("air_temperature")["path"] = str(case.tmp / "tas_end.nc")
    refused_everywhere(
        case, "air_temperature is stamped 12 h after", "another calendar day", "back by one day"
    )


def test_hourly_file_is_refused_with_the_fix(case):
    hours = pd.date_range("2031-01-01", periods=96, freq="h")
    case.write_climate(climate_dataset(hours, TEMPERATURE), "tas_hourly.nc")
    case.climate_entry("air_temperature")["path"] = str(case.tmp / "tas_hourly.nc")
    refused_everywhere(case, "tas_hourly.nc", "1 h apart (sub-daily", "aggregate the file to daily")
