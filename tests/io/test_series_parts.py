"""series.nc from partitions: each partition writes its own series file, then they are joined.

Fixture: ten invented water bodies (the seventh without geometry, so no location) and 40 daily
steps of a noleap calendar across the end of February, written once by one SeriesWriter over
all bodies, and again as partitions of 4, 3 and 3 bodies (each its own SeriesWriter, with
blocks of steps that do not line up with the chunk length) that are then joined. The joined
file must be the one-go file: structure, attributes, chunking, compression and values.
"""

from __future__ import annotations

import datetime
import itertools
import tracemalloc

import cftime
import netCDF4
import numpy as np
import pytest
import xarray as xr
from builders import cf_report, failed_cf_checks

from lakeloss.io import series_join
from lakeloss.io.series import SeriesWriter
from lakeloss.io.series_join import join_series

N_BODIES, N_STEPS = 10, 40
TIMES = np.array(
    [cftime.DatetimeNoLeap(2001, 2, 1) + datetime.timedelta(days=i) for i in range(N_STEPS)]
)
VARIABLES = {
    "evaporation_rate": {
        "units": "mm day-1",
        "long_name": "open-water evaporation rate",
        "standard_name": "lwe_water_evaporation_rate",
    },
    "precipitation_rate": {
        "units": "mm day-1",
        "long_name": "precipitation rate on the water surface",
        "standard_name": "lwe_precipitation_rate",
    },
}
GLOBAL = {
    "title": "Evaporation series of an invented pond district",
    "source": "lakeloss test suite",
    "history": "2031-05-01T00:00:00+00:00 created by the test suite",
    "comment": "Estimates from gridded data for screening; not a measurement.",
}
IDS = np.arange(201, 201 + N_BODIES)
LON = np.linspace(146.1, 146.4, N_BODIES)
LAT = np.linspace(-30.3, -30.05, N_BODIES)
LON[6] = LAT[6] = np.nan


def _values(name: str) -> np.ndarray:
    """Distinct value per (step, body): step*100 + body (+0.5), NaN for body 2 at steps 5-9."""
    offset = 0.5 if name == "precipitation_rate" else 0.0
    values = np.arange(N_STEPS)[:, None] * 100.0 + np.arange(N_BODIES)[None, :] + offset
    values[5:10, 2] = np.nan
    return values


def _write(path, bodies: slice, blocks, ids=IDS, **chunks):
    with SeriesWriter(
        path,
        waterbody_ids=ids[bodies],
        times=TIMES,
        calendar="noleap",
        variables=VARIABLES,
        global_attrs=GLOBAL,
        longitude=LON[bodies],
        latitude=LAT[bodies],
        **chunks,
    ) as writer:
        for start, stop in blocks:
            for name in VARIABLES:
                writer.write(name, slice(start, stop), _values(name)[start:stop, bodies])
    return path


def _parts(directory, cuts, ids=IDS, **chunks):
    directory.mkdir(exist_ok=True)
    bounds = [0, *cuts, N_BODIES]
    return [
        _write(directory / f"{k:06d}.nc", slice(a, b), [(0, 9), (9, 23), (23, 40)], ids, **chunks)
        for k, (a, b) in enumerate(zip(bounds[:-1], bounds[1:], strict=True))
    ]


def _structure(path) -> dict:
    """Everything of a file but its bytes: dimensions, variables in order with dtype,
    chunking, filters and ordered attributes, global attributes in order, and the values."""
    with netCDF4.Dataset(path) as ds:
        ds.set_auto_maskandscale(False)
        return {
            "dimensions": [(name, len(dim)) for name, dim in ds.dimensions.items()],
            "global": [(k, repr(ds.getncattr(k))) for k in ds.ncattrs()],
            "variables": [
                (
                    name,
                    var.dimensions,
                    str(var.dtype),
                    var.chunking(),
                    var.filters(),
                    [(k, repr(var.getncattr(k))) for k in var.ncattrs()],
                )
                for name, var in ds.variables.items()
            ],
            "values": {name: var[...] for name, var in ds.variables.items()},
        }


