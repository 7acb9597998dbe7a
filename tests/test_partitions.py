"""Partitions of water bodies: the same numbers and the same files for any partition count.

A layer of 1 331 ponds (twenty whole partitions of 64 and a short one) on the 8 x 6 cell
test grid, with real GeoPackage and NetCDF files, runs with partitions of 64, 192 and all
bodies, with blocks of several sizes, on threads and on a local dask cluster. The per-body
tables must be identical, the summaries too (their sums are taken in chunks of 64 bodies in
layer order, so they do not depend on where partitions start), and the CSV files
byte-identical.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import tomli_w
from builders import CHOW_CLIMATE, CHOW_FIELDS, LAT, LON, pond_layer
from click.testing import CliRunner

from lakeloss.cli import cli
from lakeloss.partitions import ALIGN, partition_ranges, partition_size
from lakeloss.pipeline import run_stages

N_PONDS = 20 * ALIGN + 50  # plus the reservoir of pond_layer: 1 331 bodies


def test_partition_sizes_are_whole_chunks():
    assert ALIGN == 64
    assert partition_size(0, 10**6) == 1_048_576
    assert partition_size(100, 10**6) == 2 * ALIGN
    assert partition_size(0, 10**5, workers=2) == 50_048  # every worker gets one
    assert [len(r) for r in partition_ranges(1331, 448)] == [448, 448, 435]
    assert partition_ranges(0, 64) == [range(0)]


@pytest.fixture(scope="module")
def layer():
    frame = pond_layer(N_PONDS, seed=11)
    # A few groups with a missing value, and some bodies off the grid's weather: a varied
    # climate so that bodies differ and the sums are not of equal numbers.
    zones = np.array(["north", "south", "east", None], dtype=object)
    frame["zone"] = zones[np.arange(len(frame)) % 4]
    return frame


@pytest.fixture
def varied(make_case, layer):
    rng = np.random.default_rng(5)
    shape = (59, LAT.size, LON.size)
    fields = dict(CHOW_FIELDS)
    fields["tas"] = (288.0 + 12.0 * rng.random(shape), "K", "air_temperature")
    fields["wind"] = (1.0 + 4.0 * rng.random(shape), "m s-1", "wind_speed")
    fields["pr"] = (4e-5 * rng.random(shape), "kg m-2 s-1", "precipitation_flux")

    def make(method="penman_open_water", **compute):
        config = make_case(method, fields, CHOW_CLIMATE, layer=layer)
        config["compute"].update(compute)
        config["method"]["compare"] = ["priestley_taylor"]
        return config

    return make


def _same(result, reference):
    pd.testing.assert_frame_equal(
        result.waterbodies.drop(columns="geometry"),
        reference.waterbodies.drop(columns="geometry"),
        check_exact=True,
    )
    pd.testing.assert_frame_equal(result.by_period, reference.by_period, check_exact=True)
    pd.testing.assert_frame_equal(
        result.summary_by_period, reference.summary_by_period, check_exact=True
    )
    pd.testing.assert_frame_equal(
        result.summary_by_group, reference.summary_by_group, check_exact=True
    )
    assert result.provenance["counts"] == reference.provenance["counts"]


@pytest.mark.parametrize("partition_bodies", [64, 192])
def test_any_partition_count_gives_the_same_tables(varied, partition_bodies):
    reference = run_stages(varied(partition_bodies=10**6))
    result = run_stages(varied(partition_bodies=partition_bodies, chunk_steps=7))
    assert result.provenance["partitions"]["count"] == -(
        -len(result.waterbodies) // partition_bodies
    )
    assert reference.provenance["partitions"]["count"] == 1
    _same(result, reference)
    # the rank runs over every body of the run, not per partition
    assert sorted(result.waterbodies["loss_rank"].dropna()) == list(
        range(1, result.waterbodies["loss_rank"].notna().sum() + 1)
    )


def test_summaries_count_every_group_including_a_missing_value(varied):
    result = run_stages(varied(partition_bodies=64))
    groups = result.summary_by_group
    zones = list(groups["zone"].drop_duplicates())
    assert zones[:3] == ["east", "north", "south"] and pd.isna(zones[3]) and len(zones) == 4
    first = groups[groups["period_label"] == "2031-01"]
    assert first["n_waterbodies"].sum() == len(result.waterbodies)


def test_a_stateful_method_is_the_same_in_partitions_and_on_a_cluster(varied):
    reference = run_stages(varied("relaxation_check", partition_bodies=10**6, chunk_steps=59))
    local = run_stages(varied("relaxation_check", partition_bodies=64, chunk_steps=5))
    cluster = run_stages(varied("relaxation_check", partition_bodies=64, chunk_steps=9, workers=2))
    _same(local, reference)
    _same(cluster, reference)


def _cli_run(tmp_path, config, name):
    config = dict(config, output={**config["output"], "dir": str(tmp_path / name)})
    path = tmp_path / f"{name}.toml"
    path.write_text(tomli_w.dumps(config))
    result = CliRunner().invoke(cli, ["run", str(path), "-q"])
    assert result.exit_code == 0, result.output
    return tmp_path / name


def test_written_files_are_byte_identical_for_any_partition_count(varied, tmp_path):
    whole = _cli_run(tmp_path, varied(partition_bodies=10**6), "whole")
    parts = _cli_run(tmp_path, varied(partition_bodies=64, chunk_steps=3), "parts")
    for name in ("summary_by_waterbody.csv", "summary_by_period.csv", "summary_by_group.csv"):
        assert (parts / name).read_bytes() == (whole / name).read_bytes(), name
    for table in ("waterbodies", "evaporation_by_period"):
        import sqlite3

        with (
            sqlite3.connect(whole / "waterbodies.gpkg") as a,
            sqlite3.connect(parts / "waterbodies.gpkg") as b,
        ):
            rows_a = a.execute(f"SELECT * FROM {table} ORDER BY fid").fetchall()
            rows_b = b.execute(f"SELECT * FROM {table} ORDER BY fid").fetchall()
        assert rows_a == rows_b, table
    record = json.loads((parts / "run.json").read_text())
    assert record["partitions"] == {"count": 21, "bodies_each": 64}


def test_the_series_of_partitions_join_into_the_series_of_one(varied):
    whole = run_stages(varied(partition_bodies=10**6), series=True).series
    parts = run_stages(varied(partition_bodies=64, chunk_steps=11), series=True).series
    assert parts.sizes == whole.sizes
    for name in ("evaporation_rate", "precipitation_rate"):
        np.testing.assert_array_equal(parts[name].values, whole[name].values)
    np.testing.assert_array_equal(parts["waterbody_id"].values, whole["waterbody_id"].values)
    differs = {k for k in whole.attrs if parts.attrs.get(k) != whole.attrs[k]}
    assert differs <= {"history"}  # the time the run was made


def test_geoparquet_output_holds_one_file_per_partition_and_the_same_numbers(varied, tmp_path):
    import geopandas as gpd
    import pyogrio

    config = varied(partition_bodies=64)
    gpkg = _cli_run(tmp_path, config, "gpkg")
    config["output"]["format"] = "geoparquet"
    parquet = _cli_run(tmp_path, config, "parquet")
    files = sorted((parquet / "waterbodies").glob("*.parquet"))
    assert len(files) == 21
    assert not (parquet / "waterbodies.gpkg").exists() and not (parquet / "_parts").exists()
    layer = gpd.read_parquet(parquet / "waterbodies")
    expected = pyogrio.read_dataframe(gpkg / "waterbodies.gpkg", layer="waterbodies")
    for column in ("pond_id", "evap_mm", "evap_m3", "net_m3", "loss_rank", "qa_flags"):
        np.testing.assert_array_equal(
            layer[column].to_numpy(), expected[column].to_numpy(), err_msg=column
        )
    assert layer.crs == expected.crs
    periods = pd.read_parquet(parquet / "evaporation_by_period")
    assert len(periods) == len(layer) * 2
    for name in ("summary_by_waterbody.csv", "summary_by_period.csv", "summary_by_group.csv"):
        assert (parquet / name).read_bytes() == (gpkg / name).read_bytes(), name


def test_a_failing_partition_names_itself_and_leaves_the_previous_outputs(varied, tmp_path):
    # A layer whose rows 150..151 hold a collection without polygons: the survey does not
    # see it (the geometry is not scanned for a polygon layer), partition 3 of 21 meets it.
    import shapely
    from builders import pond_layer as ponds

    config = varied(partition_bodies=64)
    previous = _cli_run(tmp_path, config, "out")
    before = {p.name: p.read_bytes() for p in previous.iterdir() if p.suffix == ".csv"}
    frame = ponds(N_PONDS, seed=11)
    frame.loc[150, "geometry"] = shapely.GeometryCollection([shapely.LineString([(0, 0), (1, 1)])])
    frame.to_file(config["waterbodies"]["path"], layer="ponds", driver="GPKG")
    path = tmp_path / "bad.toml"
    config = dict(config, output={**config["output"], "dir": str(previous)})
    path.write_text(tomli_w.dumps(config))
    result = CliRunner().invoke(cli, ["run", str(path), "--overwrite", "-q"])
    assert result.exit_code == 2, result.output
    lines = [line for line in result.output.splitlines() if line.strip()]
    assert len(lines) == 1 and lines[0].startswith("error: partition 3 of 21"), lines
    assert f"first water body {frame['pond_id'].iloc[128]}" in lines[0]
    assert "GeometryCollection" in lines[0] or "collection" in lines[0].lower()
    after = {p.name: p.read_bytes() for p in previous.iterdir() if p.suffix == ".csv"}
    assert after == before
    assert sorted(p.name for p in tmp_path.iterdir() if "lakeloss" in p.name) == []


@pytest.mark.parametrize("workers", [0, 2])
def test_tables_in_pieces_of_a_partition_are_the_tables_of_the_whole(
    varied, tmp_path, monkeypatch, workers
):
    # A partition is computed whole and its tables made a piece at a time: partitions of
    # 192 bodies in pieces of 64, here and on a cluster (where workers write the pieces).
    import lakeloss.pipeline as pipeline

    reference = run_stages(varied(partition_bodies=10**6))
    whole = _cli_run(tmp_path, varied(partition_bodies=10**6), "whole")
    monkeypatch.setattr(pipeline, "PIECE_BODIES", 64)
    config = varied(partition_bodies=192, workers=workers)
    _same(run_stages(config), reference)
    pieces = _cli_run(tmp_path, config, "pieces")
    for name in ("summary_by_waterbody.csv", "summary_by_period.csv", "summary_by_group.csv"):
        assert (pieces / name).read_bytes() == (whole / name).read_bytes(), name
