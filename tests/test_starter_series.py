"""``lakeloss draft-config`` on climate split over many files, and on Zarr stores.

The series are written the way providers split them (invented values): CMIP-style one file
per variable and year (``tas_day_<model>_<experiment>_<member>_gn_20310101-20311231.nc``),
ERA5-style one file per month holding every variable (``era5_daily_2031_01.nc``), and a
Zarr store. A run of the drafted configuration over the pieces must write the same CSV
files, byte for byte, as a run over one file per variable holding the same data.
"""

from __future__ import annotations

import tomllib

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from builders import LAT, LON, pond_layer
from test_starter import _draft_and_check, _invoke

# The files have latitude/longitude but no grid mapping: EPSG:4326 is assumed.
pytestmark = pytest.mark.filterwarnings("ignore::lakeloss.errors.AssumedCRSWarning")

CMIP = "{}_day_ModelY-2_ssp370_r2i1p1f1_gn_{}.nc"
# name, low, high, units, standard name, cell_methods
CMIP_VARIABLES = [
    ("tasmax", 295.0, 310.0, "K", "air_temperature", "time: maximum"),
    ("tasmin", 280.0, 292.0, "K", "air_temperature", "time: minimum"),
    ("hurs", 20.0, 90.0, "%", "relative_humidity", "time: mean"),
    ("sfcWind", 0.5, 8.0, "m s-1", "wind_speed", "time: mean"),
    ("rsds", 80.0, 330.0, "W m-2", "surface_downwelling_shortwave_flux_in_air", "time: mean"),
    ("pr", 0.0, 8.0e-5, "kg m-2 s-1", "precipitation_flux", "time: mean"),
]
ERA5_VARIABLES = [
    ("t2m", 285.0, 305.0, "K"),
    ("d2m", 270.0, 285.0, "K"),
    ("u10", -6.0, 6.0, "m s**-1"),
    ("v10", -6.0, 6.0, "m s**-1"),
    ("ssrd", 0.5e7, 2.8e7, "J m**-2"),
    ("tp", 0.0, 0.01, "m"),
]


@pytest.fixture
def layer_path(tmp_path):
    path = tmp_path / "data" / "ponds.gpkg"
    path.parent.mkdir()
    pond_layer().to_file(path, layer="ponds", driver="GPKG")
    return path


def _random(low, high, steps, seed):
    rng = np.random.default_rng(seed)
    return rng.uniform(low, high, (steps, len(LAT), len(LON))).astype(np.float32)


def _cmip_dataset(name, low, high, units, standard, methods, times, seed):
    data = xr.DataArray(
        _random(low, high, len(times), seed),
        dims=("time", "lat", "lon"),
        attrs={"standard_name": standard, "units": units, "cell_methods": f"area: mean {methods}"},
    )
    return xr.Dataset(
        {name: data},
        coords={
            "time": ("time", times),
            "lat": ("lat", LAT, {"standard_name": "latitude", "units": "degrees_north"}),
            "lon": ("lon", LON, {"standard_name": "longitude", "units": "degrees_east"}),
        },
        attrs={"Conventions": "CF-1.7 CMIP-6.2", "mip_era": "CMIP6"},
    )


def _write_cmip(folder, years):
    """One file per variable over all ``years`` (folder/whole) and one per year (folder/split)."""
    times = pd.date_range(f"{years[0]}-01-01 12:00", f"{years[-1]}-12-31 12:00", freq="D")
    for seed, (name, *spec) in enumerate(CMIP_VARIABLES):
        ds = _cmip_dataset(name, *spec, times, seed)
        (folder / "whole").mkdir(parents=True, exist_ok=True)
        span = f"{years[0]}0101-{years[-1]}1231"
        ds.to_netcdf(folder / "whole" / CMIP.format(name, span), engine="netcdf4")
        for year in years:
            part = ds.sel(time=str(year))
            (folder / "split").mkdir(exist_ok=True)
            # Each file with its own epoch, as providers write them.
            encoding = {"time": {"units": f"days since {year}-01-01", "dtype": "float64"}}
            part.to_netcdf(
                folder / "split" / CMIP.format(name, f"{year}0101-{year}1231"),
                engine="netcdf4",
                encoding=encoding,
            )


def _era5_dataset(times, seed0=0):
    dims = ("valid_time", "latitude", "longitude")
    variables = {
        name: (dims, _random(low, high, len(times), seed0 + k),
               {"units": units, "GRIB_units": units, "GRIB_shortName": name})
        for k, (name, low, high, units) in enumerate(ERA5_VARIABLES)
    }  # fmt: skip
    return xr.Dataset(
        variables,
        coords={
            "valid_time": ("valid_time", times),
            "latitude": ("latitude", LAT, {"units": "degrees_north"}),
            "longitude": ("longitude", LON, {"units": "degrees_east"}),
        },
        attrs={"institution": "European Centre for Medium-Range Weather Forecasts"},
    )


def _run_csvs(monkeypatch, config_path):
    monkeypatch.chdir(config_path.parent)
    code, output = _invoke("run", config_path.name, "-q", "--overwrite")
    assert code == 0, output
    folder = config_path.parent / "lakeloss-output"
    csvs = sorted(folder.glob("*.csv"))
    assert csvs
    return {p.name: p.read_bytes() for p in csvs}


