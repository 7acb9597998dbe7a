"""The streamed writer: any number of partitions gives the files of the whole-table writer.

Fixtures are real small runs (``builders.small_runs``: monthly standard calendar with a
compared method, group_by, extra volume units, series and a layer with dates, times, gaps
and awkward text, one pond outside the grid without a rank; daily 360-day calendar with
cftime period dates). Their whole-run tables are cut into 1, 2, 3 and 7 partitions at
arbitrary rows (one partition of a single row), written as part files and streamed. The
reference is what the writer did before partitions, built from the whole-table writers
(:func:`~lakeloss.io.gpkg.write_geopackage` and :func:`~lakeloss.io.tables.write_csv`).
"""

from __future__ import annotations

import pickle
import sqlite3
import subprocess
import sys
from pathlib import Path

import cftime
import geopandas as gpd
import numpy as np
import pandas as pd
import psutil
import pyogrio
import pytest
import shapely
from builders import small_runs, split_tables

import lakeloss.io.gpkg as gpkg
from lakeloss.errors import OutputError
from lakeloss.io import bulk_table, gpkg_geometry, ranked_csv, tables, write_run
from lakeloss.io.atomic import OutputDirectory
from lakeloss.io.gpkg import (
    LayerGeometry,
    read_field_descriptions,
    read_metadata,
    write_geopackage,
)
from lakeloss.io.parts import part_directory, read_part, write_part
from lakeloss.io.tables import to_jsonable, write_csv, write_json

CUTS = {1: [], 2: [7], 3: [2, 3], 7: [1, 2, 4, 6, 9, 13]}  # [2, 3): a one-row partition
CSV_FILES = ["summary_by_waterbody.csv", "summary_by_period.csv", "summary_by_group.csv"]


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    return small_runs(tmp_path_factory.mktemp("runs"))


def _whole_table_outputs(result, target):
    """The files as the writer wrote them before partitions: every table at once."""
    with OutputDirectory(target, overwrite=False) as staging:
        write_geopackage(
            staging / "waterbodies.gpkg",
            [("waterbodies", result.waterbodies), ("evaporation_by_period", result.by_period)],
            fields=result.field_info,
            metadata=result.provenance,
        )
        table = result.waterbodies.drop(columns="geometry")
        table = table[[result.id_field] + [c for c in table.columns if c != result.id_field]]
        body = table.sort_values(["loss_rank"], kind="stable")
        write_csv(staging / CSV_FILES[0], body, decimals=write_run._decimals(body.columns))
        for name, frame in (
            (CSV_FILES[1], result.summary_by_period),
            (CSV_FILES[2], result.summary_by_group),
        ):
            write_csv(staging / name, frame, decimals=write_run._decimals(frame.columns))
        write_run._write_series(result.series, staging / "series.nc") if result.series else None
        write_json(staging / "run.json", result.provenance)
    return target


def _streamed_outputs(result, target, cuts):
    """The files written from part files of the partitions cut before rows ``cuts``."""
    with OutputDirectory(target, overwrite=False) as staging:
        stream = write_run.OutputStream(
            staging,
            id_field=result.id_field,
            field_info=result.field_info,
            layer_geometry=LayerGeometry.of(result.waterbodies.geometry),
        )
        for k, (bodies, periods) in enumerate(
            split_tables(result.waterbodies, result.by_period, cuts)
        ):
            write_part(part_directory(staging, k), bodies, periods)
            stream.add_part(part_directory(staging, k))
        stream.finish(
            loss_rank=result.waterbodies["loss_rank"].array,
            summary_by_period=result.summary_by_period,
            summary_by_group=result.summary_by_group,
            series=result.series,
            provenance=result.provenance,
        )
    return target


