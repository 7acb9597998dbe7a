"""Checks of the committed demo scenario in demo_layers/ and of config/demo.toml.

The demo is invented (see demo_layers/README.md). These tests guard what the demo run relies
on: the layer and grid open with the documented names, CRS and CF metadata, the grid covers
the layer, the no-data cells touch at least one pond, the values are physically plausible for
a semi-arid climate, and the generator reproduces the committed files exactly.
"""

from __future__ import annotations

import importlib.util
import sys
import tomllib
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pytest
import shapely
import xarray as xr
from pyproj import CRS, Transformer

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "demo_layers"
VARIABLES = {
    "tas": ("air_temperature", "K"),
    "hurs": ("relative_humidity", "%"),
    "wind": ("wind_speed", "m s-1"),
    "rsds": ("surface_downwelling_shortwave_flux_in_air", "W m-2"),
    "pr": ("precipitation_flux", "kg m-2 s-1"),
}
# Sizes [ha] and depths [m] from docs/methods.md#plausible-ranges (sanity ranges, an open question there);
# reservoirs 1-15 km2 and tailings 10-100 ha as the demo brief asks.
SIZE_HA = {
    "farm_dam": (0.05, 1.0),
    "stock_pond": (0.1, 2.0),
    "detention_pond": (0.1, 5.0),
    "tailings_pond": (10.0, 100.0),
    "reservoir": (100.0, 1500.0),
}


def _load_generator():
    """Import demo_layers/make_demo.py, which is a script rather than a package module."""
    name = "lakeloss_demo_make_demo"
    if name not in sys.modules:
        spec = importlib.util.spec_from_file_location(name, DEMO / "make_demo.py")
        module = importlib.util.module_from_spec(spec)
        sys.modules[name] = module  # dataclasses look their module up while it executes
        spec.loader.exec_module(module)
    return sys.modules[name]


@pytest.fixture(scope="module")
def make_demo():
    return _load_generator()


@pytest.fixture(scope="module")
def layer() -> gpd.GeoDataFrame:
    return gpd.read_file(DEMO / "farm_dams.gpkg", layer="dams")


@pytest.fixture(scope="module")
def climate():
    with xr.open_dataset(DEMO / "climate.nc") as dataset:
        yield dataset.load()


@pytest.fixture(scope="module")
def cells(climate) -> tuple[np.ndarray, np.ndarray]:
    """Cell boxes in EPSG:4326 (row-major lat, lon) and whether each cell has no data."""
    lon_edges = np.r_[climate["lon_bnds"][:, 0], climate["lon_bnds"][-1, 1]]
    lat_edges = np.r_[climate["lat_bnds"][:, 0], climate["lat_bnds"][-1, 1]]
    west, south = np.meshgrid(lon_edges[:-1], lat_edges[:-1])
    east, north = np.meshgrid(lon_edges[1:], lat_edges[1:])
    boxes = shapely.box(west.ravel(), south.ravel(), east.ravel(), north.ravel())
    return boxes, climate["tas"].isel(time=0).isnull().to_numpy().ravel()


# --------------------------------------------------------------------------- the layer


def test_layer_is_the_documented_layer_in_a_projected_crs(layer):
    assert [name for name, _ in pyogrio.list_layers(DEMO / "farm_dams.gpkg")] == ["dams"]
    assert layer.crs.is_projected
    assert layer.crs.to_epsg() == 32754
    assert list(layer.columns) == ["dam_id", "name", "kind", "district", "depth_m", "geometry"]
    assert 200 <= len(layer) <= 500


def test_layer_ids_unique_integers_and_names_present(layer):
    assert pd.api.types.is_integer_dtype(layer["dam_id"])
    assert layer["dam_id"].is_unique
    assert layer["name"].notna().all() and layer["name"].is_unique
    assert set(layer["district"]) == {"Quillarn", "Stavemoor", "Orvenna"}


