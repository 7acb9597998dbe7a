"""``lakeloss draft-config``: from a user's own layer and climate files to a first ``check``.

The climate files are written the way providers write them (all invented values):

* CMIP-style: one file per variable named ``<var>_day_<model>_<experiment>_..._<dates>.nc``,
  with CF ``standard_name``, ``cell_methods`` (``time: maximum`` for tasmax) and a scalar
  ``height`` coordinate of 10 m on the wind;
* ERA5-style: several variables in one file with ECMWF short names (``t2m``, ``d2m``,
  ``u10``, ``v10``, ``ssrd``, ``tp``, ``sp``), no standard names, a ``valid_time``
  coordinate, ``latitude``/``longitude`` dimensions and ``GRIB_`` attributes; accumulations
  in ``m`` and ``J m**-2`` per step.
"""

from __future__ import annotations

import re
import tomllib

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pytest
import shapely
import xarray as xr
from builders import LAT, LON, pond_layer
from click.testing import CliRunner

from lakeloss import config as config_schema
from lakeloss.cli import cli
from lakeloss.config import load_config
from lakeloss.io.survey import VariableSummary
from lakeloss.starter import identify

TIMES = pd.date_range("2031-01-01", periods=59, freq="D")
SHAPE = (len(TIMES), len(LAT), len(LON))
CMIP_NAME = "{}_day_ModelX-1_ssp245_r1i1p1f1_gn_20310101-20310228.nc"


def _cmip_file(folder, name, value, units, standard_name, cell_methods="time: mean", **coords):
    data = xr.DataArray(
        np.full(SHAPE, value, dtype=np.float32),
        dims=("time", "lat", "lon"),
        attrs={"standard_name": standard_name, "units": units,
               "cell_methods": f"area: mean {cell_methods}"},
    )  # fmt: skip
    ds = xr.Dataset(
        {name: data},
        coords={
            "time": ("time", TIMES),
            "lat": ("lat", LAT, {"standard_name": "latitude", "units": "degrees_north"}),
            "lon": ("lon", LON, {"standard_name": "longitude", "units": "degrees_east"}),
            **{k: ((), v, {"units": "m", "axis": "Z"}) for k, v in coords.items()},
        },
        attrs={"Conventions": "CF-1.7 CMIP-6.2", "mip_era": "CMIP6"},
    )
    path = folder / CMIP_NAME.format(name)
    ds.to_netcdf(path, engine="netcdf4")
    return path


def write_cmip_folder(folder):
    folder.mkdir(parents=True)
    _cmip_file(folder, "tasmax", 303.15, "K", "air_temperature", "time: maximum")
    _cmip_file(folder, "tasmin", 288.15, "K", "air_temperature", "time: minimum")
    _cmip_file(folder, "hurs", 45.0, "%", "relative_humidity")
    _cmip_file(folder, "sfcWind", 3.0, "m s-1", "wind_speed", height=10.0)
    _cmip_file(folder, "rsds", 250.0, "W m-2", "surface_downwelling_shortwave_flux_in_air")
    _cmip_file(folder, "pr", 2.0 / 86_400.0, "kg m-2 s-1", "precipitation_flux")
    _cmip_file(folder, "ps", 100_000.0, "Pa", "surface_air_pressure")
    return folder


def write_era5_file(path, times=TIMES, accumulated=None):
    """ERA5-shaped file; ``accumulated`` overrides the units of tp and ssrd."""
    dims = ("valid_time", "latitude", "longitude")
    shape = (len(times), len(LAT), len(LON))
    tp_units, ssrd_units = accumulated or ("m", "J m**-2")

    def grib(value, units, short):
        array = np.full(shape, value, dtype=np.float32)
        return dims, array, {"units": units, "GRIB_shortName": short, "GRIB_units": units}

    ds = xr.Dataset(
        {
            "t2m": grib(295.0, "K", "2t"),
            "d2m": grib(285.0, "K", "2d"),
            "u10": grib(3.0, "m s**-1", "10u"),
            "v10": grib(-4.0, "m s**-1", "10v"),
            "ssrd": grib(2.0e7, ssrd_units, "ssrd"),
            "tp": grib(0.002, tp_units, "tp"),
            "sp": grib(100_000.0, "Pa", "sp"),
        },
        coords={
            "valid_time": ("valid_time", times),
            "latitude": ("latitude", LAT, {"units": "degrees_north"}),
            "longitude": ("longitude", LON, {"units": "degrees_east"}),
        },
        attrs={"institution": "European Centre for Medium-Range Weather Forecasts"},
    )
    path.parent.mkdir(parents=True, exist_ok=True)
    ds.to_netcdf(path, engine="netcdf4")
    return path


