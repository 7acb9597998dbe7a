"""Climate inputs over many files (a list or a glob), joined along time.

The files are written the way providers split a series: one NetCDF per period with its own
time epoch ("days since" the period's start), or one GeoTIFF per day with the date in its
name. Each joined field must equal the field of one file holding the same data, value for
value, and every disagreement between files must be a one-line error naming both files.
"""

from __future__ import annotations

import contextlib
import os
import warnings

import cftime
import numpy as np
import pytest

from lakeloss.errors import (
    ConfigError,
    CRSError,
    GridError,
    InputDataError,
    OverlappingStepsWarning,
    TimeAlignedWarning,
    TimeAxisError,
    UnitsError,
)
from lakeloss.io import climate, multifile

TEMPERATURE = "air_temperature"


def _values(steps: int, seed: int = 7) -> np.ndarray:
    return np.random.default_rng(seed).uniform(280.0, 300.0, (steps, 3, 4))


def _write_split(build, tmp_path, values, times, cuts, *, name="tas", units="K", **kwargs):
    """Write ``values`` split at ``cuts`` into files ``{name}_{k}.nc``, each with its own epoch."""
    paths = []
    bounds = [0, *cuts, len(times)]
    for k, (lo, hi) in enumerate(zip(bounds[:-1], bounds[1:], strict=True)):
        dataset = build.grid_dataset(values[lo:hi], times=times[lo:hi], units=units)
        epoch = f"{times[lo].year:04d}-{times[lo].month:02d}-{times[lo].day:02d}"
        path = tmp_path / f"{name}_{k}.nc"
        dataset.to_netcdf(
            path,
            engine="netcdf4",
            encoding={"time": {"units": f"days since {epoch}", **kwargs.get("time", {})}},
        )
        paths.append(path)
    return paths


def _open(path, **kwargs):
    return climate.open_netcdf(
        path, "tas", TEMPERATURE, crs="EPSG:4326", chunk_steps=kwargs.pop("chunk_steps", 16)
    )


# --------------------------------------------------------------------------- NetCDF joins


def test_files_in_any_order_join_to_the_single_file_field(build, tmp_path):
    values, times = _values(40), build.daily_times(40)
    single = build.write_netcdf(build.grid_dataset(values, times=times), tmp_path / "all.nc")
    parts = _write_split(build, tmp_path, values, times, [15, 33])
    joined = _open([parts[2], parts[0], parts[1]])
    one = _open(single)
    assert np.array_equal(joined.data.values, one.data.values)
    assert list(joined.times) == list(one.times)
    assert joined.calendar == one.calendar
    assert joined.source_path == f"{parts[0]} .. {parts[2]} (3 files)"


def test_a_glob_and_a_list_give_the_same_field(build, tmp_path):
    values, times = _values(30), build.daily_times(30)
    parts = _write_split(build, tmp_path, values, times, [10, 20])
    by_glob = _open(str(tmp_path / "tas_*.nc"))
    by_list = _open([str(p) for p in parts])
    assert np.array_equal(by_glob.data.values, by_list.data.values)
    assert by_glob.source_path == by_list.source_path


def test_chunks_break_where_a_single_file_s_chunks_break(build, tmp_path):
    # A block reads whole chunks: a chunk straddling a block boundary would be read twice.
    values, times = _values(40), build.daily_times(40)
    joined = _open(_write_split(build, tmp_path, values, times, [15, 33]))
    ends = set(np.cumsum(joined.data.chunks[0]))
    assert {16, 32, 40} <= ends
    assert ends <= {15, 16, 32, 33, 40}


