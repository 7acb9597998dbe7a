"""Time axes that disagree between variables, and GeoTIFF stacks whose band count does not
match their dates. lakeloss never aligns or resamples inputs silently: it refuses them.
"""

from __future__ import annotations

import cftime
import numpy as np
import pandas as pd
import pytest
from bad_inputs.corpus import BASE_FIELDS, TIMES, refused_everywhere
from builders import climate_dataset, temperature_stack

TEMPERATURE = {"tas": BASE_FIELDS["tas"]}

# Time stamps of the air temperature file, each disagreeing with the others' 4 daily steps
# at 00:00 of 2031-01-01..04 in the standard calendar.
OTHER_AXES = {
    "later-start": pd.date_range("2031-01-02", periods=4, freq="D"),
    "shorter": pd.date_range("2031-01-01", periods=3, freq="D"),
    "monthly": pd.date_range("2031-01-01", periods=4, freq="MS"),
    "noon-stamps": pd.date_range("2031-01-01 12:00", periods=4, freq="D"),
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
