"""GeoParquet dataset output (``[output] format = "geoparquet"``) finished from partition parts.

Fixtures: a real run of tests/builders.py's pond district (12 ponds and a reservoir in UTM zone
55 south, two months of daily climate) plus one pond far outside the climate grid (so it has no
result and no rank); its whole-run tables are cut into partition parts written the way the
design of issue 15 fixes them (``GeoDataFrame.to_parquet(index=False)`` and
``DataFrame.to_parquet(index=True)``, ``loss_rank`` all null), and the dataset finished from
them is read back by geopandas, pandas, pyarrow and DuckDB's spatial extension. Hand-made parts
cover what a real layer can bring: a text column that is empty throughout one partition,
missing and empty geometries, text ids.

GDAL: the GDAL inside pyogrio's wheels (3.12) is built without the (Arrow) Parquet driver, and
so is the GDAL inside DuckDB's spatial extension; readers through GDAL need a GDAL built with
it (``ogrinfo --formats`` lists ``Parquet``).
"""

from __future__ import annotations

import json
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pyproj
import pytest
import shapely
from builders import (
    CHOW_CLIMATE,
    CHOW_FIELDS,
    case_config,
    climate_dataset,
    pond_layer,
    write_netcdf,
)
from geopandas.testing import assert_geodataframe_equal

from lakeloss.config import OutputConfig, load_config
from lakeloss.errors import ConfigError
from lakeloss.io.geoparquet import PROVENANCE_KEY, finish_dataset
from lakeloss.io.tables import write_json

# GeoParquet 1.1.0 specification, "geometry_types": the valid type names (each may end in " Z").
GEOMETRY_TYPES = {
    "Point",
    "LineString",
    "Polygon",
    "MultiPoint",
    "MultiLineString",
    "MultiPolygon",
    "GeometryCollection",
}


def write_parts(directory: Path, waterbodies, by_period, stops) -> list[Path]:
    """Cut whole-run tables into parts ``directory/NNNNNN`` at the given row ``stops``."""
    ids = waterbodies.columns[0]
    parts, start = [], 0
    for index, stop in enumerate(stops):
        part = directory / f"{index:06d}"
        part.mkdir(parents=True)
        bodies = waterbodies.iloc[start:stop].copy()
        bodies["loss_rank"] = pd.array([pd.NA] * len(bodies), dtype="Int64")
        bodies.to_parquet(part / "waterbodies.parquet", index=False)
        periods = by_period[by_period.index.isin(bodies[ids])]
        periods.to_parquet(part / "by_period.parquet", index=True)
        parts.append(part)
        start = stop
    return parts


@pytest.fixture(scope="module")
def run_result(tmp_path_factory):
    import lakeloss

    base = pond_layer()
    far = base.iloc[[0]].copy()  # 5 degrees east of the grid: no climate, no rank
    far["pond_id"], far["name"] = 999, "far pond"
    far["geometry"] = far.geometry.translate(500_000.0, 0.0)
    layer = pd.concat([base.iloc[:6], far, base.iloc[6:]], ignore_index=True)
    directory = tmp_path_factory.mktemp("case")
    layer.to_file(directory / "ponds.gpkg", layer="ponds", driver="GPKG")
    times = pd.date_range("2031-01-01", periods=59, freq="D")
    climate = write_netcdf(climate_dataset(times, CHOW_FIELDS), directory / "climate.nc")
    config = case_config(
        directory / "ponds.gpkg", climate, directory / "out", "energy_balance", CHOW_CLIMATE
    )
    return lakeloss.run(config)


def _finish(result, directory: Path, stops) -> Path:
    parts = write_parts(directory / "_parts", result.waterbodies, result.by_period, stops)
    target = directory / "out"
    finish_dataset(
        parts,
        target,
        loss_rank=result.waterbodies["loss_rank"].array,
        field_info=result.field_info,
        provenance=result.provenance,
    )
    return target


@pytest.fixture(scope="module")
def three_parts(run_result, tmp_path_factory):
    return _finish(run_result, tmp_path_factory.mktemp("three"), [5, 10, 14])


