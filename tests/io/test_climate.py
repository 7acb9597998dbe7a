"""Opening climate grids: CF NetCDF and GeoTIFF stacks, CRS, units, calendars, laziness."""

from __future__ import annotations

import warnings

import cftime
import dask.array as da
import numpy as np
import pyproj
import pytest
import xarray as xr

from lakeloss.errors import (
    AssumedCRSWarning,
    ConfigError,
    CRSError,
    GridError,
    ImplausibleValuesError,
    InputDataError,
    TimeAxisError,
    UnitsError,
)
from lakeloss.io.climate import check_values, open_geotiff_stack, open_netcdf

UTM = pyproj.CRS.from_epsg(32755)


def _kelvin_cube(n_time=4, n_y=3, n_x=2):
    # value = 293.15 + t + 0.1 y + 0.01 x [K], so each cell and step is identifiable after
    # transposes, and every value is a plausible air temperature (20 °C and a little more).
    t, y, x = np.meshgrid(np.arange(n_time), np.arange(n_y), np.arange(n_x), indexing="ij")
    return 293.15 + t + 0.1 * y + 0.01 * x


def _latlon_file(tmp_path, build, **kwargs):
    values = kwargs.pop("values", _kelvin_cube())
    dataset = build.grid_dataset(values, times=build.daily_times(values.shape[0]), **kwargs)
    return build.write_netcdf(dataset, tmp_path / "tas.nc")


def _open_assuming_latlon(*args, **kwargs):
    with pytest.warns(AssumedCRSWarning, match="assumed EPSG:4326"):
        return open_netcdf(*args, **kwargs)


def _projected_dataset(build, values, *, grid_mapping=True, wkt_only=False):
    n_time, n_y, n_x = values.shape
    dataset = build.grid_dataset(
        values,
        times=build.daily_times(n_time),
        dims=("time", "y", "x"),
        y=6_005_000.0 - 1000.0 * np.arange(n_y),
        x=500_000.0 + 1000.0 * np.arange(n_x),
    )
    dataset["x"].attrs["standard_name"] = "projection_x_coordinate"
    dataset["y"].attrs["standard_name"] = "projection_y_coordinate"
    if grid_mapping:
        attrs = {"crs_wkt": UTM.to_wkt()} if wkt_only else UTM.to_cf()
        dataset["crs"] = xr.DataArray(np.int32(0), attrs=attrs)
        dataset["tas"].attrs["grid_mapping"] = "crs"
    return dataset


def test_latlon_file_is_lazy_converted_and_assumes_wgs84(tmp_path, build):
    path = _latlon_file(tmp_path, build)
    field = _open_assuming_latlon(path, "tas", "air_temperature", chunk_steps=2)
    assert field.data.dims == ("time", "y", "x")
    assert isinstance(field.data.data, da.Array)
    assert field.data.chunks[0] == (2, 2)
    assert field.crs_assumed and field.crs.to_epsg() == 4326
    assert field.quantity == "air_temperature" and field.source_units == "K"
    assert field.data.attrs["units"] == "degC"
    # 293.15 K = 20 °C (offset-aware conversion, T_K = T + 273.15, docs/methods.md#units-and-conventions)
    np.testing.assert_allclose(field.data.values, _kelvin_cube() - 273.15, atol=1e-9)
    assert isinstance(field.times[0], cftime.datetime)
    assert field.calendar == "standard"
    assert field.transform is None
    np.testing.assert_allclose(field.y, [-30.0, -30.5, -31.0])


@pytest.mark.parametrize(
    "dims",
    [("lat", "lon", "time"), ("time", "latitude", "longitude"), ("longitude", "time", "latitude")],
)
def test_any_dimension_order_and_names_become_time_y_x(tmp_path, build, dims):
    reference = xr.DataArray(
        _kelvin_cube(),
        dims=("time", "y", "x"),
        coords={"time": build.daily_times(4), "y": [-30.0, -30.5, -31.0], "x": [145.0, 146.0]},
        attrs={"units": "K"},
    )
    y_name = next(d for d in dims if d.startswith("lat"))
    x_name = next(d for d in dims if d.startswith("lon"))
    stored = reference.rename(y=y_name, x=x_name).transpose(*dims)
    path = build.write_netcdf(stored.to_dataset(name="tas"), tmp_path / "tas.nc")
    field = _open_assuming_latlon(path, "tas", "air_temperature")
    assert field.data.dims == ("time", "y", "x")
    np.testing.assert_allclose(field.data.values, reference.values - 273.15, atol=1e-9)
    np.testing.assert_allclose(field.x, [145.0, 146.0])


