"""Whole runs on global climate grids give the same results whichever way the file stores them.

Each case writes a real NetCDF file the way a provider does and the same field rolled to the
other longitude convention, runs lakeloss on one invented layer of lakes (GeoPackage, WGS84)
over both, and compares every lake's whole-run evaporation and climate_coverage. The layer
puts lakes over every seam the grids have (-0.5, -0.125 and 0 degrees; 179.5, 179.875 and
180 degrees), on either side of it, including two stored crossing the antimeridian (a ring
jumping from +179.8 to -179.8, and a multipolygon split at +-180 as GeoJSON asks). The
climate is random in space and time so a lake averaging the wrong cells gets other numbers.

Before global grids wrapped, lakes over a file's storage seam got climate_coverage ~0.5, the
flag partly_outside_grid and depths off by up to a quarter.
"""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely
import tomli_w
import xarray as xr
from builders import CHOW_CLIMATE, case_config
from click.testing import CliRunner

import lakeloss
from lakeloss.cli import cli

RADIUS = 0.3  # [degrees] lakes ~60 km across: each spans several 0.25-degree cells

# (lon, lat) of lake centres; the seams of the grids below are at -0.5, -0.125, 0, 179.5,
# 179.875 and 180 degrees, and each has lakes centred on both of its sides.
ROUND_LAKES = [
    (-0.62, 12.4),
    (-0.38, -3.1),
    (-0.2, 6.6),
    (-0.05, -14.2),
    (0.12, 3.7),
    (179.35, -8.4),
    (179.62, 15.2),
    (30.2, 10.1),  # ordinary lakes, far from every seam
    (-75.3, -12.4),
]
JUMPING_RING = (179.9, -4.3)  # stored with western longitudes below -179
SPLIT_AT_180 = (180.15, 9.2)  # stored as two parts, east and west of the antimeridian


def _lake_layer() -> gpd.GeoDataFrame:
    lakes = [shapely.Point(c).buffer(RADIUS, quad_segs=16) for c in ROUND_LAKES]
    ring = np.asarray(shapely.Point(JUMPING_RING).buffer(RADIUS, quad_segs=16).exterior.coords)
    ring[:, 0] = np.where(ring[:, 0] > 180.0, ring[:, 0] - 360.0, ring[:, 0])
    lakes.append(shapely.Polygon(ring))
    whole = shapely.Point(SPLIT_AT_180).buffer(RADIUS, quad_segs=16)
    east = shapely.clip_by_rect(whole, 0.0, -90.0, 180.0, 90.0)
    west = shapely.affinity.translate(shapely.clip_by_rect(whole, 180.0, -90.0, 360.0, 90.0),
                                      -360.0)  # fmt: skip
    lakes.append(shapely.MultiPolygon([east, west]))
    n = len(lakes)
    return gpd.GeoDataFrame(
        {"pond_id": np.arange(1, n + 1), "zone": ["z"] * n}, geometry=lakes, crs="EPSG:4326"
    )


def _random_climate(rng, shape) -> dict[str, tuple]:
    """Plausible, spatially random daily fields: (values, units, standard_name) per variable."""
    return {
        "rnet": (rng.uniform(60.0, 220.0, shape), "W m-2", "surface_net_downward_radiative_flux"),
        "tas": (rng.uniform(285.0, 305.0, shape), "K", "air_temperature"),
        "hurs": (rng.uniform(30.0, 90.0, shape), "%", "relative_humidity"),
        "wind": (rng.uniform(0.5, 6.0, shape), "m s-1", "wind_speed"),
        "ps": (rng.uniform(97_000.0, 102_000.0, shape), "Pa", "surface_air_pressure"),
        "pr": (rng.uniform(0.0, 8.0, shape) / 86400.0, "kg m-2 s-1", "precipitation_flux"),
    }


def _era5_like(rng) -> xr.Dataset:
    """0.25-degree cells, longitude 0..359.75 and latitude descending (a band 20 N..20 S),
    float32 coordinates named longitude/latitude, no grid mapping: as reanalysis files come."""
    lon = np.arange(1440, dtype=np.float32) * np.float32(0.25)
    lat = np.float32(20.0) - np.arange(161, dtype=np.float32) * np.float32(0.25)
    times = pd.date_range("2031-03-01", periods=3, freq="D")
    shape = (times.size, lat.size, lon.size)
    data = {
        name: (("time", "latitude", "longitude"), values.astype(np.float32),
               {"units": units, "standard_name": standard})
        for name, (values, units, standard) in _random_climate(rng, shape).items()
    }  # fmt: skip
    return xr.Dataset(
        data,
        coords={
            "time": ("time", times),
            "latitude": ("latitude", lat, {"units": "degrees_north", "long_name": "latitude"}),
            "longitude": ("longitude", lon, {"units": "degrees_east", "long_name": "longitude"}),
        },
    )


