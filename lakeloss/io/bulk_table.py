"""Bulk load of GeoPackage attribute tables with SQLite, in this process or in a child process.

This module imports only numpy and the standard library, so a child process that runs it
(``python -m lakeloss.io.bulk_table <payload directory>``) starts in about 0.2 s instead of
the ~0.5 s that pandas, GDAL and lakeloss's other modules would add.

Columns arrive already reduced to what SQLite binds (see :class:`Column`): numbers as numpy
arrays, text as Python values, optionally run-length encoded, and columns that repeat with a
short cycle (a period table's dates) as SQL literals, so they are neither converted nor bound
row by row. For 1.2 x 10^6 rows x 9 columns on the 2-core development machine, literals for
the three period columns cut the INSERTs from 0.91 to 0.75 s and skipped 0.2 s of conversion.

Why a child process: the conversion of numbers to Python objects and the binding of each
value need the GIL that the caller's CSV formatting holds, and the table cannot be written
while GDAL still writes the feature layer into the same file (SQLite has one writer). A child
converts on the second core while GDAL writes the layer, and inserts once told the file is
free (one line ``go`` on its standard input). It exits when its parent goes away: at once on
Linux (``PR_SET_PDEATHSIG``), elsewhere when it next reads its standard input.
"""

from __future__ import annotations

import json
import os
import queue
import shutil
import signal
import sqlite3
import subprocess
import sys
import tempfile
import threading
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

_MANIFEST = "manifest.json"
_GO = b"go\n"
_MAX_VARIABLES = 32766  # SQLite's default SQLITE_MAX_VARIABLE_NUMBER since 3.32
# Values converted ahead of the INSERTs (about 40 bytes each: a float object and two
# references). Few: converting the whole 12 x 10^6-row table while GDAL wrote the layer took
# 3 GB and shortened the INSERTs only from 10.2 to 9.8 s, while it competed with GDAL (and
# other jobs) for the two cores.
_AHEAD_VALUES = 4_800_000


@dataclass(frozen=True)
class Column:
    """One attribute-table column in the form SQLite binds.

    Attributes
    ----------
    name : str
        Column name.
    sql_type : str
        GeoPackage column type, e.g. ``"REAL"`` or ``"DATE"``.
    numbers : numpy.ndarray or None
        float64 (NaN binds as NULL) or int64 values, one per row.
    values : list or None
        Python values (``str``, ``int`` or None), one per row, or one per run with
        ``repeats``, or one per position of the cycle with ``cycle``.
    repeats : numpy.ndarray or None
        Length of each run of equal values in ``values`` (int64), summing to the row count.
    cycle : bool
        ``values`` repeat with period ``len(values)`` down the rows; written as literals.
    """

    name: str
    sql_type: str
    numbers: np.ndarray | None = None
    values: list | None = None
    repeats: np.ndarray | None = None
    cycle: bool = False


@dataclass(frozen=True)
class Table:
    """An attribute table to create and fill: name, columns, row count and indexed columns.

    ``indexed`` names the columns of one SQL index built after the rows are in (empty: none).
    ``append``: the table exists already (created by an earlier part); only insert the rows.
    """

    name: str
    columns: tuple[Column, ...]
    rows: int
    indexed: tuple[str, ...] = ()
    append: bool = False


def fast_bulk_settings(con: sqlite3.Connection) -> None:
    """Connection settings for one bulk load into a file nobody else has open yet.

    The file lives in a staging directory that is thrown away if the run fails, so crash
    safety of the journal buys nothing here, while a large page cache avoids spilling the
    growing table to the journal. The settings last only as long as this connection.
    """
    con.execute("PRAGMA journal_mode = MEMORY")
    con.execute("PRAGMA synchronous = OFF")
    con.execute("PRAGMA cache_size = -65536")  # [KiB] 64 MiB


def quote_name(name: str) -> str:
    """An SQL identifier in double quotes."""
    return '"' + name.replace('"', '""') + '"'


