"""Missing, unreadable, truncated and corrupt input files; directories given as files; CRS
and extent problems. Each is refused by ``check`` and ``run`` with one line.

The tests run as any user (often root in containers, who can read a file of mode 000), so
"unreadable" is made with content no reader accepts: an empty file and foreign bytes.
"""

from __future__ import annotations

import json
import warnings

import numpy as np
import pytest
import rasterio
import rasterio.errors
import xarray as xr
from bad_inputs.corpus import BASE_FIELDS, TIMES, refused_everywhere
from builders import LAT, LON, climate_dataset, pond_layer, temperature_stack

import lakeloss
from lakeloss.errors import AssumedCRSWarning

# Bytes that are neither a GeoPackage, a NetCDF nor a GeoTIFF (a few lines of CSV).
FOREIGN_BYTES = b"pond,area\n1,200\n2,300\n"


def _truncated(path, keep: float = 0.4) -> None:
    data = path.read_bytes()
    path.write_bytes(data[: int(len(data) * keep)])


# --------------------------------------------------------------------------- vector layer


def test_missing_layer_file(case):
    case.config["waterbodies"]["path"] = str(case.tmp / "no_such_ponds.gpkg")
    refused_everywhere(case, "no_such_ponds.gpkg", "does not exist", "[waterbodies] path")


def test_layer_path_is_a_directory(case):
    (case.tmp / "ponds_dir.gpkg").mkdir()
    case.config["waterbodies"]["path"] = str(case.tmp / "ponds_dir.gpkg")
    refused_everywhere(case, "ponds_dir.gpkg", "directory")


@pytest.mark.parametrize(
    "damage",
    [
        pytest.param(lambda p: _truncated(p), id="truncated"),
        pytest.param(lambda p: p.write_bytes(b""), id="empty"),
        pytest.param(lambda p: p.write_bytes(FOREIGN_BYTES), id="foreign-bytes"),
        pytest.param(
            lambda p: p.write_bytes(p.read_bytes()[:100] + b"\0" * 4096), id="corrupt-pages"
        ),
    ],
)
def test_damaged_layer_file(case, damage):
    damage(case.tmp / "ponds.gpkg")
    refused_everywhere(case, "ponds.gpkg", "water-body layer")


# --------------------------------------------------------------------------- climate files


def test_missing_climate_file(case):
    case.climate_entry("air_temperature")["path"] = str(case.tmp / "no_such_climate.nc")
    refused_everywhere(case, "no_such_climate.nc", "does not exist", "[climate]")


def test_climate_path_is_a_directory(case):
    (case.tmp / "climate_dir.nc").mkdir()
    case.climate_entry("air_temperature")["path"] = str(case.tmp / "climate_dir.nc")
    refused_everywhere(case, "climate_dir.nc", "is a directory")


@pytest.mark.parametrize(
    "damage",
    [
        pytest.param(lambda p: _truncated(p), id="truncated"),
        pytest.param(lambda p: p.write_bytes(b""), id="empty"),
        pytest.param(lambda p: p.write_bytes(FOREIGN_BYTES), id="foreign-bytes"),
        pytest.param(lambda p: _truncated(p, keep=0.95), id="truncated-tail"),
    ],
)
def test_damaged_netcdf(case, damage):
    damage(case.tmp / "climate.nc")
    refused_everywhere(case, "climate.nc", "unreadable, truncated or not NetCDF")


def _geotiff_temperature(case, path, **extra) -> None:
    case.config["climate"]["air_temperature"] = {
        "path": str(path),
        "start": "2031-01-01",
        "step": "day",
        **extra,
    }


@pytest.mark.parametrize("damage", ["truncated", "foreign-bytes"])
def test_damaged_geotiff(case, damage):
    path = case.tmp / "tas.tif"
    temperature_stack(path, 4)
    if damage == "truncated":
        _truncated(path, keep=0.3)
    else:
        path.write_bytes(FOREIGN_BYTES)
    _geotiff_temperature(case, path)
    refused_everywhere(case, "tas.tif", "GeoTIFF")


def test_unknown_climate_variable_lists_those_in_the_file(case):
    case.climate_entry("air_temperature")["variable"] = "tasmean"
    refused_everywhere(case, "'tasmean'", "the variables are", "'tas'")


# --------------------------------------------------------------------------- CRS and extent