def test_layer_reads_back_as_the_run_layer_with_its_ranks(run_result, three_parts):
    assert run_result.waterbodies["loss_rank"].isna().sum() == 1  # the far pond
    assert sorted(p.name for p in (three_parts / "waterbodies").iterdir()) == [
        "000000.parquet",
        "000001.parquet",
        "000002.parquet",
    ]
    back = gpd.read_parquet(three_parts / "waterbodies")
    assert_geodataframe_equal(back, run_result.waterbodies, check_crs=True)
    assert back.crs == pyproj.CRS("EPSG:32755")
    assert back["loss_rank"].dtype == "Int64"


def test_period_table_reads_back_as_the_concatenated_parts(run_result, three_parts):
    parts = sorted((three_parts.parent / "_parts").glob("*/by_period.parquet"))
    expected = pd.concat([pd.read_parquet(p) for p in parts])
    back = pd.read_parquet(three_parts / "evaporation_by_period")
    pd.testing.assert_frame_equal(back, expected)
    # The values are the run's; Parquet keeps the dates in milliseconds, not seconds.
    whole = run_result.by_period.astype({"period_start": back["period_start"].dtype})
    whole = whole.astype({"period_end": back["period_end"].dtype})
    pd.testing.assert_frame_equal(back, whole)
    assert back.index.name == "pond_id"


def test_one_part_and_three_parts_hold_the_same_tables(run_result, three_parts, tmp_path):
    one = _finish(run_result, tmp_path, [14])
    for table in ("waterbodies", "evaporation_by_period"):
        assert pq.read_table(one / table).equals(pq.read_table(three_parts / table))


def test_files_carry_geoparquet_metadata_of_their_own_rows(three_parts):
    # GeoParquet 1.1.0 specification, "File metadata" and "Column metadata".
    for path in sorted((three_parts / "waterbodies").glob("*.parquet")):
        geo = json.loads(pq.read_schema(path).metadata[b"geo"])
        assert geo["version"].startswith("1.")
        assert geo["primary_column"] == "geometry"
        column = geo["columns"]["geometry"]
        assert column["encoding"] == "WKB"
        assert pyproj.CRS.from_json_dict(column["crs"]) == pyproj.CRS("EPSG:32755")
        assert set(column["geometry_types"]) <= GEOMETRY_TYPES
        shapes = shapely.from_wkb(pq.read_table(path, columns=["geometry"])["geometry"])
        assert column["bbox"] == pytest.approx(list(shapely.total_bounds(shapes)))
        types = {t for t in shapely.get_type_id(shapes)}
        assert column["geometry_types"] == ["Polygon"] and types == {3}


def test_columns_documented_and_provenance_in_every_file(run_result, three_parts, tmp_path):
    write_json(tmp_path / "run.json", run_result.provenance)  # as the run writes run.json
    run_json = json.loads((tmp_path / "run.json").read_text())
    assert run_json["counts"]["waterbodies"] == 14
    for table in ("waterbodies", "evaporation_by_period"):
        infos = run_result.field_info[table]
        for path in sorted((three_parts / table).glob("*.parquet")):
            schema = pq.read_schema(path)
            record = json.loads(schema.metadata[PROVENANCE_KEY.encode()])
            assert record == run_json
            for column, info in infos.items():
                meta = schema.field(column).metadata
                assert meta[b"title"].decode() == info.title
                assert meta[b"description"].decode() == info.description
                assert meta.get(b"unit", b"").decode() == (info.unit or "")
    layer = pq.read_schema(three_parts / "waterbodies" / "000001.parquet")
    assert layer.field("evap_mm").metadata[b"unit"] == b"mm"
    assert layer.field("evap_m3").metadata[b"unit"] == b"m3"


def _duckdb():
    """A DuckDB connection with the spatial extension loaded from its PyPI wheel (offline)."""
    import duckdb
    import duckdb_extension_spatial

    package = Path(duckdb_extension_spatial.__path__[0])
    (extension,) = package.rglob("spatial.duckdb_extension")
    connection = duckdb.connect(config={"autoinstall_known_extensions": False})
    connection.load_extension(str(extension))
    return connection


