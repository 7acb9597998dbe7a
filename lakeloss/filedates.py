"""Dates read from file names: the ``date_pattern`` of a climate input spread over many files.

Pure: turns a pattern into a matcher and a path into the date it names; opens no file.

Two spellings are accepted:

* strftime-like codes: ``%Y`` (4-digit year), ``%m`` (month 01-12), ``%d`` (day 01-31),
  ``%j`` (day of year 001-366) and ``%%`` (a percent sign); every other character stands for
  itself. ``"%Y%m%d"`` reads ``rain_20310105.tif``; ``"%Y"`` alone reads a yearly file's
  1 January. A match may not be part of a longer run of digits.
* a regular expression with named groups ``year`` and ``month`` (and optionally ``day``), or
  ``year`` and ``doy``: ``"(?P<year>\\d{4})\\.(?P<doy>\\d{3})"``.

The pattern is looked for in the file name; a pattern holding ``/`` is looked for in as many
trailing parts of the path (``"%Y/%m%d"`` reads ``rain/2031/0105.tif``).
"""

from __future__ import annotations

import datetime
import re
from dataclasses import dataclass
from pathlib import PurePath

import cftime

from lakeloss.errors import ConfigError, TimeAxisError

_CODES = {
    "%Y": r"(?P<year>\d{4})",
    "%m": r"(?P<month>0[1-9]|1[0-2])",
    "%d": r"(?P<day>0[1-9]|[12]\d|3[01])",
    "%j": r"(?P<doy>00[1-9]|0[1-9]\d|[12]\d\d|3[0-5]\d|36[0-6])",
    "%%": "%",
}
_CODE = re.compile(r"%.?")


@dataclass(frozen=True)
class DatePattern:
    """A compiled ``date_pattern``.

    Attributes
    ----------
    text : str
        The pattern as written.
    regex : re.Pattern
        What is searched for; its groups are ``year`` and ``month``/``day`` or ``doy``.
    parts : int
        Trailing path parts the pattern is searched in (1: the file name).
    """

    text: str
    regex: re.Pattern
    parts: int


def compile_pattern(text: str) -> DatePattern:
    """Compile a ``date_pattern`` (strftime-like codes or a regular expression).

    Raises
    ------
    ConfigError
        Unknown ``%`` code, invalid regular expression, or groups that cannot give a date.
    """
    if "(?P<" in text:
        try:
            regex = re.compile(text)
        except re.error as err:
            raise ConfigError(
                f"date_pattern {text!r} is not a valid regular expression ({err}); "
                'fix it, or write codes such as "%Y%m%d"'
            ) from err
    else:
        regex = re.compile(r"(?<!\d)" + _translate(text) + r"(?!\d)")
    groups = set(regex.groupindex)
    usable = "year" in groups and (
        ("month" in groups and "doy" not in groups) or (groups.isdisjoint({"month", "day"}))
    )
    if not usable or ("day" in groups and "month" not in groups):
        raise ConfigError(
            f"date_pattern {text!r} does not name a date; expected a year with a month (and "
            'day) or a day of year, e.g. "%Y%m%d", "%Y-%m", "%Y%j" or "%Y"'
        )
    return DatePattern(text=text, regex=regex, parts=text.count("/") + 1)


def _translate(text: str) -> str:
    pieces, position = [], 0
    for code in _CODE.finditer(text):
        pieces.append(re.escape(text[position : code.start()]))
        if code.group() not in _CODES:
            raise ConfigError(
                f"date_pattern {text!r} uses {code.group()!r}; expected only the codes "
                "%Y, %m, %d, %j and %% (or a regular expression with named groups)"
            )
        if code.group() != "%%" and code.group() in text[: code.start()]:
            raise ConfigError(f"date_pattern {text!r} uses {code.group()!r} twice; keep one")
        pieces.append(_CODES[code.group()])
        position = code.end()
    pieces.append(re.escape(text[position:]))
    return "".join(pieces)


def date_of(pattern: DatePattern, path, calendar: str):
    """The date a file's name gives, as a cftime datetime at 00:00.

    Parameters
    ----------
    pattern : DatePattern
        From :func:`compile_pattern`.
    path : str or os.PathLike
        The file.
    calendar : str
        CF calendar of the date.

    Raises
    ------
    TimeAxisError
        The name does not match, matches in several places with different dates, or names a
        date that does not exist in ``calendar``.
    """
    tail = "/".join(PurePath(path).parts[-pattern.parts :])
    found = {_fields(match) for match in pattern.regex.finditer(tail)}
    if not found:
        raise TimeAxisError(
            f"climate file {str(path)!r}: its name does not match date_pattern "
            f"{pattern.text!r}; expected a name holding the date that way; rename the file or "
            "fix date_pattern"
        )
    if len(found) > 1:
        listing = ", ".join(_label(f) for f in sorted(found))
        raise TimeAxisError(
            f"climate file {str(path)!r}: date_pattern {pattern.text!r} matches its name in "
            f"several places ({listing}); expected one date; make date_pattern more specific"
        )
    year, month, day, doy = found.pop()
    try:
        if not doy:
            return cftime.datetime(year, month or 1, day or 1, calendar=calendar)
        date = cftime.datetime(year, 1, 1, calendar=calendar) + datetime.timedelta(days=doy - 1)
        if date.year == year:
            return date
        raise ValueError("day of year beyond the year's end")
    except ValueError as err:
        raise TimeAxisError(
            f"climate file {str(path)!r}: its name gives the date "
            f"{_label((year, month, day, doy))}, which does not exist in calendar {calendar!r}; "
            "rename the file or set the calendar of this input in [climate]"
        ) from err


def _fields(match: re.Match) -> tuple[int, int, int, int]:
    values = match.groupdict()
    return tuple(int(values.get(k) or 0) for k in ("year", "month", "day", "doy"))  # type: ignore[return-value]


def _label(fields: tuple[int, int, int, int]) -> str:
    year, month, day, doy = fields
    if doy:
        return f"{year:04d} day {doy}"
    return f"{year:04d}-{month or 1:02d}-{day or 1:02d}"