def _assert_same_file(left, right):
    a, b = _structure(left), _structure(right)
    assert a["dimensions"] == b["dimensions"]
    assert a["global"] == b["global"]
    assert a["variables"] == b["variables"]
    assert a["values"].keys() == b["values"].keys()
    for name, values in a["values"].items():
        np.testing.assert_array_equal(values, b["values"][name], err_msg=name)  # NaN == NaN


@pytest.fixture(scope="module")
def one_go(tmp_path_factory):
    path = tmp_path_factory.mktemp("one") / "series.nc"
    return _write(path, slice(None), [(0, 13), (13, 40)])


def test_three_parts_join_into_the_one_go_file(one_go, tmp_path):
    parts = _parts(tmp_path, [4, 7])
    join_series(parts, tmp_path / "series.nc")
    _assert_same_file(tmp_path / "series.nc", one_go)
    with xr.open_dataset(tmp_path / "series.nc", decode_times=False) as joined:
        with xr.open_dataset(one_go, decode_times=False) as whole:
            xr.testing.assert_identical(joined, whole)
        np.testing.assert_array_equal(
            joined["evaporation_rate"].values, _values("evaporation_rate").T
        )


def test_one_part_and_three_parts_give_the_same_file(tmp_path):
    (one,) = _parts(tmp_path / "one", [])
    join_series([one], tmp_path / "from_one.nc")
    join_series(_parts(tmp_path / "three", [4, 7]), tmp_path / "from_three.nc")
    _assert_same_file(tmp_path / "from_one.nc", tmp_path / "from_three.nc")


def test_tiles_across_part_boundaries(one_go, tmp_path, monkeypatch):
    # Chunks of 3 bodies x 16 steps in the joined file and tiles of one chunk (48 values):
    # chunks straddle the parts (4 | 3 | 3 bodies), rows and steps are copied piecewise.
    parts = _parts(tmp_path, [4, 7], chunk_times=16, chunk_waterbodies=2)
    monkeypatch.setattr(series_join, "_COPY_VALUES", 48)
    join_series(parts, tmp_path / "series.nc", chunk_waterbodies=3)
    with netCDF4.Dataset(tmp_path / "series.nc") as ds:
        assert ds["evaporation_rate"].chunking() == [3, 16]
    reference = _write(
        tmp_path / "whole.nc",
        slice(None),
        [(0, 40)],
        chunk_times=16,
        chunk_waterbodies=3,
    )
    _assert_same_file(tmp_path / "series.nc", reference)


@pytest.mark.parametrize(
    ("chunk", "cuts", "as_stored"),
    [(2, [4, 8], 3), (4, [4, 8], 2), (2, [3, 8], 0)],
    ids=["every-part", "all-but-the-short-last", "a-boundary-inside-a-chunk"],
)
def test_chunks_of_aligned_parts_copied_as_stored(one_go, tmp_path, chunk, cuts, as_stored):
    # Parts starting on a chunk boundary with the file's chunk shape are copied chunk by chunk
    # as stored; a short last part (its own chunk shape) or a boundary inside a chunk of the
    # joined file are copied by value. The file is the same either way.
    parts = _parts(tmp_path, cuts, chunk_times=16, chunk_waterbodies=chunk)
    copied = join_series(parts, tmp_path / "series.nc", chunk_waterbodies=chunk)
    assert copied == as_stored
    whole = _write(
        tmp_path / "whole.nc", slice(None), [(0, 40)], chunk_times=16, chunk_waterbodies=chunk
    )
    _assert_same_file(tmp_path / "series.nc", whole)


def test_partitions_of_4096_bodies_are_copied_as_stored_by_default(tmp_path):
    # Default chunk shape: 4096 bodies x 20 steps, so partitions of 4096 bodies (as a run cuts
    # them) line up with the joined file's chunks; the short last partition is copied by value.
    n, steps = 2 * 4096 + 100, 20
    values = np.random.default_rng(7).random((steps, n)).astype(np.float32)
    values[3, 5000:5010] = np.nan

    def write(path, bodies):
        with SeriesWriter(
            path,
            waterbody_ids=np.arange(n)[bodies],
            times=TIMES[:steps],
            calendar="noleap",
            variables=VARIABLES,
            global_attrs=GLOBAL,
        ) as writer:
            for name in VARIABLES:
                writer.write(name, slice(0, steps), values[:, bodies])
        return path

    cuts = [0, 4096, 8192, n]
    parts = [
        write(tmp_path / f"{k}.nc", slice(a, b))
        for k, (a, b) in enumerate(itertools.pairwise(cuts))
    ]
    assert join_series(parts, tmp_path / "series.nc") == 2
    whole = write(tmp_path / "whole.nc", slice(None))
    with netCDF4.Dataset(whole) as ds:
        assert ds["evaporation_rate"].chunking() == [4096, 20]
    _assert_same_file(tmp_path / "series.nc", whole)


