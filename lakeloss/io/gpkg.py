"""GeoPackage output: layers written by GDAL, field descriptions and provenance added after.

The file is a GeoPackage 1.2 (see :data:`GPKG_VERSION`). Feature layers are written by
GDAL (through pyogrio), in their own CRS, with GDAL layer
metadata that ``ogrinfo`` and :func:`pyogrio.read_info` show (the provenance reaches them as
the dataset item ``GPKG_METADATA_ITEM_1``). Attribute tables
(plain DataFrames, ``gpkg_contents.data_type = 'attributes'``) are then filled with SQLite
by :mod:`lakeloss.io.bulk_table` (large ones by a child process), and registered, together
with two OGC GeoPackage extensions, in one more transaction:

* ``gpkg_schema``: one ``gpkg_data_columns`` row per documented column; ``name`` and
  ``title`` read ``"<title> [<unit>]"`` so the unit is visible wherever the alias is shown,
  and ``description`` holds the description.
* ``gpkg_metadata``: the run's provenance as one JSON document (``mime_type``
  ``application/json``) referenced at ``geopackage`` scope, next to the XML rows GDAL itself
  keeps there (for attribute tables those XML rows are written here in GDAL's own form).

Why attribute tables bypass GDAL, measured for 10^6 rows x 9 columns (two of them dates) on
the 2-core development machine, pyogrio 0.13 / GDAL 3.12, no pyarrow: through GDAL 13.9 s
(3.4 s without the date columns: without pyarrow, pyogrio converts dates value by value);
SQLite ``executemany`` 4.4 s; SQLite with ~3500 rows per INSERT 1.5 s for the insert and
5.6 s for the whole :func:`write_geopackage` call including value conversion. Once pyarrow
became a dependency, GDAL with ``use_arrow=True`` measured the same within noise (4.5-6.3 s
against 5.6-6.3 s under load from parallel jobs) but writes dates as DATETIME and holds the
whole table as Arrow at once, so the SQLite path stayed. GDAL reads the result like its own
(types INTEGER, REAL, TEXT, DATE, DATETIME, BOOLEAN).

:class:`GeoPackageStream` writes the same file for a run's two tables from parts that
arrive one after another (partitions of water bodies): each part's features are appended
to the layer and its rows to the table, so only one part is held at a time, and values
known only once every part is in (the rank of each water body) are set by one UPDATE.
"""

from __future__ import annotations

import errno
import json
import os
import re
import sqlite3
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from contextlib import closing, contextmanager
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any
from xml.sax.saxutils import escape, quoteattr

import geopandas
import numpy as np
import pandas as pd
import pyogrio
import pyogrio.errors

from lakeloss.errors import CRSError, InputDataError, OutputError
from lakeloss.io import bulk_table, gpkg_geometry
from lakeloss.io.tables import is_date, iso_dates, to_jsonable

PROVENANCE_URI = "urn:lakeloss:run-provenance"
"""``gpkg_metadata.md_standard_uri`` of the provenance document lakeloss writes."""

GPKG_VERSION = "1.2"
"""GeoPackage version written. GDAL from 2.2 on opens a 1.2 file without a warning; 1.4,
GDAL 3.12's default, made GDAL 3.6 (long-term-support Linux releases) print "may only be
partially supported" on every open, and its validator miss the 1.2 R-tree triggers. Nothing
lakeloss stores needs 1.3 or 1.4 (their additions: R-tree trigger fixes, WKT2 CRS, details of
column constraints)."""
_SPEC = "http://www.geopackage.org/spec120/"  # the extension definitions of version 1.2
_SCHEMA_DEFINITION = _SPEC + "#extension_schema"
_METADATA_DEFINITION = _SPEC + "#extension_metadata"
_BLOCK_ROWS = 100_000  # rows converted to Python objects at a time (bounds memory)
# Attribute-table rows from which a child process writes them: below, its ~0.2 s start-up
# and the payload files cost more than the overlap saves.
_CHILD_MIN_ROWS = 200_000
_MAX_CYCLE = 64  # longest cycle of repeated values written as SQL literals
_PAGE_SIZE = 65536  # [bytes] SQLite page size of a new GeoPackage (the largest SQLite allows)
_SQLITE_PRAGMA = "OGR_SQLITE_PRAGMA"
_SQLITE_FULL = 13  # SQLITE_FULL result code: database or disk is full
_UNIT_IN_TITLE = re.compile(r"^(?P<title>.*) \[(?P<unit>[^\[\]]+)\]$", re.DOTALL)

