"""Tiny synthetic input files for the reader tests, written into ``tmp_path``.

Every fixture describes an invented scenario: square "ponds" a few hundred metres wide on a
projected grid (EPSG:32755, an arbitrary UTM zone) and small climate grids of a few cells
with a handful of time steps. Values are chosen so that conversions are easy to check by
hand (e.g. 293.15 K = 20 °C).
"""

from __future__ import annotations

from types import SimpleNamespace

import cftime
import geopandas
import numpy as np
import pytest
import rasterio
import xarray as xr
from affine import Affine
from shapely.geometry import box

PROJECTED_CRS = "EPSG:32755"


def ponds(count: int = 3, crs: str | None = PROJECTED_CRS) -> geopandas.GeoDataFrame:
    """``count`` square ponds 200 m wide, 1 km apart, with two attributes."""
    squares = [
        box(500_000 + 1000 * i, 6_000_000, 500_200 + 1000 * i, 6_000_200) for i in range(count)
    ]
    return geopandas.GeoDataFrame(
        {
            "pond_code": [f"P{i + 1:02d}" for i in range(count)],
            "depth_m": np.linspace(1.5, 4.0, count),
        },
        geometry=squares,
        crs=crs,
    )


@pytest.fixture
def pond_gpkg(tmp_path):
    """A GeoPackage with one layer ``ponds`` of three square ponds."""
    path = tmp_path / "ponds.gpkg"
    ponds().to_file(path, layer="ponds", driver="GPKG", engine="pyogrio")
    return path


def grid_dataset(
    values: np.ndarray,
    *,
    times,
    units: str | None = "K",
    variable: str = "tas",
    dims: tuple[str, str, str] = ("time", "lat", "lon"),
    y: np.ndarray | None = None,
    x: np.ndarray | None = None,
    attrs: dict | None = None,
) -> xr.Dataset:
    """A CF-style dataset holding one (time, y, x) variable.

    ``dims`` names the dimensions in storage order, which must be a permutation of the
    time/y/x roles given by their names. ``times`` are cftime datetimes.
    """
    n_time, n_y, n_x = values.shape
    y = np.linspace(-30.0, -31.0, n_y) if y is None else y
    x = np.linspace(145.0, 146.0, n_x) if x is None else x
    time_dim, y_dim, x_dim = dims
    data = xr.DataArray(values, dims=(time_dim, y_dim, x_dim), attrs=dict(attrs or {}))
    if units is not None:
        data.attrs["units"] = units
    dataset = xr.Dataset(
        {variable: data}, coords={time_dim: times, y_dim: (y_dim, y), x_dim: (x_dim, x)}
    )
    return dataset


def daily_times(count: int, calendar: str = "standard", start: str = "2021-01-01", hour: int = 0):
    """``count`` daily cftime stamps from ``start`` at ``hour`` o'clock."""
    return cftime.num2date(np.arange(count) + hour / 24.0, f"days since {start}", calendar=calendar)


def write_netcdf(dataset: xr.Dataset, path, *, calendar: str = "standard", encoding=None):
    """Write with the netCDF4 engine and an explicit time encoding."""
    time_name = next(name for name in dataset.dims if name.startswith("t"))
    time_encoding = {"units": "days since 2000-01-01", "calendar": calendar}
    full = {time_name: time_encoding, **(encoding or {})}
    dataset.to_netcdf(path, engine="netcdf4", encoding=full)
    return path


def write_geotiff(
    path, bands: np.ndarray, *, crs: str | None = PROJECTED_CRS, nodata=None, tags=None
):
    """Write a (band, row, col) float32 stack with 1 km cells north-up."""
    count, height, width = bands.shape
    profile = {
        "driver": "GTiff",
        "width": width,
        "height": height,
        "count": count,
        "dtype": "float32",
        "transform": Affine(1000.0, 0.0, 500_000.0, 0.0, -1000.0, 6_005_000.0),
        "nodata": nodata,
    }
    if crs is not None:
        profile["crs"] = crs
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(bands.astype("float32"))
        if tags:
            dst.update_tags(**tags)
    return path


@pytest.fixture
def build():
    """The builders above, for tests (conftest modules are not importable by name)."""
    return SimpleNamespace(
        ponds=ponds,
        grid_dataset=grid_dataset,
        daily_times=daily_times,
        write_netcdf=write_netcdf,
        write_geotiff=write_geotiff,
    )
