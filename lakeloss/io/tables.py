"""Deterministic CSV tables and the ``run.json`` writer.

Identical inputs give byte-identical files: columns in the frame's order, rows in the
frame's order (the caller sorts), a fixed number of decimals per float column where given and
the shortest round-trip form otherwise, ``\\n`` line endings, UTF-8, no index and no time
stamps. Missing values are empty fields. There is deliberately no header comment, because
comment lines break ordinary CSV readers; cautions belong in ``run.json`` and the README.

The CSV writer formats column by column in blocks of rows. pandas' ``to_csv`` and
``pyarrow.csv.write_csv`` were measured against it and not taken, because neither gives
these bytes (timings: benchmarks/README.md, "Outputs", figures behind the code): ``to_csv``
has one float format for all columns (no per-column decimals, no ``-0.000`` repair) and
writes ``True``/``False`` and cftime dates with a time of day; ``write_csv`` quotes every
text value and the header, writes whole floats as ``1`` and 1e-05 as ``0.00001``, negative
zero as ``-0``, dates with a time of day, and has no fixed number of decimals. Either would
change the bytes of files users diff between runs.
"""

from __future__ import annotations

import dataclasses
import datetime
import json
import math
from collections.abc import Iterable, Mapping
from pathlib import Path

import numpy as np
import pandas as pd

_BLOCK_ROWS = 200_000
_NEEDS_QUOTES = frozenset(',"\n\r')


def write_csv(
    path: str | Path, frame: pd.DataFrame, *, decimals: Mapping[str, int] | None = None
) -> None:
    """Write a table as deterministic CSV.

    Parameters
    ----------
    path : str or Path
        File to create (replaced if it exists).
    frame : pandas.DataFrame
        Table in its final column and row order; the index is not written.
    decimals : mapping of str to int, optional
        Number of decimals for numeric columns, e.g. ``{"evap_mm": 2, "evap_m3": 1}``.
        Other float columns use the shortest representation that reads back exactly.

    Raises
    ------
    ValueError
        If ``decimals`` names a column the frame does not have, or a negative count.

    Notes
    -----
    Dates are written as ``YYYY-MM-DD`` when every value of the column falls on midnight and
    as ``YYYY-MM-DDTHH:MM:SS`` otherwise; this holds for numpy datetimes and for cftime dates
    of any calendar alike. Booleans are written ``true``/``false``.
    """
    decimals = dict(decimals or {})
    _check_decimals(frame, decimals)
    # Decided over the whole column, so a column's form does not change from block to block.
    forms = [date_form(frame.iloc[:, i]) for i in range(frame.shape[1])]
    with open(path, "w", encoding="utf-8", newline="") as fh:
        fh.write(csv_header(frame.columns) + "\n")
        for start in range(0, len(frame), _BLOCK_ROWS):
            block = frame.iloc[start : start + _BLOCK_ROWS]
            columns = [
                format_column(block.iloc[:, i], decimals.get(name), date_only=forms[i])
                for i, name in enumerate(frame.columns)
            ]
            fh.write("\n".join(map(",".join, zip(*columns, strict=True))) + "\n")


def csv_header(columns: Iterable[object]) -> str:
    """The header line of :func:`write_csv` (without its line end)."""
    return ",".join(_quote(str(name)) for name in columns)


def date_form(series: pd.Series) -> bool | None:
    """How :func:`write_csv` writes a column's dates: True as dates, False with the time.

    True when every date of the column falls on midnight, False when one has a time of
    day, None for a column without dates.
    """
    kind = series.dtype.kind
    if kind == "M" and getattr(series.dtype, "tz", None) is None:
        values = series.to_numpy(dtype="datetime64[s]")
        present = values[~np.isnat(values)]
        return bool(np.all(present == present.astype("datetime64[D]")))
    if series.dtype != object and kind != "M":
        return None
    dates = [v for v in series.to_numpy(dtype=object, na_value=None).tolist() if is_date(v)]
    if not dates:
        return None
    return all(_at_midnight(v) for v in dates)