def test_monthly_files_of_one_step_convert_amounts_by_the_month_s_days(build, tmp_path):
    # Monthly totals "mm" per step in one file per month: each file alone looks like a single
    # (daily) step, but the rate is the total over the month's days (31, 28, 31 in 2031).
    import cftime

    times = np.array([cftime.datetime(2031, m, 1) for m in (1, 2, 3)])
    totals = np.stack([np.full((3, 4), t) for t in (62.0, 28.0, 31.0)])
    parts = _write_split(build, tmp_path, totals, times, [1, 2], name="pr", units="mm")
    for k, path in enumerate(parts):
        dataset = build.grid_dataset(totals[k : k + 1], times=times[k : k + 1], variable="pr")
        dataset["pr"].attrs["units"] = "mm"
        dataset.to_netcdf(path, engine="netcdf4")
    field = climate.open_netcdf(parts, "pr", "precipitation_amount", crs="EPSG:4326")
    assert field.time_axis.step == "month"
    np.testing.assert_allclose(field.data.values[:, 0, 0], [2.0, 1.0, 1.0])  # mm day-1


def test_identical_overlap_is_read_once_with_a_warning(build, tmp_path):
    values, times = _values(20), build.daily_times(20)
    one = _open(build.write_netcdf(build.grid_dataset(values, times=times), tmp_path / "a.nc"))
    first = build.grid_dataset(values[:12], times=times[:12])
    second = build.grid_dataset(values[10:], times=times[10:])
    paths = [
        build.write_netcdf(first, tmp_path / "tas_0.nc"),
        build.write_netcdf(second, tmp_path / "tas_1.nc"),
    ]
    with pytest.warns(OverlappingStepsWarning, match=r"2021-01-11\.\.2021-01-12 \(2 steps\)"):
        joined = _open(paths)
    assert np.array_equal(joined.data.values, one.data.values)


def test_overlap_with_other_values_names_both_files_and_the_dates(build, tmp_path):
    values, times = _values(20), build.daily_times(20)
    changed = values.copy()
    changed[11] += 0.5
    paths = [
        build.write_netcdf(build.grid_dataset(values[:12], times=times[:12]), tmp_path / "a.nc"),
        build.write_netcdf(build.grid_dataset(changed[11:], times=times[11:]), tmp_path / "b.nc"),
    ]
    with pytest.raises(TimeAxisError) as caught:
        _open(paths)
    message = str(caught.value)
    assert "'" + str(paths[0]) + "'" in message and "'" + str(paths[1]) + "'" in message
    assert "2021-01-12..2021-01-12 (1 steps) with different values" in message
    assert "\n" not in message


def test_gap_between_files_names_both_files_and_the_missing_date(build, tmp_path):
    values, times = _values(20), build.daily_times(20)
    paths = [
        build.write_netcdf(build.grid_dataset(values[:8], times=times[:8]), tmp_path / "a.nc"),
        build.write_netcdf(build.grid_dataset(values[10:], times=times[10:]), tmp_path / "b.nc"),
    ]
    with pytest.raises(TimeAxisError, match=r"leave a gap: the first ends 2021-01-08 and the "
                       r"second starts 2021-01-11, expected 2021-01-09"):  # fmt: skip
        _open(paths)


def test_files_stamped_at_another_time_of_day_are_aligned_by_calendar_date(build, tmp_path):
    # One year's file stamped at 00:00, the next one's at 12:00 (a provider changing its
    # convention between releases): the days follow one another, so the series joins, with
    # the first file's stamps and a warning, and equals the single file value for value.
    values = _values(9)
    one = _open(
        build.write_netcdf(
            build.grid_dataset(values, times=build.daily_times(9)), tmp_path / "o.nc"
        )
    )
    morning = build.daily_times(3, hour=0)
    noon = build.daily_times(3, start="2021-01-04", hour=12)
    evening = build.daily_times(3, start="2021-01-07", hour=0)
    paths = [
        build.write_netcdf(build.grid_dataset(values[:3], times=morning), tmp_path / "a.nc"),
        build.write_netcdf(build.grid_dataset(values[3:6], times=noon), tmp_path / "b.nc"),
        build.write_netcdf(build.grid_dataset(values[6:], times=evening), tmp_path / "c.nc"),
    ]
    with pytest.warns(TimeAlignedWarning) as caught:
        joined = _open(paths[::-1])
    message = str(caught[0].message)
    assert message.startswith("daily steps aligned by calendar date")
    assert f"'{paths[1]}' stamped 2021-01-04 12:00" in message
    assert f"'{paths[0]}' stamped 2021-01-01 00:00" in message
    assert joined.time_axis.starts == one.time_axis.starts
    assert [t.hour for t in joined.times] == [0] * 9
    assert np.array_equal(joined.data.values, one.data.values)


