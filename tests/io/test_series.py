"""SeriesWriter: CF NetCDF written block by block, read back with xarray and netCDF4.

Fixture: five invented water bodies and 40 daily steps of a noleap calendar across the end of
February, written in blocks that do not line up with the chunk length, so the collection of
chunk rows is exercised.
"""

from __future__ import annotations

import datetime

import cftime
import netCDF4
import numpy as np
import pytest
import xarray as xr
from builders import cf_report, failed_cf_checks

from lakeloss.io.series import SeriesWriter

N_BODIES, N_STEPS = 5, 40
TIMES = np.array(
    [cftime.DatetimeNoLeap(2001, 2, 1) + datetime.timedelta(days=i) for i in range(N_STEPS)]
)
VARIABLES = {
    "evap_mm": {"units": "mm", "long_name": "open-water evaporation depth per step"},
    "precip_mm": {
        "units": "mm",
        "long_name": "precipitation depth per step",
        "standard_name": "lwe_thickness_of_precipitation_amount",
    },
}
GLOBAL = {
    "title": "Evaporation series of an invented pond district",
    "source": "lakeloss 0.1.0",
    "history": "created by the test suite",
    "comment": "Estimates from gridded data; not a measurement.",
}


def _expected(name: str) -> np.ndarray:
    """Distinct value per (step, body) so misplaced blocks show: step*10 + body (+0.5)."""
    offset = 0.5 if name == "precip_mm" else 0.0
    return np.arange(N_STEPS)[:, None] * 10.0 + np.arange(N_BODIES)[None, :] + offset


def _write(path, blocks, chunk_times=16, ids=None):
    ids = np.array([101, 102, 103, 104, 105]) if ids is None else ids
    with SeriesWriter(
        path,
        waterbody_ids=ids,
        times=TIMES,
        calendar="noleap",
        variables=VARIABLES,
        global_attrs=GLOBAL,
        chunk_times=chunk_times,
        chunk_waterbodies=2,
    ) as writer:
        for name, start, stop in blocks:
            writer.write(name, slice(start, stop), _expected(name)[start:stop])
    return path


BLOCKS = [(name, a, b) for a, b in [(0, 7), (7, 19), (19, 33), (33, 40)] for name in VARIABLES]


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    return _write(tmp_path_factory.mktemp("series") / "series.nc", BLOCKS)


def test_blocks_land_in_place(written):
    with xr.open_dataset(written, decode_times=xr.coders.CFDatetimeCoder(use_cftime=True)) as ds:
        assert ds["evap_mm"].dims == ("waterbody", "time")
        assert ds["evap_mm"].dtype == np.float32
        np.testing.assert_array_equal(ds["evap_mm"].values, _expected("evap_mm").T)
        np.testing.assert_array_equal(ds["precip_mm"].values, _expected("precip_mm").T)
        assert ds["waterbody_id"].values.tolist() == [101, 102, 103, 104, 105]
        assert "waterbody_id" in ds["evap_mm"].coords


def test_cf_attributes(written):
    with xr.open_dataset(written, decode_times=False) as ds:
        assert ds.attrs["Conventions"] == "CF-1.8"
        for key, value in GLOBAL.items():
            assert ds.attrs[key] == value
        assert ds["evap_mm"].attrs["units"] == "mm"
        assert ds["evap_mm"].attrs["long_name"] == VARIABLES["evap_mm"]["long_name"]
        assert ds["precip_mm"].attrs["standard_name"] == "lwe_thickness_of_precipitation_amount"
        assert ds["time"].attrs["calendar"] == "noleap"
        assert ds["time"].attrs["units"] == "days since 2001-02-01 00:00:00"
        assert ds["time"].values[:3].tolist() == [0.0, 1.0, 2.0]


def test_noleap_calendar_round_trips(written):
    with xr.open_dataset(written, decode_times=xr.coders.CFDatetimeCoder(use_cftime=True)) as ds:
        times = ds["time"].values
    assert list(times) == list(TIMES)
    assert times[27] == cftime.DatetimeNoLeap(2001, 2, 28)
    assert times[28] == cftime.DatetimeNoLeap(2001, 3, 1)  # no 29 February in noleap
    assert all(t.calendar == "noleap" for t in times)


def test_storage_float32_zlib_chunked_along_waterbody(written):
    with netCDF4.Dataset(written) as ds:
        var = ds["evap_mm"]
        filters = var.filters()
        assert filters["zlib"] and filters["complevel"] == 1
        assert var.chunking() == [2, 16]
        assert var.dtype == np.float32


