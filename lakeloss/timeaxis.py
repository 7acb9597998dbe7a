"""The time axis of a run: steps, their lengths per calendar, and reporting periods.

Pure: takes decoded time stamps (cftime datetimes, so ``noleap`` and ``360_day`` work) and
returns descriptions of them. A run's variables must share one axis (:func:`require_identical`):
the same calendar, step and calendar days or months; lakeloss never interpolates or resamples
in time.

Two step kinds exist: daily (stamps one day apart, all at the same time of day) and monthly
(one stamp in each consecutive calendar month, on any day). A daily value belongs to the
calendar date of its stamp and a monthly value to the calendar month of its stamp, so
variables stamped at different times of that day (00:00 and 12:00) or on different days of
that month (the 1st, the 15th, the last) share an axis; :func:`alignment_note` says when that
happened. Monthly values are daily rates, so a month's total is the rate times that month's
calendar days (docs/methods.md#monthly-inputs).
"""

from __future__ import annotations

import datetime as _dt
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import cftime
import numpy as np

from lakeloss.errors import ConfigError, TimeAxisError

STEPS = ("day", "month")
PERIODS = ("day", "month", "year", "water_year", "season", "table")
DEFAULT_YEAR_START_MONTH = 7
"""First month of a water year when ``[output] year_start_month`` is not set (July-June)."""

# Spellings CF allows for the same calendar; the first form is the one lakeloss reports.
_CALENDAR_ALIASES = {
    "gregorian": "standard",
    "standard": "standard",
    "proleptic_gregorian": "proleptic_gregorian",
    "noleap": "noleap",
    "365_day": "noleap",
    "all_leap": "all_leap",
    "366_day": "all_leap",
    "360_day": "360_day",
    "julian": "julian",
}

# Before this date the standard (mixed) and proleptic Gregorian calendars disagree.
_GREGORIAN_REFORM = (1582, 10, 15)


@dataclass(frozen=True)
class TimeAxis:
    """A regular daily or monthly time axis.

    Attributes
    ----------
    times : numpy.ndarray
        cftime datetimes as stored in the file (object array).
    calendar : str
        CF calendar name (aliases resolved: ``gregorian`` -> ``standard``).
    step : str
        ``"day"`` or ``"month"``.
    starts : tuple of str
        ISO date ``YYYY-MM-DD`` of the first day of each step.
    days : numpy.ndarray
        Length of each step [day]: 1 for daily, 28..31 for months (30 in ``360_day``).
    day_of_year : numpy.ndarray
        Day of year in the middle of each step (int; the stamp's day for daily steps).
    hour : float
        Time of day of the stamps [h] (of the first stamp for monthly axes).
    """

    times: np.ndarray
    calendar: str
    step: str
    starts: tuple[str, ...]
    days: np.ndarray
    day_of_year: np.ndarray
    hour: float

    def __len__(self) -> int:
        return len(self.starts)

    @property
    def ends(self) -> tuple[str, ...]:
        """ISO date of the last (inclusive) day of each step."""
        if self.step == "day":
            return self.starts
        return tuple(f"{s[:8]}{int(d):02d}" for s, d in zip(self.starts, self.days, strict=True))

    def take(self, steps: slice) -> TimeAxis:
        """The axis of the steps in ``steps`` (a time window of the run)."""
        return TimeAxis(
            times=self.times[steps],
            calendar=self.calendar,
            step=self.step,
            starts=self.starts[steps],
            days=self.days[steps],
            day_of_year=self.day_of_year[steps],
            hour=self.hour,
        )

    def describe(self) -> str:
        """One line naming span, step, calendar and stamp time, for messages."""
        hours, minutes = divmod(round(self.hour * 60.0), 60)
        kind = "daily" if self.step == "day" else "monthly"
        return (
            f"{self.starts[0]}..{self.ends[-1]}, {kind}, calendar {self.calendar}, "
            f"stamps at {hours:02d}:{minutes:02d}"
        )


def _iso(stamp) -> str:
    return f"{stamp.year:04d}-{stamp.month:02d}-{stamp.day:02d}"


def _hour_of(stamp) -> float:
    return stamp.hour + stamp.minute / 60.0 + stamp.second / 3600.0