@pytest.fixture
def layer_path(tmp_path):
    path = tmp_path / "data" / "ponds.gpkg"
    path.parent.mkdir()
    pond_layer().to_file(path, layer="ponds", driver="GPKG")
    return path


def _invoke(*args):
    result = CliRunner().invoke(cli, [str(a) for a in args])
    return result.exit_code, result.output  # stdout and stderr interleaved


def _draft_and_check(monkeypatch, config_path, *inputs):
    code, output = _invoke("draft-config", *inputs, "-o", config_path)
    assert code == 0, output
    text = config_path.read_text()
    config = load_config(config_path)  # loads as written, comments and all
    # Relative paths resolve against the config's folder; running from there makes the
    # check independent of whether the loader resolves against that folder or the cwd.
    monkeypatch.chdir(config_path.parent)
    code, output = _invoke("check", config_path.name)
    assert code == 0, output
    assert "ready to run" in output
    return text, config


def test_cmip_folder_drafts_a_config_that_checks(tmp_path, layer_path, monkeypatch):
    climate = write_cmip_folder(tmp_path / "data" / "cmip")
    config_path = tmp_path / "configs" / "ponds.toml"
    config_path.parent.mkdir()
    text, config = _draft_and_check(monkeypatch, config_path, layer_path, climate)

    found = {c.key: c.variable for c in config.climate}
    assert found == {
        "air_temperature_max": "tasmax",
        "air_temperature_min": "tasmin",
        "relative_humidity": "hurs",
        "wind_speed": "sfcWind",
        "surface_downwelling_shortwave_flux_in_air": "rsds",
        "precipitation_flux": "pr",
        "surface_air_pressure": "ps",
    }
    assert next(c for c in config.climate if c.key == "wind_speed").height_m == 10.0
    raw = tomllib.loads(text)
    assert raw["waterbodies"]["path"] == "../data/ponds.gpkg"
    assert raw["climate"]["relative_humidity"]["path"] == "../data/cmip/" + CMIP_NAME.format("hurs")
    assert raw["waterbodies"]["id_field"] == "pond_id"
    assert '# group_by = ["zone"]' in text
    assert config.method.name == "penman_open_water"
    assert "# Time axis found: 2031-01-01..2031-02-28, daily" in text
    assert "estimates for screening" in text


# ERA5 files have latitude/longitude but no grid mapping: EPSG:4326 is assumed, with a warning.
@pytest.mark.filterwarnings("ignore::lakeloss.errors.AssumedCRSWarning")
def test_era5_file_drafts_components_and_accumulations(tmp_path, layer_path, monkeypatch):
    era5 = write_era5_file(tmp_path / "data" / "era5" / "era5_2031_daily.nc")
    config_path = tmp_path / "data" / "era5.toml"
    text, config = _draft_and_check(monkeypatch, config_path, layer_path, era5)

    found = {c.key: c.variable for c in config.climate}
    assert found == {
        "air_temperature": "t2m",
        "dew_point_temperature": "d2m",
        "eastward_wind": "u10",
        "northward_wind": "v10",
        "surface_downwelling_shortwave_flux_in_air": "ssrd",
        "precipitation_amount": "tp",
        "surface_air_pressure": "sp",
    }
    assert config.parameters["wind_height_m"] == 10.0  # u10/v10 are 10 m winds
    assert tomllib.loads(text)["climate"]["precipitation_amount"]["path"] == (
        "era5/era5_2031_daily.nc"
    )
    # The drafted configuration runs, and the accumulation comes out as a depth: 0.002 m of
    # water per daily step is 2 mm a day, 118 mm over the 59 days.
    code, output = _invoke("run", config_path.name, "-q")
    assert code == 0, output
    table = pyogrio.read_dataframe(
        config_path.parent / "lakeloss-output" / "waterbodies.gpkg", layer="waterbodies"
    )
    np.testing.assert_allclose(table["precip_mm"], 2.0 * 59, rtol=1e-6)


def test_era5_monthly_means_get_per_day_units(tmp_path, layer_path, monkeypatch):
    # ERA5 monthly means hold the mean daily accumulation under units "m" (ECMWF ERA5
    # documentation, monthly averaged reanalysis); per step they would be divided by the month's days.
    months = pd.date_range("2031-01-01", periods=3, freq="MS")
    era5 = write_era5_file(tmp_path / "data" / "era5_monthly.nc", times=months)
    text, config = _draft_and_check(monkeypatch, tmp_path / "data" / "m.toml", layer_path, era5)
    units = {c.key: c.units for c in config.climate}
    assert units["precipitation"] == "m d-1"
    assert units["surface_downwelling_shortwave_flux_in_air"] == "J m**-2 d-1"
    assert "ECMWF monthly means hold the mean daily amount" in text