# Table definitions as given in the GeoPackage 1.2+ specification (schema and metadata
# extensions). IF NOT EXISTS because GDAL may have created some of them already.
_DDL = (
    """CREATE TABLE IF NOT EXISTS gpkg_data_columns (
        table_name TEXT NOT NULL, column_name TEXT NOT NULL, name TEXT, title TEXT,
        description TEXT, mime_type TEXT, constraint_name TEXT,
        CONSTRAINT pk_gdc PRIMARY KEY (table_name, column_name),
        CONSTRAINT gdc_tn UNIQUE (table_name, name))""",
    """CREATE TABLE IF NOT EXISTS gpkg_data_column_constraints (
        constraint_name TEXT NOT NULL, constraint_type TEXT NOT NULL, value TEXT,
        min NUMERIC, min_is_inclusive BOOLEAN, max NUMERIC, max_is_inclusive BOOLEAN,
        description TEXT,
        CONSTRAINT gdcc_ntv UNIQUE (constraint_name, constraint_type, value))""",
    """CREATE TABLE IF NOT EXISTS gpkg_metadata (
        id INTEGER CONSTRAINT m_pk PRIMARY KEY ASC NOT NULL,
        md_scope TEXT NOT NULL DEFAULT 'dataset', md_standard_uri TEXT NOT NULL,
        mime_type TEXT NOT NULL DEFAULT 'text/xml', metadata TEXT NOT NULL DEFAULT '')""",
    """CREATE TABLE IF NOT EXISTS gpkg_metadata_reference (
        reference_scope TEXT NOT NULL, table_name TEXT, column_name TEXT,
        row_id_value INTEGER,
        timestamp DATETIME NOT NULL DEFAULT (strftime('%Y-%m-%dT%H:%M:%fZ','now')),
        md_file_id INTEGER NOT NULL, md_parent_id INTEGER,
        CONSTRAINT crmr_mfi_fk FOREIGN KEY (md_file_id) REFERENCES gpkg_metadata(id),
        CONSTRAINT crmr_mpi_fk FOREIGN KEY (md_parent_id) REFERENCES gpkg_metadata(id))""",
    """CREATE TABLE IF NOT EXISTS gpkg_extensions (
        table_name TEXT, column_name TEXT, extension_name TEXT NOT NULL,
        definition TEXT NOT NULL, scope TEXT NOT NULL,
        CONSTRAINT ge_tce UNIQUE (table_name, column_name, extension_name))""",
)

_EXTENSIONS = (
    ("gpkg_data_columns", "gpkg_schema", _SCHEMA_DEFINITION),
    ("gpkg_data_column_constraints", "gpkg_schema", _SCHEMA_DEFINITION),
    ("gpkg_metadata", "gpkg_metadata", _METADATA_DEFINITION),
    ("gpkg_metadata_reference", "gpkg_metadata", _METADATA_DEFINITION),
)


@dataclass(frozen=True)
class FieldInfo:
    """What one output column holds, for the GeoPackage's data-columns table.

    Attributes
    ----------
    title : str
        Short human label, e.g. ``"Evaporation depth"``; must not itself end in ``[...]``.
    description : str
        One or two sentences: what the value is and how it was obtained.
    unit : str or None
        Unit of the values, e.g. ``"mm"`` or ``"m3"``; None for unitless columns.
    """

    title: str
    description: str
    unit: str | None = None

    @property
    def label(self) -> str:
        """Title with the unit in brackets, as stored in ``name`` and ``title``."""
        return self.title if self.unit is None else f"{self.title} [{self.unit}]"


@dataclass(frozen=True)
class LayerGeometry:
    """Geometry type of a GeoPackage feature layer, decided over all of its features.

    A layer written in parts must be declared as the whole would be: with polygons and
    multipolygons mixed, every feature is written as a multipolygon (a GeoPackage layer has
    one geometry type), also those of a part that holds only polygons.

    Attributes
    ----------
    type_name : str
        Geometry type as GDAL names it, e.g. ``"MultiPolygon"``, ``"Polygon Z"`` or
        ``"Unknown"`` (mixed types).
    promote_to_multi : bool
        Write single geometries as one-part multi-geometries.
    """

    type_name: str
    promote_to_multi: bool

    @classmethod
    def of_types(cls, types: Iterable[str]) -> LayerGeometry | None:
        """The type of a layer whose features are of ``types`` (as a survey of the input
        layer names them), after lakeloss has read them: collections become their polygons,
        missing geometries empty polygons, MultiPoints of one place points. None when the
        types do not settle it (``"Unknown"``, mixtures of kinds)."""
        names = {str(t) for t in types}
        has_z = any(name.endswith(" Z") for name in names)
        names = {name.removesuffix(" Z") for name in names}
        if "GeometryCollection" in names:
            names = (names - {"GeometryCollection"}) | {"Polygon", "MultiPolygon"}
        suffix = " Z" if has_z else ""
        if names and names <= {"Polygon", "MultiPolygon"}:
            if "MultiPolygon" in names:
                return cls("MultiPolygon" + suffix, True)
            return cls("Polygon" + suffix, False)
        if names and names <= {"Point", "MultiPoint"}:
            return cls("Point" + suffix, False)
        return None

    @classmethod
    def of(cls, geometry: geopandas.GeoSeries) -> LayerGeometry:
        """The type pyogrio's GeoPackage writer gives a layer of these geometries.

        The rule is that of :func:`pyogrio.write_dataframe` for the GPKG driver: one type
        as it is; a single type with its multi type (Polygon and MultiPolygon) as the multi
        type, singles promoted; other mixtures ``"Unknown"``; ``" Z"`` appended when a
        non-empty geometry has z. Missing and empty geometries count by their type.
        """
        types = {str(t) for t in pd.unique(geometry.geom_type.dropna())}
        present = geometry[~(geometry.isna().to_numpy() | geometry.is_empty.to_numpy())]
        has_z = bool(present.has_z.any())
        promote = False
        name = "Unknown"
        if len(types) == 1:
            (name,) = types
        elif len(types) == 2:
            for single in ("Point", "LineString", "Polygon"):
                if types == {single, f"Multi{single}"}:
                    name, promote = f"Multi{single}", True
        if has_z and name != "Unknown":
            name = f"{name} Z"
        return cls(name, promote)