def _gpkg_content(path) -> dict:
    """Everything the GeoPackage holds, but for its time stamps, with SQL types and fids."""
    con = sqlite3.connect(path)
    try:
        out = {
            "pragma": [
                con.execute(f"PRAGMA {p}").fetchone()
                for p in ("application_id", "user_version", "page_size")
            ],
            "schema": con.execute(
                "SELECT type, name, tbl_name, sql FROM sqlite_master ORDER BY type, name"
            ).fetchall(),
        }
        stamps = {"gpkg_contents": "last_change", "gpkg_metadata_reference": "timestamp"}
        for (name,) in con.execute("SELECT name FROM sqlite_master WHERE type = 'table'"):
            columns = [
                f'"{row[1]}", typeof("{row[1]}")'
                for row in con.execute(f"PRAGMA table_info('{name}')")
                if row[1] != stamps.get(name)
            ]
            order = "" if name.startswith("rtree_") else " ORDER BY rowid"
            rows = con.execute(f'SELECT {", ".join(columns)} FROM "{name}"{order}').fetchall()
            out[name] = sorted(rows) if name.startswith("rtree_") else rows
    finally:
        con.close()
    return out


def _assert_same_outputs(streamed, reference, result):
    names = sorted(p.name for p in reference.iterdir())
    assert sorted(p.name for p in streamed.iterdir()) == names  # no _parts, no scratch
    for name in CSV_FILES:
        if (reference / name).exists():
            assert (streamed / name).read_bytes() == (reference / name).read_bytes(), name
    assert (streamed / "run.json").read_bytes() == (reference / "run.json").read_bytes()
    if "series.nc" in names:
        assert (streamed / "series.nc").read_bytes() == (reference / "series.nc").read_bytes()
    new, old = streamed / "waterbodies.gpkg", reference / "waterbodies.gpkg"
    assert _gpkg_content(new) == _gpkg_content(old)
    # As GIS software reads them: types, descriptions, metadata, fid order.
    for layer in ("waterbodies", "evaporation_by_period"):
        new_info, old_info = (
            pyogrio.read_info(new, layer=layer),
            pyogrio.read_info(old, layer=layer),
        )
        for key in ("fields", "dtypes", "crs", "geometry_type", "features", "layer_metadata"):
            assert (
                np.array_equal(new_info[key], old_info[key])
                if key in ("fields", "dtypes")
                else (new_info[key] == old_info[key])
            ), (layer, key)
        pd.testing.assert_frame_equal(
            pyogrio.read_dataframe(new, layer=layer, fid_as_index=True),
            pyogrio.read_dataframe(old, layer=layer, fid_as_index=True),
        )
        assert read_field_descriptions(new, layer) == read_field_descriptions(old, layer)
    assert read_metadata(new) == read_metadata(old) == to_jsonable(result.provenance)


@pytest.mark.parametrize("name", ["monthly", "daily_360"])
@pytest.mark.parametrize("parts", [1, 2, 3, 7])
def test_any_number_of_parts_gives_the_whole_table_files(runs, tmp_path, name, parts):
    result = runs[name]
    reference = _whole_table_outputs(result, tmp_path / "whole")
    streamed = _streamed_outputs(result, tmp_path / "streamed", CUTS[parts])
    _assert_same_outputs(streamed, reference, result)
    ranks = pd.read_csv(streamed / "summary_by_waterbody.csv")["loss_rank"]
    assert ranks.isna().tolist()[-1] and ranks.dropna().is_monotonic_increasing


@pytest.mark.parametrize("name", ["monthly", "daily_360"])
def test_write_result_gives_the_whole_table_files(runs, tmp_path, name):
    result = runs[name]
    reference = _whole_table_outputs(result, tmp_path / "whole")
    written = write_run.write_result(result, tmp_path / "written", overwrite=False)
    _assert_same_outputs(written, reference, result)


def test_child_process_parts_give_the_same_file(runs, tmp_path, monkeypatch):
    # Every part's table through a child process (threshold 0), in small blocks.
    result = runs["monthly"]
    reference = _whole_table_outputs(result, tmp_path / "whole")
    monkeypatch.setattr(gpkg, "_CHILD_MIN_ROWS", 0)
    monkeypatch.setattr(bulk_table, "_MAX_VARIABLES", 60)
    streamed = _streamed_outputs(result, tmp_path / "streamed", CUTS[3])
    _assert_same_outputs(streamed, reference, result)
    assert _children() == []


def _children() -> list[psutil.Process]:
    return [p for p in psutil.Process().children(recursive=True) if p.is_running()]


