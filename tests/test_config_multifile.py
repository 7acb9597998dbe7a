"""Config keys for climate over many files: ``path`` as a list or glob, ``date_pattern``,
the ``zarr`` format; and the file-name dates themselves (lakeloss.filedates)."""

from __future__ import annotations

import copy
from pathlib import Path

import cftime
import pytest

from lakeloss import filedates
from lakeloss.config import load_config
from lakeloss.errors import ConfigError, TimeAxisError

BASE = {
    "waterbodies": {"path": "ponds.gpkg"},
    "climate": {
        "air_temperature": {"path": "c.nc", "variable": "tas"},
        "surface_downwelling_shortwave_flux_in_air": {"path": "c.nc", "variable": "rsds"},
    },
    "method": {"name": "priestley_taylor"},
    "output": {"dir": "out", "precipitation": False},
}


def _temperature(**entry):
    raw = copy.deepcopy(BASE)
    raw["climate"]["air_temperature"] = entry
    return load_config(raw).climate[0]


def test_path_takes_a_list_or_a_glob():
    listed = _temperature(path=["tas_2031.nc", "tas_2032.nc"], variable="tas")
    assert listed.path == (Path("tas_2031.nc"), Path("tas_2032.nc"))
    assert listed.format == "netcdf"
    assert _temperature(path="tas_*.nc", variable="tas").path == Path("tas_*.nc")
    assert _temperature(path=["only.nc"], variable="tas").path == Path("only.nc")


def test_path_list_must_hold_strings_of_one_format():
    with pytest.raises(ConfigError, match=r"path must be a string or a non-empty list"):
        _temperature(path=[], variable="tas")
    with pytest.raises(ConfigError, match=r"path must be a string or a non-empty list"):
        _temperature(path=["a.nc", 3], variable="tas")
    with pytest.raises(ConfigError, match=r"path mixes formats \(geotiff, netcdf\)"):
        _temperature(path=["a.nc", "b.tif"], variable="tas")


def test_braces_are_not_placeholders():
    with pytest.raises(ConfigError, match=r"holds a \{placeholder\}; expected glob wildcards"):
        _temperature(path="rain/{year}/*.tif", date_pattern="%Y%m%d")


def test_zarr_suffix_and_format():
    store = _temperature(path="tas.zarr", variable="tas")
    assert store.format == "zarr"
    assert _temperature(path="cube", format="zarr", variable="tas").format == "zarr"
    with pytest.raises(ConfigError, match=r"reads a Zarr store and needs variable"):
        _temperature(path="tas.zarr")


def test_date_pattern_replaces_start_and_step_for_geotiffs():
    entry = _temperature(path="tas/*.tif", date_pattern="%Y%m%d", units="K")
    assert entry.date_pattern == "%Y%m%d" and entry.start is None
    with pytest.raises(ConfigError, match=r"start cannot be used with date_pattern"):
        _temperature(path="tas/*.tif", date_pattern="%Y%m%d", start="2031-01-01")
    with pytest.raises(ConfigError, match=r"date_pattern only applies to GeoTIFF"):
        _temperature(path="tas_*.nc", variable="tas", date_pattern="%Y")
    with pytest.raises(ConfigError, match=r"uses '%H'; expected only the codes"):
        _temperature(path="tas/*.tif", date_pattern="%Y%m%d%H")
    with pytest.raises(ConfigError, match=r"step must be 'day' or 'month'"):
        _temperature(path="tas/*.tif", date_pattern="%Y", step="year")


def test_a_list_of_geotiffs_needs_date_pattern():
    with pytest.raises(ConfigError, match=r"lists several GeoTIFFs but no date_pattern"):
        _temperature(path=["a.tif", "b.tif"], start="2031-01-01", step="day")


def test_elevation_takes_one_raster():
    raw = copy.deepcopy(BASE)
    raw["climate"]["elevation"] = {"path": ["a.tif", "b.tif"]}
    with pytest.raises(ConfigError, match=r"elevation\.path must name one raster"):
        load_config(raw)


# --------------------------------------------------------------------------- file-name dates


@pytest.mark.parametrize(
    ("pattern", "name", "expected"),
    [
        ("%Y%m%d", "rain_20310105.tif", (2031, 1, 5)),
        ("%Y-%m", "tas_2031-02_v2.tif", (2031, 2, 1)),
        ("%Y", "tas_2031.tif", (2031, 1, 1)),
        ("%Y%j", "A2031032.tif", (2031, 2, 1)),
        ("%Y/%m%d", "rain/2031/0105.tif", (2031, 1, 5)),
        (r"d(?P<year>\d{4})_(?P<month>\d\d)", "d2031_07.tif", (2031, 7, 1)),
    ],
)
def test_dates_from_names(pattern, name, expected):
    date = filedates.date_of(filedates.compile_pattern(pattern), Path("/data") / name, "standard")
    assert (date.year, date.month, date.day) == expected


def test_a_date_only_in_another_calendar():
    pattern = filedates.compile_pattern("%Y%m%d")
    assert filedates.date_of(pattern, "t_20310230.tif", "360_day") == cftime.datetime(
        2031, 2, 30, calendar="360_day"
    )
    with pytest.raises(TimeAxisError, match=r"gives the date 2031-02-30, which does not exist"):
        filedates.date_of(pattern, "t_20310230.tif", "standard")
    with pytest.raises(TimeAxisError, match=r"2031 day 366, which does not exist"):
        filedates.date_of(filedates.compile_pattern("%Y%j"), "t2031366.tif", "standard")


def test_longer_runs_of_digits_and_two_dates_are_not_read():
    pattern = filedates.compile_pattern("%Y%m%d")
    with pytest.raises(TimeAxisError, match=r"does not match date_pattern"):
        filedates.date_of(pattern, "tile_0020310105.tif", "standard")
    with pytest.raises(TimeAxisError, match=r"in several places \(2031-01-05, 2031-02-06\)"):
        filedates.date_of(pattern, "t_20310105_20310206.tif", "standard")


def test_patterns_that_cannot_give_a_date_are_refused():
    for text in ("%m%d", "%Y%d", "(?P<month>\\d\\d)", "%Y%m%Y"):
        with pytest.raises(ConfigError):
            filedates.compile_pattern(text)
    with pytest.raises(ConfigError, match=r"not a valid regular expression"):
        filedates.compile_pattern("(?P<year>\\d{4}")