def variable_limit() -> int:
    """Most parameters one statement may bind in this SQLite build (capped at 32766)."""
    con = sqlite3.connect(":memory:")
    try:
        return min(con.getlimit(sqlite3.SQLITE_LIMIT_VARIABLE_NUMBER), _MAX_VARIABLES)
    finally:
        con.close()


def create_and_fill(
    con: sqlite3.Connection,
    table: Table,
    *,
    block_rows: int,
    variables: int | None = None,
    blocks: Iterator[tuple[int, np.ndarray]] | None = None,
) -> None:
    """Create ``table`` (with the GeoPackage row id ``fid``) unless it exists, insert its rows.

    Parameters
    ----------
    con : sqlite3.Connection
        Open connection, inside the caller's transaction.
    table : Table
        What to write.
    block_rows : int
        Rows converted to Python objects at a time (bounds memory).
    variables : int, optional
        Parameters per statement; default :func:`variable_limit`.
    blocks : iterator, optional
        The blocks of :func:`converted_blocks` for this table when they are already being
        converted (the child starts before the file is free).
    """
    if not table.append:
        definition = ", ".join(f"{quote_name(c.name)} {c.sql_type}" for c in table.columns)
        con.execute(
            f"CREATE TABLE {quote_name(table.name)} "
            f'("fid" INTEGER PRIMARY KEY AUTOINCREMENT NOT NULL, {definition})'
        )
    plan = _Plan(table, variables or variable_limit())
    for start, block in blocks if blocks is not None else _blocks(table, plan, block_rows):
        plan.insert(con, start, block)
    if table.indexed:
        create_index(con, table.name, table.indexed)


def create_index(con: sqlite3.Connection, table: str, columns: Sequence[str]) -> None:
    """The SQL index over ``columns`` of ``table``, built once the rows are in.

    One sort of the finished table instead of 10^7 tree inserts as the rows arrive.
    """
    names = ", ".join(quote_name(c) for c in columns)
    index_name = quote_name(f"idx_{table}_{'_'.join(columns)}")
    con.execute(f"CREATE INDEX {index_name} ON {quote_name(table)} ({names})")