def test_layer_geometries_valid_irregular_and_disjoint(layer):
    assert (layer.geom_type == "Polygon").all()
    assert layer.is_valid.all() and not layer.is_empty.any()
    # Perturbed ellipses, not squares: far more than four corners on every outline.
    assert (shapely.get_num_coordinates(layer.geometry.values) >= 16).all()
    left, right = shapely.STRtree(layer.geometry.values).query(
        layer.geometry.values, predicate="intersects"
    )
    assert (left == right).all(), "water bodies overlap"


@pytest.mark.parametrize("kind", sorted(SIZE_HA))
def test_sizes_within_the_ranges_for_their_kind(layer, kind):
    bodies = layer[layer["kind"] == kind]
    low, high = SIZE_HA[kind]
    area_ha = bodies.area / 1e4
    assert len(bodies) >= 2
    assert area_ha.min() >= 0.99 * low and area_ha.max() <= 1.01 * high
    assert (bodies["depth_m"] > 0.4).all() and (bodies["depth_m"] < 20.0).all()


def test_reservoirs_have_islands_and_span_several_cells(layer, cells):
    boxes, _ = cells
    reservoirs = layer[layer["kind"] == "reservoir"].to_crs(4326)
    assert 2 <= len(reservoirs) <= 3
    assert all(len(polygon.interiors) >= 1 for polygon in reservoirs.geometry)
    cells_touched = [shapely.intersects(boxes, polygon).sum() for polygon in reservoirs.geometry]
    assert sorted(cells_touched)[-2:] >= [4, 4]


def test_some_small_ponds_cross_cell_edges(layer, cells):
    boxes, _ = cells
    small = layer[layer["kind"].isin(["farm_dam", "stock_pond"])].to_crs(4326)
    body, _ = shapely.STRtree(boxes).query(small.geometry.values, predicate="intersects")
    assert (np.bincount(body) > 1).sum() >= 5


# --------------------------------------------------------------------------- the grid


def test_climate_variables_carry_cf_names_and_units(climate):
    assert climate.attrs["Conventions"] == "CF-1.8"
    for name, (standard_name, units) in VARIABLES.items():
        variable = climate[name]
        assert variable.dims == ("time", "lat", "lon")
        assert variable.attrs["standard_name"] == standard_name
        assert variable.attrs["units"] == units
        assert variable.attrs["long_name"]
        assert variable.attrs["grid_mapping"] == "crs"
        assert variable.encoding["dtype"] == np.int16 and variable.encoding["zlib"]
    assert climate["wind"].attrs["height"] == "10 m"
    assert climate["crs"].attrs["grid_mapping_name"] == "latitude_longitude"
    assert CRS.from_wkt(climate["crs"].attrs["crs_wkt"]).to_epsg() == 4326


def test_climate_file_small_daily_two_years_standard_calendar(climate):
    assert (DEMO / "climate.nc").stat().st_size <= 3_000_000
    assert climate["time"].encoding["calendar"] == "standard"
    days = pd.DatetimeIndex(climate["time"].to_numpy()).normalize()
    expected = pd.date_range("2031-01-01", "2032-12-31", freq="D")
    assert days.equals(expected)


def test_grid_regular_and_covers_the_layer_with_margin(climate, layer):
    for axis in ("lat", "lon"):
        steps = np.diff(climate[axis].to_numpy())
        np.testing.assert_allclose(steps, 0.05, atol=1e-9)
        assert 20 <= climate[axis].size <= 40
    to_lonlat = Transformer.from_crs(layer.crs, "EPSG:4326", always_xy=True)
    west, south, east, north = to_lonlat.transform_bounds(*layer.total_bounds)
    margin = 0.1  # two cells each side [degree]
    assert climate["lon_bnds"].min() <= west - margin and climate["lon_bnds"].max() >= east + margin
    assert (
        climate["lat_bnds"].min() <= south - margin and climate["lat_bnds"].max() >= north + margin
    )


def test_nodata_cells_same_in_every_variable_and_step(climate):
    reference = climate["tas"].isnull()
    assert 2 <= int(reference.isel(time=0).sum()) <= 20
    assert (reference == reference.isel(time=0)).all()
    for name in VARIABLES:
        assert (climate[name].isnull() == reference).all()