def write_geopackage(
    path: str | Path,
    layers: Sequence[tuple[str, geopandas.GeoDataFrame | pd.DataFrame]],
    *,
    fields: Mapping[str, Mapping[str, FieldInfo]],
    metadata: Mapping[str, object],
    alongside: Callable[[], object] | None = None,
) -> None:
    """Write layers, field descriptions and provenance to one GeoPackage.

    Parameters
    ----------
    path : str or Path
        GeoPackage to create (an existing file is replaced).
    layers : sequence of (str, GeoDataFrame or DataFrame)
        Layer name and content, in order. The first is a feature layer with a CRS; later
        ones may be plain DataFrames, written as attribute tables.
    fields : mapping
        ``fields[layer_name][column] -> FieldInfo`` for the columns to document; columns
        without an entry get no description.
    metadata : mapping
        JSON-serialisable provenance of the run (NaN becomes null).
    alongside : callable, optional
        Called once, without arguments, after the feature layers are written and while the
        attribute tables are (by a child process when they are large): other outputs written
        here use the time and the GIL this process would otherwise spend waiting. An
        exception it raises stops the child and propagates unchanged.

    Raises
    ------
    ValueError
        If the layer list or field descriptions are inconsistent (a caller's mistake).
    CRSError
        If the first layer has no CRS.
    OutputError
        If GDAL or SQLite cannot write the file.

    Notes
    -----
    Meant to write into an :class:`~lakeloss.io.atomic.OutputDirectory`: the SQLite part
    runs without a disk journal (see :func:`bulk_table.fast_bulk_settings`), so a crash mid-write leaves a
    file fit only for the staging directory's clean-up. Feature layers come first in the
    file, attribute tables after them, whatever their order in ``layers``.

    From ``_CHILD_MIN_ROWS`` attribute-table rows on, a child process (see
    :mod:`lakeloss.io.bulk_table`) converts the tables while GDAL writes the feature layers
    and inserts them afterwards; its columns pass through ``.npy`` files in a directory
    beside ``path`` that is removed again. Measured for 10^6 polygons and a 12 x 10^6-row
    table with other jobs on the 2-core machine: 18.6-19.4 s for this call, against 7.7 s
    (layer) plus 21.1 s (table) in this process before.
    """
    _check_layers(layers, fields)
    provenance = to_jsonable(dict(metadata))
    path = Path(path)
    if path.exists():
        path.unlink()
    spatial = [(n, f) for n, f in layers if isinstance(f, geopandas.GeoDataFrame)]
    attributes = [(n, f) for n, f in layers if not isinstance(f, geopandas.GeoDataFrame)]
    tables = [_encode_table(name, frame) for name, frame in attributes]
    in_child = sum(t.rows for t in tables) >= _CHILD_MIN_ROWS
    with bulk_table.TableWriter(
        path, tables, block_rows=_BLOCK_ROWS, in_child=in_child
    ) as table_writer:
        for name, frame in spatial:
            _write_layer(path, name, frame, fields.get(name, {}))
        try:
            table_writer.start()
            if alongside is not None:
                alongside()
            table_writer.wait()
        except (sqlite3.Error, bulk_table.ChildFailed) as exc:
            names = [t.name for t in tables]
            raise _write_error(exc, f"cannot write attribute tables {names} to {path}") from exc
    try:
        # Autocommit mode plus an explicit BEGIN, so CREATE TABLE joins the transaction too.
        with closing(sqlite3.connect(os.fspath(path), isolation_level=None)) as con:
            bulk_table.fast_bulk_settings(con)
            con.execute("BEGIN")
            try:
                _write_tables(con, [name for name, _ in attributes], fields, provenance)
            except BaseException:
                if con.in_transaction:
                    con.execute("ROLLBACK")
                raise
            con.execute("COMMIT")
    except sqlite3.Error as exc:
        raise _write_error(
            exc, f"cannot add tables, field descriptions or provenance to {path}"
        ) from exc


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
    late_column : str, optional
        A layer column whose values are known only once every part is in (null in the
        parts), set by :meth:`finish`.
    geometry : LayerGeometry, optional
        The layer's geometry type over all parts (:meth:`LayerGeometry.of` of the whole
        layer's geometries); by default that of the first part, right for one part only.
    child_min_rows : int, optional
        Parts whose table has at least this many rows are written by a child process;
        by default the threshold :func:`write_geopackage` uses.

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
        late_column: str | None = None,
        geometry: LayerGeometry | None = None,
        child_min_rows: int | None = None,
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
        self.late_column = late_column
        self.geometry = geometry
        # The late column's values as the parts brought them, while all parts had some: a
        # caller with the whole tables (write_result) needs no UPDATE. [float64, NaN: null]
        self._late_values: list[np.ndarray] | None = [] if late_column else None

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
            if self.geometry is None:
                self.geometry = LayerGeometry.of(features.geometry)
        else:
            self._check_like_first(schema, features)
        table = replace(table, indexed=(), append=not first)
        with bulk_table.TableWriter(
            self.path,
            [table],
            block_rows=_BLOCK_ROWS,
            in_child=table.rows
            >= (_CHILD_MIN_ROWS if self.child_min_rows is None else self.child_min_rows),
        ) as table_writer:
            _write_layer(
                self.path,
                self.layer,
                features,
                self.fields.get(self.layer, {}),
                append=not first,
                geometry=self.geometry,
            )
            try:
                table_writer.start()
                if alongside is not None:
                    alongside()
                table_writer.wait()
            except (sqlite3.Error, bulk_table.ChildFailed) as exc:
                raise _write_error(
                    exc, f"cannot write attribute tables {[self.table]} to {self.path}"
                ) from exc
        self.features += len(features)
        if self.late_column is not None and self._late_values is not None:
            values = features[self.late_column]
            if len(values) and values.isna().all():
                self._late_values = None
            else:
                self._late_values.append(values.to_numpy(dtype=float, na_value=np.nan))

    def _check_like_first(self, schema: tuple, features: geopandas.GeoDataFrame) -> None:
        assert self._schema is not None
        expected, crs = self._schema
        if schema != expected or features.crs != crs:
            raise ValueError(
                f"a part's columns, types or CRS differ from the first part's: "
                f"{schema} against {expected}; expected every part laid out alike"
            )

    def finish(
        self, *, metadata: Mapping[str, object], late_values: pd.arrays.IntegerArray | None = None
    ) -> None:
        """Index the table, fill the late column, add descriptions and provenance.

        Parameters
        ----------
        metadata : mapping
            JSON-serialisable provenance of the run.
        late_values : IntegerArray, optional
            Values of ``late_column`` for every feature in the order appended.
        """
        if self._schema is None:
            raise ValueError("no part was appended; expected at least one")
        column = self.late_column
        if column is not None:
            if late_values is None or len(late_values) != self.features:
                raise ValueError(
                    f"values of {column!r} for {self.features} features expected, got "
                    f"{None if late_values is None else len(late_values)}"
                )
            if self._late_values is not None and np.array_equal(
                np.concatenate(self._late_values),
                late_values.to_numpy(dtype=float, na_value=np.nan),
                equal_nan=True,
            ):
                column = None  # the parts had them all already
        provenance = to_jsonable(dict(metadata))
        try:
            with closing(sqlite3.connect(os.fspath(self.path), isolation_level=None)) as con:
                bulk_table.fast_bulk_settings(con)
                # The UPDATE rewrites every feature: a journal in memory would hold the
                # whole layer. Without one a failure leaves a broken file, which the
                # staging directory it lives in is removed with.
                con.execute("PRAGMA journal_mode = OFF")
                gpkg_geometry.add_geometry_functions(con)
                con.execute("BEGIN")
                try:
                    if self._keys:
                        bulk_table.create_index(con, self.table, self._keys)
                    _finish_layer(con, self.layer, column, late_values, self._first_rows)
                    _write_tables(con, [self.table], self.fields, provenance)
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
    column: str | None,
    values: pd.arrays.IntegerArray | None,
    first_rows: int,
) -> None:
    """Set ``column`` of every feature to ``values[fid - 1]`` in one UPDATE.

    The same UPDATE gives the date-times of appended features the form of the first part's
    (see :func:`_milliseconds_to_add`). Nothing is written when there is nothing to do.
    """
    settings = [_with_milliseconds(name) for name in _milliseconds_to_add(con, layer, first_rows)]
    if column is not None and values is not None:
        settings.insert(0, _numbered_values(con, layer, column, values))
    if settings:
        con.execute(f"UPDATE {bulk_table.quote_name(layer)} SET {', '.join(settings)}")