def test_every_optional_key_is_listed_with_the_loaders_default(tmp_path, layer_path):
    climate = write_cmip_folder(tmp_path / "data" / "cmip")
    config_path = tmp_path / "data" / "run.toml"
    code, output = _invoke("draft-config", layer_path, climate, "-o", config_path)
    assert code == 0, output
    text = config_path.read_text()
    schema = {
        "waterbodies": config_schema._WATERBODY_KEYS,
        "output": config_schema._OUTPUT_KEYS,
        "compute": config_schema._COMPUTE_KEYS,
        "checks": config_schema._CHECKS_KEYS,
        "time": config_schema._TIME_KEYS,
        "method": config_schema._METHOD_KEYS,
        "climate": config_schema._CLIMATE_KEYS,
    }
    for section, keys in schema.items():
        for key in keys:
            assert re.search(rf"^#?\s*{key} = ", text, re.MULTILINE), (section, key)
    assert re.search(r"^#\s*date_pattern = \S", text, re.MULTILINE)  # an example, not blank
    assert "# elevation_m: set your water bodies' height above sea level" in text
    # Uncommenting a default changes nothing: the shown default is the one that applies.
    base = load_config(config_path)
    defaults = re.findall(r"^# (\w+ = .+?)  # default$", text, re.MULTILINE)
    assert len(defaults) >= 12
    for line in defaults:
        uncommented = text.replace(f"# {line}  # default", line, 1)
        config_path.write_text(uncommented)
        again = load_config(config_path)
        assert again.waterbodies == base.waterbodies, line
        assert again.output == base.output and again.compute == base.compute, line
        assert again.strict == base.strict, line
        assert {**_parameters(base), **_parameters(again)} == {
            **_parameters(base),
            **dict(tomllib.loads(uncommented).get("parameters", {})),
        }, line


def _parameters(config: config_schema.RunConfig) -> dict[str, object]:
    """``[parameters]`` as the run takes them: the physics' and the pipeline's switches."""
    switches = {name: getattr(config, name) for name in config_schema.PIPELINE_PARAMETERS}
    return {**config.parameters, **switches}


# ----------------------------------------------------------------------------- recognising


def _variable(name, standard_name=None, cell_methods="", units="1"):
    return VariableSummary(
        path=None, name=name, standard_name=standard_name, units=units,
        cell_methods=cell_methods, long_name="", height_m=None, from_ecmwf=False,
    )  # fmt: skip


@pytest.mark.parametrize(
    ("name", "standard_name", "cell_methods", "expected"),
    [
        ("tasmax", "air_temperature", "area: mean time: maximum", "air_temperature_max"),
        ("tas", "air_temperature", "area: mean time: mean", "air_temperature"),
        ("t_daily", "air_temperature", "time: minimum within days", "air_temperature_min"),
        ("tasmax", "air_temperature", "", "air_temperature_max"),  # name refines the CF name
        ("tas", "specific_humidity", "", "specific_humidity"),  # the standard name decides
        ("huss", "specific_humidity", "", "specific_humidity"),
        ("pr", "precipitation_flux", "", "precipitation"),
        ("precip", "lwe_thickness_of_precipitation_amount", "", "precipitation"),
        ("ssrd", "integral_of_surface_downwelling_shortwave_flux_in_air_wrt_time", "",
         "surface_downwelling_shortwave_flux_in_air"),
        ("orog", "surface_altitude", "", "elevation"),
        ("ts", "surface_temperature", "", None),  # land/sea skin, not the water bodies
        ("t2m", None, "", "air_temperature"),
        ("TX", None, "", "air_temperature_max"),  # E-OBS-style, any case
        ("rh_tmax", None, "", "relative_humidity_min"),  # SILO-style
        ("SWdown", None, "", "surface_downwelling_shortwave_flux_in_air"),  # WFDE5-style
        ("evap_pan", None, "", "pan_evaporation"),
        ("cloud", "cloud_area_fraction", "", None),
        ("mystery", None, "", None),
    ],
)  # fmt: skip
def test_variables_are_recognised_by_standard_name_cell_methods_and_short_name(
    name, standard_name, cell_methods, expected
):
    assert identify(_variable(name, standard_name, cell_methods)) == expected