def test_a_missing_day_between_stamps_at_other_times_of_day_is_a_gap(build, tmp_path):
    values = _values(6)
    morning = build.daily_times(3, hour=0)
    noon = build.daily_times(3, start="2021-01-05", hour=12)  # 2021-01-04 is missing
    paths = [
        build.write_netcdf(build.grid_dataset(values[:3], times=morning), tmp_path / "a.nc"),
        build.write_netcdf(build.grid_dataset(values[3:], times=noon), tmp_path / "b.nc"),
    ]
    with pytest.raises(TimeAxisError, match=r"starts 2021-01-05 12:00, expected 2021-01-04"):
        _open(paths)


def test_a_day_held_at_two_times_of_day_with_other_values_is_an_overlap(build, tmp_path):
    values = _values(6)
    morning = build.daily_times(3, hour=0)
    noon = build.daily_times(3, start="2021-01-03", hour=12)  # 2021-01-03 in both files
    paths = [
        build.write_netcdf(build.grid_dataset(values[:3], times=morning), tmp_path / "a.nc"),
        build.write_netcdf(build.grid_dataset(values[3:], times=noon), tmp_path / "b.nc"),
    ]
    with pytest.raises(TimeAxisError, match=r"overlap: both hold 2021-01-03 12:00\.\.2021-01-03"):
        _open(paths)


def test_monthly_files_stamped_on_other_days_are_aligned_by_calendar_month(build, tmp_path):
    # The first file stamps the 1st of each month, the second mid-month: consecutive months.
    values = _values(4)
    firsts = cftime.num2date([0, 31], "days since 2021-01-01", calendar="standard")
    middles = cftime.num2date([14, 45], "days since 2021-03-01", calendar="standard")
    paths = [
        build.write_netcdf(build.grid_dataset(values[:2], times=firsts), tmp_path / "a.nc"),
        build.write_netcdf(build.grid_dataset(values[2:], times=middles), tmp_path / "b.nc"),
    ]
    joined = _open(paths)
    assert joined.time_axis.step == "month"
    assert joined.time_axis.starts == ("2021-01-01", "2021-02-01", "2021-03-01", "2021-04-01")
    gap = cftime.num2date([14, 45], "days since 2021-04-01", calendar="standard")  # no March
    paths[1] = build.write_netcdf(build.grid_dataset(values[2:], times=gap), tmp_path / "c.nc")
    with pytest.raises(TimeAxisError, match=r"leave a gap.*expected 2021-03 \(monthly steps\)"):
        _open(paths)


def test_files_on_different_grids_are_refused(build, tmp_path):
    values, times = _values(10), build.daily_times(10)
    finer = build.grid_dataset(values[5:], times=times[5:], x=np.linspace(145.0, 145.5, 4))
    paths = [
        build.write_netcdf(build.grid_dataset(values[:5], times=times[:5]), tmp_path / "a.nc"),
        build.write_netcdf(finer, tmp_path / "b.nc"),
    ]
    with pytest.raises(GridError, match=r"'.*a\.nc' and '.*b\.nc' are on different grids \(x"):
        _open(paths)


def test_mixed_calendars_are_refused(build, tmp_path):
    values = _values(10)
    paths = [
        build.write_netcdf(
            build.grid_dataset(values[:5], times=build.daily_times(5, "noleap")),
            tmp_path / "a.nc",
            calendar="noleap",
        ),
        build.write_netcdf(
            build.grid_dataset(values[5:], times=build.daily_times(5, start="2021-01-06")),
            tmp_path / "b.nc",
        ),
    ]
    with pytest.raises(TimeAxisError, match=r"use different calendars \(noleap and standard\)"):
        _open(paths)