def test_small_ponds_lie_partly_and_wholly_on_nodata_cells(layer, cells):
    boxes, nodata = cells
    small = layer[layer["kind"] != "reservoir"].to_crs(4326)
    body, cell = shapely.STRtree(boxes).query(small.geometry.values, predicate="intersects")
    on_nodata = np.bincount(body[nodata[cell]], minlength=len(small))
    on_valid = np.bincount(body[~nodata[cell]], minlength=len(small))
    assert ((on_nodata > 0) & (on_valid > 0)).any()  # partly covered: coverage flag
    assert ((on_nodata > 0) & (on_valid == 0)).any()  # no valid cell at all: NaN and flag


def test_values_within_plausible_ranges(climate):
    limits = {
        "tas": (260.0, 320.0),  # K
        "hurs": (0.0, 100.0),  # %
        "wind": (0.0, 25.0),  # m s-1 (daily mean at 10 m)
        "rsds": (0.0, 420.0),  # W m-2 (daily mean; ~ 0.75 of a 41 MJ m-2 d-1 Ra at most)
        "pr": (0.0, 200.0 / 86400.0),  # kg m-2 s-1, at most 200 mm d-1
    }
    for name, (low, high) in limits.items():
        values = climate[name]
        assert float(values.min()) >= low and float(values.max()) <= high, name
    summer = climate["tas"].sel(time=climate["time.month"].isin([12, 1, 2])).mean()
    winter = climate["tas"].sel(time=climate["time.month"].isin([6, 7, 8])).mean()
    assert 10.0 <= float(summer - winter) <= 20.0  # southern-hemisphere seasons


def test_extraterrestrial_radiation_matches_fao56_example_8(make_demo):
    # Allen et al. (1998) FAO-56 Example 8 (docs/methods.md#fao-56-worked-examples): 20 deg S, 3 September
    # (J = 246), Ra = 32.2 MJ m-2 d-1; recomputed 32.194, so 0.05 covers the printed digit.
    assert make_demo.extraterrestrial_radiation(-20.0, 246) == pytest.approx(32.2, abs=0.05)


def test_shortwave_below_clear_sky_and_above_overcast(climate, make_demo):
    # Clear sky Rso = (0.75 + 2e-5 z) Ra, FAO-56 eq. 37 (docs/methods.md#extraterrestrial-and-clear-sky-radiation), z = 250 m.
    day = climate["time.dayofyear"].to_numpy()[:, None, None]
    ra = make_demo.extraterrestrial_radiation(climate["lat"].to_numpy()[None, :, None], day)
    ratio = climate["rsds"].to_numpy() * 0.0864 / ((0.75 + 2e-5 * 250.0) * ra)
    valid = ratio[np.isfinite(ratio)]
    assert valid.max() <= 1.0 + 1e-3 and valid.min() >= 0.2 - 1e-3
    assert 0.75 <= valid.mean() <= 0.95  # mostly sunny semi-arid skies