def _stream_parts(result, target, cuts, *, before_part=None):
    """Write the partitions cut before ``cuts`` through the stream; ``before_part(k, dir)``
    runs after partition k's part files are written and before the writer reads them."""
    with OutputDirectory(target, overwrite=False) as staging:
        stream = write_run.OutputStream(
            staging, id_field=result.id_field, field_info=result.field_info
        )
        for k, (bodies, periods) in enumerate(
            split_tables(result.waterbodies, result.by_period, cuts)
        ):
            write_part(part_directory(staging, k), bodies, periods)
            if before_part is not None:
                before_part(k, part_directory(staging, k))
            stream.add_part(part_directory(staging, k))
        stream.finish(
            loss_rank=result.waterbodies["loss_rank"].array,
            summary_by_period=result.summary_by_period,
            summary_by_group=result.summary_by_group,
            series=result.series,
            provenance=result.provenance,
        )


def _truncate(k, directory):
    if k == 2:
        path = directory / "by_period.parquet"
        path.write_bytes(path.read_bytes()[:100])


def _drop_column(k, directory):
    if k == 1:
        bodies, periods = read_part(directory)
        write_part(directory, bodies.drop(columns="owner"), periods)


@pytest.mark.parametrize(
    ("damage", "words"),
    [
        pytest.param(_truncate, ("cannot read the part files in", "000002"), id="truncated"),
        pytest.param(_drop_column, ("does not fit the earlier parts", "owner"), id="columns"),
    ],
)
def test_bad_part_gives_one_line_error_and_no_outputs(runs, tmp_path, damage, words):
    with pytest.raises(OutputError) as caught:
        _stream_parts(runs["monthly"], tmp_path / "out", CUTS[7], before_part=damage)
    message = str(caught.value)
    assert "\n" not in message
    for word in words:
        assert word in message
    assert list(tmp_path.iterdir()) == []  # no output directory, no staging left


def _failing_start_on_part(part: int, script: str):
    """``bulk_table.start`` whose child for the ``part``-th table (from 0) runs ``script``."""
    real_start = bulk_table.start
    started = []

    def start(directory):
        started.append(directory)
        if len(started) - 1 != part:
            return real_start(directory)
        return subprocess.Popen(
            [sys.executable, "-c", script],
            stdin=subprocess.PIPE,
            stdout=subprocess.DEVNULL,
            stderr=subprocess.PIPE,
        )

    return start


@pytest.mark.parametrize(
    ("script", "words"),
    [
        pytest.param(
            "import os, signal, sys; sys.stdin.readline(); os.kill(os.getpid(), signal.SIGKILL)",
            ("cannot write attribute tables", "killed by signal 9"),
            id="killed",
        ),
        pytest.param(
            "import json, sys; sys.stdin.readline(); "
            "sys.stderr.write(json.dumps({'type': 'OperationalError', "
            "'message': 'database or disk is full', 'sqlite_errorcode': 13}) + chr(10)); "
            "sys.exit(1)",
            ("disk full", "earlier outputs were left untouched"),
            id="disk-full",
        ),
    ],
)
def test_child_failing_on_a_later_part_leaves_no_outputs(
    runs, tmp_path, monkeypatch, script, words
):
    # Earlier outputs exist: they must survive a failed run untouched.
    previous = write_run.write_result(runs["daily_360"], tmp_path / "out", overwrite=False)
    before = {p.name: p.read_bytes() for p in previous.iterdir()}
    monkeypatch.setattr(gpkg, "_CHILD_MIN_ROWS", 0)
    monkeypatch.setattr(bulk_table, "start", _failing_start_on_part(2, script))
    with pytest.raises(OutputError) as caught:
        with OutputDirectory(tmp_path / "out", overwrite=True) as staging:
            stream = write_run.OutputStream(
                staging, id_field="pond_id", field_info=runs["monthly"].field_info
            )
            result = runs["monthly"]
            for bodies, periods in split_tables(result.waterbodies, result.by_period, [2, 3, 9]):
                stream.add_tables(bodies, periods)
    message = str(caught.value)
    assert "\n" not in message
    for word in words:
        assert word in message
    assert {p.name: p.read_bytes() for p in previous.iterdir()} == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]
    assert _children() == []