def test_a_part_with_ids_beyond_int32_makes_every_id_text(tmp_path):
    # As in one file over all bodies: 32-bit ids only when every id fits, else text.
    ids = IDS.astype(np.int64).copy()
    ids[8] = 2**40
    parts = _parts(tmp_path, [4, 7], ids=ids)
    with netCDF4.Dataset(parts[0]) as first:
        assert first["waterbody_id"].dtype == np.int32  # this partition's ids fit
    join_series(parts, tmp_path / "series.nc")
    whole = _write(tmp_path / "whole.nc", slice(None), [(0, 40)], ids=ids)
    _assert_same_file(tmp_path / "series.nc", whole)
    with netCDF4.Dataset(tmp_path / "series.nc") as ds:
        assert ds["waterbody_id"][:].tolist() == [str(v) for v in ids]


def test_parts_of_different_runs_refused(tmp_path):
    parts = _parts(tmp_path, [5])
    with netCDF4.Dataset(parts[1], "a") as ds:
        ds["evaporation_rate"].units = "mm"
    with pytest.raises(ValueError, match="differs from .* in its variables"):
        join_series(parts, tmp_path / "series.nc")
    with pytest.raises(ValueError, match="no series parts"):
        join_series([], tmp_path / "series.nc")


def test_joined_file_is_cf_compliant(tmp_path):
    import cf_xarray  # noqa: F401  (registers the .cf accessor)

    join_series(_parts(tmp_path, [4, 7]), tmp_path / "series.nc")
    report = cf_report(tmp_path / "series.nc")
    assert failed_cf_checks(report) == []
    assert report["scored_points"] == report["possible_points"]
    with xr.open_dataset(tmp_path / "series.nc") as ds:
        assert ds.attrs["featureType"] == "timeSeries"
        assert ds.cf["timeseries_id"].values.tolist() == IDS.tolist()
        assert set(ds.cf["evaporation_rate"].cf.coordinates) >= {"latitude", "longitude"}


def test_join_memory_does_not_grow_with_the_bodies(tmp_path, monkeypatch):
    # 20 000 bodies x 60 steps (4.8 MB per variable) joined from four parts into chunks of
    # 64 bodies x 60 steps, with tiles of at most 4096 values: the Python-side peak stays near
    # one part's ids (20 kB), far below one variable.
    n, steps = 20_000, 60
    times = TIMES[:1].repeat(steps) + np.array([datetime.timedelta(days=i) for i in range(steps)])
    rng = np.random.default_rng(5)
    parts = []
    for k in range(4):
        bodies = np.arange(k * n // 4, (k + 1) * n // 4)
        path = tmp_path / f"{k:06d}.nc"
        with SeriesWriter(
            path,
            waterbody_ids=bodies,
            times=times,
            calendar="noleap",
            variables=VARIABLES,
            global_attrs=GLOBAL,
        ) as writer:
            for name in VARIABLES:
                writer.write(name, slice(0, steps), rng.random((steps, len(bodies))))
        parts.append(path)
    monkeypatch.setattr(series_join, "_COPY_VALUES", 4096)
    tracemalloc.start()
    try:
        join_series(parts, tmp_path / "series.nc", chunk_waterbodies=64)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert peak < 500_000, peak
    with xr.open_dataset(tmp_path / "series.nc", decode_times=False) as ds:
        assert ds["waterbody_id"].values.tolist() == list(range(n))
        with xr.open_dataset(parts[2], decode_times=False) as third:
            np.testing.assert_array_equal(
                ds["precipitation_rate"].values[10_000:15_000], third["precipitation_rate"].values
            )