def test_different_units_are_refused_but_spellings_of_one_unit_are_not(build, tmp_path):
    values, times = _values(10), build.daily_times(10)
    kelvin = build.grid_dataset(values[:5], times=times[:5], units="K")
    celsius = build.grid_dataset(values[5:] - 273.15, times=times[5:], units="degC")
    spelled = build.grid_dataset(values[5:], times=times[5:], units="kelvin")
    a = build.write_netcdf(kelvin, tmp_path / "a.nc")
    b = build.write_netcdf(celsius, tmp_path / "b.nc")
    c = build.write_netcdf(spelled, tmp_path / "c.nc")
    with pytest.raises(UnitsError, match=r"declare different units \('K' and 'degC'\)"):
        _open([a, b])
    np.testing.assert_allclose(_open([a, c]).data.values[:, 0, 0], values[:, 0, 0] - 273.15)


def test_a_file_without_the_variable_is_named(build, tmp_path):
    values, times = _values(10), build.daily_times(10)
    other = build.grid_dataset(values[5:], times=times[5:], variable="t2m")
    paths = [
        build.write_netcdf(build.grid_dataset(values[:5], times=times[:5]), tmp_path / "a.nc"),
        build.write_netcdf(other, tmp_path / "b.nc"),
    ]
    with pytest.raises(ConfigError, match=r"variable 'tas' is not in '.*b\.nc'"):
        _open(paths)


def test_a_glob_that_matches_nothing_is_refused(tmp_path):
    with pytest.raises(InputDataError, match=r"pattern '.*tas_\*\.nc' matches no file"):
        _open(str(tmp_path / "tas_*.nc"))


def test_a_glob_of_one_file_is_that_file(build, tmp_path):
    values, times = _values(5), build.daily_times(5)
    path = build.write_netcdf(build.grid_dataset(values, times=times), tmp_path / "tas_0.nc")
    field = _open(str(tmp_path / "tas_*.nc"))
    assert field.source_path == str(path)


def test_assumed_crs_warnings_of_many_files_become_one(build, tmp_path):
    values, times = _values(30), build.daily_times(30)
    parts = _write_split(build, tmp_path, values, times, [10, 20])
    with warnings.catch_warnings(record=True) as seen:
        warnings.simplefilter("always")
        climate.open_netcdf(parts, "tas", TEMPERATURE)
    messages = [str(w.message) for w in seen]
    assert len(messages) == 1
    assert "assumed EPSG:4326 (and alike for 2 more files)" in messages[0]


# --------------------------------------------------------------------------- GeoTIFF series


def _daily_tiffs(build, folder, values, names):
    folder.mkdir(parents=True, exist_ok=True)
    return [
        build.write_geotiff(folder / name, values[k : k + 1], tags={"units": "K"})
        for k, name in enumerate(names)
    ]


def test_daily_geotiffs_named_by_date_equal_one_stack(build, tmp_path):
    values = _values(20)
    stack = build.write_geotiff(tmp_path / "stack.tif", values, tags={"units": "K"})
    names = [f"tas_202101{d:02d}.tif" for d in range(1, 21)]
    _daily_tiffs(build, tmp_path / "days", values, names)
    one = climate.open_geotiff_stack(
        stack, TEMPERATURE, start="2021-01-01", step="day", units=None, chunk_steps=8
    )
    series = climate.open_geotiff_stack(
        str(tmp_path / "days" / "*.tif"), TEMPERATURE, start=None, step=None, units=None,
        chunk_steps=8, date_pattern="%Y%m%d",
    )  # fmt: skip
    assert np.array_equal(series.data.values, one.data.values)
    assert list(series.times) == list(one.times)
    assert series.data.chunks[0] == one.data.chunks[0]
    assert series.transform == one.transform
    assert series.variable == "tas"
    shuffled = climate.open_geotiff_stack(
        sorted((tmp_path / "days").glob("*.tif"), key=lambda p: p.name[-6:-4] in "13579"),
        TEMPERATURE, start=None, step=None, units=None, chunk_steps=8, date_pattern="%Y%m%d",
    )  # fmt: skip
    assert np.array_equal(shuffled.data.values, one.data.values)


