"""GeoParquet dataset output: the partition parts of a run turned into the final files.

With ``[output] format = "geoparquet"`` the per-body outputs are two dataset directories,
each with one Parquet file per partition, numbered in layer order (``000000.parquet``,
``000001.parquet``, ...), so that a reader listing the directory reads the rows in the
layer's order:

* ``waterbodies/``: the feature layer as GeoParquet 1.1 (the ``geo`` key of the file
  metadata: ``primary_column``, ``encoding = "WKB"``, the CRS as PROJJSON,
  ``geometry_types`` and ``bbox`` of the file's own rows), with ``loss_rank`` filled in;
* ``evaporation_by_period/``: the per-period table, the id column first.

Each column carries ``title``, ``description`` and ``unit`` (where it has one) in its Arrow
field metadata, and each file carries the run's provenance (the content of run.json) under
the key :data:`PROVENANCE_KEY`. geopandas (``geopandas.read_parquet("waterbodies")``),
pandas, DuckDB (``read_parquet``, geometry typed with the spatial extension) and pyarrow
read either directory as one table.

The parts (see ``lakeloss/io/parts.py``) were written by geopandas and pandas, so their
GeoParquet metadata is already right for their rows; finishing copies them record batch by
record batch without decoding a geometry, holding one batch at a time. Column types are the
union over all parts: a column that is all null in one partition is typed as in the others,
so the files of a dataset share one schema.
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from lakeloss.io.gpkg import FieldInfo
from lakeloss.io.tables import to_jsonable

PROVENANCE_KEY = "lakeloss:provenance"
"""File metadata key holding the run's provenance as JSON (the content of run.json)."""

LAYER_DIRECTORY = "waterbodies"
PERIOD_DIRECTORY = "evaporation_by_period"
PART_LAYER = "waterbodies.parquet"
"""File names inside a partition's part directory (see ``lakeloss/io/parts.py``)."""
PART_PERIODS = "by_period.parquet"

_RANK = "loss_rank"
_BATCH_ROWS = 65_536  # rows read, converted and written at a time (one row group each)
_COMPRESSION = "zstd"


def finish_dataset(
    part_dirs: Sequence[Path],
    target: Path,
    *,
    loss_rank: pd.arrays.IntegerArray,
    field_info: Mapping[str, Mapping[str, FieldInfo]],
    provenance: Mapping[str, Any],
) -> None:
    """Write the GeoParquet dataset of a run from its partition parts.

    Parameters
    ----------
    part_dirs : sequence of Path
        The parts' directories in partition (layer) order, each holding
        ``waterbodies.parquet`` (GeoParquet) and ``by_period.parquet``.
    target : Path
        Directory that receives ``waterbodies/`` and ``evaporation_by_period/`` (the
        staging directory of the output; created if needed).
    loss_rank : pandas.arrays.IntegerArray
        The rank of every body in layer order (null where a body has none); part k's rows
        take the slice that follows the rows of the parts before it.
    field_info : mapping
        ``field_info[table][column] -> FieldInfo`` for the tables ``waterbodies`` and
        ``evaporation_by_period``; undocumented columns get no field metadata.
    provenance : mapping
        The run's provenance (as in run.json), stored in every file.

    Raises
    ------
    ValueError
        If there is no part, the parts disagree in their columns or their types cannot be
        reconciled, a layer part lacks valid GeoParquet metadata or ``loss_rank``, or the
        parts' rows do not add up to ``len(loss_rank)``. Checked before anything is written.
    """
    if not part_dirs:
        raise ValueError("no partition parts given; expected at least one")
    layer_files = [Path(d) / PART_LAYER for d in part_dirs]
    period_files = [Path(d) / PART_PERIODS for d in part_dirs]
    layer_schema, rows = _common_schema(layer_files)
    period_schema, _ = _common_schema(period_files)
    layer_schema = _check_layer(layer_schema, layer_files, rows, len(loss_rank))
    run_record = json.dumps(to_jsonable(provenance), sort_keys=True, ensure_ascii=False)
    layer_dir, period_dir = Path(target) / LAYER_DIRECTORY, Path(target) / PERIOD_DIRECTORY
    layer_dir.mkdir(parents=True, exist_ok=True)
    period_dir.mkdir(parents=True, exist_ok=True)
    width = max(6, len(str(len(part_dirs) - 1)))  # names sort in partition order
    start = 0
    for index, (layer_file, period_file) in enumerate(zip(layer_files, period_files, strict=True)):
        name = f"{index:0{width}d}.parquet"
        ranks = loss_rank[start : start + rows[index]]
        _copy_part(
            layer_file,
            layer_dir / name,
            layer_schema,
            field_info.get(LAYER_DIRECTORY, {}),
            run_record,
            ranks,
        )
        _copy_part(
            period_file,
            period_dir / name,
            period_schema,
            field_info.get(PERIOD_DIRECTORY, {}),
            run_record,
        )
        start += rows[index]