def _numbered_values(
    con: sqlite3.Connection, layer: str, column: str, values: pd.arrays.IntegerArray
) -> str:
    """SQL assignment of ``values[fid - 1]`` to ``column``, through a function it defines."""
    count, low, high = con.execute(
        f"SELECT count(*), min(fid), max(fid) FROM {bulk_table.quote_name(layer)}"
    ).fetchone()
    if count != len(values) or (count and (low, high) != (1, count)):
        raise ValueError(
            f"layer {layer!r} has {count} features with ids {low}..{high}; expected ids "
            f"1..{len(values)}, one per value"
        )
    # Eight bytes per feature; a list of Python ints would take 36.
    numbers = np.asarray(values.to_numpy(dtype=np.int64, na_value=0))
    present = ~np.asarray(values.isna())

    def value_of(fid: int) -> int | None:
        return int(numbers[fid - 1]) if present[fid - 1] else None

    con.create_function("lakeloss_value_of", 1, value_of, deterministic=True)
    return f"{bulk_table.quote_name(column)} = lakeloss_value_of(fid)"


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


def _write_tables(
    con: sqlite3.Connection,
    attributes: Sequence[str],
    fields: Mapping[str, Mapping[str, FieldInfo]],
    provenance: object,
) -> None:
    """Registration of the attribute tables ``attributes`` (names), field descriptions and
    provenance, in the caller's single transaction."""
    for name in attributes:
        con.execute(
            "INSERT INTO gpkg_contents (table_name, data_type, identifier, description, srs_id) "
            "VALUES (?, 'attributes', ?, '', 0)",
            (name, name),
        )
        _add_gdal_layer_metadata(con, name, _layer_metadata(fields.get(name, {})))
    _add_extensions(con, fields)
    _add_provenance(con, provenance)


