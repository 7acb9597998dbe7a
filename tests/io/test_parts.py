"""Part files: a partition's tables written and read back as equal frames.

Fixtures are real small runs (``builders.small_runs``: a monthly standard-calendar run with a
compared method, group_by, extra volume units and a layer with dates, times, nullable
counts and awkward text; a daily 360-day-calendar run, whose period dates are cftime dates
with 2031-02-30), cut into partitions at arbitrary rows.
"""

from __future__ import annotations

import cftime
import numpy as np
import pandas as pd
import pytest
from builders import small_runs, split_tables

from lakeloss.io.parts import part_directory, read_part, write_part


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    return small_runs(tmp_path_factory.mktemp("runs"))


def _assert_same(back: pd.DataFrame, original: pd.DataFrame) -> None:
    pd.testing.assert_frame_equal(back, original, check_exact=True)
    # assert_frame_equal treats string storages alike; the part files must not.
    assert [repr(d) for d in back.dtypes] == [repr(d) for d in original.dtypes]
    assert repr(back.index.dtype) == repr(original.index.dtype)
    assert back.index.names == original.index.names
    assert back.attrs == original.attrs


@pytest.mark.parametrize("name", ["monthly", "daily_360"])
@pytest.mark.parametrize("cuts", [[], [1], [5, 6, 13]])
def test_parts_of_real_runs_read_back_equal(runs, tmp_path, name, cuts):
    result = runs[name]
    for k, (bodies, periods) in enumerate(split_tables(result.waterbodies, result.by_period, cuts)):
        directory = part_directory(tmp_path, k)
        write_part(directory, bodies, periods)
        back_bodies, back_periods = read_part(directory)
        _assert_same(back_bodies, bodies)
        _assert_same(back_periods, periods)
        assert back_bodies.crs == bodies.crs and back_bodies.geometry.name == "geometry"
        assert back_bodies.geometry.geom_equals_exact(bodies.geometry, 0.0).all()
    assert sorted(p.name for p in (tmp_path / "_parts").iterdir()) == [
        f"{k:06d}" for k in range(len(cuts) + 1)
    ]


def test_360_day_dates_come_back_as_cftime_dates_of_the_calendar(runs, tmp_path):
    periods = runs["daily_360"].by_period
    assert cftime.datetime(2031, 2, 30, calendar="360_day") in set(periods["period_end"])
    write_part(tmp_path, runs["daily_360"].waterbodies, periods)
    _, back = read_part(tmp_path)
    ends = back["period_end"].tolist()
    assert ends == periods["period_end"].tolist()
    assert {(d.calendar, d.has_year_zero) for d in ends} == {("360_day", True)}


def test_every_kind_of_column_reads_back_equal(runs, tmp_path):
    # Columns a layer or a later result may carry beyond those of the runs: strings held as
    # Python objects or in object columns, nullable integers and booleans with gaps, times
    # with a zone, float32, and cftime dates (all-leap calendar, microseconds, a gap).
    bodies = runs["monthly"].waterbodies.iloc[3:9].copy()
    n = len(bodies)
    bodies["code_py"] = pd.array(["a", None, "c,d", "e", "f", "g"], dtype="string[python]")
    bodies["code_obj"] = np.array(["x", "y", "z", "w", "v", "u"], dtype=object)
    bodies["count"] = pd.array([1, None, 3, 4, None, 6], dtype="Int64")
    bodies["checked"] = pd.array([True, None, False, True, True, False], dtype="boolean")
    bodies["seen_at"] = pd.date_range(
        "2031-01-01 06:00", periods=n, freq="D", tz="Australia/Hobart"
    )
    bodies["depth_f32"] = np.linspace(0.5, 3.0, n, dtype=np.float32)
    leap = [cftime.datetime(2031, 2, 29, 0, 0, 0, 250, calendar="all_leap")] * n
    leap[2] = None
    bodies["filled_on"] = pd.Series(leap, index=bodies.index, dtype=object)
    bodies = bodies.set_index(pd.RangeIndex(3, 9, name="row"))
    periods = runs["monthly"].by_period.iloc[6:18].copy()
    periods["note"] = pd.array(["p"] * 11 + [None], dtype="string[python]")
    write_part(tmp_path, bodies, periods)
    back_bodies, back_periods = read_part(tmp_path)
    _assert_same(back_bodies, bodies)
    _assert_same(back_periods, periods)
    assert back_bodies["filled_on"].iloc[0].microsecond == 250
    assert back_bodies["filled_on"].iloc[0].calendar == "all_leap"


def test_dates_of_two_calendars_in_one_column_are_refused(runs, tmp_path):
    bodies = runs["monthly"].waterbodies.iloc[:2].copy()
    bodies["filled_on"] = pd.Series(
        [
            cftime.datetime(2031, 2, 30, calendar="360_day"),
            cftime.datetime(2031, 2, 28, calendar="noleap"),
        ],
        index=bodies.index,
        dtype=object,
    )
    with pytest.raises(ValueError, match="different calendars"):
        write_part(tmp_path, bodies, runs["monthly"].by_period.iloc[:4])
