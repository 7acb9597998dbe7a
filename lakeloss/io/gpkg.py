"""GeoPackage output: layers and tables written by GDAL, field descriptions and provenance after.

The file is a GeoPackage 1.2 (see :data:`GPKG_VERSION`). GDAL (through pyogrio) writes
everything that holds rows: feature layers, in their own CRS, and attribute tables (plain
DataFrames, ``gpkg_contents.data_type = 'attributes'``) through its Arrow path
(:func:`pyogrio.write_arrow` without geometry), each with GDAL layer metadata that
``ogrinfo`` and :func:`pyogrio.read_info` show (the provenance reaches them as the dataset
item ``GPKG_METADATA_ITEM_1``). One SQLite transaction then adds an index over each
attribute table's key column and two OGC GeoPackage extensions:

* ``gpkg_schema``: one ``gpkg_data_columns`` row per documented column; ``name`` and
  ``title`` read ``"<title> [<unit>]"`` so the unit is visible wherever the alias is shown,
  and ``description`` holds the description.
* ``gpkg_metadata``: the run's provenance as one JSON document (``mime_type``
  ``application/json``) referenced at ``geopackage`` scope, next to the XML rows GDAL itself
  keeps there.

The Arrow types of an attribute table's columns are chosen so that GDAL declares the same
GeoPackage types the columns had when lakeloss filled the tables with its own SQLite code
(INTEGER, REAL, TEXT, DATE, DATETIME, BOOLEAN; dates as DATE, not DATETIME). That code (a
child process fed through ``.npy`` files) was replaced because it was no faster end to end
and GDAL's writer is far less code (benchmarks/README.md, "Outputs"), with the same values
and types in the file.
"""

from __future__ import annotations

import errno
import json
import os
import re
import sqlite3
from collections.abc import Iterator, Mapping, Sequence
from contextlib import closing, contextmanager
from dataclasses import dataclass
from pathlib import Path

import geopandas
import numpy as np
import pandas as pd
import pyarrow as pa
import pyogrio
import pyogrio.errors

from lakeloss.errors import CRSError, InputDataError, OutputError
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
# SQLite page size of a new GeoPackage (64 KiB, the largest SQLite allows), no disk journal,
# no syncs, a 64 MiB page cache: see _staging_pragmas.
_PRAGMAS = "page_size=65536,journal_mode=MEMORY,synchronous=OFF,cache_size=-65536"
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