def test_year_folders_and_day_of_year_names(build, tmp_path):
    values = _values(4)
    for k, (year, doy) in enumerate([(2020, 365), (2020, 366), (2021, 1), (2021, 2)]):
        _daily_tiffs(build, tmp_path / str(year), values[k : k + 1], [f"r{doy:03d}.tif"])
    series = climate.open_geotiff_stack(
        str(tmp_path / "*" / "*.tif"), TEMPERATURE, start=None, step=None, units=None,
        date_pattern="%Y/r%j",
    )  # fmt: skip
    assert series.time_axis.starts == ("2020-12-30", "2020-12-31", "2021-01-01", "2021-01-02")
    assert series.variable == "r"
    np.testing.assert_allclose(series.data.values, values - 273.15, atol=1e-4)


def test_yearly_stacks_named_by_year_with_a_regex(build, tmp_path):
    values = _values(730)
    for year, lo in ((2030, 0), (2031, 365)):
        build.write_geotiff(
            tmp_path / f"tas.y{year}.tif", values[lo : lo + 365], tags={"units": "K"}
        )
    series = climate.open_geotiff_stack(
        [tmp_path / "tas.y2031.tif", tmp_path / "tas.y2030.tif"], TEMPERATURE, start=None,
        step="day", units=None, date_pattern=r"\.y(?P<year>\d{4})\.",
    )  # fmt: skip
    assert series.time_axis.starts[0] == "2030-01-01"
    assert series.time_axis.starts[-1] == "2031-12-31"
    assert series.variable == "tas.y"
    np.testing.assert_allclose(series.data.values, values - 273.15, atol=1e-4)


def test_a_name_without_the_date_pattern_is_named(build, tmp_path):
    values = _values(3)
    _daily_tiffs(build, tmp_path, values, ["tas_20210101.tif", "tas_20210102.tif", "tas_x.tif"])
    with pytest.raises(TimeAxisError, match=r"'.*tas_x\.tif': its name does not match"):
        climate.open_geotiff_stack(
            str(tmp_path / "*.tif"), TEMPERATURE, start=None, step=None, units=None,
            date_pattern="%Y%m%d",
        )  # fmt: skip


def test_a_missing_day_names_the_files_on_either_side(build, tmp_path):
    values = _values(3)
    names = ["tas_20210101.tif", "tas_20210102.tif", "tas_20210104.tif"]
    _daily_tiffs(build, tmp_path, values, names)
    with pytest.raises(TimeAxisError, match=r"tas_20210102\.tif' and '.*tas_20210104\.tif' leave "
                       r"a gap.*expected 2021-01-03"):  # fmt: skip
        climate.open_geotiff_stack(
            str(tmp_path / "*.tif"), TEMPERATURE, start=None, step=None, units=None,
            date_pattern="%Y%m%d",
        )  # fmt: skip


def test_a_missing_first_day_is_a_gap_of_daily_steps(build, tmp_path):
    # Two single-band files two days apart: daily steps with a day missing, not months.
    values = _values(3)
    _daily_tiffs(build, tmp_path, values, ["t_20210101.tif", "t_20210103.tif", "t_20210104.tif"])
    with pytest.raises(TimeAxisError, match=r"expected 2021-01-02 \(daily steps\)"):
        climate.open_geotiff_stack(
            str(tmp_path / "*.tif"), TEMPERATURE, start=None, step=None, units=None,
            date_pattern="%Y%m%d",
        )  # fmt: skip


def test_monthly_files_named_by_month(build, tmp_path):
    values = _values(3)
    _daily_tiffs(build, tmp_path, values, ["t_2031-01.tif", "t_2031-02.tif", "t_2031-04.tif"])
    with pytest.raises(TimeAxisError, match=r"starts 2031-04-01, expected 2031-03 \(monthly"):
        climate.open_geotiff_stack(
            str(tmp_path / "*.tif"), TEMPERATURE, start=None, step=None, units=None,
            date_pattern="%Y-%m",
        )  # fmt: skip
    (tmp_path / "t_2031-04.tif").rename(tmp_path / "t_2031-03.tif")
    series = climate.open_geotiff_stack(
        str(tmp_path / "*.tif"), TEMPERATURE, start=None, step="month", units=None,
        date_pattern="%Y-%m",
    )  # fmt: skip
    assert series.time_axis.step == "month"
    assert list(series.time_axis.days) == [31, 28, 31]


