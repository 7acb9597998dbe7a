"""Time axes: step inference, calendars, month lengths, joins by calendar date or month, and
reporting periods."""

from __future__ import annotations

import cftime
import numpy as np
import pytest

from lakeloss import timeaxis
from lakeloss.errors import ConfigError, TimeAxisError


def _daily(count, calendar="standard", start="2021-01-01", hour=0.0):
    return cftime.num2date(np.arange(count) + hour / 24.0, f"days since {start}", calendar=calendar)


def _monthly(year, months, calendar="standard", day=15, hour=0):
    return [
        cftime.datetime(year + (m - 1) // 12, (m - 1) % 12 + 1, day, hour, calendar=calendar)
        for m in months
    ]


@pytest.mark.parametrize(
    ("calendar", "days"), [("standard", 365), ("noleap", 365), ("360_day", 360), ("all_leap", 366)]
)
def test_daily_axis_over_a_year(calendar, days):
    axis = timeaxis.from_times(_daily(days, calendar, hour=12.0), calendar)
    assert axis.step == "day" and len(axis) == days
    assert axis.starts[0] == "2021-01-01"
    assert axis.day_of_year[-1] == days
    np.testing.assert_array_equal(axis.days, 1.0)
    assert axis.hour == 12.0
    last = {"360_day": "2021-12-30"}.get(calendar, "2021-12-31")
    assert axis.describe() == f"2021-01-01..{last}, daily, calendar {calendar}, stamps at 12:00"


def test_360_day_calendar_has_february_30():
    axis = timeaxis.from_times(_daily(60, "360_day"), "360_day")
    assert "2021-02-30" in axis.starts and axis.starts[-1] == "2021-02-30"


@pytest.mark.parametrize(
    ("calendar", "year", "february"),
    [
        ("standard", 2020, 29.0),
        ("standard", 2021, 28.0),
        ("noleap", 2020, 28.0),
        ("all_leap", 2021, 29.0),
        ("360_day", 2021, 30.0),
        ("proleptic_gregorian", 2000, 29.0),
        ("standard", 1900, 28.0),
    ],
)
def test_monthly_days_follow_the_calendar(calendar, year, february):
    axis = timeaxis.from_times(_monthly(year, range(1, 13), calendar), calendar)
    assert axis.step == "month"
    assert axis.days[1] == february
    expected_year = 360.0 if calendar == "360_day" else 337.0 + february
    assert axis.days.sum() == expected_year
    assert axis.starts[:2] == (f"{year:04d}-01-01", f"{year:04d}-02-01")
    assert axis.ends[1] == f"{year:04d}-02-{int(february):02d}"


def test_monthly_stamps_on_any_day_and_mid_month_day_of_year():
    # Month-centre stamps as CF files write them: 16th of long months, 15th of short ones.
    stamps = [
        cftime.DatetimeNoLeap(2021, 1, 16, 12),
        cftime.DatetimeNoLeap(2021, 2, 15),
        cftime.DatetimeNoLeap(2021, 3, 16, 12),
    ]
    axis = timeaxis.from_times(stamps, "365_day")
    assert axis.calendar == "noleap" and axis.step == "month"
    # Mid-month: first day of month + floor(days/2); FAO-56 writes int(30.4 M - 15), which
    # gives 15, 45, 76 (docs/methods.md#monthly-inputs): within 1 day of these.
    np.testing.assert_array_equal(axis.day_of_year, [16, 46, 75])
    assert np.all(np.abs(axis.day_of_year - (30.4 * np.arange(1, 4) - 15).astype(int)) <= 1)


def test_monthly_across_a_year_boundary():
    axis = timeaxis.from_times(_monthly(2020, [11, 12, 13, 14]), "standard")
    assert axis.starts == ("2020-11-01", "2020-12-01", "2021-01-01", "2021-02-01")


def test_numpy_datetimes_are_accepted():
    axis = timeaxis.from_times(
        np.array(["2021-03-01", "2021-03-02"], dtype="datetime64[ns]"), "standard"
    )
    assert axis.starts == ("2021-03-01", "2021-03-02")
    assert isinstance(axis.times[0], cftime.datetime)


@pytest.mark.parametrize(
    ("stamps", "words"),
    [
        (
            [(2021, 1, 1), (2021, 1, 2), (2021, 1, 4)],
            "step 2: 2021-01-02 00:00:00 -> 2021-01-04 00:00:00 is 2 days",
        ),
        ([(2021, 1, 1), (2021, 1, 2), (2021, 1, 2)], "step 2"),
        ([(2021, 1, 15), (2021, 2, 15), (2021, 4, 15)], "step 2"),
        ([(2021, 1, 1), (2021, 1, 8), (2021, 1, 15)], "step 1"),  # weekly
    ],
)
def test_irregular_axes_name_the_first_gap(stamps, words):
    times = [cftime.DatetimeGregorian(*s) for s in stamps]
    with pytest.raises(TimeAxisError, match=words.replace("(", r"\(")):
        timeaxis.from_times(times, "standard")


def test_unknown_calendar_and_empty_axis():
    with pytest.raises(TimeAxisError, match="not a CF calendar"):
        timeaxis.from_times(_daily(2), "lunar")
    with pytest.raises(TimeAxisError, match="no time steps"):
        timeaxis.from_times(np.array([], dtype=object), "standard")


def test_from_start_daily_and_monthly():
    daily = timeaxis.from_start("2020-02-27", "day", 4, "noleap")
    assert daily.starts == ("2020-02-27", "2020-02-28", "2020-03-01", "2020-03-02")
    monthly = timeaxis.from_start("2020-11-01", "month", 4)
    assert monthly.starts == ("2020-11-01", "2020-12-01", "2021-01-01", "2021-02-01")
    np.testing.assert_array_equal(monthly.days, [30, 31, 31, 28])
    # an axis built from a start equals one decoded from equivalent stamps
    decoded = timeaxis.from_times(_monthly(2020, [11, 12, 13, 14], day=1), "standard")
    assert timeaxis.require_identical({"a": monthly, "b": decoded}) is monthly


def test_from_start_refusals():
    with pytest.raises(TimeAxisError, match="day 1..28"):
        timeaxis.from_start("2021-01-31", "month", 3)
    with pytest.raises(TimeAxisError, match="not an ISO date"):
        timeaxis.from_start("1/2/2021", "day", 3)
    with pytest.raises(TimeAxisError, match="does not exist in calendar"):
        timeaxis.from_start("2021-02-29", "day", 3, "noleap")
    assert timeaxis.from_start("2021-02-30", "day", 2, "360_day").starts[1] == "2021-03-01"
    with pytest.raises(ConfigError, match="'week'"):
        timeaxis.from_start("2021-01-01", "week", 3)
    with pytest.raises(ConfigError, match="at least 1"):
        timeaxis.from_start("2021-01-01", "day", 0)


def test_count_steps():
    assert timeaxis.count_steps("2021-01-01", "2021-12-31", "day") == 365
    assert timeaxis.count_steps("2021-01-01", "2021-12-30", "day", "360_day") == 360
    assert timeaxis.count_steps("2021-01-01", "2021-12-01", "month") == 12


def test_daily_midnight_and_noon_stamps_align_by_calendar_date():
    # A daily mean stamped at 00:00 and one stamped at 12:00 describe the same day.
    midnight = timeaxis.from_times(_daily(3, hour=0.0), "standard")
    noon = timeaxis.from_times(_daily(3, hour=12.0), "standard")
    axes = {"air_temperature": midnight, "wind_speed": noon, "relative_humidity": midnight}
    assert timeaxis.require_identical(axes) is midnight
    note = timeaxis.alignment_note(axes)
    assert note == (
        "daily steps aligned by calendar date (a value belongs to the day of its stamp): "
        "air_temperature, relative_humidity stamped 2021-01-01 00:00, 2021-01-02 00:00, ...; "
        "wind_speed stamped 2021-01-01 12:00, 2021-01-02 12:00, ..."
    )
    assert timeaxis.alignment_note({"a": noon, "b": noon}) is None


def test_geotiff_start_date_only_aligns_with_noon_stamps():
    # The README's GeoTIFF example (start = "2031-01-01") beside a file stamped at noon.
    stack = timeaxis.from_start("2031-01-01", "day", 4)
    netcdf = timeaxis.from_times(_daily(4, start="2031-01-01", hour=12.0), "standard")
    assert timeaxis.require_identical({"tas": netcdf, "rsds": stack}).starts[0] == "2031-01-01"
    assert "aligned by calendar date" in timeaxis.alignment_note({"tas": netcdf, "rsds": stack})


@pytest.mark.parametrize("hours_later", [12.0, 14.0, 20.0])
def test_stamps_that_fall_on_the_next_day_are_refused_with_the_fix(hours_later):
    # One producer stamps a day at noon, another at the end of the day (00:00 of the next).
    noon = timeaxis.from_times(_daily(3, hour=12.0), "standard")
    later = timeaxis.from_times(_daily(3, hour=12.0 + hours_later), "standard")
    with pytest.raises(TimeAxisError) as info:
        timeaxis.require_identical({"air_temperature": noon, "precipitation": later})
    message = str(info.value)
    assert f"precipitation is stamped {hours_later:g} h after air_temperature" in message
    assert "another calendar day" in message and "move them back by one day" in message
    assert "\n" not in message


@pytest.mark.parametrize("day", [1, 15, 28])
@pytest.mark.parametrize("hour", [0, 12])
def test_monthly_stamps_on_any_day_align_by_calendar_month(day, hour):
    first = timeaxis.from_times(_monthly(2031, range(1, 13), day=1), "standard")
    ends = [
        cftime.datetime(2031, m, timeaxis.month_length(2031, m, "standard"), calendar="standard")
        for m in range(1, 13)
    ]
    month_end = timeaxis.from_times(ends, "standard")
    other = timeaxis.from_times(_monthly(2031, range(1, 13), day=day, hour=hour), "standard")
    axes = {"a": first, "b": other, "c": month_end}
    assert timeaxis.require_identical(axes) is first
    note = timeaxis.alignment_note(axes)
    assert note.startswith("monthly steps aligned by calendar month")
    assert "c stamped 2031-01-31 00:00, 2031-02-28 00:00, ..." in note


def test_month_end_stamps_against_first_of_next_month_are_refused_with_the_fix():
    ends = [
        cftime.datetime(2031, m, timeaxis.month_length(2031, m, "standard"), calendar="standard")
        for m in range(1, 4)
    ]
    next_first = timeaxis.from_times(_monthly(2031, range(2, 5), day=1), "standard")
    with pytest.raises(TimeAxisError, match="24 h after.*another calendar month.*back by one"):
        timeaxis.require_identical({"a": timeaxis.from_times(ends, "standard"), "b": next_first})


def test_sub_daily_steps_are_refused_with_the_fix():
    hourly = cftime.num2date(np.arange(48) / 24.0, "days since 2021-01-01", calendar="standard")
    with pytest.raises(TimeAxisError, match=r"1 h apart \(sub-daily.*aggregate the file to daily"):
        timeaxis.from_times(hourly, "standard")


@pytest.mark.parametrize(
    "other",
    [
        timeaxis.from_start("2021-01-01", "day", 3, "noleap"),  # calendar
        timeaxis.from_start("2021-01-02", "day", 3),  # dates
        timeaxis.from_start("2021-01-01", "day", 4),  # length
        timeaxis.from_start("2021-01-01", "month", 3),  # step
    ],
)
def test_require_identical_refuses_any_other_difference(other):
    reference = timeaxis.from_start("2021-01-01", "day", 3)
    with pytest.raises(TimeAxisError, match="different time axes"):
        timeaxis.require_identical({"a": reference, "b": other})


def test_gregorian_aliases_join():
    standard = timeaxis.from_times(_daily(3, "standard"), "gregorian")
    proleptic = timeaxis.from_times(_daily(3, "proleptic_gregorian"), "proleptic_gregorian")
    assert timeaxis.require_identical({"a": standard, "b": proleptic}).calendar == "standard"


def test_require_identical_needs_an_axis():
    with pytest.raises(ConfigError):
        timeaxis.require_identical({})


def test_monthly_periods_of_a_partial_daily_year():
    axis = timeaxis.from_start("2021-01-30", "day", 33)  # Jan 30 .. Mar 3
    result = timeaxis.periods(axis, "month")
    assert result.starts == ("2021-01-30", "2021-02-01", "2021-03-01")
    assert result.ends == ("2021-01-31", "2021-02-28", "2021-03-03")
    np.testing.assert_array_equal(result.days, [2, 28, 3])
    np.testing.assert_array_equal(np.bincount(result.index), [2, 28, 3])


def test_yearly_periods_of_monthly_steps():
    axis = timeaxis.from_start("2020-07-01", "month", 12)
    result = timeaxis.periods(axis, "year")
    assert result.starts == ("2020-07-01", "2021-01-01")
    assert result.ends == ("2020-12-31", "2021-06-30")
    np.testing.assert_array_equal(result.days, [184, 181])
    np.testing.assert_array_equal(result.index, [0] * 6 + [1] * 6)


def test_daily_periods():
    axis = timeaxis.from_start("2021-01-01", "day", 3, "360_day")
    result = timeaxis.periods(axis, "day")
    np.testing.assert_array_equal(result.index, [0, 1, 2])
    assert result.starts == result.ends == axis.starts


def test_daily_periods_of_monthly_steps_are_refused():
    with pytest.raises(ConfigError, match='"month" or "year"'):
        timeaxis.periods(timeaxis.from_start("2021-01-01", "month", 2), "day")
    with pytest.raises(ConfigError, match="'decade'"):
        timeaxis.periods(timeaxis.from_start("2021-01-01", "month", 2), "decade")


# ----------------------------------------------------------------------------- period labels


def test_water_year_labels_across_a_century_and_from_january():
    axis = timeaxis.from_start("2099-05-01", "month", 4)  # May-August 2099
    july = timeaxis.periods(axis, "water_year")
    assert july.labels == ("2098-99", "2099-00")
    assert july.days.tolist() == [61.0, 62.0] and july.days_in_period.tolist() == [
        365.0,
        365.0,
    ]  # 2100: no leap day
    january = timeaxis.periods(axis, "water_year", year_start_month=1)
    assert january.labels == ("2099",) and january.days_in_period.tolist() == [365.0]


@pytest.mark.parametrize(
    ("calendar", "winter"), [("standard", 91), ("noleap", 90), ("360_day", 90)]
)
def test_season_of_december_is_the_next_years_djf(calendar, winter):
    # December 2031 to February 2032: 2032 is a leap year in the standard calendar only.
    axis = timeaxis.from_times(_daily(100, calendar, start="2031-11-25"), calendar)
    seasons = timeaxis.periods(axis, "season")
    assert seasons.labels[:2] == ("2031-SON", "2032-DJF")
    assert seasons.starts[1] == "2031-12-01"
    assert seasons.days_in_period[1] == winter
    assert seasons.complete.tolist()[:2] == [False, True]


def test_window_selects_inclusive_days():
    axis = timeaxis.from_start("2031-01-01", "day", 10)
    steps = timeaxis.window(axis, "2031-01-03", "2031-01-05")
    assert axis.take(steps).starts == ("2031-01-03", "2031-01-04", "2031-01-05")
    assert timeaxis.window(axis, None, None) == slice(0, 10)


def test_custom_table_periods_leave_the_days_between_them_unreported():
    axis = timeaxis.from_start("2031-01-01", "day", 10)
    rows = [
        timeaxis.PeriodRow("late", "2031-01-07", "2031-01-20", 3),
        timeaxis.PeriodRow("early", "2030-12-30", "2031-01-03", 2),
    ]
    table = timeaxis.periods(axis, "table", table=rows)
    assert table.labels == ("early", "", "late")
    assert table.reported.tolist() == [True, False, True]
    assert table.index.tolist() == [0, 0, 0, 1, 1, 1, 2, 2, 2, 2]
    assert table.days.tolist() == [3.0, 3.0, 4.0]
    assert table.days_in_period[table.rows].tolist() == [5.0, 14.0]
    assert table.complete[table.rows].tolist() == [False, False]