def test_out_of_order_and_rewritten_blocks(tmp_path):
    # Blocks in reverse order, and the first block of each variable written twice after its
    # chunk row was already flushed: the later write wins and the rest of the row is kept.
    blocks = list(reversed(BLOCKS)) + [("evap_mm", 3, 5), ("precip_mm", 17, 18)]
    path = _write(tmp_path / "s.nc", blocks)
    with xr.open_dataset(path, decode_times=False) as ds:
        np.testing.assert_array_equal(ds["evap_mm"].values, _expected("evap_mm").T)
        np.testing.assert_array_equal(ds["precip_mm"].values, _expected("precip_mm").T)


def test_unwritten_steps_are_nan_and_string_ids(tmp_path):
    ids = np.array(["pond-a", "pond-b", "pond-c", "pond-d", "pond-e"])
    path = _write(tmp_path / "s.nc", [("evap_mm", 0, 10)], chunk_times=None, ids=ids)
    with xr.open_dataset(path, decode_times=False) as ds:
        evap = ds["evap_mm"].values
        assert ds["waterbody_id"].values.tolist() == ids.tolist()
        assert np.isnan(ds["precip_mm"].values).all()
    np.testing.assert_array_equal(evap[:, :10], _expected("evap_mm")[:10].T)
    assert np.isnan(evap[:, 10:]).all()


def test_bad_blocks_refused(tmp_path):
    with SeriesWriter(
        tmp_path / "s.nc",
        waterbody_ids=np.arange(N_BODIES),
        times=TIMES,
        calendar="noleap",
        variables=VARIABLES,
        global_attrs=GLOBAL,
    ) as writer:
        with pytest.raises(ValueError, match="unknown series variable 'net_mm'"):
            writer.write("net_mm", slice(0, 2), np.zeros((2, N_BODIES)))
        with pytest.raises(ValueError, match=r"shape \(2, 4\); expected \(2, 5\)"):
            writer.write("evap_mm", slice(0, 2), np.zeros((2, 4)))
        with pytest.raises(ValueError, match="strided"):
            writer.write("evap_mm", slice(0, 4, 2), np.zeros((2, N_BODIES)))
    with pytest.raises(ValueError, match="lacks CF attributes"):
        SeriesWriter(
            tmp_path / "t.nc",
            waterbody_ids=np.arange(2),
            times=TIMES,
            calendar="noleap",
            variables={"evap_mm": {"units": "mm"}},
            global_attrs=GLOBAL,
        )


def test_datetime64_times_standard_calendar(tmp_path):
    times = np.arange("2001-01-01", "2001-01-04", dtype="datetime64[D]")
    path = tmp_path / "s.nc"
    with SeriesWriter(
        path,
        waterbody_ids=np.arange(2),
        times=times,
        calendar="standard",
        variables=VARIABLES,
        global_attrs=GLOBAL,
    ) as writer:
        writer.write("evap_mm", slice(0, 3), np.ones((3, 2)))
    with xr.open_dataset(path) as ds:
        assert ds["time"].values.astype("datetime64[D]").tolist() == times.tolist()
        np.testing.assert_array_equal(ds["evap_mm"].values, np.ones((2, 3)))


# --- CF discrete sampling geometry: one time series per water body ------------------------


def _locate(path, ids, lon, lat):
    with SeriesWriter(
        path,
        waterbody_ids=ids,
        times=TIMES,
        calendar="noleap",
        variables=VARIABLES,
        global_attrs={k: v for k, v in GLOBAL.items() if k != "history"},
        longitude=lon,
        latitude=lat,
    ) as writer:
        writer.write("evap_mm", slice(0, N_STEPS), _expected("evap_mm"))
        writer.write("precip_mm", slice(0, N_STEPS), _expected("precip_mm"))
    return path


LON = np.array([146.1, 146.2, 146.3, np.nan, 146.5])  # the fourth body has no geometry
LAT = np.array([-30.1, -30.2, -30.3, np.nan, -30.5])


