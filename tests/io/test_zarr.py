"""Zarr stores read like CF NetCDF files: same field, lazily, with or without consolidated
metadata, in Zarr format 2 and 3.

The stores are written by xarray the way data providers publish cloud-ready copies of a
NetCDF product (CF attributes, "days since" times, a grid-mapping variable).
"""

from __future__ import annotations

import json

import dask.array as da
import numpy as np
import pytest

from lakeloss.errors import InputDataError
from lakeloss.io import climate, zarr_store


def _dataset(build, steps=20, calendar="standard"):
    values = np.random.default_rng(3).uniform(280.0, 300.0, (steps, 3, 4)).astype("float32")
    return build.grid_dataset(values, times=build.daily_times(steps, calendar), units="K")


def _open(path, chunk_steps=8):
    return climate.open_netcdf(
        path, "tas", "air_temperature", crs="EPSG:4326", chunk_steps=chunk_steps
    )


# Writing (not reading) consolidated format 3 metadata makes zarr note that it is not in the spec.
@pytest.mark.filterwarnings("ignore:Consolidated metadata:UserWarning")
@pytest.mark.parametrize(
    ("zarr_format", "consolidated"), [(2, True), (2, False), (3, True), (3, False)]
)
def test_store_gives_the_netcdf_field(build, tmp_path, zarr_format, consolidated):
    dataset = _dataset(build, calendar="noleap")
    netcdf = build.write_netcdf(dataset, tmp_path / "tas.nc", calendar="noleap")
    store = tmp_path / "tas.zarr"
    dataset.encoding = {}
    dataset.to_zarr(
        store,
        zarr_format=zarr_format,
        consolidated=consolidated,
        encoding={"time": {"units": "days since 2000-01-01", "calendar": "noleap"},
                  "tas": {"chunks": (5, 3, 2)}},
    )  # fmt: skip
    assert zarr_store.has_consolidated_metadata(store) == consolidated
    from_store, from_file = _open(store), _open(netcdf)
    assert isinstance(from_store.data.data, da.Array)
    assert from_store.data.chunks[0] == from_file.data.chunks[0]
    assert np.array_equal(from_store.data.values, from_file.data.values)
    assert list(from_store.times) == list(from_file.times)
    assert from_store.calendar == "noleap"
    assert from_store.source_units == "K"


def test_store_without_suffix_is_recognised_by_its_metadata(build, tmp_path):
    store = tmp_path / "tas_store"
    _dataset(build).to_zarr(store, zarr_format=2, consolidated=False)
    assert zarr_store.is_store(store)
    assert len(_open(store).times) == 20


def test_store_s_grid_mapping_gives_the_crs(build, tmp_path):
    dataset = _dataset(build)
    dataset["crs"] = ((), 0, {"grid_mapping_name": "latitude_longitude",
                              "semi_major_axis": 6378137.0, "inverse_flattening": 298.257223563})  # fmt: skip
    dataset["tas"].attrs["grid_mapping"] = "crs"
    store = tmp_path / "tas.zarr"
    dataset.to_zarr(store, zarr_format=3, consolidated=False)
    field = climate.open_netcdf(store, "tas", "air_temperature")
    assert field.crs.is_geographic and not field.crs_assumed


def test_folder_that_is_not_a_store_is_refused(tmp_path):
    folder = tmp_path / "empty.zarr"
    folder.mkdir()
    with pytest.raises(InputDataError, match=r"'.*empty\.zarr' is not a Zarr store"):
        _open(folder)
    with pytest.raises(InputDataError, match=r"'.*missing\.zarr' does not exist"):
        _open(tmp_path / "missing.zarr")


def test_store_with_broken_metadata_is_refused(build, tmp_path):
    store = tmp_path / "tas.zarr"
    _dataset(build).to_zarr(store, zarr_format=3, consolidated=False)
    (store / "zarr.json").write_text(json.dumps({"zarr_format": 3, "node_type": "nonsense"}))
    with pytest.raises(InputDataError, match=r"Zarr store '.*tas\.zarr' cannot be read"):
        _open(store)


def test_yearly_stores_join_like_netcdf_files(build, tmp_path):
    dataset = _dataset(build)
    whole = _open(build.write_netcdf(dataset, tmp_path / "tas.nc"))
    for k, part in enumerate((slice(0, 12), slice(12, 20))):
        dataset.isel(time=part).to_zarr(tmp_path / f"tas_{k}.zarr", zarr_format=2)
    joined = _open(str(tmp_path / "tas_*.zarr"))
    assert np.array_equal(joined.data.values, whole.data.values)