def _write_layer_without_crs(case) -> None:
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", "'crs' was not provided", UserWarning)  # pyogrio
        case.write_layer(pond_layer(n_ponds=3).set_crs(None, allow_override=True))


def test_layer_without_crs_is_refused(case):
    _write_layer_without_crs(case)
    refused_everywhere(case, "no coordinate reference system", "[waterbodies] crs")


def test_layer_without_crs_runs_when_the_config_states_it(case):
    _write_layer_without_crs(case)
    case.config["waterbodies"]["crs"] = "EPSG:32755"
    outcome = case.invoke("run")
    assert outcome.code == 0, outcome.stderr
    assert (case.out / "waterbodies.gpkg").is_file()


def test_layer_crs_contradicting_the_config(case):
    case.config["waterbodies"]["crs"] = "EPSG:4326"
    refused_everywhere(case, "EPSG:32755", "EPSG:4326", "agree")


def test_climate_grid_without_crs_or_lat_lon(case):
    # Projected-looking x/y coordinates in metres, no grid_mapping, no crs_wkt.
    ds = climate_dataset(TIMES, BASE_FIELDS)
    ds = ds.drop_vars("crs").rename({"lat": "y", "lon": "x"})
    ds = ds.assign_coords(x=("x", 500_000.0 + 5000.0 * np.arange(len(LON))))
    ds = ds.assign_coords(y=("y", 6_700_000.0 - 5000.0 * np.arange(len(LAT))))
    for name in ds.data_vars:
        ds[name].attrs.pop("grid_mapping", None)
    case.write_climate(ds, "projected.nc")
    for entry in case.config["climate"].values():
        entry["path"] = str(case.tmp / "projected.nc")
    refused_everywhere(case, "no CRS", "set crs")


def _climate_with_dangling_grid_mapping(case) -> None:
    # The grid_mapping attribute names a variable the file lacks (as a tool that copies
    # variables one by one leaves it).
    ds = climate_dataset(TIMES, BASE_FIELDS).drop_vars("crs")
    for name in ds.data_vars:
        ds[name].attrs["grid_mapping"] = "lambert_conformal"
    case.write_climate(ds)


def test_dangling_grid_mapping_names_the_variable_and_the_crs_fix(case):
    _climate_with_dangling_grid_mapping(case)
    refused_everywhere(case, "'lambert_conformal', which is not in the file", "set crs =")


@pytest.mark.filterwarnings("always::lakeloss.errors.LakelossWarning")
def test_crs_setting_wins_over_a_dangling_grid_mapping(case):
    _climate_with_dangling_grid_mapping(case)
    for entry in case.config["climate"].values():
        entry["crs"] = "EPSG:4326"
    outcome = case.invoke("run")
    assert outcome.code == 0, outcome.stderr
    recorded = json.loads((case.out / "run.json").read_text())["warnings"]
    assert sum("used the configured crs 'EPSG:4326'" in w for w in recorded) == 4, recorded


def test_layer_that_does_not_overlap_the_grid(case):
    # The same ponds 3 degrees further north: the grid is 0.4 x 0.3 degrees.
    ds = climate_dataset(TIMES, BASE_FIELDS, lat=LAT + 3.0)
    case.write_climate(ds)
    refused_everywhere(case, "does not overlap the climate grid", "check both CRSs")


def test_grid_with_irregular_coordinates(case):
    ds = climate_dataset(TIMES, BASE_FIELDS)
    lon = LON.copy()
    lon[3], lon[4] = lon[4], lon[3]
    ds = ds.assign_coords(lon=("lon", lon, ds["lon"].attrs))
    case.write_climate(ds)
    refused_everywhere(case, "monotonic")


def test_variable_with_an_unrecognised_dimension(case):
    ds = climate_dataset(TIMES, BASE_FIELDS)
    tas = ds["tas"].expand_dims(member=3, axis=1)
    case.write_climate(xr.Dataset({"tas": tas, "crs": ds["crs"]}), "members.nc")
    case.climate_entry("air_temperature")["path"] = str(case.tmp / "members.nc")
    refused_everywhere(case, "'member'", "dimensions")