def _cmip_like(rng) -> xr.Dataset:
    """1-degree cells, lon 0.5..359.5 and lat -89.5..89.5 (ascending) with lat_bnds and
    lon_bnds, a noleap calendar counted from 1850: as climate-model output comes."""
    lon = np.arange(0.5, 360.0, 1.0)
    lat = np.arange(-89.5, 90.0, 1.0)
    days = np.arange(3) + 0.5 + 365 * 181
    shape = (days.size, lat.size, lon.size)
    data = {
        name: (("time", "lat", "lon"), values.astype(np.float32),
               {"units": units, "standard_name": standard})
        for name, (values, units, standard) in _random_climate(rng, shape).items()
    }  # fmt: skip
    data["lat_bnds"] = (("lat", "bnds"), np.column_stack([lat - 0.5, lat + 0.5]))
    data["lon_bnds"] = (("lon", "bnds"), np.column_stack([lon - 0.5, lon + 0.5]))
    data["time_bnds"] = (("time", "bnds"), np.column_stack([days - 0.5, days + 0.5]))
    time_attrs = {"units": "days since 1850-01-01", "calendar": "noleap", "bounds": "time_bnds"}
    lat_attrs = {"units": "degrees_north", "standard_name": "latitude", "bounds": "lat_bnds"}
    lon_attrs = {"units": "degrees_east", "standard_name": "longitude", "bounds": "lon_bnds"}
    return xr.Dataset(
        data,
        coords={
            "time": ("time", days, time_attrs),
            "lat": ("lat", lat, lat_attrs),
            "lon": ("lon", lon, lon_attrs),
        },
        attrs={"Conventions": "CF-1.7 CMIP-6.2"},
    )


def _minus_180_grid(rng) -> xr.Dataset:
    """1-degree cells, longitude -180..179 and latitude descending, with a grid mapping."""
    lon = np.arange(-180.0, 180.0)
    lat = np.arange(29.5, -30.0, -1.0)
    times = pd.date_range("2031-03-01", periods=3, freq="D")
    shape = (times.size, lat.size, lon.size)
    data = {
        name: (("time", "lat", "lon"), values.astype(np.float32),
               {"units": units, "standard_name": standard, "grid_mapping": "crs"})
        for name, (values, units, standard) in _random_climate(rng, shape).items()
    }  # fmt: skip
    ds = xr.Dataset(
        data,
        coords={
            "time": ("time", times),
            "lat": ("lat", lat, {"units": "degrees_north", "standard_name": "latitude"}),
            "lon": ("lon", lon, {"units": "degrees_east", "standard_name": "longitude"}),
        },
    )
    ds["crs"] = xr.DataArray(0, attrs={"grid_mapping_name": "latitude_longitude",
                                       "semi_major_axis": 6378137.0,
                                       "inverse_flattening": 298.257223563})  # fmt: skip
    return ds


def _stored_the_other_way(ds: xr.Dataset, lon_name: str) -> xr.Dataset:
    """The same field with its longitudes rolled to the other convention (0..360 <-> ±180)."""
    lon = ds[lon_name].values
    to_180 = lon.max() > 180.0
    new_lon = (
        np.where(lon >= 180.0, lon - 360.0, lon) if to_180 else np.where(lon < 0, lon + 360, lon)
    )
    order = np.argsort(new_lon, kind="stable")
    rolled = ds.isel({lon_name: order})
    rolled = rolled.assign_coords({lon_name: (lon_name, new_lon[order], ds[lon_name].attrs)})
    if "lon_bnds" in rolled:
        centres = rolled[lon_name].values.astype(np.float64)
        rolled["lon_bnds"] = ((lon_name, "bnds"), np.column_stack([centres - 0.5, centres + 0.5]))
    return rolled


def _run(tmp_path, name: str, ds: xr.Dataset) -> pd.DataFrame:
    folder = tmp_path / name
    folder.mkdir()
    layer_path = folder / "lakes.gpkg"
    _lake_layer().to_file(layer_path, layer="ponds", driver="GPKG")
    climate_path = folder / "climate.nc"
    ds.to_netcdf(climate_path, engine="netcdf4")
    config = case_config(layer_path, climate_path, folder / "out", "energy_balance",
                         CHOW_CLIMATE)  # fmt: skip
    result = lakeloss.run(config)
    return result.waterbodies.set_index("pond_id").sort_index()


def _assert_same_results(seam: pd.DataFrame, reference: pd.DataFrame) -> None:
    assert list(seam.index) == list(reference.index)
    np.testing.assert_allclose(seam["evap_mm"], reference["evap_mm"], rtol=1e-9)
    np.testing.assert_allclose(seam["precip_mm"], reference["precip_mm"], rtol=1e-9)
    np.testing.assert_allclose(seam["climate_coverage"], reference["climate_coverage"], rtol=1e-9)
    np.testing.assert_allclose(seam["climate_coverage"], 1.0, rtol=1e-9)
    assert (seam["qa_flags"] == "").all(), seam["qa_flags"].to_dict()
    assert (reference["qa_flags"] == "").all(), reference["qa_flags"].to_dict()