def read_field_descriptions(path: str | Path, table: str) -> dict[str, FieldInfo]:
    """Field descriptions of one table of a GeoPackage written by :func:`write_geopackage`.

    Parameters
    ----------
    path : str or Path
        GeoPackage.
    table : str
        Layer or attribute-table name.

    Returns
    -------
    dict of str to FieldInfo
        Column name to its description, in the order they were written; empty if the
        table has none.
    """
    with closing(_open_read_only(path)) as con:
        if not _has_table(con, "gpkg_data_columns"):
            return {}
        rows = con.execute(
            "SELECT column_name, title, description FROM gpkg_data_columns "
            "WHERE table_name = ? ORDER BY rowid",
            (table,),
        ).fetchall()
    return {
        column: _parse_field(title or "", description or "") for column, title, description in rows
    }


def read_metadata(path: str | Path) -> dict:
    """The provenance document stored by :func:`write_geopackage`.

    Parameters
    ----------
    path : str or Path
        GeoPackage.

    Returns
    -------
    dict
        The provenance, as JSON types.

    Raises
    ------
    InputDataError
        If the file holds no lakeloss provenance.
    """
    with closing(_open_read_only(path)) as con:
        row = None
        if _has_table(con, "gpkg_metadata"):
            row = con.execute(
                "SELECT metadata FROM gpkg_metadata WHERE md_standard_uri = ? "
                "AND mime_type = 'application/json' ORDER BY id DESC LIMIT 1",
                (PROVENANCE_URI,),
            ).fetchone()
    if row is None:
        raise InputDataError(
            f"{path} holds no lakeloss provenance metadata; expected a GeoPackage written "
            "by lakeloss"
        )
    return json.loads(row[0])


def _check_layers(
    layers: Sequence[tuple[str, pd.DataFrame]], fields: Mapping[str, Mapping[str, FieldInfo]]
) -> None:
    """Refuse inconsistent arguments before anything is written."""
    if not layers:
        raise ValueError("no layers given; expected at least the water-body feature layer")
    names = [name for name, _ in layers]
    if len(set(names)) != len(names):
        raise ValueError(f"layer names repeat in {names}; expected unique names")
    first_name, first = layers[0]
    geometry = getattr(first, "active_geometry_name", None)
    if not isinstance(first, geopandas.GeoDataFrame) or geometry not in first.columns:
        raise ValueError(f"first layer {first_name!r} has no geometry; expected a GeoDataFrame")
    if first.crs is None:
        raise CRSError(
            f"layer {first_name!r} has no CRS; expected the water-body layer's own CRS; "
            "set it on the GeoDataFrame before writing"
        )
    frames = dict(layers)
    unknown_layers = sorted(set(fields) - set(frames))
    if unknown_layers:
        raise ValueError(
            f"field descriptions for unknown layers {unknown_layers}; expected {names}"
        )
    for name, infos in fields.items():
        _check_fields(name, frames[name], infos)


def _check_fields(name: str, frame: pd.DataFrame, infos: Mapping[str, FieldInfo]) -> None:
    written = {str(c) for c in frame.columns}
    if not isinstance(frame, geopandas.GeoDataFrame):  # attribute tables keep a named index
        written |= {str(n) for n in frame.index.names if n is not None}
    missing = sorted(set(infos) - written)
    if missing:
        raise ValueError(f"layer {name!r} has no columns {missing} to describe")
    labels = [info.label for info in infos.values()]
    if len(set(labels)) != len(labels):
        raise ValueError(f"layer {name!r} field labels repeat in {labels}; expected unique ones")
    ambiguous = [info.title for info in infos.values() if _UNIT_IN_TITLE.match(info.title)]
    if ambiguous:
        raise ValueError(
            f"field titles {ambiguous} end in a bracketed part; put the unit in FieldInfo.unit"
        )


def _write_layer(
    path: Path,
    name: str,
    frame: pd.DataFrame,
    infos: Mapping[str, FieldInfo],
    *,
    append: bool = False,
    geometry: LayerGeometry | None = None,
) -> None:
    """Write one layer through GDAL with GDAL-visible layer metadata.

    No GDAL *dataset* metadata: GDAL then writes a ``.aux.xml`` sidecar beside the file every
    time a reader opens it. The provenance is in ``gpkg_metadata`` as JSON instead, which
    GDAL shows as the dataset metadata item ``GPKG_METADATA_ITEM_1``.
    ``append``: add the rows to the layer written before (its fields and metadata stay).
    ``geometry``: the layer's geometry type, decided over all its features (by default over
    ``frame``'s, as GDAL's writer decides).
    """
    kind = (
        {}
        if geometry is None
        else {
            "geometry_type": geometry.type_name,
            "promote_to_multi": geometry.promote_to_multi,
        }
    )
    layer_metadata = None if append else _layer_metadata(infos) or None
    # The version is chosen when GDAL creates the file (with the first layer).
    creation = None if path.exists() else {"VERSION": GPKG_VERSION}
    try:
        with _large_pages():
            pyogrio.write_dataframe(
                _gdal_ready(frame),
                path,
                layer=name,
                driver="GPKG",
                layer_metadata=layer_metadata,
                use_arrow=_arrow_safe(frame),
                dataset_options=creation,
                append=append,
                **kind,
            )
    except (pyogrio.errors.DataSourceError, pyogrio.errors.FieldError, RuntimeError) as exc:
        raise _write_error(exc, f"GDAL could not write layer {name!r} to {path}") from exc