def _at_midnight(value: object) -> bool:
    if not hasattr(value, "hour"):
        return True  # a date without a time of day
    clock = (value.hour, value.minute, value.second, getattr(value, "microsecond", 0))  # type: ignore[attr-defined]
    return clock == (0, 0, 0, 0)


def write_json(path: str | Path, obj: object) -> None:
    """Write ``obj`` as JSON with sorted keys, two-space indent and NaN as ``null``.

    Parameters
    ----------
    path : str or Path
        File to create (replaced if it exists).
    obj : object
        Mappings, sequences, strings, numbers, booleans and None; also numpy scalars and
        arrays, paths, dates, sets (sorted) and dataclass instances.

    Raises
    ------
    TypeError
        If ``obj`` holds a value of a type with no JSON form.

    Notes
    -----
    JSON has no NaN or infinity; both become ``null``. Mapping keys become strings.
    """
    text = json.dumps(
        to_jsonable(obj), sort_keys=True, indent=2, ensure_ascii=False, allow_nan=False
    )
    with open(path, "w", encoding="utf-8", newline="") as fh:
        fh.write(text + "\n")


def to_jsonable(obj: object) -> object:
    """Convert ``obj`` to plain JSON types (see :func:`write_json`)."""
    if obj is None or isinstance(obj, bool | str | int):
        return obj
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, np.generic | np.ndarray):
        return to_jsonable(obj.tolist())
    if isinstance(obj, Mapping):
        return {str(key): to_jsonable(value) for key, value in obj.items()}
    if isinstance(obj, set | frozenset):
        return [to_jsonable(v) for v in sorted(obj, key=str)]
    if isinstance(obj, list | tuple):
        return [to_jsonable(v) for v in obj]
    if isinstance(obj, Path):
        return str(obj)
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return to_jsonable(dataclasses.asdict(obj))
    if is_date(obj):
        return obj.isoformat()  # type: ignore[attr-defined]
    raise TypeError(
        f"cannot write a {type(obj).__name__} to JSON; expected mappings, sequences, "
        "strings, numbers, booleans or None; convert it before writing"
    )


def _check_decimals(frame: pd.DataFrame, decimals: Mapping[str, int]) -> None:
    unknown = sorted(set(decimals) - {str(c) for c in frame.columns})
    if unknown:
        raise ValueError(
            f"decimals given for columns {unknown} that the table does not have; "
            f"expected some of {[str(c) for c in frame.columns]}"
        )
    negative = sorted(name for name, count in decimals.items() if int(count) < 0)
    if negative:
        raise ValueError(f"negative decimals for columns {negative}; expected counts >= 0")


def format_column(
    series: pd.Series, decimals: int | None, *, date_only: bool | None = None
) -> list[str]:
    """Text of each value of one column as :func:`write_csv` writes it, missing as empty.

    ``date_only`` (see :func:`date_form`): dates without (True) or with (False) their time of
    day; None decides from the values given.
    """
    kind = series.dtype.kind
    if kind == "f" and decimals is None and series.dtype.itemsize == 4:
        # Shortest text of the float32 value itself, not of its float64 widening.
        return [
            "" if v != v else str(v) for v in series.to_numpy(dtype=np.float32, na_value=np.nan)
        ]
    if kind in "fiu" and (decimals is not None or kind == "f"):
        values = series.to_numpy(dtype=float, na_value=np.nan)
        return _format_floats(values, decimals)
    if kind in "iu" and not series.hasnans:
        return list(map(str, series.to_numpy().tolist()))
    if isinstance(series.dtype, pd.StringDtype):
        return _format_strings(series)
    if kind == "M" and getattr(series.dtype, "tz", None) is None:
        return _format_datetime64(series.to_numpy(dtype="datetime64[s]"), date_only)
    values = series.to_numpy(dtype=object, na_value=None).tolist()
    if any(is_date(v) for v in values):
        return iso_dates(values, date_only=date_only)
    return [_format_scalar(v, decimals) for v in values]