# Reanalysis and model files carry no grid mapping: lakeloss assumes EPSG:4326 and says so.
@pytest.mark.filterwarnings("ignore::lakeloss.errors.AssumedCRSWarning")
@pytest.mark.parametrize(
    ("builder", "lon_name"),
    [(_era5_like, "longitude"), (_cmip_like, "lon"), (_minus_180_grid, "lon")],
    ids=["era5-like-0-359.75", "cmip-like-0.5-359.5-bnds", "grid-minus-180-179"],
)
def test_global_grid_gives_the_results_of_the_same_field_stored_the_other_way(
    tmp_path, builder, lon_name
):
    stored = builder(np.random.default_rng(12))
    seam = _run(tmp_path, "as_stored", stored)
    reference = _run(tmp_path, "rolled", _stored_the_other_way(stored, lon_name))
    _assert_same_results(seam, reference)
    # the lakes differ from each other: a comparison of identical numbers proves nothing
    assert seam["evap_mm"].nunique() == len(seam)


def test_cli_run_on_a_grid_stored_0_359_writes_full_coverage_for_seam_lakes(tmp_path):
    # The case: 1-degree cells centred 0..359 (edges -0.5/359.5), lakes over -0.5.
    stored = _stored_the_other_way(_minus_180_grid(np.random.default_rng(5)), "lon")
    assert float(stored["lon"].min()) == 0.0
    layer_path = tmp_path / "lakes.gpkg"
    _lake_layer().to_file(layer_path, layer="ponds", driver="GPKG")
    stored.to_netcdf(tmp_path / "climate.nc", engine="netcdf4")
    config = case_config(layer_path, tmp_path / "climate.nc", tmp_path / "out",
                         "energy_balance", CHOW_CLIMATE)  # fmt: skip
    config_path = tmp_path / "run.toml"
    config_path.write_text(tomli_w.dumps(config))
    result = CliRunner().invoke(cli, ["run", str(config_path), "-q"])
    assert result.exit_code == 0, result.output
    written = gpd.read_file(tmp_path / "out" / "waterbodies.gpkg", layer="waterbodies")
    np.testing.assert_allclose(written["climate_coverage"], 1.0, rtol=1e-9)
    assert (written["qa_flags"].fillna("") == "").all()


def _run_layer(tmp_path, name: str, ds: xr.Dataset, layer: gpd.GeoDataFrame) -> pd.DataFrame:
    folder = tmp_path / name
    folder.mkdir()
    layer.to_file(folder / "lakes.gpkg", layer="ponds", driver="GPKG")
    ds.to_netcdf(folder / "climate.nc", engine="netcdf4")
    config = case_config(folder / "lakes.gpkg", folder / "climate.nc", folder / "out",
                         "energy_balance", CHOW_CLIMATE)  # fmt: skip
    return lakeloss.run(config).waterbodies.set_index("pond_id").sort_index()


@pytest.mark.parametrize(
    ("columns", "centres"),
    [
        (slice(None), [(200.3, 3.2), (359.8, -4.1), (180.2, 7.7)]),  # global: every longitude
        (slice(10, 30), [(195.3, 3.2), (200.5, -4.1)]),  # regional -170..-151
    ],
    ids=["global", "regional"],
)
def test_layer_stored_in_0_360_longitudes_on_a_grid_stored_minus_180(tmp_path, columns, centres):
    # Such a layer used to be refused as "does not overlap the climate grid".
    ds = _minus_180_grid(np.random.default_rng(8)).isel(lon=columns)
    lakes = [shapely.Point(c).buffer(RADIUS, quad_segs=16) for c in centres]
    frame = gpd.GeoDataFrame(
        {"pond_id": np.arange(1, len(lakes) + 1), "zone": "z"}, geometry=lakes, crs="EPSG:4326"
    )
    as_0_360 = _run_layer(tmp_path, "layer_0_360", ds, frame)
    west = frame.set_geometry(frame.geometry.translate(xoff=-360.0))
    as_180 = _run_layer(tmp_path, "layer_180", ds, west)
    _assert_same_results(as_0_360, as_180)


@pytest.mark.filterwarnings("ignore::lakeloss.errors.AssumedCRSWarning")
def test_era5_cut_at_minus_180_to_180_inclusive_equals_the_0_360_file(tmp_path):
    # A request for the area -180..180 returns 1441 longitudes: the column at ±180 twice.
    stored = _era5_like(np.random.default_rng(3))
    rolled = _stored_the_other_way(stored, "longitude")
    inclusive = xr.concat([rolled, rolled.isel(longitude=[0])], dim="longitude")
    lon = inclusive["longitude"].values.copy()
    lon[-1] = 180.0
    inclusive = inclusive.assign_coords(longitude=("longitude", lon, stored["longitude"].attrs))
    assert inclusive.sizes["longitude"] == 1441
    _assert_same_results(_run(tmp_path, "inclusive", inclusive), _run(tmp_path, "0_360", stored))