@contextmanager
def _large_pages() -> Iterator[None]:
    """SQLite pages of ``_PAGE_SIZE`` bytes in a GeoPackage GDAL creates within this block.

    The page size can only be chosen before the first table exists, so it goes through
    GDAL's ``OGR_SQLITE_PRAGMA``. That option is process-wide: it is set only for the block,
    restored after, and left alone when the user has set it. 64 KiB pages instead of 4 KiB
    took the layer of 10^6 polygons from 4.7-5.9 s to 3.6-4.2 s and the 12 x 10^6-row
    table's INSERTs from 8.6-8.8 s to 8.0-8.4 s (two alternating runs each, quiet machine).
    """
    if pyogrio.get_gdal_config_option(_SQLITE_PRAGMA) is not None:
        yield
        return
    pyogrio.set_gdal_config_options({_SQLITE_PRAGMA: f"page_size={_PAGE_SIZE}"})
    try:
        yield
    finally:
        pyogrio.set_gdal_config_options({_SQLITE_PRAGMA: None})


def _arrow_safe(frame: geopandas.GeoDataFrame) -> bool:
    """Whether GDAL's Arrow path gives the same field types as its row-by-row path.

    Measured for 10^5 polygons: 0.8 s through Arrow against 1.1 s, with the same table
    definition. Only for numeric, boolean and string columns, nullable ones included (a
    partition's all-null ``loss_rank``): through Arrow, dates become DATETIME and object
    columns of mixed types may not convert at all.
    """
    geometry = frame.geometry.name
    return all(
        isinstance(frame[c].dtype, pd.StringDtype) or frame[c].dtype.kind in "iufb"
        for c in frame.columns
        if c != geometry
    )


def _gdal_ready(frame: pd.DataFrame) -> pd.DataFrame:
    """Dates of non-standard calendars (cftime objects) as ISO text; GDAL has no type for them."""
    date_columns = [
        column
        for column in frame.columns
        if frame[column].dtype == object and any(is_date(v) for v in frame[column].head(100))
    ]
    if not date_columns:
        return frame
    frame = frame.copy()
    for column in date_columns:
        texts = iso_dates(frame[column].to_numpy(dtype=object, na_value=None).tolist())
        frame[column] = pd.Series([t or None for t in texts], index=frame.index, dtype=object)
    return frame


def _layer_metadata(infos: Mapping[str, FieldInfo]) -> dict[str, str]:
    """GDAL layer metadata items: one ``column = "label: description"`` per field."""
    return {
        column: f"{info.label}: {info.description}" if info.description else info.label
        for column, info in infos.items()
    }


def _key_columns(frame: pd.DataFrame) -> list[pd.Series]:
    """The named levels of a frame's index, as columns (an unnamed index is not written)."""
    index = frame.index
    if not any(name is not None for name in index.names):
        return []
    unnamed = [i for i, name in enumerate(index.names) if name is None]
    if unnamed:
        raise ValueError(f"index levels {unnamed} have no name; name them or reset the index")
    return [
        pd.Series(index.get_level_values(i), name=str(name)) for i, name in enumerate(index.names)
    ]


def _encode_table(name: str, frame: pd.DataFrame) -> bulk_table.Table:
    """A DataFrame as the SQLite-ready columns of :mod:`lakeloss.io.bulk_table`.

    Plain SQLite rather than GDAL: GDAL without pyarrow converts date columns value by
    value (see module notes), and converting blocks of rows keeps memory bounded for
    10^7-row tables. Text and integer columns that repeat with a cycle of up to
    ``_MAX_CYCLE`` rows (a period table's dates and day counts) become SQL literals; other
    text columns are run-length encoded when that halves them (a period table's ids).

    A named index (such as the water-body id of the period table) becomes the first
    column(s), with an SQL index over it, so GIS software joins the table to the layer on
    that column without scanning the whole table for each feature.
    """
    keys = _key_columns(frame)
    series = [*keys, *(frame.iloc[:, i] for i in range(frame.shape[1]))]
    names = [str(s.name) for s in keys] + [str(c) for c in frame.columns]
    if "fid" in names:
        raise ValueError(f"table {name!r} has a column 'fid'; that name is the GeoPackage row id")
    if len(set(names)) != len(names):
        raise ValueError(f"table {name!r} has repeated column names in {names}")
    encoded = [_encode_values(s) for s in series]  # (sql type, numbers or per-row values)
    lengths = [_cycle_length(values) for _, values in encoded]
    cycle = _common_cycle([n for n in lengths if n is not None])
    columns = []
    for column, (sql_type, values), length in zip(names, encoded, lengths, strict=True):
        if cycle is not None and length is not None:
            columns.append(
                bulk_table.Column(str(column), sql_type, values=_python(values[:cycle]), cycle=True)
            )
        elif isinstance(values, np.ndarray) and values.dtype != object:
            columns.append(bulk_table.Column(str(column), sql_type, numbers=values))
        else:
            distinct, repeats = _runs(values)
            columns.append(
                bulk_table.Column(str(column), sql_type, values=distinct, repeats=repeats)
            )
    return bulk_table.Table(
        name, tuple(columns), len(frame), indexed=tuple(str(s.name) for s in keys)
    )