def test_projected_grid_mapping_gives_crs_without_warning(tmp_path, build):
    path = build.write_netcdf(_projected_dataset(build, _kelvin_cube()), tmp_path / "utm.nc")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        field = open_netcdf(path, "tas", "air_temperature")
    assert field.crs.equals(UTM) and not field.crs_assumed
    np.testing.assert_allclose(field.x, [500_000.0, 501_000.0])


def test_crs_wkt_on_grid_mapping_is_read(tmp_path, build):
    dataset = _projected_dataset(build, _kelvin_cube(), wkt_only=True)
    field = open_netcdf(build.write_netcdf(dataset, tmp_path / "utm.nc"), "tas", "air_temperature")
    assert field.crs.to_epsg() == 32755


def test_projected_grid_without_crs_needs_override(tmp_path, build):
    dataset = _projected_dataset(build, _kelvin_cube(), grid_mapping=False)
    path = build.write_netcdf(dataset, tmp_path / "utm.nc")
    with pytest.raises(CRSError, match='set crs = "EPSG'):
        open_netcdf(path, "tas", "air_temperature")
    field = open_netcdf(path, "tas", "air_temperature", crs="EPSG:32755")
    assert field.crs_assumed and field.crs.to_epsg() == 32755


def test_override_wins_over_a_different_grid_mapping_and_says_so(tmp_path, build):
    path = build.write_netcdf(_projected_dataset(build, _kelvin_cube()), tmp_path / "utm.nc")
    with pytest.warns(AssumedCRSWarning, match="declares CRS 'EPSG:32755'.*used the configured"):
        field = open_netcdf(path, "tas", "air_temperature", crs="EPSG:32756")
    assert field.crs.to_epsg() == 32756 and field.crs_assumed


def test_override_agreeing_with_the_file_is_silent(tmp_path, build):
    path = build.write_netcdf(_projected_dataset(build, _kelvin_cube()), tmp_path / "utm.nc")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        field = open_netcdf(path, "tas", "air_temperature", crs="EPSG:32755")
    assert field.crs.to_epsg() == 32755 and not field.crs_assumed


def test_missing_variable_lists_variables(tmp_path, build):
    path = _latlon_file(tmp_path, build)
    with pytest.raises(ConfigError, match="variables are 'tas'"):
        open_netcdf(path, "t2m", "air_temperature")


def test_missing_units_need_config_units(tmp_path, build):
    path = _latlon_file(tmp_path, build, units=None)
    with pytest.raises(UnitsError, match="no units attribute"):
        _open_assuming_latlon(path, "tas", "air_temperature")
    field = _open_assuming_latlon(path, "tas", "air_temperature", units="kelvin")
    assert float(field.data[0, 0, 0]) == pytest.approx(20.0)


def test_wrong_dimensionality_is_units_error(tmp_path, build):
    path = _latlon_file(tmp_path, build, units="m s-1")
    with pytest.raises(UnitsError, match="'tas'.*'m s-1'"):
        _open_assuming_latlon(path, "tas", "air_temperature")


@pytest.mark.parametrize(
    ("calendar", "month_days"), [("noleap", [31.0, 28.0, 31.0]), ("360_day", [30.0, 30.0, 30.0])]
)
def test_monthly_amounts_use_calendar_month_lengths(tmp_path, build, calendar, month_days):
    # Monthly totals of 60 kg m-2 become 60/days mm/day (rho_w = 1000 exactly, docs/methods.md#units-and-conventions).
    stamps = [cftime.datetime(2021, m, 15, calendar=calendar) for m in (1, 2, 3)]
    dataset = build.grid_dataset(
        np.full((3, 2, 2), 60.0), times=stamps, units="kg m-2", variable="pr"
    )
    path = build.write_netcdf(dataset, tmp_path / "pr.nc", calendar=calendar)
    field = _open_assuming_latlon(path, "pr", "precipitation_amount")
    assert field.calendar == calendar and field.quantity == "precipitation"
    np.testing.assert_allclose(field.data.values[:, 0, 0], 60.0 / np.array(month_days))
    np.testing.assert_array_equal(field.time_axis.days, month_days)
    assert field.time_axis.step == "month"