def test_duckdb_spatial_reads_geometry_crs_and_ranks(run_result, three_parts):
    layer = (three_parts / "waterbodies" / "*.parquet").as_posix()
    with _duckdb() as db:
        rows = db.sql(
            f"SELECT pond_id, loss_rank, ST_Area(geometry), typeof(geometry) "
            f"FROM read_parquet('{layer}')"
        ).fetchall()
        periods = (three_parts / "evaporation_by_period" / "*.parquet").as_posix()
        totals = db.sql(
            f"SELECT pond_id, sum(evap_m3) FROM read_parquet('{periods}') GROUP BY pond_id"
        ).fetchall()
    expected = run_result.waterbodies
    assert [r[0] for r in rows] == expected["pond_id"].tolist()  # layer order
    assert [r[1] for r in rows] == [None if pd.isna(v) else v for v in expected["loss_rank"]]
    np.testing.assert_allclose([r[2] for r in rows], expected.geometry.area, rtol=1e-12)
    assert {r[3] for r in rows} == {"GEOMETRY('EPSG:32755')"}
    by_body = run_result.by_period.groupby(level=0)["evap_m3"].sum(min_count=1)
    got = {body: np.nan if total is None else total for body, total in totals}
    assert got == pytest.approx(by_body.to_dict(), nan_ok=True)


def test_column_empty_in_one_part_missing_geometry_and_text_ids(tmp_path):
    # A layer whose "owner" attribute is filled only in the second partition, with a missing
    # and an empty geometry and text ids: the dataset has one schema and reads back whole.
    n = 6
    layer = gpd.GeoDataFrame(
        {
            "dam_id": pd.array([f"D-{i:03d}" for i in range(n)], dtype="str"),
            "owner": pd.Series(
                [None, None, None, "Tilbury farm", None, "Corella station"], dtype=object
            ),
            "evap_mm": [1.5, np.nan, 2.0, 3.0, 4.0, 5.0],
            "loss_rank": pd.array([4, pd.NA, 3, 5, 2, 1], dtype="Int64"),
        },
        geometry=[shapely.box(i, 0, i + 0.5, 0.5) for i in range(n)],
        crs="EPSG:4326",
    )
    layer.loc[1, "geometry"] = None
    layer.loc[2, "geometry"] = shapely.Polygon()
    periods = pd.DataFrame(
        {"period_label": pd.array(["2031"] * n, dtype="str"), "evap_mm": np.arange(n) * 1.0},
        index=pd.Index(layer["dam_id"], name="dam_id"),
    )
    parts = write_parts(tmp_path / "_parts", layer, periods, [3, 6])
    assert pq.read_schema(parts[0] / "waterbodies.parquet").field("owner").type == "null"
    finish_dataset(
        parts,
        tmp_path / "out",
        loss_rank=layer["loss_rank"].array,
        field_info={},
        provenance={"run": "test"},
    )
    back = gpd.read_parquet(tmp_path / "out" / "waterbodies")
    assert [None if pd.isna(v) else v for v in back["owner"]] == layer["owner"].tolist()
    assert_geodataframe_equal(back.drop(columns="owner"), layer.drop(columns="owner"))
    files = sorted((tmp_path / "out" / "waterbodies").iterdir())
    assert {str(pq.read_schema(p).field("owner").type) for p in files} == {"string"}
    assert pd.read_parquet(tmp_path / "out" / "evaporation_by_period").equals(periods)


def test_inconsistent_parts_refused_before_anything_is_written(run_result, tmp_path):
    parts = write_parts(tmp_path / "_parts", run_result.waterbodies, run_result.by_period, [5, 14])
    short = run_result.waterbodies["loss_rank"].array[:13]
    with pytest.raises(ValueError, match="hold 14 rows but loss_rank has 13"):
        finish_dataset(parts, tmp_path / "out", loss_rank=short, field_info={}, provenance={})
    assert not (tmp_path / "out").exists()
    plain = pd.DataFrame(run_result.waterbodies.drop(columns="geometry"))
    plain.iloc[5:].to_parquet(parts[1] / "waterbodies.parquet", index=False)
    ranks = run_result.waterbodies["loss_rank"].array
    with pytest.raises(ValueError, match="has columns"):
        finish_dataset(parts, tmp_path / "out", loss_rank=ranks, field_info={}, provenance={})
    with pytest.raises(ValueError, match="no partition parts"):
        finish_dataset([], tmp_path / "out", loss_rank=ranks, field_info={}, provenance={})
    assert not (tmp_path / "out").exists()


# --- [output] format ----------------------------------------------------------------------


def test_output_format_key(make_case):
    assert load_config(make_case()).output.format == "geopackage" == OutputConfig.format
    config = load_config(make_case(output={"format": "geoparquet"}))
    assert config.output.format == "geoparquet"
    with pytest.raises(ConfigError, match=r"\[output\].format must be one of geopackage, "):
        load_config(make_case(output={"format": "parquet"}))