def _format_floats(values: np.ndarray, decimals: int | None) -> list[str]:
    """Text of float values; NaN as empty text, ``-0.00``-style negative zeros as zeros.

    Formats every value with one ``map`` and then patches the few NaN and near-zero
    negative positions numpy finds, which is what a per-value test did, but faster.
    """
    if decimals is None:
        texts = list(map(repr, values.tolist()))
    else:
        template = f"{{:.{int(decimals)}f}}".format
        texts = list(map(template, values.tolist()))
        # "-0.00" for a tiny negative is noise that differs between otherwise equal runs.
        negative_zero = template(-0.0)
        zero = template(0.0)
        # A superset of the values that can print as negative zero; the text decides.
        for i in np.flatnonzero(np.signbit(values) & (np.abs(values) < 10.0 ** -int(decimals))):
            if texts[i] == negative_zero:
                texts[i] = zero
    for missing in np.flatnonzero(np.isnan(values)).tolist():
        texts[missing] = ""
    return texts


def _format_strings(series: pd.Series) -> list[str]:
    """Text of a pandas string column: missing as empty, quoted only where it must be."""
    texts = series.to_numpy(dtype=object, na_value="").tolist()
    quote = series.str.contains(r'[,"\n\r]', regex=True).to_numpy(dtype=bool, na_value=False)
    for i in np.flatnonzero(quote).tolist():
        texts[i] = _quote(texts[i])
    return texts


def _format_scalar(value: object, decimals: int | None) -> str:
    if value is None or value is pd.NaT or (isinstance(value, float) and value != value):
        return ""
    if isinstance(value, bool | np.bool_):
        return "true" if value else "false"
    if isinstance(value, float | np.floating):
        return _format_floats(np.array([value], dtype=float), decimals)[0]
    return _quote(str(value))


def _format_datetime64(values: np.ndarray, date_only: bool | None = None) -> list[str]:
    """Vectorised form of :func:`iso_dates` for naive numpy datetimes."""
    if date_only is None:
        present = values[~np.isnat(values)]
        date_only = bool(np.all(present == present.astype("datetime64[D]")))
    texts = np.datetime_as_string(values, unit="D" if date_only else "s").tolist()
    return ["" if t == "NaT" else t for t in texts]


def iso_dates(values: Iterable[object], *, date_only: bool | None = None) -> list[str]:
    """ISO 8601 text of dates of any calendar, missing values as empty strings.

    Parameters
    ----------
    values : iterable
        ``datetime``, pandas ``Timestamp`` or cftime dates, or None / NaT.
    date_only : bool, optional
        Write ``YYYY-MM-DD`` (True) or ``YYYY-MM-DDTHH:MM:SS`` (False); by default the
        first if every value falls on midnight.

    Returns
    -------
    list of str
        The text of each value.
    """
    values = list(values)
    if date_only is None:
        present = [v for v in values if v is not None and v is not pd.NaT]
        date_only = all(_at_midnight(v) for v in present)
    pattern = "%Y-%m-%d" if date_only else "%Y-%m-%dT%H:%M:%S"
    return [
        "" if v is None or v is pd.NaT else v.strftime(pattern)  # type: ignore[attr-defined]
        for v in values
    ]


def is_date(value: object) -> bool:
    """Whether a value is a date or date-time (datetime, pandas, numpy or cftime)."""
    if isinstance(value, datetime.date):
        return True
    return hasattr(value, "strftime") and hasattr(value, "calendar")


def _quote(text: str) -> str:
    """Quote a field the way RFC 4180 asks, only when it has to be."""
    if _NEEDS_QUOTES.isdisjoint(text):
        return text
    return '"' + text.replace('"', '""') + '"'
