"""Part files: one partition's result tables on disk, read back as the same frames.

A partition of water bodies (a contiguous run of the layer's rows) is computed on its own,
possibly by another process or machine, and hands its tables to the writer as files in
``STAGING/_parts/NNNNNN/``: ``waterbodies.parquet`` (GeoParquet) and ``by_period.parquet``.
:func:`read_part` gives back frames equal to those :func:`write_part` was given, dtypes,
index, geometry and CRS included.

Parquet keeps most pandas types itself (through the pandas metadata pyarrow writes): numbers,
nullable integers, booleans, ``datetime64`` of any unit, time zones and string columns. Two
things it does not keep are recorded in the frame's ``attrs`` (which pandas stores in that
metadata) and restored on reading:

* cftime dates (periods of a 360-day or all-leap calendar): stored as ISO 8601 text, with the
  calendar of each such column;
* the storage of string columns held as Python objects (``string[python]``), which Parquet
  would otherwise give back as pyarrow-backed strings;
* the unit of ``datetime64[s]`` columns (the period dates), which Parquet stores in
  milliseconds.
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import cftime
import geopandas
import numpy as np
import pandas as pd

PARTS_DIRECTORY = "_parts"
"""Directory of the part files inside the staging directory of an output."""
WATERBODIES_FILE = "waterbodies.parquet"
BY_PERIOD_FILE = "by_period.parquet"
_NOTES = "lakeloss_part"  # key of what write_part records in a frame's attrs
_ISO = re.compile(
    r"^(?P<year>-?\d+)-(?P<month>\d{2})-(?P<day>\d{2})"
    r"T(?P<hour>\d{2}):(?P<minute>\d{2}):(?P<second>\d{2})(?:\.(?P<fraction>\d{1,6}))?$"
)


def part_directory(staging: Path, index: int) -> Path:
    """Directory of partition ``index``'s part files: ``staging/_parts/NNNNNN``."""
    return Path(staging) / PARTS_DIRECTORY / f"{index:06d}"


def write_part(
    directory: Path, waterbodies: geopandas.GeoDataFrame, by_period: pd.DataFrame
) -> None:
    """Write one partition's tables as part files.

    Parameters
    ----------
    directory : Path
        Directory to create (with its parents) and write into.
    waterbodies : geopandas.GeoDataFrame
        The partition's rows of the water-body table, with its CRS.
    by_period : pandas.DataFrame
        The partition's rows of the period table, indexed by the water-body id.
    """
    directory = Path(directory)
    directory.mkdir(parents=True, exist_ok=True)
    # A RangeIndex (the layer's row numbers) costs nothing: it is stored as metadata.
    _encoded(waterbodies).to_parquet(directory / WATERBODIES_FILE, index=None)
    _encoded(by_period).to_parquet(directory / BY_PERIOD_FILE, index=True)


def read_part(directory: Path) -> tuple[geopandas.GeoDataFrame, pd.DataFrame]:
    """The tables :func:`write_part` wrote into ``directory``.

    Returns
    -------
    (geopandas.GeoDataFrame, pandas.DataFrame)
        The water-body rows and the period rows, equal to what was written.
    """
    directory = Path(directory)
    waterbodies = _decoded(geopandas.read_parquet(directory / WATERBODIES_FILE))
    by_period = _decoded(pd.read_parquet(directory / BY_PERIOD_FILE))
    return waterbodies, by_period