def _encode_values(series: pd.Series) -> tuple[str, Any]:
    """GeoPackage type and values: a float64 / int64 array, a string array, or objects."""
    sql_type = _sql_type(series)
    if series.dtype.kind == "M":
        series = _date_texts(series, sql_type)
    if sql_type == "REAL":  # SQLite binds NaN as NULL
        return sql_type, series.to_numpy(dtype=float, na_value=np.nan)
    if sql_type in ("INTEGER", "BOOLEAN") and not series.hasnans:
        return sql_type, series.to_numpy().astype(np.int64)
    if isinstance(series.dtype, pd.StringDtype) and not series.hasnans:
        return sql_type, series.array  # kept as a string array: compared and taken in C
    values = _sql_values(series, sql_type)
    if sql_type in ("INTEGER", "BOOLEAN"):
        return sql_type, _objects([None if v is None else int(v) for v in values.tolist()])
    return sql_type, values


def _cycle_length(values: Any) -> int | None:
    """Shortest cycle (<= ``_MAX_CYCLE`` rows) with which text or integers repeat, or None."""
    if isinstance(values, np.ndarray) and values.dtype.kind == "f":
        return None  # floats stay bound parameters: their SQL text need not round-trip
    n = len(values)
    head = _python(values[: 2 * _MAX_CYCLE])
    for length in range(1, min(_MAX_CYCLE, n // 2) + 1):
        if head[length:] == head[: len(head) - length] and _repeats_every(values, length):
            return length
    return None


def _repeats_every(values: Any, length: int) -> bool:
    same = values[length:] == values[:-length]
    return bool(np.all(np.asarray(same, dtype=bool)))


def _common_cycle(lengths: list[int]) -> int | None:
    """One cycle for all cyclic columns (their least common multiple) if short enough."""
    if not lengths:
        return None
    common = int(np.lcm.reduce(np.array(lengths, dtype=np.int64)))
    return common if common <= _MAX_CYCLE else None


def _runs(values: Any) -> tuple[list, np.ndarray | None]:
    """Run-length encoding of text values when it at least halves them, else the values."""
    n = len(values)
    if n < 2:
        return _python(values), None
    changes = np.asarray(values[1:] != values[:-1], dtype=bool)
    starts = np.concatenate([[0], np.flatnonzero(changes) + 1])
    if 2 * len(starts) > n:
        return _python(values), None
    repeats = np.diff(np.append(starts, n)).astype(np.int64)
    return _python(values.take(starts)), repeats


def _python(values: Any) -> list:
    """Values as a list of Python ``str``, ``int`` or None."""
    if isinstance(values, np.ndarray):
        return values.tolist()
    return values.to_numpy(dtype=object, na_value=None).tolist()


def _sql_type(series: pd.Series) -> str:
    """GeoPackage column type (GeoPackage 1.2, Table 1) for a pandas column."""
    kind = series.dtype.kind
    if kind == "b":
        return "BOOLEAN"
    if kind in "iu":
        return "INTEGER"
    if kind == "f":
        return "REAL"
    if kind == "M":
        values = series.to_numpy(dtype="datetime64[s]")
        present = values[~np.isnat(values)]
        return "DATE" if np.all(present == present.astype("datetime64[D]")) else "DATETIME"
    if _is_date_text(series):
        return "DATE"
    return "TEXT"


_ISO_DATE = re.compile(r"\d{4}-\d{2}-\d{2}")


def _is_date_text(series: pd.Series) -> bool:
    """Whether a string column holds only real Gregorian dates as ``YYYY-MM-DD`` text.

    That is how GeoPackage stores a DATE, so such a column is declared DATE and GIS software
    reads dates. Dates of a 360-day or no-leap calendar that do not exist in the Gregorian
    one (2031-02-30) keep the column TEXT. Only the distinct values are parsed, and only
    when the first value looks like a date, so an id column costs one regex match.
    """
    if not _is_text(series) or series.empty:
        return False
    first = series.iloc[0]
    if not isinstance(first, str) or not _ISO_DATE.fullmatch(first):
        return False
    distinct = [text for text in series.unique() if isinstance(text, str)]  # NA left out
    if not all(_ISO_DATE.fullmatch(text) for text in distinct):
        return False
    parsed = pd.to_datetime(pd.Series(distinct), format="%Y-%m-%d", errors="coerce")
    return bool(parsed.notna().all())


def _date_texts(series: pd.Series, sql_type: str) -> pd.Series:
    """A numpy-datetime column as GeoPackage DATE or DATETIME text, NaT as missing.

    Only the distinct values are formatted (a period table's 10^7 rows hold a few dozen).
    """
    codes, distinct = pd.factorize(series.to_numpy(dtype="datetime64[ms]"))
    texts = _sql_values(pd.Series(distinct, dtype="datetime64[ms]"), sql_type)
    array = pd.array(texts, dtype="string").take(codes, allow_fill=True)
    return pd.Series(array, name=series.name)


def _is_text(series: pd.Series) -> bool:
    """A string column: pandas' string dtype, or (pandas 2 ``dtype="str"``) objects all text."""
    if isinstance(series.dtype, pd.StringDtype):
        return True
    return series.dtype == object and pd.api.types.infer_dtype(series, skipna=True) == "string"


def _sql_values(series: pd.Series, sql_type: str) -> np.ndarray:
    """Column values as an object array of what SQLite binds; missing values as None.

    Numbers go to Python objects in one numpy cast rather than a loop; strings of a pandas
    string column are already ``str`` and are passed through.
    """
    if sql_type == "DATE" and _is_text(series):
        return series.to_numpy(dtype=object, na_value=None)  # already GeoPackage DATE text
    if sql_type in ("DATE", "DATETIME"):
        stamps = series.to_numpy(dtype="datetime64[ms]")
        if sql_type == "DATE":
            texts = np.datetime_as_string(stamps, unit="D").tolist()
        else:  # GeoPackage DATETIME is ISO 8601 in UTC with milliseconds
            texts = [t + "Z" for t in np.datetime_as_string(stamps, unit="ms").tolist()]
        return _objects([None if t.startswith("NaT") else t for t in texts])
    if sql_type == "REAL":  # SQLite binds NaN as NULL
        return series.to_numpy(dtype=float, na_value=np.nan).astype(object)
    if sql_type in ("INTEGER", "BOOLEAN") and not series.hasnans:
        return series.to_numpy().astype(np.int64).astype(object)
    values = series.to_numpy(dtype=object, na_value=None)
    if sql_type == "TEXT" and any(is_date(v) for v in values[:100]):
        return _objects([t or None for t in iso_dates(values.tolist())])
    if sql_type == "TEXT" and not isinstance(series.dtype, pd.StringDtype):
        return _objects([None if v is None else str(v) for v in values.tolist()])
    return values


def _objects(values: list) -> np.ndarray:
    """A 1-D object array of ``values`` (``np.array`` would nest sequences or cast)."""
    out = np.empty(len(values), dtype=object)
    out[:] = values
    return out


def _add_gdal_layer_metadata(con: sqlite3.Connection, table: str, items: Mapping[str, str]) -> None:
    """Layer metadata in the form GDAL keeps it, so GDAL tools show it for this table too."""
    if not items:
        return
    entries = "".join(
        f"    <MDI key={quoteattr(key)}>{escape(value)}</MDI>\n" for key, value in items.items()
    )
    document = f"<GDALMultiDomainMetadata>\n  <Metadata>\n{entries}  </Metadata>\n</GDALMultiDomainMetadata>\n"
    for statement in _DDL:
        con.execute(statement)
    cursor = con.execute(
        "INSERT INTO gpkg_metadata (md_scope, md_standard_uri, mime_type, metadata) "
        "VALUES ('dataset', 'http://gdal.org', 'text/xml', ?)",
        (document,),
    )
    con.execute(
        "INSERT INTO gpkg_metadata_reference (reference_scope, table_name, md_file_id) "
        "VALUES ('table', ?, ?)",
        (table, cursor.lastrowid),
    )


def _add_extensions(con: sqlite3.Connection, fields: Mapping[str, Mapping[str, FieldInfo]]) -> None:
    for statement in _DDL:
        con.execute(statement)
    # Only where GDAL has not registered the extension already: the UNIQUE constraint does
    # not catch a repeat, because column_name is NULL and NULLs never compare equal.
    con.executemany(
        "INSERT INTO gpkg_extensions "
        "(table_name, column_name, extension_name, definition, scope) "
        "SELECT ?1, NULL, ?2, ?3, 'read-write' WHERE NOT EXISTS (SELECT 1 FROM "
        "gpkg_extensions WHERE table_name = ?1 AND column_name IS NULL AND extension_name = ?2)",
        _EXTENSIONS,
    )
    con.executemany(
        "INSERT OR REPLACE INTO gpkg_data_columns "
        "(table_name, column_name, name, title, description, mime_type, constraint_name) "
        "VALUES (?, ?, ?, ?, ?, NULL, NULL)",
        [
            (table, column, info.label, info.label, info.description)
            for table, infos in fields.items()
            for column, info in infos.items()
        ],
    )


def _add_provenance(con: sqlite3.Connection, provenance: object) -> None:
    document = json.dumps(provenance, sort_keys=True, indent=2, ensure_ascii=False, allow_nan=False)
    cursor = con.execute(
        "INSERT INTO gpkg_metadata (md_scope, md_standard_uri, mime_type, metadata) "
        "VALUES ('dataset', ?, 'application/json', ?)",
        (PROVENANCE_URI, document),
    )
    con.execute(
        "INSERT INTO gpkg_metadata_reference (reference_scope, md_file_id) "
        "VALUES ('geopackage', ?)",
        (cursor.lastrowid,),
    )


def _parse_field(title: str, description: str) -> FieldInfo:
    match = _UNIT_IN_TITLE.match(title)
    if match is None:
        return FieldInfo(title=title, description=description)
    return FieldInfo(title=match["title"], description=description, unit=match["unit"])


def _write_error(exc: Exception, what: str) -> OSError:
    """A full disk as ``OSError(ENOSPC)`` (the output directory reports it), else OutputError.

    GDAL and SQLite report a full disk in their own exception types and words.
    """
    full = getattr(exc, "sqlite_errorcode", None) == _SQLITE_FULL or any(
        phrase in str(exc).lower() for phrase in ("disk is full", "no space left")
    )
    if full:
        return OSError(errno.ENOSPC, f"{what}: {exc}")
    return OutputError(
        f"{what}: {exc}; expected columns of numbers, text, booleans or dates and a file "
        "not open elsewhere"
    )


def _open_read_only(path: str | Path) -> sqlite3.Connection:
    path = Path(path)
    if not path.is_file():
        raise InputDataError(
            f"GeoPackage {path} does not exist; expected a file written by lakeloss"
        )
    return sqlite3.connect(f"{path.absolute().as_uri()}?mode=ro", uri=True)


def _has_table(con: sqlite3.Connection, name: str) -> bool:
    row = con.execute("SELECT 1 FROM sqlite_master WHERE type = 'table' AND name = ?", (name,))
    return row.fetchone() is not None