def test_check_names_a_grid_crs_without_authority_code_in_one_line(case):
    # The builders' CF grid mapping gives an ellipsoid but no EPSG code.
    outcome = case.invoke("check")
    assert outcome.code == 0, outcome.stderr
    climate_lines = [line for line in outcome.stdout.splitlines() if line.startswith("climate")]
    assert len(climate_lines) == 4
    for line in climate_lines:
        assert "unnamed geographic CRS, ellipsoid a = 6378137 m" in line
        assert "{" not in line


def test_geotiff_without_crs_is_refused_unless_the_config_states_it(case):
    path = case.tmp / "tas_nocrs.tif"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", rasterio.errors.NotGeoreferencedWarning)
        temperature_stack(path, 4, crs=None)
    _geotiff_temperature(case, path)
    refused_everywhere(case, "tas_nocrs.tif", "has no CRS (no coordinate system in its", "set crs")
    case.climate_entry("air_temperature")["crs"] = "EPSG:4326"
    outcome = case.invoke("run")
    assert outcome.code == 0, outcome.stderr


@pytest.mark.filterwarnings("always::lakeloss.errors.LakelossWarning")
def test_lat_lon_grid_without_grid_mapping_assumes_wgs84_and_says_so(case):
    ds = climate_dataset(TIMES, BASE_FIELDS).drop_vars("crs")
    for name in ds.data_vars:
        del ds[name].attrs["grid_mapping"]
    case.write_climate(ds)
    outcome = case.invoke("run")
    assert outcome.code == 0, outcome.stderr
    assert "warning:" in outcome.stderr and "assumed EPSG:4326" in outcome.stderr
    recorded = json.loads((case.out / "run.json").read_text())["warnings"]
    assert sum("assumed EPSG:4326" in w for w in recorded) == 4, recorded


def test_assumed_crs_warning_keeps_its_category_through_the_python_api(case):
    ds = climate_dataset(TIMES, BASE_FIELDS).drop_vars("crs")
    for name in ds.data_vars:
        del ds[name].attrs["grid_mapping"]
    case.write_climate(ds)
    with pytest.warns(AssumedCRSWarning, match="assumed EPSG:4326"):
        result = lakeloss.run(case.config)
    assert sum("assumed EPSG:4326" in w for w in result.provenance["warnings"]) == 4


def test_layer_without_features(case):
    case.write_layer(pond_layer(n_ponds=3).iloc[:0])
    refused_everywhere(case, "has no features", "ponds.gpkg")


def test_source_with_several_layers_and_none_chosen(case):
    pond_layer(n_ponds=3).to_file(case.tmp / "ponds.gpkg", layer="spillways", driver="GPKG")
    del case.config["waterbodies"]["layer"]
    refused_everywhere(case, "2 layers", "'ponds'", "'spillways'", "set [waterbodies] layer")


def test_variable_without_a_time_dimension(case):
    ds = climate_dataset(TIMES, BASE_FIELDS)
    ds["tas"] = ds["tas"].isel(time=0, drop=True)
    case.write_climate(ds)
    refused_everywhere(case, "'tas'", "found no time")


@pytest.mark.parametrize(
    ("section", "crs", "words"),
    [
        ("waterbodies", "EPSG:99999999", ("[waterbodies] crs", "EPSG:99999999", "not a CRS")),
        ("climate", "not a crs", ("climate crs", "'not a crs'", "not a CRS")),
    ],
)
def test_crs_setting_that_is_unusable_or_contradicts_the_file(case, section, crs, words):
    if section == "waterbodies":
        case.config["waterbodies"]["crs"] = crs
    else:
        case.climate_entry("air_temperature")["crs"] = crs
    line = refused_everywhere(case, *words)
    assert "{" not in line  # CRSs are named briefly, not as PROJJSON


@pytest.mark.filterwarnings("always::lakeloss.errors.LakelossWarning")
def test_climate_crs_setting_wins_over_the_files_crs_and_says_so(case):
    # The file's grid mapping is WGS 84; the entry says GDA94 (as a user who knows the
    # provider's metadata is wrong would): the setting is used, and run.json says so.
    case.climate_entry("air_temperature")["crs"] = "EPSG:4283"
    outcome = case.invoke("run")
    assert outcome.code == 0, outcome.stderr
    recorded = json.loads((case.out / "run.json").read_text())["warnings"]
    (note,) = [w for w in recorded if "used the configured crs" in w]
    assert "'tas'" in note and "declares CRS 'unnamed geographic CRS" in note
    assert "[climate] crs is 'EPSG:4283'" in note and "{" not in note