def write_geopackage(
    path: str | Path,
    layers: Sequence[tuple[str, geopandas.GeoDataFrame | pd.DataFrame]],
    *,
    fields: Mapping[str, Mapping[str, FieldInfo]],
    metadata: Mapping[str, object],
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
    Meant to write into an :class:`~lakeloss.io.atomic.OutputDirectory`: the last SQLite
    transaction runs without a disk journal, so a crash mid-write leaves a file fit only for
    the staging directory's clean-up. Feature layers come first in the file, attribute
    tables after them, whatever their order in ``layers``.
    """
    _check_layers(layers, fields)
    provenance = to_jsonable(dict(metadata))
    path = Path(path)
    if path.exists():
        path.unlink()
    spatial = [(n, f) for n, f in layers if isinstance(f, geopandas.GeoDataFrame)]
    attributes = [(n, f) for n, f in layers if not isinstance(f, geopandas.GeoDataFrame)]
    tables = [(name, _arrow_table(name, frame)) for name, frame in attributes]
    with _staging_pragmas():
        for name, frame in spatial:
            _write_layer(path, name, frame, fields.get(name, {}))
        for name, table in tables:
            _write_table(path, name, table, fields.get(name, {}))
    try:
        # Autocommit mode plus an explicit BEGIN, so CREATE INDEX joins the transaction too.
        with closing(sqlite3.connect(os.fspath(path), isolation_level=None)) as con:
            _fast_bulk_settings(con)
            con.execute("BEGIN")
            try:
                _write_tables(con, attributes, fields, provenance)
            except BaseException:
                if con.in_transaction:
                    con.execute("ROLLBACK")
                raise
            con.execute("COMMIT")
    except sqlite3.Error as exc:
        raise _write_error(
            exc, f"cannot add indexes, field descriptions or provenance to {path}"
        ) from exc


def _write_tables(
    con: sqlite3.Connection,
    attributes: Sequence[tuple[str, pd.DataFrame]],
    fields: Mapping[str, Mapping[str, FieldInfo]],
    provenance: object,
) -> None:
    """Key indexes, field descriptions and provenance, in the caller's single transaction.

    The index over a table's key columns (its named index) is built once the rows are in:
    one sort instead of a tree insert per row. It lets GIS software join the table to the
    layer on that column without scanning the whole table for each feature.
    """
    for name, frame in attributes:
        keys = [str(s.name) for s in _key_columns(frame)]
        if keys:
            columns = ", ".join(_quote_name(c) for c in keys)
            index = _quote_name(f"idx_{name}_{'_'.join(keys)}")
            con.execute(f"CREATE INDEX {index} ON {_quote_name(name)} ({columns})")
    _add_extensions(con, fields)
    _add_provenance(con, provenance)


def _fast_bulk_settings(con: sqlite3.Connection) -> None:
    """Connection settings for writing into a file nobody else has open yet.

    The file lives in a staging directory that is thrown away if the run fails (see
    :class:`~lakeloss.io.atomic.OutputDirectory`), so crash safety of the journal buys
    nothing here. The settings last only as long as this connection.
    """
    con.execute("PRAGMA journal_mode = MEMORY")
    con.execute("PRAGMA synchronous = OFF")


def _quote_name(name: str) -> str:
    """An SQL identifier in double quotes."""
    return '"' + name.replace('"', '""') + '"'


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
    path: Path, name: str, frame: pd.DataFrame, infos: Mapping[str, FieldInfo]
) -> None:
    """Write one layer through GDAL with GDAL-visible layer metadata.

    No GDAL *dataset* metadata: GDAL then writes a ``.aux.xml`` sidecar beside the file every
    time a reader opens it. The provenance is in ``gpkg_metadata`` as JSON instead, which
    GDAL shows as the dataset metadata item ``GPKG_METADATA_ITEM_1``.
    """
    layer_metadata = _layer_metadata(infos) or None
    # The version is chosen when GDAL creates the file (with the first layer).
    creation = None if path.exists() else {"VERSION": GPKG_VERSION}
    try:
        pyogrio.write_dataframe(
            _gdal_ready(frame),
            path,
            layer=name,
            driver="GPKG",
            layer_metadata=layer_metadata,
            use_arrow=_arrow_safe(frame),
            dataset_options=creation,
        )
    except (pyogrio.errors.DataSourceError, pyogrio.errors.FieldError, RuntimeError) as exc:
        raise _write_error(exc, f"GDAL could not write layer {name!r} to {path}") from exc


def _write_table(path: Path, name: str, table: pa.Table, infos: Mapping[str, FieldInfo]) -> None:
    """Write one attribute table (no geometry) through GDAL's Arrow path.

    GDAL registers it in ``gpkg_contents`` (``data_type = 'attributes'``) and keeps its
    layer metadata, as for a feature layer.
    """
    try:
        pyogrio.write_arrow(
            table,
            path,
            layer=name,
            driver="GPKG",
            geometry_name=None,
            geometry_type=None,
            layer_metadata=_layer_metadata(infos) or None,
        )
    except (pyogrio.errors.DataSourceError, pyogrio.errors.FieldError, RuntimeError) as exc:
        raise _write_error(exc, f"GDAL could not write table {name!r} to {path}") from exc


@contextmanager
def _staging_pragmas() -> Iterator[None]:
    """SQLite settings for the GeoPackage GDAL writes within this block (``_PRAGMAS``).

    GDAL applies its ``OGR_SQLITE_PRAGMA`` option each time it opens the file. The page size
    (64 KiB instead of 4 KiB) can only be chosen before the first table exists; the others
    skip the disk journal and its syncs, which buy nothing for a file in a staging directory
    that is thrown away if the run fails and synced once before it is committed (see
    :class:`~lakeloss.io.atomic.OutputDirectory`). The option is process-wide: it is set
    only for the block, restored after, and left alone when the user has set it.

    Larger pages write a large layer measurably faster (benchmarks/README.md, "Outputs",
    figures behind the code).
    """
    if pyogrio.get_gdal_config_option(_SQLITE_PRAGMA) is not None:
        yield
        return
    pyogrio.set_gdal_config_options({_SQLITE_PRAGMA: _PRAGMAS})
    try:
        yield
    finally:
        pyogrio.set_gdal_config_options({_SQLITE_PRAGMA: None})


def _arrow_safe(frame: geopandas.GeoDataFrame) -> bool:
    """Whether GDAL's Arrow path gives the same field types as its row-by-row path.

    The Arrow path is faster with the same table definition (benchmarks/README.md,
    "Outputs", figures behind the code). Only for numeric and string columns: through
    Arrow, dates become DATETIME and object columns of mixed types may not convert at all.
    """
    geometry = frame.geometry.name
    return all(
        isinstance(frame[c].dtype, pd.StringDtype)
        or (isinstance(frame[c].dtype, np.dtype) and frame[c].dtype.kind in "iuf")
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


def _arrow_table(name: str, frame: pd.DataFrame) -> pa.Table:
    """An attribute table as Arrow columns whose types GDAL maps to the GeoPackage's.

    Arrow type -> column type: float64 -> REAL (NaN stored as NULL), int64 -> INTEGER
    (int32 would become MEDIUMINT), bool -> BOOLEAN, date32 -> DATE, timestamp in UTC ->
    DATETIME, string -> TEXT. A named index (such as the water-body id of the period table)
    becomes the first column(s); :func:`write_geopackage` indexes it in SQL afterwards.
    """
    keys = _key_columns(frame)
    series = [*keys, *(frame.iloc[:, i] for i in range(frame.shape[1]))]
    names = [str(s.name) for s in keys] + [str(c) for c in frame.columns]
    if "fid" in names:
        raise ValueError(f"table {name!r} has a column 'fid'; that name is the GeoPackage row id")
    if len(set(names)) != len(names):
        raise ValueError(f"table {name!r} has repeated column names in {names}")
    return pa.table(
        [_arrow_column(s.reset_index(drop=True)) for s in series],
        names=names,
    )


def _arrow_column(series: pd.Series) -> pa.Array:
    """One column as an Arrow array of the type that gives its GeoPackage type (see above)."""
    sql_type = _sql_type(series)
    if sql_type == "REAL":
        return pa.array(series.to_numpy(dtype=float, na_value=np.nan))
    if sql_type in ("INTEGER", "BOOLEAN"):
        arrow_type = pa.int64() if sql_type == "INTEGER" else pa.bool_()
        if not series.hasnans:
            return pa.array(series.to_numpy(), type=arrow_type)
        return pa.array(series.to_numpy(dtype=object, na_value=None), type=arrow_type)
    if series.dtype.kind == "M":
        stamps = series.to_numpy(dtype="datetime64[ms]")
        if sql_type == "DATE":
            return pa.array(stamps.astype("datetime64[D]"), from_pandas=True)
        return pa.array(stamps, type=pa.timestamp("ms", tz="UTC"), from_pandas=True)
    if sql_type == "DATE":  # ISO date text, checked by _is_date_text
        return pa.array(series.to_numpy(dtype=object, na_value=None), type=pa.string()).cast(
            pa.date32()
        )
    values = series.to_numpy(dtype=object, na_value=None)
    if any(is_date(v) for v in values[:100]):  # cftime dates of any calendar
        return pa.array([t or None for t in iso_dates(values.tolist())], type=pa.string())
    if _is_text(series):  # converted by Arrow, in C
        return pa.array(values, type=pa.string(), from_pandas=True)
    return pa.array([None if v is None else str(v) for v in values.tolist()], type=pa.string())


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


def _is_text(series: pd.Series) -> bool:
    """A string column: pandas' string dtype, or (pandas 2 ``dtype="str"``) objects all text."""
    if isinstance(series.dtype, pd.StringDtype):
        return True
    return series.dtype == object and pd.api.types.infer_dtype(series, skipna=True) == "string"


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