def test_daily_energy_per_step_becomes_mean_flux(tmp_path, build):
    # 8.64 MJ m-2 accumulated over one day = 100 W m-2 (W m-2 x 0.0864 = MJ m-2 d-1, docs/methods.md#units-and-conventions).
    dataset = build.grid_dataset(
        np.full((2, 2, 2), 8.64e6), times=build.daily_times(2), units="J m-2", variable="ssrd"
    )
    path = build.write_netcdf(dataset, tmp_path / "ssrd.nc")
    field = _open_assuming_latlon(path, "ssrd", "surface_downwelling_shortwave_flux_in_air")
    np.testing.assert_allclose(field.data.values, 100.0)


def test_fill_values_and_packed_data(tmp_path, build):
    values = _kelvin_cube()
    values[1, 2, 1] = np.nan
    dataset = build.grid_dataset(values, times=build.daily_times(4))
    encoding = {
        "tas": {"dtype": "int16", "scale_factor": 0.01, "add_offset": 400.0, "_FillValue": -32768}
    }
    path = build.write_netcdf(dataset, tmp_path / "packed.nc", encoding=encoding)
    field = _open_assuming_latlon(path, "tas", "air_temperature")
    result = field.data.values
    assert np.isnan(result[1, 2, 1]) and np.isnan(result).sum() == 1
    np.testing.assert_allclose(
        result[0], values[0] - 273.15, atol=0.006
    )  # half the 0.01 K packing step


def test_south_up_and_0_360_longitudes_pass_through(tmp_path, build):
    dataset = build.grid_dataset(
        _kelvin_cube(),
        times=build.daily_times(4),
        y=np.array([-31.0, -30.5, -30.0]),
        x=np.array([350.0, 355.0]),
    )
    field = _open_assuming_latlon(
        build.write_netcdf(dataset, tmp_path / "tas.nc"), "tas", "air_temperature"
    )
    np.testing.assert_allclose(field.y, [-31.0, -30.5, -30.0])
    np.testing.assert_allclose(field.x, [350.0, 355.0])
    np.testing.assert_allclose(field.data.values[0, 0], [20.0, 20.01])


def test_irregular_times_are_time_axis_error(tmp_path, build):
    stamps = [cftime.DatetimeGregorian(2021, 1, d) for d in (1, 2, 4, 5)]
    dataset = build.grid_dataset(_kelvin_cube(), times=stamps)
    with pytest.raises(TimeAxisError, match="irregular at step 2"):
        open_netcdf(build.write_netcdf(dataset, tmp_path / "gap.nc"), "tas", "air_temperature")


def test_unrecognisable_dimension_is_grid_error(tmp_path, build):
    dataset = build.grid_dataset(
        _kelvin_cube(), times=build.daily_times(4), dims=("time", "row", "column")
    )
    with pytest.raises(GridError, match="'row'"):
        open_netcdf(build.write_netcdf(dataset, tmp_path / "odd.nc"), "tas", "air_temperature")