def _penman_open_water(climate) -> np.ndarray:
    """Daily Penman open-water evaporation [mm d-1] on (time, lat, lon), for plausibility only.

    Shuttleworth (1993) open-water form (docs/methods.md#penman_open_water):
    E = [slope Rn + gamma 6.43 (1 + 0.536 u2) (es - ea)] / [lambda (slope + gamma)], water
    albedo 0.08, FAO-56 eqs. 7, 8, 11, 13, 37, 39 and 47 (docs/methods.md),
    lambda = 2.45 MJ kg-1, elevation 250 m as in config/demo.toml.
    """
    temp = climate["tas"].to_numpy() - 273.15
    es = 0.6108 * np.exp(17.27 * temp / (temp + 237.3))  # FAO-56 eq. 11 [kPa]
    ea = es * climate["hurs"].to_numpy() / 100.0
    slope = 4098.0 * es / (temp + 237.3) ** 2  # eq. 13 [kPa K-1]
    gamma = 0.665e-3 * 101.3 * ((293.0 - 0.0065 * 250.0) / 293.0) ** 5.26  # eqs. 7-8
    u2 = climate["wind"].to_numpy() * 4.87 / np.log(67.8 * 10.0 - 5.42)  # eq. 47
    rs = climate["rsds"].to_numpy() * 0.0864  # W m-2 -> MJ m-2 d-1
    day = climate["time.dayofyear"].to_numpy()[:, None, None]
    ra = _load_generator().extraterrestrial_radiation(climate["lat"].to_numpy()[:, None], day)
    cloud = np.minimum(rs / ((0.75 + 2e-5 * 250.0) * ra), 1.0)  # Rs/Rso, eq. 37
    rnl = 4.903e-9 * (temp + 273.15) ** 4 * (0.34 - 0.14 * np.sqrt(ea)) * (1.35 * cloud - 0.35)
    rn = (1.0 - 0.08) * rs - rnl  # eq. 39 with the daily mean for Tmax and Tmin
    aero = gamma * 6.43 * (1.0 + 0.536 * u2) * (es - ea)
    return (slope * rn + aero) / (2.45 * (slope + gamma))


def test_annual_evaporation_and_rain_are_semi_arid(climate):
    # Semi-arid open water 1500-2500 mm/yr (docs/methods.md#plausible-ranges, rough figures); the demo brief asks
    # for 1500-2200 mm/yr of evaporation and 250-500 mm/yr of rain falling in events.
    evaporation = _penman_open_water(climate).sum(axis=0) / 2.0
    rain = (climate["pr"] * 86400.0).sum("time", skipna=False).to_numpy() / 2.0
    assert 1500.0 <= np.nanmean(evaporation) <= 2200.0
    assert 250.0 <= np.nanmean(rain) <= 500.0
    dry_fraction = float((climate["pr"] * 86400.0 < 0.2).mean())
    assert 0.7 <= dry_fraction <= 0.95


def test_monthly_file_holds_the_monthly_means(climate):
    with xr.open_dataset(DEMO / "climate_monthly.nc") as monthly:
        monthly = monthly.load()
    stamps = pd.DatetimeIndex(monthly["time"].to_numpy())
    assert len(stamps) == 24 and (stamps.day == 15).all()
    for name, (standard_name, units) in VARIABLES.items():
        assert monthly[name].attrs["standard_name"] == standard_name
        assert monthly[name].attrs["units"] == units
        expected = climate[name].resample(time="MS").mean().to_numpy()
        scale = float(monthly[name].encoding["scale_factor"])
        np.testing.assert_allclose(monthly[name].to_numpy(), expected, atol=scale, rtol=1e-5)


# --------------------------------------------------------------------------- config and rerun


def test_demo_config_points_at_the_demo_files(climate, layer):
    with (ROOT / "config" / "demo.toml").open("rb") as handle:
        config = tomllib.load(handle)
    # Relative paths are resolved against the configuration file's folder.
    assert (ROOT / "config" / config["waterbodies"]["path"]).is_file()
    assert config["waterbodies"]["layer"] == "dams"
    assert config["waterbodies"]["id_field"] in layer.columns
    assert set(config["waterbodies"]["group_by"]) <= set(layer.columns)
    for source in config["climate"].values():
        assert (ROOT / "config" / source["path"]).is_file()
        assert source["variable"] in climate.data_vars


def test_generator_reproduces_the_committed_files(tmp_path, make_demo, layer, climate):
    paths = make_demo.write_demo(tmp_path)
    fresh_layer = gpd.read_file(paths["layer"], layer="dams")
    pd.testing.assert_frame_equal(
        pd.DataFrame(fresh_layer.drop(columns="geometry")),
        pd.DataFrame(layer.drop(columns="geometry")),
    )
    assert shapely.equals_exact(fresh_layer.geometry.values, layer.geometry.values, 0.0).all()
    with xr.open_dataset(paths["climate"]) as fresh:
        xr.testing.assert_identical(fresh.load(), climate)