def test_time_series_feature_type_read_by_cf_xarray(tmp_path):
    import cf_xarray  # noqa: F401  (registers the .cf accessor)

    path = _locate(tmp_path / "s.nc", np.array([101, 102, 103, 104, 105]), LON, LAT)
    with xr.open_dataset(path, decode_times=xr.coders.CFDatetimeCoder(use_cftime=True)) as ds:
        assert ds.attrs["featureType"] == "timeSeries"
        assert ds.attrs["history"]  # a default when the caller gives none
        assert ds.cf["timeseries_id"].name == "waterbody_id"
        assert ds["waterbody_id"].dtype == np.int32  # CF 1.8 has no 64-bit integers
        assert ds.cf["latitude"].dims == ("waterbody",)
        np.testing.assert_array_equal(ds.cf["longitude"].values, LON)
        evap = ds.cf["evap_mm"]
        assert set(evap.cf.coordinates) >= {"latitude", "longitude", "time"}
        # One body's series, selected by its identifier as a notebook user would.
        one = (
            ds.set_coords("waterbody_id").swap_dims(waterbody="waterbody_id").sel(waterbody_id=103)
        )
        np.testing.assert_array_equal(one["evap_mm"].values, _expected("evap_mm")[:, 2])
    report = cf_report(path)
    assert failed_cf_checks(report) == []
    assert report["scored_points"] == report["possible_points"]


def test_ids_beyond_int32_and_text_ids_stored_as_text(tmp_path):
    big = np.array([1, 2, 3, 4, 2**40], dtype=np.int64)
    path = _locate(tmp_path / "big.nc", big, LON, LAT)
    with netCDF4.Dataset(path) as ds:
        assert ds["waterbody_id"].dtype is str
        assert ds["waterbody_id"][:].tolist() == ["1", "2", "3", "4", str(2**40)]
        assert ds["waterbody_id"].cf_role == "timeseries_id"
    assert failed_cf_checks(cf_report(path)) == []
    with pytest.raises(ValueError, match="go together"):
        _locate(tmp_path / "half.nc", big, LON, None)


def test_body_locations_inside_each_polygon_in_lon_lat():
    import geopandas as gpd
    import pyproj
    from shapely import make_valid
    from shapely.geometry import Point, Polygon, box

    from lakeloss.io.series import body_locations

    # A crescent (its centroid lies outside it), a self-touching bow tie (invalid), an
    # empty geometry and a missing one, in UTM zone 55 south.
    crescent = box(0, 0, 1000, 1000).difference(box(200, 0, 1000, 800))
    bow_tie = Polygon([(5000, 0), (5400, 400), (5400, 0), (5000, 400)])
    layer = gpd.GeoSeries([crescent, bow_tie, Polygon(), None], crs="EPSG:32755")
    lon, lat = body_locations(layer.translate(500000, 6650000))
    assert np.isnan(lon[2:]).all() and np.isnan(lat[2:]).all()
    to_utm = pyproj.Transformer.from_crs("EPSG:4326", "EPSG:32755", always_xy=True)
    x, y = to_utm.transform(lon[:2], lat[:2])
    assert crescent.contains(Point(x[0] - 500000, y[0] - 6650000))
    assert make_valid(bow_tie).contains(Point(x[1] - 500000, y[1] - 6650000))
    assert -31 < lat[0] < -29 and 147 < lon[0] < 148  # (500 km E, 6650 km N) of zone 55 S
    # Without a CRS there is no location rather than a wrong one.
    assert np.isnan(body_locations(gpd.GeoSeries([box(0, 0, 1, 1)]))[0]).all()


def test_run_series_is_cf_time_series_with_standard_names(make_case, tmp_path):
    import cf_units
    import cf_xarray  # noqa: F401

    import lakeloss

    result = lakeloss.run(make_case("energy_balance", output={"series": True}))
    path = result.write(tmp_path / "out") / "series.nc"
    with xr.open_dataset(path) as ds:
        assert ds.cf["timeseries_id"].values.tolist() == result.waterbodies["pond_id"].tolist()
        rate = ds.cf["lwe_water_evaporation_rate"]
        assert rate.name == "evaporation_rate"
        # CF accepts units convertible to the standard name's canonical ones (m s-1).
        per_second = cf_units.Unit(rate.attrs["units"]).convert(1.0, cf_units.Unit("m s-1"))
        assert per_second == pytest.approx(1e-3 / 86400.0)
        assert ds.cf["lwe_precipitation_rate"].name == "precipitation_rate"
        assert "lakeloss" in ds.attrs["history"] and ds.attrs["featureType"] == "timeSeries"
        # The ponds of tests/builders.py lie within 146.05-146.35 E, 30.05-30.25 S.
        assert ((ds["lon"] > 146.0) & (ds["lon"] < 146.4)).all()
        assert ((ds["lat"] > -30.3) & (ds["lat"] < -30.0)).all()
    report = cf_report(path)
    assert failed_cf_checks(report) == []
    assert report["scored_points"] == report["possible_points"]