_KILLED_STREAM = """
import sys, time
sys.path.insert(0, {tests!r})
import pickle
from pathlib import Path
import lakeloss.io.gpkg as gpkg
from lakeloss.io import write_run
from lakeloss.io.atomic import OutputDirectory
from lakeloss.io.parts import part_directory, read_part, write_part
from builders import split_tables
gpkg._CHILD_MIN_ROWS = 0
result = pickle.loads(Path(sys.argv[2]).read_bytes())
with OutputDirectory(sys.argv[1], overwrite=True) as staging:
    stream = write_run.OutputStream(staging, id_field="pond_id", field_info=result["fields"])
    for k, (bodies, periods) in enumerate(split_tables(result["bodies"], result["periods"], [4, 9])):
        write_part(part_directory(staging, k), bodies, periods)
        stream.add_part(part_directory(staging, k))
        print(staging, flush=True)
        if k == 1:
            time.sleep(60)
"""


def test_sigkill_between_parts_leaves_previous_outputs_and_no_child(runs, tmp_path):
    previous = write_run.write_result(runs["daily_360"], tmp_path / "out", overwrite=False)
    before = {p.name: p.read_bytes() for p in previous.iterdir()}
    result = runs["monthly"]
    frames = tmp_path.parent / f"{tmp_path.name}-frames.pickle"
    frames.write_bytes(
        pickle.dumps(
            {"bodies": result.waterbodies, "periods": result.by_period, "fields": result.field_info}
        )
    )
    tests = str(Path(__file__).resolve().parents[1])
    proc = subprocess.Popen(
        [sys.executable, "-c", _KILLED_STREAM.format(tests=tests), str(previous), str(frames)],
        stdout=subprocess.PIPE,
        text=True,
    )
    try:
        staging = Path(proc.stdout.readline().strip())
        assert proc.stdout.readline().strip() == str(staging)  # two parts are in
        assert (staging / "waterbodies.gpkg").is_file()
    finally:
        proc.kill()
        proc.wait(timeout=30)
        proc.stdout.close()
        frames.unlink()
    assert {p.name: p.read_bytes() for p in previous.iterdir()} == before
    assert not [
        p
        for p in psutil.process_iter(["cmdline"])
        if str(staging) in " ".join(p.info["cmdline"] or [])
    ]
    # The next run removes what the killed one left and writes its outputs.
    written = write_run.write_result(result, tmp_path / "out", overwrite=True)
    assert not staging.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]
    assert (written / "series.nc").is_file()


def _survey_table(n: int, seed: int) -> pd.DataFrame:
    """An invented summary table: ids, ranks with gaps, dates, times, text, cftime dates.

    Times of day appear only in the last rows, so only a part holding them knows that the
    column is written with its times.
    """
    rng = np.random.default_rng(seed)
    rank = rng.permutation(n) + 1
    missing = rng.random(n) < 0.2
    days = pd.Timestamp("2031-01-01") + pd.to_timedelta(rng.integers(0, 400, n), unit="D")
    inspected = days + pd.to_timedelta(np.where(np.arange(n) >= n - 3, 7.25, 0.0), unit="h")
    calendar = [cftime.datetime(2031, 2, 1 + i % 30, calendar="360_day") for i in range(n)]
    return pd.DataFrame(
        {
            "pond_code": pd.array([f"D{i:04d}" for i in range(n)], dtype="str"),
            "surveyed": days.where(rng.random(n) > 0.1).astype("datetime64[s]"),
            "inspected": inspected.astype("datetime64[ms]"),
            "filled_on": pd.Series(calendar, dtype=object),
            "note": pd.array([None if i % 3 else f'a "b", {i}' for i in range(n)], dtype="str"),
            "evap_m3": rng.uniform(-1.0, 5.0, n),
            "loss_rank": pd.arrays.IntegerArray(rank, missing),
            "qa_flags": pd.array(["" if i % 4 else "climate_gaps" for i in range(n)], dtype="str"),
        }
    )


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_ranked_summary_from_parts_is_write_csv_of_the_sorted_table(tmp_path, monkeypatch, seed):
    # Small merge chunks, so rows of many parts interleave across several chunks.
    monkeypatch.setattr(ranked_csv, "_CHUNK_ROWS", 4)
    table = _survey_table(61, seed)
    decimals = {"evap_m3": 3}
    expected = tmp_path / "expected.csv"
    write_csv(expected, table.sort_values(["loss_rank"], kind="stable"), decimals=decimals)
    summary = ranked_csv.RankedCsv(
        tmp_path / "summary.csv", tmp_path / "scratch", rank="loss_rank", decimals=decimals
    )
    bounds = [0, 1, 9, 10, 30, 58, 61]
    for start, stop in zip(bounds[:-1], bounds[1:], strict=True):
        part = table.iloc[start:stop].copy()
        part["loss_rank"] = pd.array([None] * len(part), dtype="Int64")
        summary.add(part)
    summary.finish(table["loss_rank"].array)
    assert (tmp_path / "summary.csv").read_bytes() == expected.read_bytes()
    assert not (tmp_path / "scratch").exists()
    text = (tmp_path / "summary.csv").read_text()
    assert "T07:15:00" in text and "T00:00:00" in text  # inspected: with times throughout
    assert ",2031-02-30," in text  # 360-day dates as dates


