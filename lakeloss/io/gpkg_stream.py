"""A run's GeoPackage written partition by partition, the rank filled in at the end.

The same file as :func:`lakeloss.io.gpkg.write_geopackage` writes for the whole tables at
once (feature layer by GDAL, attribute table by SQLite, large parts through the child
process of :mod:`lakeloss.io.bulk_table`, the same descriptions, metadata and extensions),
but built from parts that arrive one after another: each part's features are appended to
the layer and its rows to the table, so no more than one part is held at a time. Values
known only when every part is in (the rank of each water body) are written by one UPDATE.
"""

from __future__ import annotations

import dataclasses
import os
import sqlite3
import struct
from collections.abc import Callable, Mapping
from contextlib import closing
from pathlib import Path

import geopandas
import numpy as np
import pandas as pd
import shapely

from lakeloss.io import bulk_table
from lakeloss.io.gpkg import (
    _BLOCK_ROWS,
    FieldInfo,
    _check_layers,
    _encode_table,
    _key_columns,
    _write_error,
    _write_layer,
    _write_tables,
)
from lakeloss.io.tables import to_jsonable

# GeoPackage geometry header (GeoPackage 1.2, clause 2.1.3): envelope size by indicator.
_ENVELOPE_BYTES = {0: 0, 1: 32, 2: 48, 3: 48, 4: 64}


class GeoPackageStream:
    """Append parts to a GeoPackage feature layer and attribute table, then finish it.

    Parameters
    ----------
    path : Path
        GeoPackage to create (an existing file is replaced).
    layer, table : str
        Names of the feature layer and of the attribute table.
    fields : mapping
        ``fields[name][column] -> FieldInfo`` for the layer and the table (see
        :func:`~lakeloss.io.gpkg.write_geopackage`).
    child_min_rows : int
        Parts whose table has at least this many rows are written by a child process.

    Notes
    -----
    Every part must have the columns and dtypes of the first. The feature ids (``fid``) are
    1, 2, ... in the order rows were appended, which :meth:`finish` relies on.
    """

    def __init__(
        self,
        path: Path,
        *,
        layer: str,
        table: str,
        fields: Mapping[str, Mapping[str, FieldInfo]],
        child_min_rows: int,
    ) -> None:
        self.path = Path(path)
        self.layer = layer
        self.table = table
        self.fields = fields
        self.child_min_rows = child_min_rows
        self.features = 0
        self._schema: tuple | None = None
        self._keys: tuple[str, ...] = ()
        self._first_rows = 0

    def append(
        self,
        features: geopandas.GeoDataFrame,
        rows: pd.DataFrame,
        *,
        alongside: Callable[[], object] | None = None,
    ) -> None:
        """Append one part: ``features`` to the layer, ``rows`` to the table.

        ``alongside`` is called while the table rows are inserted (by a child process for
        large parts), as in :func:`~lakeloss.io.gpkg.write_geopackage`.

        Raises
        ------
        ValueError
            If the part's columns or types differ from the first part's.
        OutputError
            If GDAL or SQLite cannot write the file (``OSError(ENOSPC)`` when the disk is full).
        """
        first = self._schema is None
        table = _encode_table(self.table, rows)
        schema = (
            [(str(c), str(features[c].dtype)) for c in features.columns],
            [(c.name, c.sql_type) for c in table.columns],
        )
        if first:
            _check_layers([(self.layer, features), (self.table, rows)], self.fields)
            if self.path.exists():
                self.path.unlink()
            self._schema = (schema, features.crs)
            self._keys = tuple(str(s.name) for s in _key_columns(rows))
            self._first_rows = len(features)
        else:
            self._check_like_first(schema, features)
        table = dataclasses.replace(table, indexed=(), append=not first)
        with bulk_table.TableWriter(
            self.path,
            [table],
            block_rows=_BLOCK_ROWS,
            in_child=table.rows >= self.child_min_rows,
        ) as table_writer:
            _write_layer(
                self.path, self.layer, features, self.fields.get(self.layer, {}), append=not first
            )
            try:
                table_writer.start()
                if alongside is not None:
                    alongside()
                table_writer.wait()
            except (sqlite3.Error, bulk_table.ChildFailed) as exc:
                raise _write_error(
                    exc, f"cannot write table {self.table!r} to {self.path}"
                ) from exc
        self.features += len(features)

    def _check_like_first(self, schema: tuple, features: geopandas.GeoDataFrame) -> None:
        assert self._schema is not None
        expected, crs = self._schema
        if schema != expected or features.crs != crs:
            raise ValueError(
                f"a part's columns, types or CRS differ from the first part's: "
                f"{schema} against {expected}; expected every part laid out alike"
            )

    def finish(
        self, *, metadata: Mapping[str, object], ranks: tuple[str, pd.arrays.IntegerArray]
    ) -> None:
        """Index the table, fill the layer's rank column, add descriptions and provenance.

        Parameters
        ----------
        metadata : mapping
            JSON-serialisable provenance of the run.
        ranks : (str, IntegerArray)
            Column of the layer and its values for every feature in the order appended.
        """
        if self._schema is None:
            raise ValueError("no part was appended; expected at least one")
        column, values = ranks
        if len(values) != self.features:
            raise ValueError(f"{len(values)} ranks for {self.features} features; expected one each")
        provenance = to_jsonable(dict(metadata))
        try:
            with closing(sqlite3.connect(os.fspath(self.path), isolation_level=None)) as con:
                bulk_table.fast_bulk_settings(con)
                _add_geometry_functions(con)
                con.execute("BEGIN")
                try:
                    if self._keys:
                        bulk_table.create_index(con, self.table, self._keys)
                    _finish_layer(con, self.layer, column, values, self._first_rows)
                    _write_tables(con, [(self.table, None)], self.fields, provenance)  # type: ignore[list-item]
                except BaseException:
                    if con.in_transaction:
                        con.execute("ROLLBACK")
                    raise
                con.execute("COMMIT")
        except sqlite3.Error as exc:
            raise _write_error(
                exc, f"cannot add ranks, field descriptions or provenance to {self.path}"
            ) from exc