def test_missing_directory_garbage_and_truncated_files(tmp_path, build):
    with pytest.raises(InputDataError, match="does not exist"):
        open_netcdf(tmp_path / "absent.nc", "tas", "air_temperature")
    with pytest.raises(InputDataError, match="is a directory"):
        open_netcdf(tmp_path, "tas", "air_temperature")
    garbage = tmp_path / "garbage.nc"
    garbage.write_bytes(b"CDF? certainly not" * 50)
    with pytest.raises(InputDataError, match="unreadable"):
        open_netcdf(garbage, "tas", "air_temperature")
    content = _latlon_file(tmp_path, build, values=_kelvin_cube(64, 8, 8)).read_bytes()
    truncated = tmp_path / "truncated.nc"
    truncated.write_bytes(content[: len(content) // 2])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", AssumedCRSWarning)
        with pytest.raises(InputDataError, match="truncated"):
            open_netcdf(truncated, "tas", "air_temperature")


def test_check_values_strict_and_lenient(tmp_path, build):
    path = _latlon_file(tmp_path, build, units="degC")  # kelvin numbers declared as Celsius
    field = _open_assuming_latlon(path, "tas", "air_temperature")
    reason = check_values(field, strict=False)
    assert reason is not None and "look like kelvin" in reason and "'tas'" in reason
    with pytest.raises(ImplausibleValuesError, match="look like kelvin"):
        check_values(field, strict=True)
    (tmp_path / "good").mkdir()
    good_path = _latlon_file(tmp_path / "good", build)
    good = _open_assuming_latlon(good_path, "tas", "air_temperature")
    assert check_values(good, strict=True) is None


# ----------------------------------------------------------------------------- GeoTIFF


def test_geotiff_stack_in_one_file_without_band_dates_is_a_config_error(tmp_path, build):
    # The configuration refuses this before; a caller of the function gets the same kind of
    # one-line error instead of a failure inside the band-date arithmetic.
    path = build.write_geotiff(tmp_path / "wind.tif", np.ones((2, 2, 4)), tags={"units": "m s-1"})
    with pytest.raises(ConfigError, match="needs start and step"):
        open_geotiff_stack(path, "wind_speed", start=None, step="day", units=None)
    with pytest.raises(ConfigError, match="needs start and step"):
        open_geotiff_stack(path, "wind_speed", start="2021-03-30", step=None, units=None)


def test_geotiff_stack_reads_bands_lazily_with_nodata(tmp_path, build):
    bands = np.arange(3 * 2 * 4, dtype=float).reshape(3, 2, 4)
    bands[2, 1, 3] = -9999.0
    path = build.write_geotiff(
        tmp_path / "wind.tif", bands, nodata=-9999.0, tags={"units": "km h-1"}
    )
    field = open_geotiff_stack(path, "wind_speed", start="2021-03-30", step="day", units=None)
    assert isinstance(field.data.data, da.Array)
    assert field.data.dims == ("time", "y", "x")
    assert field.source_units == "km h-1"
    values = field.data.values
    assert np.isnan(values[2, 1, 3])
    np.testing.assert_allclose(
        values[1, 0, 1], 9.0 / 3.6
    )  # km/h ÷ 3.6 = m/s (docs/methods.md#units-and-conventions)
    assert [str(t)[:10] for t in field.times] == ["2021-03-30", "2021-03-31", "2021-04-01"]
    np.testing.assert_allclose(field.x, [500_500.0, 501_500.0, 502_500.0, 503_500.0])
    np.testing.assert_allclose(field.y, [6_004_500.0, 6_003_500.0])
    assert field.transform.a == 1000.0 and field.crs.to_epsg() == 32755


def test_geotiff_end_must_match_band_count(tmp_path, build):
    path = build.write_geotiff(tmp_path / "rs.tif", np.ones((11, 2, 2)))
    with pytest.raises(TimeAxisError, match="11 bands.*imply 12 month steps"):
        open_geotiff_stack(
            path,
            "surface_downwelling_shortwave_flux_in_air",
            start="2021-01-01",
            step="month",
            units="W m-2",
            end="2021-12-01",
        )
    field = open_geotiff_stack(
        path,
        "surface_downwelling_shortwave_flux_in_air",
        start="2021-01-01",
        step="month",
        units="W m-2",
        end="2021-11-30",
    )
    assert len(field.times) == 11


def test_geotiff_units_and_crs_are_required(tmp_path, build):
    path = build.write_geotiff(tmp_path / "t.tif", np.ones((2, 2, 2)))
    with pytest.raises(UnitsError, match="no units"):
        open_geotiff_stack(path, "air_temperature", start="2021-01-01", step="day", units=None)
    bare = build.write_geotiff(tmp_path / "bare.tif", np.ones((2, 2, 2)), crs=None)
    with pytest.raises(CRSError, match="no CRS"):
        open_geotiff_stack(bare, "air_temperature", start="2021-01-01", step="day", units="degC")
    field = open_geotiff_stack(
        bare, "air_temperature", start="2021-01-01", step="day", units="degC", crs="EPSG:32755"
    )
    assert field.crs_assumed


def test_geotiff_unreadable_is_input_data_error(tmp_path):
    path = tmp_path / "broken.tif"
    path.write_bytes(b"II*\x00 nonsense" * 20)
    with pytest.raises(InputDataError, match="unreadable"):
        open_geotiff_stack(path, "air_temperature", start="2021-01-01", step="day", units="degC")


def test_roles_by_standard_name_and_singleton_height_dimension(tmp_path, build):
    # A 2 m temperature stored (time, height, row, col) with CF attributes on odd names.
    values = _kelvin_cube()[:, np.newaxis]
    stored = xr.DataArray(
        values,
        dims=("time", "height", "row", "col"),
        coords={
            "time": build.daily_times(4),
            "height": [2.0],
            "row": ("row", [-30.0, -30.5, -31.0], {"standard_name": "latitude"}),
            "col": ("col", [145.0, 146.0], {"units": "degrees_east"}),
        },
        attrs={"units": "K"},
    )
    path = build.write_netcdf(stored.to_dataset(name="t2"), tmp_path / "t2.nc")
    field = _open_assuming_latlon(path, "t2", "air_temperature")
    assert field.data.dims == ("time", "y", "x")
    np.testing.assert_allclose(field.data.values, _kelvin_cube() - 273.15, atol=1e-9)


def test_spatial_ref_attribute_gives_crs(tmp_path, build):
    dataset = _projected_dataset(build, _kelvin_cube(), grid_mapping=False)
    dataset["tas"].attrs["spatial_ref"] = UTM.to_wkt()
    field = open_netcdf(build.write_netcdf(dataset, tmp_path / "utm.nc"), "tas", "air_temperature")
    assert field.crs.to_epsg() == 32755 and not field.crs_assumed


def _broken_mapping_file(tmp_path, build, mapping="transverse_mercator"):
    # As some regridding tools leave it: the attribute survives, the variable it names not.
    dataset = _projected_dataset(build, _kelvin_cube(), grid_mapping=False)
    dataset["tas"].attrs["grid_mapping"] = mapping
    return build.write_netcdf(dataset, tmp_path / "utm.nc")


def test_grid_mapping_naming_absent_variable_is_crs_error_naming_the_fix(tmp_path, build):
    path = _broken_mapping_file(tmp_path, build)
    with pytest.raises(CRSError, match="'transverse_mercator', which is not in the file") as err:
        open_netcdf(path, "tas", "air_temperature")
    assert 'set crs = "EPSG:...."' in str(err.value) and "\n" not in str(err.value)


@pytest.mark.parametrize("mapping", ["transverse_mercator", "crs: x y"])
def test_crs_override_wins_over_a_broken_grid_mapping(tmp_path, build, mapping):
    path = _broken_mapping_file(tmp_path, build, mapping)
    with pytest.warns(AssumedCRSWarning, match="CRS is unusable.*used the configured crs"):
        field = open_netcdf(path, "tas", "air_temperature", crs="EPSG:32755")
    assert field.crs.to_epsg() == 32755 and field.crs_assumed
    np.testing.assert_allclose(field.x, [500_000.0, 501_000.0])


def test_crs_override_wins_over_an_unreadable_grid_mapping(tmp_path, build):
    dataset = _projected_dataset(build, _kelvin_cube(), grid_mapping=False)
    dataset["crs"] = xr.DataArray(np.int32(0), attrs={"grid_mapping_name": "no_such_projection"})
    dataset["tas"].attrs["grid_mapping"] = "crs"
    path = build.write_netcdf(dataset, tmp_path / "utm.nc")
    with pytest.raises(CRSError, match="cannot be read as a CRS.*set crs ="):
        open_netcdf(path, "tas", "air_temperature")
    with pytest.warns(AssumedCRSWarning, match="CRS is unusable"):
        field = open_netcdf(path, "tas", "air_temperature", crs="EPSG:32755")
    assert field.crs.to_epsg() == 32755


def test_geotiff_chunks_follow_chunk_steps(tmp_path, build):
    path = build.write_geotiff(tmp_path / "rs.tif", np.full((5, 2, 2), 200.0))
    field = open_geotiff_stack(
        path,
        "surface_downwelling_shortwave_flux_in_air",
        start="2021-01-01",
        step="day",
        units="W m-2",
        chunk_steps=2,
    )
    assert field.data.chunks[0] == (2, 2, 1)
    assert check_values(field, strict=True) is None
