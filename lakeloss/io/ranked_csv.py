"""A CSV table sorted by a rank known only at the end, written from parts in bounded memory.

``summary_by_waterbody.csv`` lists the water bodies by ``loss_rank``, but the rank is known
only once every partition is done, while the partitions' rows should not wait in memory.
:class:`RankedCsv` therefore formats each part's rows as it comes (the same text
:func:`lakeloss.io.tables.write_csv` gives) into a scratch Arrow file, leaving out the rank and
the dates whose form (with or without the time of day) depends on the whole column. At the
end each part's rows are put in rank order with the rank filled in, and the sorted parts are
merged chunk by chunk. The bytes are those :func:`~lakeloss.io.tables.write_csv` writes for
the whole table sorted by rank (stable: rows without a rank last, in their layer order).
"""

from __future__ import annotations

import shutil
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from lakeloss.io.tables import csv_header, date_form, format_column

_CHUNK_ROWS = 65_536  # rows per Arrow batch and per merge step
_MIDNIGHT = "T00:00:00"


@dataclass
class _Layout:
    """The columns of the table, in pieces: runs of final text and the deferred columns.

    ``pieces[i]`` is a list of column positions written as final text (``kind == "text"``),
    or one column: the rank (``"rank"``) or a column that may hold dates (``"dates"``).
    """

    columns: list[str]
    dtypes: list[str]
    pieces: list[tuple[str, list[int]]]
    forms: dict[int, bool | None] = field(default_factory=dict)


class RankedCsv:
    """Collect parts of a table and write it sorted by a rank column given at the end.

    Parameters
    ----------
    path : Path
        CSV file to write.
    scratch : Path
        Directory for the parts' formatted rows (created; removed by :meth:`finish`).
    rank : str
        Name of the rank column (null in the parts; its values come to :meth:`finish`).
    decimals : mapping, optional
        Decimals per column, as for :func:`~lakeloss.io.tables.write_csv`.
    """

    def __init__(
        self, path: Path, scratch: Path, *, rank: str, decimals: Mapping[str, int] | None = None
    ) -> None:
        self.path = Path(path)
        self.scratch = Path(scratch)
        self.rank = rank
        self.decimals = dict(decimals or {})
        self._layout: _Layout | None = None
        self._parts: list[tuple[Path, int, set[int]]] = []  # file, rows, columns with dates

    def add(self, frame: pd.DataFrame) -> None:
        """Format the rows of the next part (columns in their final order)."""
        layout = self._layout_of(frame)
        with_dates: set[int] = set()
        arrays = []
        for kind, positions in layout.pieces:
            if kind == "rank":
                continue
            if kind == "dates":
                (i,) = positions
                form = date_form(frame.iloc[:, i])
                if form is not None:
                    with_dates.add(i)
                    known = layout.forms.get(i)
                    layout.forms[i] = form if known is None else known and form
                texts = format_column(frame.iloc[:, i], None, date_only=False)
            else:
                columns = [
                    format_column(frame.iloc[:, i], self.decimals.get(layout.columns[i]))
                    for i in positions
                ]
                texts = list(map(",".join, zip(*columns, strict=True)))
            arrays.append(pa.array(texts, type=pa.large_string()))
        self.scratch.mkdir(parents=True, exist_ok=True)
        file = self.scratch / f"{len(self._parts):06d}.arrow"
        _write_arrow(file, arrays)
        self._parts.append((file, len(frame), with_dates))

    def _layout_of(self, frame: pd.DataFrame) -> _Layout:
        columns = [str(c) for c in frame.columns]
        dtypes = [str(d) for d in frame.dtypes]
        if self._layout is not None:
            if (columns, dtypes) != (self._layout.columns, self._layout.dtypes):
                raise ValueError(
                    f"a part has columns {list(zip(columns, dtypes, strict=True))}; expected "
                    f"{list(zip(self._layout.columns, self._layout.dtypes, strict=True))}"
                )
            return self._layout
        if self.rank not in columns:
            raise ValueError(f"the table has no rank column {self.rank!r}")
        unknown = sorted(set(self.decimals) - set(columns))
        if unknown:
            raise ValueError(f"decimals given for columns {unknown} that the table does not have")
        pieces: list[tuple[str, list[int]]] = []
        for i, name in enumerate(columns):
            series = frame.iloc[:, i]
            if name == self.rank:
                pieces.append(("rank", [i]))
            elif series.dtype.kind == "M" or series.dtype == object:
                pieces.append(("dates", [i]))
            elif pieces and pieces[-1][0] == "text":
                pieces[-1][1].append(i)
            else:
                pieces.append(("text", [i]))
        self._layout = _Layout(columns, dtypes, pieces)
        return self._layout

    def finish(self, ranks: pd.arrays.IntegerArray) -> None:
        """Write the CSV: the parts' rows sorted by ``ranks`` (one per row, in part order)."""
        if self._layout is None:
            raise ValueError("no part was added; expected at least one")
        rows = sum(n for _, n, _ in self._parts)
        if len(ranks) != rows:
            raise ValueError(f"{len(ranks)} ranks for {rows} rows; expected one per row")
        keys = _sort_keys(ranks)
        bounds = np.cumsum([0] + [n for _, n, _ in self._parts])
        sorted_parts = []
        for k, (file, _, with_dates) in enumerate(self._parts):
            part_keys = keys[bounds[k] : bounds[k + 1]]
            order = np.argsort(part_keys, kind="stable")
            target = file.with_suffix(".sorted.arrow")
            lines = self._lines(file, with_dates, ranks[bounds[k] : bounds[k + 1]], order)
            _write_arrow(target, [lines])
            file.unlink()
            sorted_parts.append(target)
        # Rows of all parts in rank order, ties in part order (as a stable sort of the whole).
        part_of_row = np.repeat(np.arange(len(self._parts), dtype=np.int32), np.diff(bounds))
        source = part_of_row[np.argsort(keys, kind="stable")]
        with open(self.path, "w", encoding="utf-8", newline="") as fh:
            fh.write(csv_header(self._layout.columns) + "\n")
            for text in _merged(sorted_parts, source):
                fh.write(text)
        shutil.rmtree(self.scratch, ignore_errors=True)

    def _lines(
        self,
        file: Path,
        with_dates: set[int],
        ranks: pd.arrays.IntegerArray,
        order: np.ndarray,
    ) -> pa.Array:
        """One part's CSV lines in rank order, its rank and dates filled in."""
        assert self._layout is not None
        with pa.memory_map(str(file)) as source:
            stored = pa.ipc.open_file(source).read_all()
        indices = pa.array(order)
        pieces = []
        position = 0
        for kind, columns in self._layout.pieces:
            if kind == "rank":
                pieces.append(_rank_texts(ranks, order))
                continue
            texts = stored.column(position).take(indices)
            position += 1
            (i, *_) = columns
            if kind == "dates" and i in with_dates and self._layout.forms.get(i):
                texts = pc.utf8_slice_codeunits(texts, 0, -len(_MIDNIGHT))
            pieces.append(texts)
        return pc.binary_join_element_wise(*pieces, pa.scalar(",", type=pa.large_string()))


