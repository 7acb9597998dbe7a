"""Grids as regional climate products write them: rotated-pole grids work, curvilinear grids
without a grid mapping are refused with what would work.

The rotated-pole file is written the way regional-model archives write them: dimensions
``rlat``/``rlon`` (CF ``grid_latitude``/``grid_longitude``), a ``rotated_pole`` variable
with the CF ``rotated_latitude_longitude`` grid mapping (pole at 39.25 N, 162 W, as the
European regional-model domains use), and 2-D ``lat``/``lon`` auxiliary coordinates named in
each variable's ``coordinates`` attribute. Air temperature differs in every cell, so a body
given the wrong cell gets a different depth. Everything is invented test data.
"""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pandas as pd
import pyproj
import pytest
import shapely
import xarray as xr
from bad_inputs.corpus import Case, refused_everywhere
from builders import CHOW_FIELDS, write_netcdf

import lakeloss

ROTATED_POLE = {
    "grid_mapping_name": "rotated_latitude_longitude",
    "grid_north_pole_latitude": 39.25,
    "grid_north_pole_longitude": -162.0,
    "north_pole_grid_longitude": 0.0,
}
RLON = -2.0 + 0.5 * np.arange(8) + 0.25
RLAT = -1.0 + 0.5 * np.arange(6) + 0.25
TIMES = pd.date_range("2031-06-01", periods=20, freq="D")
# Shortwave rather than net radiation, so the sun's geometry (the cell's latitude) counts too.
FIELDS = {
    "rsds": (250.0, "W m-2", "surface_downwelling_shortwave_flux_in_air"),
    "tas": (None, "K", "air_temperature"),
    "hurs": CHOW_FIELDS["hurs"],
    "wind": CHOW_FIELDS["wind"],
}
CLIMATE = {
    "surface_downwelling_shortwave_flux_in_air": "rsds",
    "air_temperature": "tas",
    "relative_humidity": "hurs",
    "wind_speed": "wind",
}
TARGET = (2, 3)  # (row, column) of the cell the water body lies in


def _temperature(ny: int, nx: int) -> np.ndarray:
    return 285.0 + np.arange(nx)[None, :] + 2.0 * np.arange(ny)[:, None]


def _dataset(dims, coords, mapping: dict | None, tas: np.ndarray, extra_attrs=None):
    data = {}
    for name, (value, units, standard_name) in FIELDS.items():
        value = tas if name == "tas" else value
        array = np.broadcast_to(np.asarray(value, dtype=float), (len(TIMES), *tas.shape))
        attrs = {"units": units, "standard_name": standard_name, **(extra_attrs or {})}
        if mapping is not None:
            attrs["grid_mapping"] = "grid_mapping"
        data[name] = (("time", *dims), array.astype(np.float32), attrs)
    ds = xr.Dataset(data, coords={"time": TIMES, **coords}, attrs={"Conventions": "CF-1.8"})
    if mapping is not None:
        ds["grid_mapping"] = xr.DataArray(0, attrs=mapping)
    return ds


def _rotated_to_lonlat():
    return pyproj.Transformer.from_crs(
        pyproj.CRS.from_cf(ROTATED_POLE), "EPSG:4326", always_xy=True
    )


def _rotated_dataset() -> xr.Dataset:
    lon2d, lat2d = _rotated_to_lonlat().transform(*np.meshgrid(RLON, RLAT))
    coords = {
        "rlat": ("rlat", RLAT, {"standard_name": "grid_latitude", "units": "degrees"}),
        "rlon": ("rlon", RLON, {"standard_name": "grid_longitude", "units": "degrees"}),
        "lat": (("rlat", "rlon"), lat2d, {"standard_name": "latitude", "units": "degrees_north"}),
        "lon": (("rlat", "rlon"), lon2d, {"standard_name": "longitude", "units": "degrees_east"}),
    }
    tas = _temperature(RLAT.size, RLON.size)
    return _dataset(("rlat", "rlon"), coords, ROTATED_POLE, tas, {"coordinates": "lat lon"})


def _cell_centre_lonlat() -> tuple[float, float]:
    row, col = TARGET
    lon, lat = _rotated_to_lonlat().transform(RLON[col], RLAT[row])
    return float(lon), float(lat)


def _regular_dataset() -> xr.Dataset:
    """A 0.5 degree lat/lon grid centred on the rotated cell's centre, with its climate there
    and different values in every other cell."""
    lon0, lat0 = _cell_centre_lonlat()
    lon = lon0 + 0.5 * (np.arange(7) - 3)
    lat = lat0 + 0.5 * (np.arange(5) - 2)
    tas = _temperature(lat.size, lon.size) + 30.0
    tas[2, 3] = _temperature(RLAT.size, RLON.size)[TARGET]
    coords = {
        "lat": ("lat", lat, {"standard_name": "latitude", "units": "degrees_north"}),
        "lon": ("lon", lon, {"standard_name": "longitude", "units": "degrees_east"}),
    }
    mapping = {
        "grid_mapping_name": "latitude_longitude",
        "semi_major_axis": 6378137.0,
        "inverse_flattening": 298.257223563,
    }
    return _dataset(("lat", "lon"), coords, mapping, tas)