def test_time_of_day_late_in_a_long_column_gives_one_form_for_the_column(tmp_path, monkeypatch):
    # write_csv formats blocks of rows; whether dates carry their time of day is decided for
    # the whole column, not per block (a block of midnights wrote dates only before).
    monkeypatch.setattr(tables, "_BLOCK_ROWS", 2)
    frame = pd.DataFrame(
        {
            "seen": pd.to_datetime(
                ["2031-01-01", "2031-01-02", "2031-01-03T06:00"], format="ISO8601"
            ).as_unit("s")
        }
    )
    write_csv(tmp_path / "t.csv", frame)
    assert (tmp_path / "t.csv").read_text().splitlines() == [
        "seen",
        "2031-01-01T00:00:00",
        "2031-01-02T00:00:00",
        "2031-01-03T06:00:00",
    ]


@pytest.mark.parametrize(
    "geometry",
    [
        shapely.box(10.0, -5.0, 12.5, 3.0),
        shapely.Point(4.0, 2.0),
        shapely.LineString([(0, 0), (3, -2)]),
        shapely.Polygon(),
    ],
)
def test_trigger_functions_read_geopackage_blobs_as_gdal_writes_them(tmp_path, geometry):
    # GDAL writes the blobs (with an envelope for polygons and lines, none for points, the
    # empty flag for an empty polygon); the functions must give the geometry's bounds.
    frame = gpd.GeoDataFrame({"a": [1]}, geometry=[geometry], crs="EPSG:32755")
    pyogrio.write_dataframe(frame, tmp_path / "g.gpkg", layer="g", driver="GPKG")
    con = sqlite3.connect(tmp_path / "g.gpkg")
    try:
        gpkg_geometry.add_geometry_functions(con)
        row = con.execute(
            "SELECT ST_IsEmpty(geom), ST_MinX(geom), ST_MinY(geom), ST_MaxX(geom), "
            "ST_MaxY(geom) FROM g"
        ).fetchone()
    finally:
        con.close()
    if geometry.is_empty:
        assert row == (1, None, None, None, None)
    else:
        assert row == (0, *geometry.bounds)


def test_nullable_columns_through_gdal_arrow_give_the_row_by_row_layer(tmp_path):
    # A partition's all-null loss_rank (Int64), nullable booleans and counts go through
    # GDAL's Arrow path; the layer must be the one the row-by-row path writes.
    frame = gpd.GeoDataFrame(
        {
            "pond_code": pd.array(["A", None, "C", "D"], dtype="str"),
            "loss_rank": pd.array([None] * 4, dtype="Int64"),
            "visits": pd.array([3, None, 1, 2], dtype="Int32"),
            "fenced": pd.array([True, None, False, True], dtype="boolean"),
            "dry": np.array([False, True, False, False]),
            "depth_m": [1.5, np.nan, 2.0, 0.5],
        },
        geometry=[shapely.box(i, 0, i + 0.5, 0.5) for i in range(4)],
        crs="EPSG:32755",
    )
    assert gpkg._arrow_safe(frame)
    contents = []
    for arrow in (True, False):
        path = tmp_path / f"arrow_{arrow}.gpkg"
        pyogrio.write_dataframe(
            frame,
            path,
            layer="w",
            driver="GPKG",
            use_arrow=arrow,
            dataset_options={"VERSION": "1.2"},
        )
        content = _gpkg_content(path)
        contents.append(content)
    assert contents[0] == contents[1]