def test_variable_with_units_that_cannot_express_the_quantity_is_left_out(
    tmp_path, layer_path, monkeypatch
):
    folder = write_cmip_folder(tmp_path / "data" / "cmip")
    _cmip_file(folder, "tas", 12.0, "kg m-2", "air_temperature")
    text, config = _draft_and_check(monkeypatch, tmp_path / "run.toml", layer_path, folder)
    assert "air_temperature" not in {c.key for c in config.climate}
    assert re.search(r"tas looks like air_temperature but its units 'kg m-2'", text)


# ----------------------------------------------------------------------------- bad input


def _refused(tmp_path, *args, words):
    config_path = tmp_path / "out.toml"
    code, output = _invoke("draft-config", *args, "-o", config_path)
    assert code == 2, output
    lines = output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: "), output
    assert re.search(words, lines[0]), lines[0]
    assert not config_path.exists()
    assert not list(tmp_path.glob(".out.toml*"))


def test_missing_layer_is_refused(tmp_path):
    climate = write_cmip_folder(tmp_path / "cmip")
    _refused(tmp_path, tmp_path / "nope.gpkg", climate, words="'.*nope.gpkg' does not exist")


def test_missing_climate_path_is_refused(tmp_path, layer_path):
    _refused(tmp_path, layer_path, tmp_path / "era6", words="climate path '.*era6' does not")


def test_folder_without_climate_files_is_refused(tmp_path, layer_path):
    empty = tmp_path / "downloads"
    empty.mkdir()
    (empty / "readme.txt").write_text("nothing here")
    _refused(tmp_path, layer_path, empty, words="no climate files in")


def test_layer_of_points_without_an_area_is_refused(tmp_path):
    climate = write_cmip_folder(tmp_path / "cmip")
    points = gpd.GeoDataFrame({"n": ["a", "b"]}, geometry=shapely.points([0, 1], [0, 1]), crs=4326)
    points.to_file(tmp_path / "wells.gpkg", layer="wells", driver="GPKG")
    _refused(tmp_path, tmp_path / "wells.gpkg", climate, words="2 points but no numeric field")


def test_layer_with_no_features_is_refused(tmp_path):
    climate = write_cmip_folder(tmp_path / "cmip")
    empty = gpd.GeoDataFrame({"pond_id": []}, geometry=[], crs="EPSG:32755")
    pyogrio.write_dataframe(empty, tmp_path / "empty.gpkg", layer="ponds", geometry_type="Polygon")
    _refused(tmp_path, tmp_path / "empty.gpkg", climate, words="has no features")


def test_climate_allowing_no_method_is_refused(tmp_path, layer_path):
    folder = tmp_path / "cmip"
    folder.mkdir()
    _cmip_file(folder, "hurs", 45.0, "%", "relative_humidity")
    _refused(tmp_path, layer_path, folder, words="allows no evaporation method")


def test_several_polygon_layers_need_a_choice(tmp_path, layer_path, monkeypatch):
    climate = write_cmip_folder(tmp_path / "cmip")
    pond_layer().to_file(layer_path, layer="dams", driver="GPKG")
    _refused(tmp_path, layer_path, climate, words=r"2 polygon or point layers .*--layer")
    text, _ = _draft_and_check(
        monkeypatch, tmp_path / "dams.toml", "--layer", "dams", layer_path, climate
    )
    assert tomllib.loads(text)["waterbodies"]["layer"] == "dams"


def test_existing_config_is_kept_without_overwrite(tmp_path, layer_path):
    climate = write_cmip_folder(tmp_path / "cmip")
    config_path = tmp_path / "out.toml"
    config_path.write_text("# my own settings\n")
    code, output = _invoke("draft-config", layer_path, climate, "-o", config_path)
    assert code == 2 and "already exists" in output and "--overwrite" in output
    assert config_path.read_text() == "# my own settings\n"
    code, output = _invoke("draft-config", layer_path, climate, "-o", config_path, "--overwrite")
    assert code == 0, output
    assert "[waterbodies]" in config_path.read_text()