def _finish_layer(
    con: sqlite3.Connection,
    layer: str,
    column: str,
    values: pd.arrays.IntegerArray,
    first_rows: int,
) -> None:
    """Set ``column`` of every feature to ``values[fid - 1]`` in one UPDATE.

    The same UPDATE gives the date-times of appended features the form of the first part's
    (see :func:`_milliseconds_to_add`).
    """
    count, low, high = con.execute(
        f"SELECT count(*), min(fid), max(fid) FROM {bulk_table.quote_name(layer)}"
    ).fetchone()
    if count != len(values) or (count and (low, high) != (1, count)):
        raise ValueError(
            f"layer {layer!r} has {count} features with ids {low}..{high}; expected ids "
            f"1..{len(values)}, one per rank"
        )
    numbers = np.asarray(values.to_numpy(dtype=np.int64, na_value=0)).tolist()
    missing = np.asarray(values.isna())
    for i in np.flatnonzero(missing).tolist():
        numbers[i] = None
    con.create_function("lakeloss_value_of", 1, lambda fid: numbers[fid - 1], deterministic=True)
    settings = [f"{bulk_table.quote_name(column)} = lakeloss_value_of(fid)"]
    settings += [_with_milliseconds(name) for name in _milliseconds_to_add(con, layer, first_rows)]
    con.execute(f"UPDATE {bulk_table.quote_name(layer)} SET {', '.join(settings)}")


def _milliseconds_to_add(con: sqlite3.Connection, layer: str, first_rows: int) -> list[str]:
    """DATETIME columns whose appended values lack the milliseconds of the first part's.

    GDAL 3.12 writes a GeoPackage 1.2 DATETIME with milliseconds (``...T10:00:00.000``) into
    the layer it creates, but into a layer it appends to only when they are not zero
    (``...T10:00:00``). The first part's form is taken as the file's.
    """
    quoted = bulk_table.quote_name(layer)
    columns = [
        row[1] for row in con.execute(f"PRAGMA table_info({quoted})") if row[2] == "DATETIME"
    ]
    out = []
    for column in columns:
        name = bulk_table.quote_name(column)
        first = con.execute(
            f"SELECT {name} FROM {quoted} WHERE fid <= ? AND {name} IS NOT NULL LIMIT 1",
            (first_rows,),
        ).fetchone()
        if first is None or _has_fraction(str(first[0])):
            out.append(column)
    return out


def _has_fraction(text: str) -> bool:
    time = text.find("T")
    return time >= 0 and text[time + 9 : time + 10] == "."


def _with_milliseconds(column: str) -> str:
    """SQL assignment adding ``.000`` after the seconds of values written without a fraction."""
    name = bulk_table.quote_name(column)
    time = f"instr({name}, 'T')"
    return (
        f"{name} = CASE WHEN {time} = 0 OR substr({name}, {time} + 9, 1) = '.' THEN {name} "
        f"ELSE substr({name}, 1, {time} + 8) || '.000' || substr({name}, {time} + 9) END"
    )


def _add_geometry_functions(con: sqlite3.Connection) -> None:
    """The SQL functions the GeoPackage R-tree triggers call, for updates in plain SQLite.

    GDAL's triggers on a feature table refer to ``ST_IsEmpty`` and ``ST_MinX`` ... ``ST_MaxY``
    (GeoPackage 1.2, Annex F.3); SQLite refuses an UPDATE of any column when a trigger that
    may fire names a function it does not know. These read the GeoPackage geometry blob: the
    empty flag and envelope of its header, else the bounds of its WKB body.
    """
    con.create_function("ST_IsEmpty", 1, _is_empty, deterministic=True)
    for name, position in (("ST_MinX", 0), ("ST_MaxX", 2), ("ST_MinY", 1), ("ST_MaxY", 3)):
        con.create_function(name, 1, _bound(position), deterministic=True)


def _is_empty(blob: bytes | None) -> int | None:
    if blob is None:
        return None
    return 1 if blob[3] & 0b10000 else 0


def _bound(position: int) -> Callable[[bytes | None], float | None]:
    """One of the bounds (xmin, ymin, xmax, ymax) of a GeoPackage geometry blob."""

    def bound(blob: bytes | None) -> float | None:
        if blob is None or _is_empty(blob):
            return None
        flags = blob[3]
        indicator = (flags >> 1) & 0b111
        if indicator:
            order = "<" if flags & 1 else ">"
            xmin, xmax, ymin, ymax = struct.unpack_from(order + "4d", blob, 8)
            return (xmin, ymin, xmax, ymax)[position]
        bounds = shapely.from_wkb(bytes(blob[8 + _ENVELOPE_BYTES[indicator] :])).bounds
        return float(bounds[position])

    return bound