def _canonical_calendar(calendar: str, first) -> str:
    name = _CALENDAR_ALIASES.get(str(calendar).strip().lower())
    if name is None:
        known = ", ".join(sorted(_CALENDAR_ALIASES))
        raise TimeAxisError(
            f"calendar {calendar!r} is not a CF calendar; expected one of {known}; "
            "fix the time variable's calendar attribute"
        )
    # After the 1582 reform the two Gregorian variants give identical dates; treating them
    # as one lets files from different producers share an axis.
    if name == "proleptic_gregorian" and (first.year, first.month, first.day) >= _GREGORIAN_REFORM:
        return "standard"
    return name


def month_length(year: int, month: int, calendar: str) -> int:
    """Number of days in a calendar month [day] under a CF calendar."""
    first = cftime.datetime(year, month, 1, calendar=calendar)
    following = cftime.datetime(year + month // 12, month % 12 + 1, 1, calendar=calendar)
    return (following - first).days


def _as_cftime(times, calendar: str) -> np.ndarray:
    values = np.asarray(times)
    if values.dtype.kind == "M":
        # numpy datetime64 carries no calendar: it is always the proleptic Gregorian one.
        stamps = [_dt.datetime.fromisoformat(str(v)[:26]) for v in values.astype("datetime64[us]")]
        return np.array(
            [cftime.datetime(*s.timetuple()[:6], calendar=calendar) for s in stamps], dtype=object
        )
    return values.astype(object)


def from_times(times, calendar: str) -> TimeAxis:
    """Build a time axis from decoded stamps, inferring a daily or monthly step.

    Parameters
    ----------
    times : array_like
        cftime datetimes (or numpy datetime64), strictly increasing.
    calendar : str
        CF calendar of the stamps.

    Returns
    -------
    TimeAxis

    Raises
    ------
    TimeAxisError
        No stamps, unknown calendar, sub-daily steps, or spacing that is neither one day (at
        a constant time of day) nor one calendar month; the message names the first
        irregular gap.

    Notes
    -----
    A single stamp is taken as one daily step.
    """
    stamps = _as_cftime(times, calendar)
    if stamps.size == 0:
        raise TimeAxisError("time axis has no time steps; expected at least one; check the file")
    cal = _canonical_calendar(calendar, stamps[0])
    if stamps.size > 1 and 0.0 < _gap_days(stamps[0], stamps[1]) < 1.0:
        raise TimeAxisError(
            f"time steps are {_gap_days(stamps[0], stamps[1]) * 24.0:g} h apart (sub-daily, "
            f"{stamps[0]} -> {stamps[1]}); expected daily or monthly steps; aggregate the file "
            "to daily values first (daily means; daily totals for amounts)"
        )
    if stamps.size == 1 or _gap_days(stamps[0], stamps[1]) == 1.0:
        _check_daily(stamps)
        return _daily_axis(stamps, cal)
    _check_monthly(stamps)
    return _monthly_axis(stamps, cal)


def _gap_days(earlier, later) -> float:
    return (later - earlier).total_seconds() / 86400.0


def _irregular(stamps, index: int, expected: str) -> TimeAxisError:
    gap = _gap_days(stamps[index - 1], stamps[index])
    return TimeAxisError(
        f"time axis is irregular at step {index}: {stamps[index - 1]} -> {stamps[index]} is "
        f"{gap:g} days, expected {expected}; fill the gap or remove the duplicated stamps"
    )


def _check_daily(stamps: np.ndarray) -> None:
    for index in range(1, stamps.size):
        if _gap_days(stamps[index - 1], stamps[index]) != 1.0:
            raise _irregular(stamps, index, "1 day (daily) at a constant time of day")


def _check_monthly(stamps: np.ndarray) -> None:
    for index in range(1, stamps.size):
        before, after = stamps[index - 1], stamps[index]
        months = (after.year - before.year) * 12 + after.month - before.month
        if months != 1:
            raise _irregular(stamps, index, "1 day (daily) or the next calendar month (monthly)")


def _daily_axis(stamps: np.ndarray, calendar: str) -> TimeAxis:
    return TimeAxis(
        times=stamps,
        calendar=calendar,
        step="day",
        starts=tuple(_iso(s) for s in stamps),
        days=np.ones(stamps.size),
        day_of_year=np.array([s.dayofyr for s in stamps], dtype=int),
        hour=_hour_of(stamps[0]),
    )


def _monthly_axis(stamps: np.ndarray, calendar: str) -> TimeAxis:
    days = np.array([month_length(s.year, s.month, calendar) for s in stamps], dtype=float)
    firsts = [cftime.datetime(s.year, s.month, 1, calendar=calendar) for s in stamps]
    # Mid-month by this calendar's month lengths (FAO-56 approximates it as int(30.4M - 15)).
    mid = np.array([f.dayofyr for f in firsts], dtype=int) + (days // 2).astype(int)
    return TimeAxis(
        times=stamps,
        calendar=calendar,
        step="month",
        starts=tuple(_iso(f) for f in firsts),
        days=days,
        day_of_year=mid,
        hour=_hour_of(stamps[0]),
    )


def from_start(start: str, step: str, count: int, calendar: str = "standard") -> TimeAxis:
    """Build a time axis of ``count`` steps from a start date, for files without time stamps.

    Parameters
    ----------
    start : str
        ISO date of the first stamp, ``YYYY-MM-DD`` (optionally ``THH:MM``). Monthly stamps
        repeat its day of month, which must therefore be 1..28.
    step : str
        ``"day"`` or ``"month"``.
    count : int
        Number of steps (>= 1).
    calendar : str
        CF calendar.

    Returns
    -------
    TimeAxis

    Raises
    ------
    ConfigError
        Unknown step or a count below 1.
    TimeAxisError
        Start not an ISO date, invalid in the calendar, or a monthly start after day 28.
    """
    if step not in STEPS:
        raise ConfigError(f"time step {step!r} is not known; expected one of {', '.join(STEPS)}")
    if count < 1:
        raise ConfigError(f"time step count is {count}; expected at least 1 step")
    first = _parse_start(start, calendar)
    if step == "day":
        stamps = [first + _dt.timedelta(days=i) for i in range(count)]
        return _daily_axis(np.array(stamps, dtype=object), _canonical_calendar(calendar, first))
    if first.day > 28:
        raise TimeAxisError(
            f"monthly start {start!r} is on day {first.day}; expected day 1..28 so that every "
            "month has that day; set the start to the first of the month"
        )
    stamps = []
    for i in range(count):
        months = first.month - 1 + i
        stamps.append(first.replace(year=first.year + months // 12, month=months % 12 + 1))
    return _monthly_axis(np.array(stamps, dtype=object), _canonical_calendar(calendar, first))


def count_steps(start: str, end: str, step: str, calendar: str = "standard") -> int:
    """Number of steps from ``start`` to ``end`` inclusive.

    Parameters
    ----------
    start, end : str
        ISO dates of the first and last step; for monthly steps any day of the end month
        counts as that month.
    step : str
        ``"day"`` or ``"month"``.
    calendar : str
        CF calendar (a day count depends on it).

    Returns
    -------
    int
        Step count (0 or negative when ``end`` precedes ``start``).
    """
    if step not in STEPS:
        raise ConfigError(f"time step {step!r} is not known; expected one of {', '.join(STEPS)}")
    first, last = _parse_start(start, calendar), _parse_start(end, calendar)
    if step == "day":
        return int((last - first).total_seconds() // 86400) + 1
    return (last.year - first.year) * 12 + last.month - first.month + 1


# ISO 8601 calendar date with an optional time; parsed by hand because datetime rejects
# dates that exist only in other calendars (2021-02-30 is a valid 360_day date).
_ISO_DATE = re.compile(r"^(\d{4})-(\d{2})-(\d{2})(?:[T ](\d{2}):(\d{2})(?::(\d{2}))?)?$")


def _parse_start(start: str, calendar: str):
    match = _ISO_DATE.match(str(start).strip())
    if match is None:
        raise TimeAxisError(
            f"date {start!r} is not an ISO date; expected YYYY-MM-DD, e.g. 2021-01-01"
        )
    fields = [int(part) for part in match.groups(default="0")]
    try:
        return cftime.datetime(*fields, calendar=calendar)
    except ValueError as err:
        raise TimeAxisError(
            f"date {start!r} does not exist in calendar {calendar!r} or the calendar is "
            "unknown; expected a valid date in a CF calendar"
        ) from err


def require_identical(axes: Mapping[str, TimeAxis]) -> TimeAxis:
    """Return the one time axis all variables share, or explain how they differ.

    Variables share an axis when calendar, step and the calendar date (daily steps) or
    calendar month (monthly steps) of every step agree; the time of day and, for monthly
    steps, the day of the month of the stamps may differ (:func:`alignment_note` describes
    such an alignment).

    Parameters
    ----------
    axes : mapping of str to TimeAxis
        Time axis of each climate variable, by variable (or quantity) name.

    Returns
    -------
    TimeAxis
        The first variable's axis.

    Raises
    ------
    ConfigError
        The mapping is empty.
    TimeAxisError
        Calendars, steps or any step's date or month differ; stamps less than a day apart
        that fall on different dates get a message of their own (a stamping convention to
        fix); otherwise the message lists every variable's axis, variables with the same
        axis together.
    """
    if not axes:
        raise ConfigError("no climate variables were given; expected at least one time axis")
    names = list(axes)
    reference = axes[names[0]]
    if all(_same_steps(reference, axes[name]) for name in names[1:]):
        return reference
    for name in names[1:]:
        _refuse_offset_stamps(names[0], reference, name, axes[name])
    # Variables sharing an axis are named together, so the odd one out stands out.
    groups: dict[str, list[str]] = {}
    for name in names:
        groups.setdefault(axes[name].describe(), []).append(name)
    listing = "; ".join(f"{', '.join(group)}: {text}" for text, group in groups.items())
    raise TimeAxisError(
        f"climate variables have different time axes ({listing}); expected the same calendar, "
        "step and dates; regrid or subset the files to a common axis"
    )


def alignment_note(axes: Mapping[str, TimeAxis]) -> str | None:
    """One line saying how variables with differently placed stamps were aligned, or None.

    Parameters
    ----------
    axes : mapping of str to TimeAxis
        Axes that :func:`require_identical` accepted.

    Returns
    -------
    str or None
        E.g. ``"daily steps aligned by calendar date (a value belongs to the day of its
        stamp): air_temperature stamped 2031-01-01 00:00, ...; wind_speed stamped
        2031-01-01 12:00, ..."``; None when every variable has the same stamps.
    """
    groups: dict[str, list[str]] = {}
    for name, axis in axes.items():
        groups.setdefault(_stamp_text(axis), []).append(name)
    if len(groups) < 2:
        return None
    step = next(iter(axes.values())).step
    how = (
        "daily steps aligned by calendar date (a value belongs to the day of its stamp)"
        if step == "day"
        else "monthly steps aligned by calendar month (a value belongs to the month of its stamp)"
    )
    listing = "; ".join(f"{', '.join(group)} stamped {text}" for text, group in groups.items())
    return f"{how}: {listing}"


def _stamp_text(axis: TimeAxis) -> str:
    shown = [_stamp_iso(t) for t in axis.times[:2]]
    return ", ".join(shown) + (", ..." if len(axis.times) > 2 else "")


def _stamp_iso(stamp) -> str:
    return f"{_iso(stamp)} {stamp.hour:02d}:{stamp.minute:02d}"


def _same_steps(one: TimeAxis, other: TimeAxis) -> bool:
    # Daily starts are the stamps' dates, monthly starts the first of the stamps' months.
    return one.calendar == other.calendar and one.step == other.step and one.starts == other.starts


def _refuse_offset_stamps(name: str, axis: TimeAxis, other_name: str, other: TimeAxis) -> None:
    """Refuse, with the fix, stamps that are less than a day (daily) or at most a day
    (monthly) apart but fall on different dates or months: one file stamps the end of the
    interval, the other its start or middle."""
    if (axis.calendar, axis.step, len(axis)) != (other.calendar, other.step, len(other)):
        return
    hours = _gap_days(axis.times[0], other.times[0]) * 24.0
    limit = 24.0 if axis.step == "day" else 24.0 + 1e-9
    if not 0.0 < abs(hours) < limit:
        return
    later, earlier = (other_name, name) if hours > 0 else (name, other_name)
    unit = "day" if axis.step == "day" else "month"
    raise TimeAxisError(
        f"{later} is stamped {abs(hours):g} h after {earlier} ({_stamp_iso(other.times[0])} "
        f"against {_stamp_iso(axis.times[0])}) and so falls in another calendar {unit}; "
        f"expected each stamp inside the {unit} its value describes; if {later}'s stamps mark "
        f"the end of each {unit} (00:00 of the next), move them back by one day (for a "
        "GeoTIFF stack, set start to the date the first band describes)"
    )


def window(axis: TimeAxis, start: str | None, end: str | None) -> slice:
    """The steps of ``axis`` from ``start`` to ``end`` (inclusive ISO dates; None: the ends).

    Parameters
    ----------
    axis : TimeAxis
        The time axis the climate files hold.
    start, end : str or None
        First and last day of the window, ``YYYY-MM-DD`` (``[time] start`` and ``end``).

    Returns
    -------
    slice
        Positions of the selected steps.

    Raises
    ------
    ConfigError
        A date that does not exist in the axis's calendar, a window reaching outside the
        days the files hold (the message names them), start after end, or, on a monthly
        axis, a window that cuts a month (monthly values cover whole months).
    """
    first_day, last_day = axis.starts[0], axis.ends[-1]
    held = f"the climate files hold {first_day}..{last_day} ({axis.calendar} calendar)"
    begin = _window_date(start, "start", axis.calendar) if start is not None else first_day
    finish = _window_date(end, "end", axis.calendar) if end is not None else last_day
    if begin > finish:
        raise ConfigError(
            f"[time] start {begin} is after [time] end {finish}; expected start <= end"
        )
    if begin < first_day or begin > last_day:
        raise ConfigError(
            f"[time] start {begin} is outside the data: {held}; set a date inside that span"
        )
    if finish > last_day or finish < first_day:
        raise ConfigError(
            f"[time] end {finish} is outside the data: {held}; set a date inside that span"
        )
    if axis.step == "month":
        if begin not in axis.starts:
            raise ConfigError(
                f"[time] start {begin} cuts a month of monthly climate; expected the first day "
                f"of a month, e.g. {begin[:8]}01"
            )
        if finish not in axis.ends:
            last = axis.ends[axis.starts.index(f"{finish[:8]}01")]
            raise ConfigError(
                f"[time] end {finish} cuts a month of monthly climate; expected the last day "
                f"of a month, e.g. {last}"
            )
    chosen = [i for i, day in enumerate(axis.starts) if begin <= day <= finish]
    return slice(chosen[0], chosen[-1] + 1)


def _window_date(text: str, key: str, calendar: str) -> str:
    try:
        return _iso(_parse_start(text, calendar))
    except TimeAxisError as err:
        raise ConfigError(f"[time] {key}: {err}") from err


@dataclass(frozen=True)
class PeriodRow:
    """One row of a custom period table: a name and its first and last (inclusive) day."""

    name: str
    start: str
    end: str
    line: int
    """Line of the row in the file (the header is line 1), for messages."""


@dataclass(frozen=True)
class Periods:
    """Reporting periods over a time axis.

    Attributes
    ----------
    index : numpy.ndarray
        Segment number (0-based, int, non-decreasing) of each time step.
    starts, ends : tuple of str
        ISO first and last (inclusive) covered day of each segment: a period only partly
        covered by the axis starts or ends where the data does.
    days : numpy.ndarray
        Covered days in each segment [day] (sum of its step lengths).
    labels : tuple of str
        Name of each segment's period (``2031-01``, ``2030-31``, ``2031-DJF``, a custom name).
    days_in_period : numpy.ndarray
        Calendar days of each segment's whole period [day], in the axis's calendar.
    reported : numpy.ndarray
        Whether a segment is a reported period (bool); False only for the days between
        the periods of a custom table, which are computed (they belong to the run) but not
        reported per period.
    """

    index: np.ndarray
    starts: tuple[str, ...]
    ends: tuple[str, ...]
    days: np.ndarray
    labels: tuple[str, ...] = ()
    days_in_period: np.ndarray | None = None
    reported: np.ndarray | None = None

    def __len__(self) -> int:
        return len(self.starts)

    @property
    def rows(self) -> np.ndarray:
        """Positions of the reported periods among the segments."""
        if self.reported is None:
            return np.arange(len(self.starts))
        return np.flatnonzero(self.reported)

    @property
    def complete(self) -> np.ndarray:
        """Whether the data cover every calendar day of each segment's period (bool)."""
        if self.days_in_period is None:
            return np.ones(len(self.starts), dtype=bool)
        return np.rint(self.days).astype(int) == np.rint(self.days_in_period).astype(int)


_SEASONS = ("DJF", "MAM", "JJA", "SON")


def _calendar_period(
    period: str, year: int, month: int, first_month: int
) -> tuple[str, int, int, int]:
    """Label, first year, first month and length in months of the period holding a month."""
    if period == "month":
        return f"{year:04d}-{month:02d}", year, month, 1
    if period == "year":
        return f"{year:04d}", year, 1, 12
    if period == "water_year":
        begin = year if month >= first_month else year - 1
        label = f"{begin:04d}" if first_month == 1 else f"{begin:04d}-{(begin + 1) % 100:02d}"
        return label, begin, first_month, 12
    # Seasons: December belongs to the DJF of the following year.
    season = (month % 12) // 3
    named = year + 1 if month == 12 else year
    first = (named - 1, 12) if season == 0 else (named, 3 * season)
    return f"{named:04d}-{_SEASONS[season]}", first[0], first[1], 3


def _months_days(year: int, month: int, count: int, calendar: str) -> int:
    total = 0
    for k in range(count):
        months = month - 1 + k
        total += month_length(year + months // 12, months % 12 + 1, calendar)
    return total


def periods(
    axis: TimeAxis,
    period: str,
    *,
    year_start_month: int | None = None,
    table: Sequence[PeriodRow] | None = None,
    table_name: str = "period table",
) -> Periods:
    """Group the steps of ``axis`` into reporting periods.

    Parameters
    ----------
    axis : TimeAxis
        The run's time axis.
    period : str
        ``"day"``, ``"month"``, ``"year"``, ``"water_year"`` (twelve months from
        ``year_start_month``, labelled ``2030-31``, or ``2030`` when it starts in January),
        ``"season"`` (DJF, MAM, JJA, SON; December counts to the next year's DJF, labelled
        ``2031-DJF``) or ``"table"`` (the rows of ``table``).
    year_start_month : int, optional
        First month of a water year, 1..12 (default :data:`DEFAULT_YEAR_START_MONTH`).
    table : sequence of PeriodRow, optional
        Custom periods for ``"table"``: not overlapping; days between them are not reported.
    table_name : str
        The table's file, for messages.

    Returns
    -------
    Periods

    Raises
    ------
    ConfigError
        Unknown period, daily periods of a monthly axis, a bad custom table (dates invalid in
        the calendar, end before start, overlaps, duplicate names, a period wholly outside
        the data, or one that splits a month of monthly data).
    """
    if period not in PERIODS:
        raise ConfigError(
            f"reporting period {period!r} is not known; expected one of {', '.join(PERIODS)}"
        )
    if period == "day" and axis.step == "month":
        raise ConfigError(
            "daily reporting periods were asked for monthly climate data; expected period "
            '"month" or "year"; set the period to "month" or supply daily data'
        )
    if period == "table":
        return _table_periods(axis, table or (), table_name)
    if period == "day":
        grouped = _group(list(axis.starts), axis.starts, axis.ends, axis.days)
        count = len(grouped)
        return _with(grouped, grouped.starts, np.ones(count), np.ones(count, dtype=bool))
    first_month = DEFAULT_YEAR_START_MONTH if year_start_month is None else year_start_month
    if not 1 <= first_month <= 12:
        raise ConfigError(f"[output].year_start_month is {first_month}; expected 1..12")
    keys: list[str] = []
    lengths: dict[str, int] = {}
    for start in axis.starts:
        label, year, month, count = _calendar_period(
            period, int(start[:4]), int(start[5:7]), first_month
        )
        keys.append(label)
        if label not in lengths:
            lengths[label] = _months_days(year, month, count, axis.calendar)
    grouped = _group(keys, axis.starts, axis.ends, axis.days)
    labels = tuple(keys[i] for i in _firsts(grouped.index))
    calendar_days = np.array([lengths[label] for label in labels], dtype=float)
    return _with(grouped, labels, calendar_days, np.ones(len(labels), dtype=bool))


def _firsts(index: np.ndarray) -> np.ndarray:
    return np.flatnonzero(np.r_[True, index[1:] != index[:-1]])


def _with(grouped: Periods, labels: Sequence[str], days_in: np.ndarray, reported: np.ndarray):
    return Periods(
        index=grouped.index,
        starts=grouped.starts,
        ends=grouped.ends,
        days=grouped.days,
        labels=tuple(labels),
        days_in_period=np.asarray(days_in, dtype=float),
        reported=reported,
    )


def _table_periods(axis: TimeAxis, table: Sequence[PeriodRow], where: str) -> Periods:
    rows = _checked_rows(axis, table, where)
    first_day, last_day = axis.starts[0], axis.ends[-1]
    starts = [r[1] for r in rows]
    keys: list[str] = []
    for day in axis.starts:
        j = int(np.searchsorted(starts, day, side="right")) - 1
        inside = j >= 0 and day <= rows[j][2]
        # Days between periods form segments of their own, keyed by the next period.
        keys.append(f"p{j}" if inside else f"gap{j + 1}")
    grouped = _group(keys, axis.starts, axis.ends, axis.days)
    seg_keys = [keys[i] for i in _firsts(grouped.index)]
    used = {int(k[1:]) for k in seg_keys if k.startswith("p")}
    for j, (row, start, end, _days) in enumerate(rows):
        if j not in used:
            raise ConfigError(
                f"{where} line {row.line}: period '{row.name}' ({start}..{end}) is outside "
                f"the data, which cover {first_day}..{last_day}; remove the row or widen "
                "[time] start/end"
            )
    labels, days_in, reported = [], [], []
    for key in seg_keys:
        if key.startswith("p"):
            j = int(key[1:])
            labels.append(rows[j][0].name)
            days_in.append(rows[j][3])
            reported.append(True)
        else:
            labels.append("")
            days_in.append(0)
            reported.append(False)
    return _with(grouped, labels, np.array(days_in, float), np.array(reported, dtype=bool))


def _checked_rows(
    axis: TimeAxis, table: Sequence[PeriodRow], where: str
) -> list[tuple[PeriodRow, str, str, int]]:
    """The table's rows in time order with ISO dates and calendar days, checked."""
    if not table:
        raise ConfigError(f"{where} holds no periods; expected rows of name,start,end")
    rows = []
    names: dict[str, int] = {}
    for row in table:
        at = f"{where} line {row.line}"
        if row.name in names:
            raise ConfigError(
                f"{at}: period name '{row.name}' is used on line {names[row.name]} too; "
                "expected each name once"
            )
        names[row.name] = row.line
        dates = []
        for column, text in (("start", row.start), ("end", row.end)):
            try:
                dates.append(_parse_start(text, axis.calendar))
            except TimeAxisError as err:
                raise ConfigError(
                    f"{at}: {column} {text!r} is not a date of the {axis.calendar} calendar; "
                    "expected YYYY-MM-DD"
                ) from err
        begin, end = dates
        if end < begin:
            raise ConfigError(
                f"{at}: period '{row.name}' ends ({_iso(end)}) before it starts "
                f"({_iso(begin)}); expected start <= end"
            )
        if axis.step == "month":
            _require_whole_months(begin, end, axis.calendar, at, row.name)
        rows.append((row, _iso(begin), _iso(end), (end - begin).days + 1))
    rows.sort(key=lambda r: r[1])
    for before, after in zip(rows, rows[1:], strict=False):
        if after[1] <= before[2]:
            raise ConfigError(
                f"{where} line {after[0].line}: period '{after[0].name}' ({after[1]}..{after[2]}) "
                f"overlaps '{before[0].name}' on line {before[0].line} ({before[1]}..{before[2]}); "
                "expected periods that do not overlap"
            )
    return rows


def _require_whole_months(begin, end, calendar: str, at: str, name: str) -> None:
    last = month_length(end.year, end.month, calendar)
    if begin.day != 1 or end.day != last:
        raise ConfigError(
            f"{at}: period '{name}' ({_iso(begin)}..{_iso(end)}) splits a month, but the "
            "climate is monthly; expected periods of whole months (from the 1st to the last "
            "day of a month)"
        )


def _group(
    keys: Sequence[str], starts: Sequence[str], ends: Sequence[str], days: np.ndarray
) -> Periods:
    # Steps are in time order, so a period is a run of equal keys.
    index = np.zeros(len(keys), dtype=int)
    first_of: list[int] = [0]
    for i in range(1, len(keys)):
        index[i] = index[i - 1] + (keys[i] != keys[i - 1])
        if keys[i] != keys[i - 1]:
            first_of.append(i)
    last_of = [i - 1 for i in first_of[1:]] + [len(keys) - 1]
    return Periods(
        index=index,
        starts=tuple(starts[i] for i in first_of),
        ends=tuple(ends[i] for i in last_of),
        days=np.bincount(index, weights=days).astype(float),
    )