@pytest.mark.parametrize("suffix", [".shp", ".geojson", ".parquet"])
def test_other_layer_formats_and_cmip_bounds_variables(tmp_path, suffix, monkeypatch):
    layer = tmp_path / f"ponds{suffix}"
    ponds = pond_layer()
    if suffix == ".parquet":
        ponds.to_parquet(layer)
    else:
        ponds.to_file(layer)
    folder = write_cmip_folder(tmp_path / "cmip")
    # CMIP files carry cell and time bounds: declared, or not (a bnds dimension only).
    path = folder / CMIP_NAME.format("hurs")
    with xr.open_dataset(path) as ds:
        ds = ds.load()
    ds["time"].attrs["bounds"] = "time_bnds"
    ds["time_bnds"] = (("time", "bnds"), np.zeros((len(TIMES), 2)))
    ds["lat_bnds"] = (("lat", "bnds"), np.zeros((len(LAT), 2)))
    path.unlink()
    ds.to_netcdf(path)
    text, config = _draft_and_check(monkeypatch, tmp_path / "run.toml", layer, folder)
    assert "_bnds" not in text
    assert config.waterbodies.id_field == "pond_id"


def _obs_file(folder, name, value, units, standard_name, times, stem):
    shape = (len(times), len(LAT), len(LON))
    attrs = {"units": units} | ({"standard_name": standard_name} if standard_name else {})
    ds = xr.Dataset(
        {name: (("time", "latitude", "longitude"), np.full(shape, value, np.float32), attrs)},
        coords={
            "time": ("time", times),
            "latitude": ("latitude", LAT[::-1], {"units": "degrees_north"}),  # south-up
            "longitude": ("longitude", LON, {"units": "degrees_east"}),
        },
    )
    ds.to_netcdf(folder / stem.format(name))


def test_eobs_style_daily_files(tmp_path, layer_path, monkeypatch):
    # E-OBS-style names and spellings: Celsius, rainfall depth "mm" per day, "W/m2", "m/s".
    folder = tmp_path / "obs"
    folder.mkdir()
    stem = "{}_ens_mean_0.1deg_reg_v1.0e.nc"
    for name, value, units, standard_name in [
        ("tx", 26.0, "Celsius", "air_temperature"),
        ("tn", 14.0, "Celsius", "air_temperature"),
        ("rr", 2.0, "mm", "thickness_of_rainfall_amount"),
        ("hu", 60.0, "%", "relative_humidity"),
        ("qq", 200.0, "W/m2", "surface_downwelling_shortwave_flux_in_air"),
        ("fg", 3.0, "m/s", "wind_speed"),
        ("pp", 1013.0, "hPa", "air_pressure_at_sea_level"),
    ]:
        _obs_file(folder, name, value, units, standard_name, TIMES, stem)
    text, config = _draft_and_check(monkeypatch, tmp_path / "obs.toml", layer_path, folder)
    assert {c.key: c.variable for c in config.climate} == {
        "air_temperature_max": "tx",
        "air_temperature_min": "tn",
        "precipitation_amount": "rr",
        "relative_humidity": "hu",
        "surface_downwelling_shortwave_flux_in_air": "qq",
        "wind_speed": "fg",
    }
    assert "pp (air_pressure_at_sea_level) is not a quantity lakeloss uses" in text
    assert "fg: the file does not give the wind's height" in text


def test_cru_style_monthly_files(tmp_path, layer_path, monkeypatch):
    # CRU-style monthly names without standard names: tmx/tmn in "degrees Celsius", pre in
    # "mm/month" (the month's total), vap in hPa; radiation from another product.
    folder = tmp_path / "monthly"
    folder.mkdir()
    months = pd.date_range("2031-01-16", periods=3, freq="MS") + pd.Timedelta(days=15)
    stem = "cru_like.2031.{}.dat.nc"
    for name, value, units in [
        ("tmx", 26.0, "degrees Celsius"),
        ("tmn", 14.0, "degrees Celsius"),
        ("pre", 60.0, "mm/month"),
        ("vap", 15.0, "hPa"),
        ("srad", 220.0, "W m-2"),
    ]:
        _obs_file(folder, name, value, units, None, months, stem)
    text, config = _draft_and_check(monkeypatch, tmp_path / "cru.toml", layer_path, folder)
    assert {c.key: c.variable for c in config.climate} == {
        "air_temperature_max": "tmx",
        "air_temperature_min": "tmn",
        "precipitation_amount": "pre",
        "water_vapor_partial_pressure_in_air": "vap",
        "surface_downwelling_shortwave_flux_in_air": "srad",
    }
    assert "monthly" in text
    assert config.method.name == "priestley_taylor"  # no wind: the Penman forms are out


def test_no_method_message_names_the_quantities_found_from_a_generator():
    # The quantities may come as a one-pass iterable; the message still names what was found.
    from lakeloss.errors import MissingInputError
    from lakeloss.starter import choose_methods

    with pytest.raises(MissingInputError) as err:
        choose_methods(q for q in ["precipitation_flux"])
    assert "give precipitation_flux," in str(err.value)