def _encoded(frame: pd.DataFrame) -> pd.DataFrame:
    """``frame`` with cftime columns as ISO text and notes on what to restore in ``attrs``."""
    dates: dict[str, dict[str, Any]] = {}
    python_strings = [
        str(name)
        for name, dtype in frame.dtypes.items()
        if isinstance(dtype, pd.StringDtype) and dtype.storage == "python"
    ]
    seconds = {
        str(name): str(dtype)
        for name, dtype in frame.dtypes.items()
        if dtype.kind == "M" and _time_unit(dtype) == "s"
    }
    replaced: dict[Any, pd.Series] = {}
    for name in frame.columns:
        column = frame[name]
        if column.dtype != object:
            continue
        encoded = _cftime_text(column)
        if encoded is not None:
            dates[str(name)], replaced[name] = encoded
    if not (dates or python_strings or seconds):
        return frame
    out = frame.copy(deep=False)
    for name, texts in replaced.items():
        out[name] = texts
    out.attrs = {
        **frame.attrs,
        _NOTES: {"cftime": dates, "python_strings": python_strings, "seconds": seconds},
    }
    return out


def _time_unit(dtype: Any) -> str:
    """Unit of a numpy or time-zone-aware pandas datetime dtype."""
    if isinstance(dtype, np.dtype):
        return np.datetime_data(dtype)[0]
    return str(dtype.unit)


def _decoded(frame: pd.DataFrame) -> Any:
    notes = frame.attrs.pop(_NOTES, None)
    if not notes:
        return frame
    for name, calendar in notes["cftime"].items():
        frame[name] = _cftime_dates(frame[name], calendar)
    for name in notes["python_strings"]:
        dtype = pd.StringDtype("python", na_value=frame[name].dtype.na_value)
        frame[name] = frame[name].astype(dtype)
    for name, dtype in notes["seconds"].items():
        frame[name] = frame[name].astype(dtype)
    return frame


def _cftime_text(column: pd.Series) -> tuple[dict[str, Any], pd.Series] | None:
    """Calendar and ISO 8601 text of an object column of cftime dates, else None.

    Each distinct date is checked and formatted once (a period table repeats a few dates
    over millions of rows). Missing values stay missing.
    """
    present = column.notna().to_numpy()
    if not present.any() or not isinstance(column.iloc[int(present.argmax())], cftime.datetime):
        return None
    first = column.iloc[int(present.argmax())]
    calendar = {"calendar": first.calendar, "has_year_zero": bool(first.has_year_zero)}
    try:
        codes, distinct = pd.factorize(column.to_numpy(dtype=object), use_na_sentinel=True)
        same = all(
            isinstance(d, cftime.datetime)
            and (d.calendar, bool(d.has_year_zero)) == tuple(calendar.values())
            for d in distinct
        )
    except TypeError:  # dates of different calendars do not compare
        same = False
    if not same:
        raise ValueError(
            f"column {column.name!r} mixes cftime dates of different calendars with other "
            "values; expected dates of one calendar"
        )
    texts = pd.array([d.isoformat() for d in distinct], dtype="string").take(codes, allow_fill=True)
    return calendar, pd.Series(texts, index=column.index, name=column.name)


def _cftime_dates(texts: pd.Series, calendar: dict[str, Any]) -> pd.Series:
    """The cftime dates of :func:`_cftime_text`, parsing each distinct text once."""
    codes, distinct = pd.factorize(
        texts.to_numpy(dtype=object, na_value=None), use_na_sentinel=True
    )
    dates = np.empty(len(distinct) + 1, dtype=object)  # the last slot: missing values
    dates[:-1] = [_parse_date(text, calendar) for text in distinct]
    dates[-1] = None
    values = dates[np.where(codes < 0, len(distinct), codes)]
    return pd.Series(values, index=texts.index, name=texts.name, dtype=object)


def _parse_date(text: str, calendar: dict[str, Any]) -> cftime.datetime:
    match = _ISO.match(text)
    if match is None:
        raise ValueError(f"part file date {text!r} is not ISO 8601; expected YYYY-MM-DDTHH:MM:SS")
    fraction = match["fraction"] or "0"
    return cftime.datetime(
        int(match["year"]),
        int(match["month"]),
        int(match["day"]),
        int(match["hour"]),
        int(match["minute"]),
        int(match["second"]),
        int(fraction.ljust(6, "0")),
        calendar=calendar["calendar"],
        has_year_zero=calendar["has_year_zero"],
    )
