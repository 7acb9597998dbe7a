"""Read a custom period table: a CSV of ``name,start,end`` (``[output] period_table``).

Only the reading is here; the dates are checked against the climate's calendar by
:func:`lakeloss.timeaxis.periods`. Spreadsheets save such files with a UTF-8 byte-order
mark, CRLF line ends, header names in any case and extra columns: all are accepted.
"""

from __future__ import annotations

import csv
from pathlib import Path

from lakeloss.errors import ConfigError, InputDataError
from lakeloss.timeaxis import PeriodRow

COLUMNS = ("name", "start", "end")


def read_period_table(path: Path) -> tuple[PeriodRow, ...]:
    """The rows of a period table, in file order, with their line numbers.

    Raises
    ------
    InputDataError
        The file cannot be read or is not UTF-8 text.
    ConfigError
        A column of ``name``, ``start``, ``end`` is missing, or a row has an empty cell
        (the message names the file and line).
    """
    try:
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as err:
        raise InputDataError(
            f"[output].period_table '{path}' cannot be read ({err}); expected a UTF-8 CSV file "
            "with columns name,start,end"
        ) from err
    reader = csv.reader(text.splitlines())
    header = next(reader, None)
    names = [cell.strip().lower() for cell in header or []]
    missing = [c for c in COLUMNS if c not in names]
    if missing:
        raise ConfigError(
            f"period table '{path}' has no column {', '.join(missing)} in its header (found: "
            f"{', '.join(names) or 'nothing'}); expected a first line name,start,end"
        )
    where = [names.index(c) for c in COLUMNS]
    rows = []
    for line, cells in enumerate(reader, start=2):
        if not any(cell.strip() for cell in cells):
            continue  # blank lines, or a spreadsheet's empty rows
        values = [cells[i].strip() if i < len(cells) else "" for i in where]
        for column, value in zip(COLUMNS, values, strict=True):
            if not value:
                raise ConfigError(
                    f"period table '{path}' line {line}: the {column} is empty; expected "
                    "name,start,end with dates as YYYY-MM-DD"
                )
        rows.append(PeriodRow(name=values[0], start=values[1], end=values[2], line=line))
    return tuple(rows)