def converted_blocks(
    table: Table, *, block_rows: int, ahead_values: int, variables: int | None = None
) -> Iterator[tuple[int, np.ndarray]]:
    """The blocks :func:`create_and_fill` inserts, converted by a thread started now.

    Up to ``ahead_values`` values (in whole blocks) are converted before anyone asks, so the
    conversion overlaps with whatever the caller waits for and later with SQLite's own work
    (``execute`` releases the GIL while SQLite runs).
    """
    plan = _Plan(table, variables or variable_limit())
    depth = max(1, ahead_values // max(1, block_rows * plan.bound_count))
    return _ahead(_blocks(table, plan, block_rows), depth)


class _Plan:
    """INSERT statements for one table: bound columns as ``?``, cycle columns as literals.

    AUTOINCREMENT, which the GeoPackage asks for on the row id, costs SQLite a write of
    ``sqlite_sequence`` per statement, so many rows go into each statement: one statement per
    row (``executemany``) took 4.4 s for 10^6 rows x 9 columns against 1.5 s with ~3500 rows
    per statement. Statements hold a whole number of cycles, so row ``j`` of any statement
    sits at position ``j % cycle`` of the cycle.
    """

    def __init__(self, table: Table, variable_limit: int) -> None:
        columns = table.columns
        self.cycle = max((len(c.values or ()) for c in columns if c.cycle), default=1)
        self.bound = [i for i, c in enumerate(columns) if not c.cycle]
        self.bound_count = max(1, len(self.bound))
        per_statement = max(1, variable_limit // self.bound_count)
        self.rows_per_statement = max(self.cycle, per_statement // self.cycle * self.cycle)
        names = ", ".join(quote_name(c.name) for c in columns)
        self.head = f"INSERT INTO {quote_name(table.name)} ({names}) VALUES "
        self.templates = [self._row(columns, position) for position in range(self.cycle)]
        self.full = self._sql(self.rows_per_statement)

    def _row(self, columns: Sequence[Column], position: int) -> str:
        parts = [_literal(c.values[position]) if c.cycle and c.values else "?" for c in columns]
        return "(" + ", ".join(parts) + ")"

    def _sql(self, rows: int) -> str:
        return self.head + ", ".join(self.templates[j % self.cycle] for j in range(rows))

    def insert(self, con: sqlite3.Connection, start: int, block: np.ndarray) -> None:
        """Insert one block (a 2-D object array of the bound columns) starting at row ``start``.

        ``start`` is a multiple of the cycle, so statement texts only depend on their length.
        """
        step = self.rows_per_statement
        for offset in range(0, len(block), step):
            chunk = block[offset : offset + step]
            sql = self.full if len(chunk) == step else self._sql(len(chunk))
            con.execute(sql, chunk.ravel().tolist() if self.bound else [])


def _literal(value: object) -> str:
    """SQL literal of a cycle value (text, integer or NULL)."""
    if value is None:
        return "NULL"
    if isinstance(value, str):
        return "'" + value.replace("'", "''") + "'"
    return str(int(value))  # type: ignore[call-overload]


def _blocks(table: Table, plan: _Plan, block_rows: int) -> Iterator[tuple[int, np.ndarray]]:
    """(first row, 2-D object array of the bound columns) for consecutive blocks of rows."""
    step = max(
        plan.rows_per_statement, block_rows // plan.rows_per_statement * plan.rows_per_statement
    )
    expanded = [_expanded(table.columns[i]) for i in plan.bound]
    for start in range(0, table.rows, step):
        stop = min(start + step, table.rows)
        block = np.empty((stop - start, len(plan.bound)), dtype=object)
        for j, values in enumerate(expanded):
            # Assigning a float64 or int64 slice creates Python floats and ints in one call.
            block[:, j] = values[start:stop]
        yield start, block


def _expanded(column: Column) -> np.ndarray:
    """A column's per-row values: its numbers, or an object array of its Python values."""
    if column.numbers is not None:
        return column.numbers
    values = np.empty(len(column.values or ()), dtype=object)
    values[:] = column.values
    if column.repeats is not None:
        return np.repeat(values, column.repeats)  # the same objects, referenced again
    return values


def _ahead(
    blocks: Iterator[tuple[int, np.ndarray]], depth: int
) -> Iterator[tuple[int, np.ndarray]]:
    """The same blocks, converted by a thread (started now) up to ``depth`` blocks ahead."""
    ready: queue.Queue = queue.Queue(maxsize=depth)
    stop = threading.Event()
    done = object()

    def offer(item: object) -> bool:
        """Put ``item`` unless the consumer stopped; False once it has."""
        while not stop.is_set():
            try:
                ready.put(item, timeout=0.1)
                return True
            except queue.Full:
                continue
        return False

    def convert() -> None:
        try:
            for item in blocks:
                if not offer(item):
                    return
            offer(done)
        except BaseException as exc:  # handed to the consumer, which raises it
            offer(exc)

    worker = threading.Thread(target=convert, name="lakeloss-convert", daemon=True)
    worker.start()

    def consume() -> Iterator[tuple[int, np.ndarray]]:
        try:
            while (item := ready.get()) is not done:
                if isinstance(item, BaseException):
                    raise item
                yield item
        finally:
            stop.set()
            worker.join()

    return consume()


# --- the child process -------------------------------------------------------------------


def dump(directory: Path, target: Path, tables: Sequence[Table], *, block_rows: int) -> None:
    """Write ``tables`` into ``directory`` for a child: ``.npy`` arrays and a JSON manifest."""
    entries = []
    for t, table in enumerate(tables):
        columns = []
        for c, column in enumerate(table.columns):
            entry: dict[str, object] = {
                "name": column.name,
                "sql_type": column.sql_type,
                "cycle": column.cycle,
                "values": column.values,
            }
            for part in ("numbers", "repeats"):
                array = getattr(column, part)
                if array is not None:
                    file = f"{t}-{c}-{part}.npy"
                    np.save(directory / file, array, allow_pickle=False)
                    entry[part] = file
            columns.append(entry)
        entries.append(
            {
                "name": table.name,
                "rows": table.rows,
                "columns": columns,
                "indexed": list(table.indexed),
                "append": table.append,
            }
        )
    manifest = {
        "target": os.fspath(target),
        "block_rows": block_rows,
        "variables": variable_limit(),  # the parent's, so both plan statements alike
        "tables": entries,
    }
    (directory / _MANIFEST).write_text(json.dumps(manifest, ensure_ascii=False), encoding="utf-8")


def load(directory: Path) -> tuple[Path, list[Table], int, int]:
    """Target file, tables, block size and parameters per statement from :func:`dump`."""
    manifest = json.loads((directory / _MANIFEST).read_text(encoding="utf-8"))
    tables = []
    for entry in manifest["tables"]:
        columns = []
        for c in entry["columns"]:
            arrays = {
                part: np.load(directory / c[part], mmap_mode="r", allow_pickle=False)
                for part in ("numbers", "repeats")
                if part in c
            }
            columns.append(
                Column(c["name"], c["sql_type"], values=c["values"], cycle=c["cycle"], **arrays)
            )
        tables.append(
            Table(
                entry["name"],
                tuple(columns),
                entry["rows"],
                tuple(entry["indexed"]),
                bool(entry["append"]),
            )
        )
    return (
        Path(manifest["target"]),
        tables,
        int(manifest["block_rows"]),
        int(manifest["variables"]),
    )


def start(directory: Path) -> subprocess.Popen:
    """Start a child that writes the tables dumped in ``directory`` once it reads ``go``."""
    return subprocess.Popen(
        [sys.executable, "-m", "lakeloss.io.bulk_table", os.fspath(directory)],
        stdin=subprocess.PIPE,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
    )


class ChildFailed(Exception):
    """A child's failure as its parent sees it; ``sqlite_errorcode`` as SQLite gave it."""

    def __init__(self, message: str, sqlite_errorcode: int | None = None) -> None:
        super().__init__(message)
        self.sqlite_errorcode = sqlite_errorcode


class TableWriter:
    """Write attribute tables into ``target`` in a child process, or in this one when small.

    Use as a context manager around the writing of the feature layers; call :meth:`start`
    once the file is free for SQLite, then :meth:`wait`. Leaving the block by an exception stops the child;
    the payload directory (beside ``target``) is removed either way.

    Parameters
    ----------
    target : Path
        GeoPackage the tables go into.
    tables : sequence of Table
        Tables to create, in order.
    block_rows : int
        Rows converted to Python objects at a time.
    in_child : bool
        Use a child process (worth it for large tables: start-up costs ~0.2 s).
    """

    def __init__(
        self, target: Path, tables: Sequence[Table], *, block_rows: int, in_child: bool
    ) -> None:
        self.target = target
        self.tables = list(tables)
        self.block_rows = block_rows
        self.in_child = in_child and bool(self.tables)
        self._payload: Path | None = None
        self._process: subprocess.Popen | None = None

    def __enter__(self) -> TableWriter:
        if self.in_child:
            self._payload = Path(
                tempfile.mkdtemp(prefix=f".{self.target.name}.columns-", dir=self.target.parent)
            )
            try:
                dump(self._payload, self.target, self.tables, block_rows=self.block_rows)
                self._process = start(self._payload)
            except BaseException:
                self.__exit__(None, None, None)
                raise
        return self

    def start(self) -> None:
        """Tell the child the file is free (the caller no longer writes into it).

        Without a child the tables are written here and now.

        Raises
        ------
        sqlite3.Error
            In-process SQLite failures, as SQLite raised them.
        ChildFailed
            If the child already ended with an error.
        """
        if not self.tables:
            return
        if self._process is None:
            self._write_here()
            return
        try:
            assert self._process.stdin is not None
            self._process.stdin.write(_GO)
            self._process.stdin.flush()
        except BrokenPipeError:  # the child ended early; wait() reports why
            pass

    def wait(self) -> None:
        """Wait for the child to finish its tables.

        Raises
        ------
        ChildFailed
            If the child reported an error or was killed.
        """
        if self._process is None:
            return
        process, self._process = self._process, None
        try:
            _, err = process.communicate()
        except BaseException:
            _stop(process)
            raise
        if process.returncode != 0:
            raise _child_failure(process.returncode, err)

    def _write_here(self) -> None:
        con = sqlite3.connect(os.fspath(self.target), isolation_level=None)
        try:
            fast_bulk_settings(con)
            con.execute("BEGIN")
            for table in self.tables:
                create_and_fill(con, table, block_rows=self.block_rows)
            con.execute("COMMIT")
        finally:
            con.close()

    def __exit__(self, *exc_info: object) -> None:
        if self._process is not None:
            _stop(self._process)
            self._process = None
        if self._payload is not None:
            shutil.rmtree(self._payload, ignore_errors=True)
            self._payload = None


def _stop(process: subprocess.Popen) -> None:
    """Kill a child and reap it, so no process outlives a failed write."""
    if process.poll() is None:
        process.kill()
    process.wait()
    for pipe in (process.stdin, process.stderr):
        if pipe is not None:
            try:
                pipe.close()
            except OSError:  # a broken pipe to a dead child: nothing left to flush
                pass


def _child_failure(returncode: int, err: bytes) -> ChildFailed:
    lines = err.decode("utf-8", "replace").strip().splitlines()
    try:
        reported = json.loads(lines[-1]) if lines else None
    except json.JSONDecodeError:
        reported = None
    if isinstance(reported, dict) and "message" in reported:
        return ChildFailed(
            f"{reported.get('type', 'Error')}: {reported['message']}",
            reported.get("sqlite_errorcode"),
        )
    if returncode < 0:
        name = signal.Signals(-returncode).name if -returncode in signal.valid_signals() else ""
        return ChildFailed(f"the table-writing process was killed by signal {-returncode} {name}")
    last = " ".join(lines[-1].split()) if lines else "no message"
    return ChildFailed(f"the table-writing process ended with code {returncode}: {last}")


def report(exc: BaseException) -> str:
    """One line a child prints on standard error for its parent: JSON with the error code."""
    return json.dumps(
        {
            "type": type(exc).__name__,
            "message": " ".join(str(exc).split()),
            "sqlite_errorcode": getattr(exc, "sqlite_errorcode", None),
        }
    )


def _die_with_parent() -> None:
    """Ask Linux to kill this process when its parent dies (no orphan after a SIGKILL)."""
    if not sys.platform.startswith("linux"):
        return
    import ctypes

    pr_set_pdeathsig = 1
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(pr_set_pdeathsig, signal.SIGKILL)
    except (OSError, AttributeError):
        return


def _wait_for_go(go: threading.Event, gone: threading.Event) -> None:
    """Read standard input: ``go`` sets ``go``; end of input (parent gone) sets ``gone``."""
    line = sys.stdin.buffer.readline()
    (go if line == _GO else gone).set()


def _child(directory: Path) -> None:
    parent = os.getppid()
    _die_with_parent()
    if os.getppid() != parent:  # the parent died before the request took effect
        raise SystemExit(1)
    target, tables, block_rows, variables = load(directory)
    go, gone = threading.Event(), threading.Event()
    threading.Thread(target=_wait_for_go, args=(go, gone), daemon=True).start()
    # Converting starts now, while the parent's GDAL still writes the file; bounded ahead.
    first = converted_blocks(
        tables[0], block_rows=block_rows, ahead_values=_AHEAD_VALUES, variables=variables
    )
    while not (go.wait(0.05) or gone.is_set()):
        pass
    if gone.is_set():
        raise SystemExit(1)
    con = sqlite3.connect(os.fspath(target), isolation_level=None)
    try:
        fast_bulk_settings(con)
        con.execute("BEGIN")
        for t, table in enumerate(tables):
            blocks = first if t == 0 else None
            create_and_fill(con, table, block_rows=block_rows, variables=variables, blocks=blocks)
        con.execute("COMMIT")
    finally:
        con.close()


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the child: write the dumped tables, report a failure as one line."""
    args = list(sys.argv[1:] if argv is None else argv)
    try:
        _child(Path(args[0]))
    except Exception as exc:
        sys.stderr.write(report(exc) + "\n")
        return 1
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