def _common_schema(files: Sequence[Path]) -> tuple[pa.Schema, list[int]]:
    """The schema every file of the dataset gets, and the row count of each part.

    Only the footers are read. Types are unified permissively (a column of nulls in one
    part takes the type it has in the others); names and order must agree.
    """
    schemas, rows = [], []
    for path in files:
        meta = pq.read_metadata(path)
        schemas.append(meta.schema.to_arrow_schema())
        rows.append(meta.num_rows)
    first = schemas[0]
    for path, schema in zip(files, schemas, strict=True):
        if schema.names != first.names:
            raise ValueError(
                f"part {path} has columns {schema.names}; expected {first.names} as in {files[0]}"
            )
    try:
        unified = pa.unify_schemas(schemas, promote_options="permissive")
    except (pa.ArrowInvalid, pa.ArrowTypeError) as exc:
        raise ValueError(f"the parts' column types cannot be reconciled: {exc}") from exc
    return unified, rows


def _check_layer(
    schema: pa.Schema, files: Sequence[Path], rows: list[int], ranked: int
) -> pa.Schema:
    """Check the layer parts; return ``schema`` with ``loss_rank`` as a 64-bit integer."""
    if _RANK not in schema.names:
        raise ValueError(f"layer parts have no {_RANK!r} column; expected it (all null)")
    at = schema.get_field_index(_RANK)
    kind = schema.field(at).type
    if not (pa.types.is_integer(kind) or pa.types.is_null(kind)):
        raise ValueError(f"{_RANK!r} of the layer parts is {kind}; expected integers or nulls")
    if sum(rows) != ranked:
        raise ValueError(
            f"the layer parts hold {sum(rows)} rows but loss_rank has {ranked}; expected one "
            "rank per body"
        )
    for path in files:
        _check_geo(path, pq.read_schema(path))
    return schema.set(at, schema.field(at).with_type(pa.int64()))


def _check_geo(path: Path, schema: pa.Schema) -> None:
    """Refuse a layer part whose ``geo`` metadata a GeoParquet 1.x reader would not take."""
    raw = (schema.metadata or {}).get(b"geo")
    if raw is None:
        raise ValueError(f"part {path} has no GeoParquet 'geo' metadata")
    geo = json.loads(raw)
    primary = geo.get("primary_column")
    columns = geo.get("columns", {})
    if not str(geo.get("version", "")).startswith("1.") or primary not in columns:
        raise ValueError(
            f"part {path} has GeoParquet metadata version {geo.get('version')!r} with primary "
            f"column {primary!r}; expected version 1.x naming one of its columns"
        )
    for name, column in columns.items():
        if column.get("encoding") != "WKB" or name not in schema.names:
            raise ValueError(
                f"geometry column {name!r} of part {path} is {column.get('encoding')!r}; "
                "expected WKB in a column of the file"
            )


def _copy_part(
    source: Path,
    destination: Path,
    schema: pa.Schema,
    infos: Mapping[str, FieldInfo],
    run_record: str,
    ranks: pd.arrays.IntegerArray | None = None,
) -> None:
    """Copy one part batch by batch into ``destination`` with ``schema``'s types.

    The file keeps the part's own schema metadata (``geo`` with its bbox, pandas' dtypes)
    and field metadata (geometry's GeoArrow type), adds the documented columns' titles,
    descriptions and units and the run's provenance, and fills ``loss_rank`` with
    ``ranks`` when given.
    """
    with pq.ParquetFile(source) as part:
        own = part.schema_arrow
        written = _file_schema(schema, own, infos, run_record)
        rank_at = written.get_field_index(_RANK) if ranks is not None else -1
        with pq.ParquetWriter(destination, written, compression=_COMPRESSION) as writer:
            offset = 0
            for batch in part.iter_batches(batch_size=_BATCH_ROWS):
                table = pa.Table.from_batches([batch]).cast(written)
                if ranks is not None:
                    rank = pa.array(ranks[offset : offset + len(table)], type=pa.int64())
                    table = table.set_column(rank_at, written.field(rank_at), rank)
                    offset += len(table)
                writer.write_table(table)


def _file_schema(
    schema: pa.Schema,
    own: pa.Schema,
    infos: Mapping[str, FieldInfo],
    run_record: str,
) -> pa.Schema:
    """The dataset's column types with this part's own metadata, documented."""
    fields = [
        _documented(field, own.field(field.name).metadata, infos.get(field.name))
        for field in schema
    ]
    metadata = {**(own.metadata or {}), PROVENANCE_KEY.encode(): run_record.encode()}
    return pa.schema(fields, metadata=metadata)


def _documented(
    field: pa.Field, own: Mapping[bytes, bytes] | None, info: FieldInfo | None
) -> pa.Field:
    """``field`` with the part's field metadata and, when documented, its description."""
    metadata = dict(own or {})
    if info is not None:
        metadata[b"title"] = info.title.encode()
        metadata[b"description"] = info.description.encode()
        if info.unit is not None:
            metadata[b"unit"] = info.unit.encode()
    return field.with_metadata(metadata)