def _run(tmp_path, dataset: xr.Dataset, name: str) -> pd.DataFrame:
    climate = write_netcdf(dataset, tmp_path / name)
    lon, lat = _cell_centre_lonlat()
    pond = shapely.Point(lon, lat).buffer(0.03)  # about 5 km2, well inside both cells
    layer = gpd.GeoDataFrame({"dam": [1]}, geometry=[pond], crs="EPSG:4326")
    layer.to_file(tmp_path / "dam.gpkg", layer="dams")
    config = {
        "waterbodies": {"path": str(tmp_path / "dam.gpkg"), "id_field": "dam"},
        "climate": {key: {"path": str(climate), "variable": var} for key, var in CLIMATE.items()},
        "method": {"name": "penman_open_water"},
        "output": {"dir": str(tmp_path / "out"), "precipitation": False},
        "compute": {"cache_dir": str(tmp_path / "cache")},
    }
    config["climate"]["wind_speed"]["height_m"] = 2.0
    return lakeloss.run(config).waterbodies.set_index("dam")


def test_rotated_pole_grid_gives_the_regular_grids_depth(tmp_path):
    rotated = _run(tmp_path, _rotated_dataset(), "rotated.nc")
    regular = _run(tmp_path, _regular_dataset(), "regular.nc")
    assert rotated.loc[1, "qa_flags"] == regular.loc[1, "qa_flags"] == ""
    assert rotated.loc[1, "climate_coverage"] == 1.0
    # the latitude of the sun's geometry is the cell centre's in both, through two
    # different transformations: equal to ~1e-12 degrees
    np.testing.assert_allclose(rotated.loc[1, "evap_mm"], regular.loc[1, "evap_mm"], rtol=1e-9)
    np.testing.assert_allclose(rotated.loc[1, "area_m2"], regular.loc[1, "area_m2"], rtol=1e-12)
    # a neighbouring cell's climate would be 1-2 K warmer or cooler: far from equal
    wrong = _regular_dataset()
    wrong["tas"][:, 2, 3] += 1.0
    assert abs(_run(tmp_path, wrong, "wrong.nc").loc[1, "evap_mm"] - regular.loc[1, "evap_mm"]) > 1


# --------------------------------------------------------------------------- curvilinear


def _curvilinear_dataset(with_xy: bool) -> xr.Dataset:
    """The rotated grid's 2-D lat/lon as its only location: no grid mapping, and x/y either
    bare dimensions or plain indices."""
    ds = _rotated_dataset().drop_vars("grid_mapping").rename({"rlat": "y", "rlon": "x"})
    for name in FIELDS:
        del ds[name].attrs["grid_mapping"]
    if with_xy:
        ds = ds.assign_coords(x=("x", np.arange(RLON.size)), y=("y", np.arange(RLAT.size)))
    else:
        ds = ds.drop_vars(["x", "y"])
    return ds


@pytest.mark.parametrize("with_xy", [False, True], ids=["bare-dims", "index-coords"])
def test_curvilinear_grid_without_grid_mapping_is_refused(tmp_path, with_xy):
    case = Case(tmp_path)  # the corpus's clean run; its climate entries now name this file
    ds = _curvilinear_dataset(with_xy)
    ds["rnet"] = ds["rsds"].copy()
    ds["rnet"].attrs["standard_name"] = "surface_net_downward_radiative_flux"
    path = write_netcdf(ds, tmp_path / "curvilinear.nc")
    for entry in case.config["climate"].values():
        entry["path"] = str(path)
    refused_everywhere(case, "curvilinear", "'lat'/'lon'", "grid_mapping", "crs")


def test_regular_grid_carrying_2d_copies_of_lat_lon_still_works(tmp_path):
    ds = _regular_dataset()
    lon2d, lat2d = np.meshgrid(ds["lon"].values, ds["lat"].values)
    ds = ds.assign_coords(
        lat2d=(("lat", "lon"), lat2d, {"standard_name": "latitude", "units": "degrees_north"}),
        lon2d=(("lat", "lon"), lon2d, {"standard_name": "longitude", "units": "degrees_east"}),
    )
    ds = ds.drop_vars("grid_mapping")
    for name in FIELDS:
        del ds[name].attrs["grid_mapping"]
    with pytest.warns(lakeloss.errors.AssumedCRSWarning):
        bodies = _run(tmp_path, ds, "regular2d.nc")
    assert np.isfinite(bodies.loc[1, "evap_mm"])