def _sort_keys(ranks: pd.arrays.IntegerArray) -> np.ndarray:
    """Sort keys of the ranks: the rank, and missing ranks after every present one."""
    values = np.asarray(ranks.to_numpy(dtype=np.int64, na_value=0))
    missing = np.asarray(ranks.isna())
    last = values.max(initial=0) + 1
    return np.where(missing, last, values)


def _rank_texts(ranks: pd.arrays.IntegerArray, order: np.ndarray) -> pa.Array:
    taken = ranks.take(order)
    return pa.array(taken, type=pa.int64()).cast(pa.large_string()).fill_null("")


def _write_arrow(file: Path, arrays: Sequence[pa.Array]) -> None:
    """Columns of text as an Arrow IPC file in batches of ``_CHUNK_ROWS`` rows."""
    table = pa.Table.from_arrays(list(arrays), names=[f"c{i}" for i in range(len(arrays))])
    with pa.OSFile(str(file), "wb") as sink:
        with pa.ipc.new_file(sink, table.schema) as writer:
            writer.write_table(table, max_chunksize=_CHUNK_ROWS)


class _Lines:
    """Consecutive lines of one sorted part, read one batch at a time."""

    def __init__(self, file: Path) -> None:
        self._source = pa.memory_map(str(file))
        self._reader = pa.ipc.open_file(self._source)
        self._batch = 0
        self._pending: pa.Array = pa.array([], type=pa.large_string())

    def take(self, count: int) -> pa.Array:
        pieces = []
        while count > 0:
            if len(self._pending) == 0:
                self._pending = self._reader.get_batch(self._batch).column(0)
                self._batch += 1
            piece = self._pending.slice(0, count)
            self._pending = self._pending.slice(len(piece))
            pieces.append(piece)
            count -= len(piece)
        return pa.concat_arrays(pieces) if pieces else pa.array([], type=pa.large_string())

    def close(self) -> None:
        self._source.close()


def _merged(files: Sequence[Path], source: np.ndarray) -> Iterator[str]:
    """Text of the merged lines, ``source[i]`` naming the part of output line ``i``."""
    readers = [_Lines(file) for file in files]
    try:
        for start in range(0, len(source), _CHUNK_ROWS):
            parts = source[start : start + _CHUNK_ROWS]
            counts = np.bincount(parts, minlength=len(readers))
            taken = [readers[k].take(int(c)) for k, c in enumerate(counts) if c]
            lines = pa.concat_arrays(taken)
            # Lines arrive grouped by part; within a chunk each part's lines keep their order.
            grouped = np.argsort(parts, kind="stable")
            placed = np.empty_like(grouped)
            placed[grouped] = np.arange(len(grouped))
            yield "\n".join(lines.take(pa.array(placed)).to_pylist()) + "\n"
    finally:
        for reader in readers:
            reader.close()