def test_cmip_yearly_files_draft_a_glob_per_variable_and_run_as_one_file(
    tmp_path, layer_path, monkeypatch
):
    _write_cmip(tmp_path / "cmip", [2031, 2032])
    (tmp_path / "configs").mkdir()
    whole_config = tmp_path / "configs" / "whole.toml"
    split_config = tmp_path / "configs" / "split.toml"
    _draft_and_check(monkeypatch, whole_config, layer_path, tmp_path / "cmip" / "whole")
    text, config = _draft_and_check(
        monkeypatch, split_config, layer_path, tmp_path / "cmip" / "split"
    )
    raw = tomllib.loads(text)["climate"]
    assert raw["relative_humidity"]["path"] == (
        "../cmip/split/hurs_day_ModelY-2_ssp370_r2i1p1f1_gn_*.nc"
    )
    assert {entry["variable"] for entry in raw.values()} == {n for n, *_ in CMIP_VARIABLES}
    assert "hurs: 2 files joined along time" in text
    assert "is also" not in text  # no second file left unused
    assert "# Time axis found: 2031-01-01..2032-12-31, daily" in text
    assert _run_csvs(monkeypatch, split_config) == _run_csvs(monkeypatch, whole_config)


def test_era5_monthly_files_draft_one_glob_and_run_as_one_file(tmp_path, layer_path, monkeypatch):
    times = pd.date_range("2031-01-01", "2031-04-30", freq="D")
    whole = _era5_dataset(times)
    (tmp_path / "era5").mkdir()
    whole.to_netcdf(tmp_path / "era5_daily_2031.nc", engine="netcdf4")
    for month in range(1, 5):
        part = whole.sel(valid_time=f"2031-{month:02d}")
        part.to_netcdf(tmp_path / "era5" / f"era5_daily_2031_{month:02d}.nc", engine="netcdf4")
    whole_config = tmp_path / "whole.toml"
    split_config = tmp_path / "split.toml"
    _draft_and_check(monkeypatch, whole_config, layer_path, tmp_path / "era5_daily_2031.nc")
    text, config = _draft_and_check(monkeypatch, split_config, layer_path, tmp_path / "era5")
    raw = tomllib.loads(text)["climate"]
    assert {entry["path"] for entry in raw.values()} == {"era5/era5_daily_2031_*.nc"}
    assert raw["precipitation_amount"]["variable"] == "tp"
    assert _run_csvs(monkeypatch, split_config) == _run_csvs(monkeypatch, whole_config)


def test_a_glob_that_would_match_other_files_becomes_a_list(tmp_path, layer_path, monkeypatch):
    # tas_2031.nc and tas_2032.nc are one series; tas_2031_v2.nc is not (another name
    # pattern), and "tas_*.nc" would read it too: the draft lists the two files instead.
    folder = tmp_path / "obs"
    folder.mkdir()
    times = pd.date_range("2031-01-01", "2032-12-31", freq="D")
    specs = [("tas", 280.0, 300.0, "K", "air_temperature", "time: mean"),
             ("hurs", 20.0, 90.0, "%", "relative_humidity", "time: mean"),
             ("rsds", 80.0, 330.0, "W m-2", "surface_downwelling_shortwave_flux_in_air",
              "time: mean")]  # fmt: skip
    for seed, (name, *spec) in enumerate(specs):
        ds = _cmip_dataset(name, *spec, times, seed)
        for year in (2031, 2032):
            ds.sel(time=str(year)).to_netcdf(folder / f"{name}_{year}.nc", engine="netcdf4")
    ds = _cmip_dataset("tas", *specs[0][1:], times[:365], 9)
    ds.to_netcdf(folder / "tas_2031_v2.nc", engine="netcdf4")
    text, config = _draft_and_check(monkeypatch, tmp_path / "obs.toml", layer_path, folder)
    raw = tomllib.loads(text)["climate"]
    assert raw["air_temperature"]["path"] == ["obs/tas_2031.nc", "obs/tas_2032.nc"]
    assert raw["surface_downwelling_shortwave_flux_in_air"]["path"] == "obs/rsds_*.nc"
    assert "tas_2031_v2.nc: tas is also air_temperature" in text


def test_zarr_stores_are_found_in_folders_and_given_as_inputs(tmp_path, layer_path, monkeypatch):
    times = pd.date_range("2031-01-01", "2031-02-28", freq="D")
    ds = _era5_dataset(times)
    folder = tmp_path / "stores"
    folder.mkdir()
    ds[["t2m", "d2m", "ssrd"]].to_zarr(folder / "era5_a.zarr", zarr_format=2)
    ds[["u10", "v10", "tp"]].to_zarr(folder / "era5_b_store", consolidated=False)  # no suffix
    ds.to_netcdf(tmp_path / "era5.nc", engine="netcdf4")

    text, config = _draft_and_check(monkeypatch, tmp_path / "z.toml", layer_path, folder)
    raw = tomllib.loads(text)["climate"]
    assert raw["air_temperature"]["path"] == "stores/era5_a.zarr"
    assert "format" not in raw["air_temperature"]
    assert raw["eastward_wind"] == {"path": "stores/era5_b_store", "format": "zarr",
                                    "variable": "u10"}  # fmt: skip
    assert "zarr.json" not in text and ".zarray" not in text  # a store's files are not listed
    netcdf_config = tmp_path / "n.toml"
    _draft_and_check(monkeypatch, netcdf_config, layer_path, tmp_path / "era5.nc")
    assert _run_csvs(monkeypatch, tmp_path / "z.toml") == _run_csvs(monkeypatch, netcdf_config)

    # A store named on the command line.
    single = tmp_path / "again" / "single.toml"
    single.parent.mkdir()
    text, _ = _draft_and_check(
        monkeypatch, single, layer_path, folder / "era5_a.zarr", folder / "era5_b_store"
    )
    raw = tomllib.loads(text)["climate"]
    assert raw["air_temperature"]["path"] == "../stores/era5_a.zarr"
    assert raw["northward_wind"]["format"] == "zarr"