def test_two_files_of_one_date_with_other_values_are_refused(build, tmp_path):
    values = _values(3)
    _daily_tiffs(build, tmp_path / "a", values[:2], ["tas_20210101.tif", "tas_20210102.tif"])
    _daily_tiffs(build, tmp_path / "b", values[2:], ["tas_20210102_v2.tif"])
    with pytest.raises(TimeAxisError, match=r"both hold 2021-01-02\.\.2021-01-02"):
        climate.open_geotiff_stack(
            [str(tmp_path / "a" / "*.tif"), str(tmp_path / "b" / "*.tif")], TEMPERATURE,
            start=None, step=None, units=None, date_pattern="%Y%m%d",
        )  # fmt: skip


def test_geotiffs_on_different_grids_or_crs_are_refused(build, tmp_path):
    values = _values(2)
    a = build.write_geotiff(tmp_path / "t_20210101.tif", values[:1], tags={"units": "K"})
    b = build.write_geotiff(tmp_path / "t_20210102.tif", values[1:, :2], tags={"units": "K"})
    with pytest.raises(GridError, match=r"are on different grids \(4 x 3 cells"):
        climate.open_geotiff_stack(
            [a, b], TEMPERATURE, start=None, step=None, units=None, date_pattern="%Y%m%d"
        )
    b = build.write_geotiff(
        tmp_path / "t_20210102.tif", values[1:], crs="EPSG:32756", tags={"units": "K"}
    )
    with pytest.raises(CRSError, match=r"have different CRSs \('EPSG:32755' vs 'EPSG:32756'\)"):
        climate.open_geotiff_stack(
            [a, b], TEMPERATURE, start=None, step=None, units=None, date_pattern="%Y%m%d"
        )


def test_several_geotiffs_without_date_pattern_are_refused(build, tmp_path):
    _daily_tiffs(build, tmp_path, _values(2), ["a.tif", "b.tif"])
    with pytest.raises(ConfigError, match=r"names several GeoTIFFs but no date_pattern"):
        climate.open_geotiff_stack(
            str(tmp_path / "*.tif"), TEMPERATURE, start="2021-01-01", step="day", units=None
        )


# --------------------------------------------------------------------------- pieces


def test_aligned_chunks_break_at_multiples_of_the_chunk_length():
    assert multifile.aligned_chunks(0, 40, 16) == (16, 16, 8)
    assert multifile.aligned_chunks(15, 18, 16) == (1, 16, 1)
    assert multifile.aligned_chunks(32, 3, 16) == (3,)


def test_an_existing_file_with_glob_characters_is_a_file(tmp_path):
    odd = tmp_path / "tas[1].nc"
    odd.write_bytes(b"")
    assert not multifile.several(str(odd))
    assert multifile.several(str(tmp_path / "tas[12].nc"))
    assert multifile.expand([odd, str(odd)]) == [odd]


def _open_files() -> set[str]:
    names = set()
    for fd in os.listdir("/proc/self/fd"):
        with contextlib.suppress(OSError):
            names.add(os.readlink(f"/proc/self/fd/{fd}"))
    return names


def test_files_are_closed_once_read_and_reopened_when_read_again(build, tmp_path):
    # Each open NetCDF file holds a chunk cache (up to 64 MiB a variable): a 20-year series
    # read in time order must not keep every year open.
    values, times = _values(40), build.daily_times(40)
    parts = {str(p) for p in _write_split(build, tmp_path, values, times, [15, 33])}
    joined = _open(sorted(parts))
    assert parts <= _open_files()  # kept open from the checks for the first read
    whole = joined.data.values  # every chunk once, in any order (threads)
    assert not parts & _open_files()
    first = joined.data.isel(time=slice(0, 16)).values  # the pipeline's blocks, in order
    assert _open_files() & parts == {str(tmp_path / "tas_1.nc")}  # 1 of its 18 steps read
    rest = joined.data.isel(time=slice(16, 40)).values
    assert not parts & _open_files()
    assert np.array_equal(np.concatenate([first, rest]), whole)
    assert np.array_equal(whole, values - 273.15)