def test_ranks_given_at_the_end_replace_those_the_parts_brought(runs, tmp_path):
    # Parts that carry ranks already (write_result's one part) need no UPDATE, unless the
    # ranks given at the end differ: those are the ones written.
    result = runs["monthly"]
    final = pd.array(result.waterbodies["loss_rank"].to_numpy()[::-1], dtype="Int64")
    with OutputDirectory(tmp_path / "out", overwrite=False) as staging:
        stream = write_run.OutputStream(
            staging,
            id_field=result.id_field,
            field_info=result.field_info,
            layer_geometry=LayerGeometry.of(result.waterbodies.geometry),
        )
        stream.add_tables(result.waterbodies.iloc[:6], result.by_period.iloc[:12])
        stream.add_tables(result.waterbodies.iloc[6:], result.by_period.iloc[12:])
        stream.finish(
            loss_rank=final,
            summary_by_period=result.summary_by_period,
            summary_by_group=None,
            series=None,
            provenance=result.provenance,
        )
    layer = pyogrio.read_dataframe(tmp_path / "out" / "waterbodies.gpkg", layer="waterbodies")
    assert layer["loss_rank"].astype("Int64").tolist() == final.tolist()
    summary = pd.read_csv(tmp_path / "out" / "summary_by_waterbody.csv")
    assert (
        summary["pond_id"].tolist()
        == result.waterbodies["pond_id"]
        .take(np.argsort(final.to_numpy(dtype=float, na_value=np.inf), kind="stable"))
        .tolist()
    )


@pytest.mark.parametrize(
    "geometries",
    [
        [shapely.box(0, 0, 1, 1), shapely.box(2, 0, 3, 1)],
        [shapely.box(0, 0, 1, 1), shapely.MultiPolygon([shapely.box(2, 0, 3, 1)])],
        [shapely.Point(0, 0), shapely.box(2, 0, 3, 1)],
        [shapely.box(0, 0, 1, 1), shapely.Polygon()],
        [shapely.Polygon([(0, 0, 1), (1, 0, 1), (1, 1, 2)]), shapely.box(2, 0, 3, 1)],
        [shapely.LineString([(0, 0), (1, 1)]), shapely.MultiLineString([[(0, 0), (2, 1)]])],
        [shapely.Point(0, 0), shapely.MultiPoint([(1, 1), (2, 2)]), None],
    ],
    ids=[
        "polygons",
        "with-multi",
        "points-and-polygons",
        "with-empty",
        "with-z",
        "lines",
        "points",
    ],
)
def test_layer_geometry_is_the_type_gdal_writes_for_the_whole_layer(tmp_path, geometries):
    # The type a partitioned layer is declared with must be the whole layer's, as pyogrio
    # decides it when given all the features at once.
    frame = gpd.GeoDataFrame({"a": range(len(geometries))}, geometry=geometries, crs="EPSG:32755")
    pyogrio.write_dataframe(frame, tmp_path / "w.gpkg", layer="w", driver="GPKG")
    kind = LayerGeometry.of(frame.geometry)
    assert pyogrio.read_info(tmp_path / "w.gpkg", layer="w")["geometry_type"] == kind.type_name
    written = pyogrio.read_dataframe(tmp_path / "w.gpkg", layer="w").geometry
    assert set(written.dropna().geom_type) <= {kind.type_name.removesuffix(" Z"), "Polygon"} or (
        kind.type_name == "Unknown"
    )


def test_first_partition_alone_does_not_show_the_layer_geometry(runs, tmp_path):
    # The first partition of CUTS[7] holds one polygon; the whole layer has a multipolygon.
    # Told the whole layer's type the stream matches the whole-table file (tests above);
    # left to infer it from the first part, the layer would be declared Polygon.
    result = runs["monthly"]
    assert LayerGeometry.of(result.waterbodies.geometry) == LayerGeometry("MultiPolygon", True)
    assert LayerGeometry.of(result.waterbodies.geometry.iloc[:1]).type_name == "Polygon"
    written = pyogrio.read_info(
        _streamed_outputs(result, tmp_path / "out", CUTS[7]) / "waterbodies.gpkg",
        layer="waterbodies",
    )
    assert written["geometry_type"] == "MultiPolygon"
