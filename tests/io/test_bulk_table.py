"""Attribute tables written by a child process: same file as in-process, failures contained.

Fixture: an invented period table of 40 ponds x 12 months (ids in runs, dates and day counts
repeating every 12 rows, floats with gaps, nullable integers, text with quotes), small block
and statement sizes so every path (literal cycles, runs, several blocks, a short last
statement) is taken. Child processes are real ``python -m lakeloss.io.bulk_table`` runs.
"""

from __future__ import annotations

import os
import sqlite3
import subprocess
import sys
import time

import geopandas as gpd
import numpy as np
import pandas as pd
import psutil
import pyogrio
import pytest
from shapely.geometry import box

import lakeloss.io.gpkg as gpkg
from lakeloss.errors import OutputError
from lakeloss.io import bulk_table, write_run
from lakeloss.io.gpkg import FieldInfo, write_geopackage

N_PONDS = 40
MONTHS = 12
DAYS = [31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31]


def ponds(count: int = 3) -> gpd.GeoDataFrame:
    """``count`` invented square ponds, 200 m wide and 1 km apart."""
    return gpd.GeoDataFrame(
        {"pond_code": [f"P{i:03d}" for i in range(count)]},
        geometry=[box(1000 * i, 0, 1000 * i + 200, 200) for i in range(count)],
        crs="EPSG:32755",
    )


def period_table() -> pd.DataFrame:
    rows = N_PONDS * MONTHS
    rng = np.random.default_rng(3)
    evap = rng.uniform(10.0, 200.0, rows)
    evap[[5, 17, 300]] = np.nan
    return pd.DataFrame(
        {
            "pond_code": pd.array([f"P{i // MONTHS:03d}" for i in range(rows)], dtype="str"),
            "period_start": pd.array([f"2031-{m + 1:02d}-01" for m in range(MONTHS)] * N_PONDS),
            "label": [f"month {m + 1} of the pond's year" for m in range(MONTHS)] * N_PONDS,
            "days": np.array(DAYS * N_PONDS, dtype=np.int64),
            "visits": pd.array([None if i % 7 == 0 else i for i in range(rows)], dtype="Int64"),
            "note": [None if i % 5 else f'say "{i}", it\'s odd' for i in range(rows)],
            "evap_mm": evap,
        }
    )


FIELDS = {"evaporation_by_period": {"evap_mm": FieldInfo("Evaporation depth", "e.", "mm")}}


def _write(path, table, monkeypatch, *, child: bool, alongside=None) -> None:
    monkeypatch.setattr(gpkg, "_CHILD_MIN_ROWS", 0 if child else 10**12)
    # 60 parameters: 12 rows (one cycle) per statement; 96-row blocks, the last one short.
    monkeypatch.setattr(bulk_table, "_MAX_VARIABLES", 60)
    monkeypatch.setattr(gpkg, "_BLOCK_ROWS", 100)
    write_geopackage(
        path,
        [("waterbodies", ponds()), ("evaporation_by_period", table)],
        fields=FIELDS,
        metadata={"run": 1},
        alongside=alongside,
    )


def _dump(path) -> dict:
    """Everything SQLite holds for the table: its definition, rows, registration, sequence."""
    con = sqlite3.connect(path)
    try:
        return {
            "sql": con.execute(
                "SELECT sql FROM sqlite_master WHERE name = 'evaporation_by_period'"
            ).fetchall(),
            "rows": con.execute("SELECT * FROM evaporation_by_period ORDER BY fid").fetchall(),
            "types": con.execute(
                "SELECT typeof(pond_code), typeof(period_start), typeof(days), typeof(visits), "
                "typeof(evap_mm) FROM evaporation_by_period ORDER BY fid"
            ).fetchall(),
            "contents": con.execute(
                "SELECT table_name, data_type, identifier FROM gpkg_contents ORDER BY rowid"
            ).fetchall(),
            "sequence": con.execute(
                "SELECT * FROM sqlite_sequence WHERE name = 'evaporation_by_period'"
            ).fetchall(),
            "tables": con.execute("SELECT name FROM sqlite_master ORDER BY rowid").fetchall(),
        }
    finally:
        con.close()


def test_child_writes_the_same_table_as_this_process(tmp_path, monkeypatch):
    table = period_table()
    _write(tmp_path / "child.gpkg", table, monkeypatch, child=True)
    _write(tmp_path / "here.gpkg", table, monkeypatch, child=False)
    plan = bulk_table._Plan(gpkg._encode_table("t", table), bulk_table.variable_limit())
    assert plan.rows_per_statement == MONTHS  # so 40 statements in 5 blocks were written
    child, here = _dump(tmp_path / "child.gpkg"), _dump(tmp_path / "here.gpkg")
    assert child == here
    assert len(child["rows"]) == N_PONDS * MONTHS
    assert child["sequence"] == [("evaporation_by_period", N_PONDS * MONTHS)]
    assert child["contents"][1] == ("evaporation_by_period", "attributes", "evaporation_by_period")
    # No payload or scratch file is left beside the GeoPackage.
    assert sorted(p.name for p in tmp_path.iterdir()) == ["child.gpkg", "here.gpkg"]


def test_named_index_becomes_the_first_column_with_an_sql_index(tmp_path, monkeypatch):
    # The period table comes indexed by the water-body id; the id is written as the first
    # column and indexed, by the child as by this process, and reads back as before.
    table = period_table().set_index("pond_code")
    _write(tmp_path / "child.gpkg", table, monkeypatch, child=True)
    _write(tmp_path / "here.gpkg", table, monkeypatch, child=False)
    child, here = _dump(tmp_path / "child.gpkg"), _dump(tmp_path / "here.gpkg")
    assert child == here
    with sqlite3.connect(tmp_path / "child.gpkg") as con:
        columns = [row[1] for row in con.execute("PRAGMA table_info('evaporation_by_period')")]
        [(index_name,)] = con.execute(
            "SELECT name FROM sqlite_master WHERE type = 'index' "
            "AND tbl_name = 'evaporation_by_period'"
        ).fetchall()
        indexed = [row[2] for row in con.execute(f"PRAGMA index_info('{index_name}')")]
    con.close()
    assert columns[:3] == ["fid", "pond_code", "period_start"]
    assert indexed == ["pond_code"]
    back = pyogrio.read_dataframe(tmp_path / "child.gpkg", layer="evaporation_by_period")
    assert back["pond_code"].tolist() == table.index.tolist()


def test_child_table_reads_back_as_the_frame(tmp_path, monkeypatch):
    table = period_table()
    _write(tmp_path / "child.gpkg", table, monkeypatch, child=True)
    back = pyogrio.read_dataframe(tmp_path / "child.gpkg", layer="evaporation_by_period")
    assert back.columns.tolist() == table.columns.tolist()
    assert back["pond_code"].tolist() == table["pond_code"].tolist()
    # ISO date text is declared DATE, so GDAL reads dates
    assert back["period_start"].dt.strftime("%Y-%m-%d").tolist() == table["period_start"].tolist()
    assert back["label"].tolist() == table["label"].tolist()
    assert back["days"].tolist() == DAYS * N_PONDS
    assert back["visits"].isna().tolist() == table["visits"].isna().tolist()
    assert back["note"].tolist() == table["note"].tolist()
    np.testing.assert_array_equal(back["evap_mm"].to_numpy(), table["evap_mm"].to_numpy())
    info = pyogrio.read_info(tmp_path / "child.gpkg", layer="evaporation_by_period")
    assert info["layer_metadata"] == {"evap_mm": "Evaporation depth [mm]: e."}


def test_encoding_finds_cycles_runs_and_numbers():
    encoded = {c.name: c for c in gpkg._encode_table("t", period_table()).columns}
    for name in ("period_start", "label", "days"):
        assert encoded[name].cycle and len(encoded[name].values) == MONTHS, name
    assert encoded["days"].values == DAYS
    assert encoded["pond_code"].repeats is not None
    assert encoded["pond_code"].repeats.tolist() == [MONTHS] * N_PONDS
    assert encoded["evap_mm"].numbers is not None
    assert not encoded["visits"].cycle and encoded["visits"].values[0] is None
    # Cycles longer than the limit, or of differing lengths whose multiple is too long,
    # stay bound parameters.
    long = gpkg._encode_table("t", pd.DataFrame({"a": np.arange(300) % 70}))
    assert not long.columns[0].cycle and long.columns[0].numbers is not None
    mixed = gpkg._encode_table(
        "t", pd.DataFrame({"a": np.arange(300) % 9, "b": np.arange(300) % 8})
    )
    assert [c.cycle for c in mixed.columns] == [False, False]


def _children() -> list[psutil.Process]:
    return [p for p in psutil.Process().children(recursive=True) if p.is_running()]


def _run_result(tmp_path, monkeypatch):
    """A minimal result for write_result, large enough (with the threshold at 0) for a child."""
    from types import SimpleNamespace

    monkeypatch.setattr(gpkg, "_CHILD_MIN_ROWS", 0)
    bodies = ponds(N_PONDS)
    bodies["loss_rank"] = np.arange(1, N_PONDS + 1)
    return SimpleNamespace(
        waterbodies=bodies,
        by_period=period_table(),
        summary_by_period=pd.DataFrame({"period_start": ["2031-01-01"], "evap_m3": [1.5]}),
        summary_by_group=None,
        series=None,
        provenance={"run": 1},
        id_field="pond_code",
        field_info=FIELDS,
    )


def test_whole_output_through_the_child(tmp_path, monkeypatch):
    result = _run_result(tmp_path, monkeypatch)
    out = write_run.write_result(result, tmp_path / "out", overwrite=False)
    assert sorted(p.name for p in out.iterdir()) == [
        "run.json",
        "summary_by_period.csv",
        "summary_by_waterbody.csv",
        "waterbodies.gpkg",
    ]
    assert _dump(out / "waterbodies.gpkg")["rows"][0][1] == "P000"
    assert _children() == []


def _failing_start(script: str):
    def start(directory):
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
            "import json, sys; sys.stdin.readline(); "
            "sys.stderr.write(json.dumps({'type': 'OperationalError', "
            "'message': 'no such table: gpkg_contents', 'sqlite_errorcode': 1}) + chr(10)); "
            "sys.exit(1)",
            ("cannot write attribute tables", "no such table"),
            id="reported-error",
        ),
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
def test_failing_child_gives_one_line_error_and_no_outputs(tmp_path, monkeypatch, script, words):
    result = _run_result(tmp_path, monkeypatch)
    monkeypatch.setattr(bulk_table, "start", _failing_start(script))
    with pytest.raises(OutputError) as caught:
        write_run.write_result(result, tmp_path / "out", overwrite=False)
    message = str(caught.value)
    assert "\n" not in message
    for word in words:
        assert word in message
    assert list(tmp_path.iterdir()) == []  # no output directory, no staging left
    assert _children() == []


def test_real_child_failure_is_reported(tmp_path, monkeypatch):
    # The payload loses a column file after it was written: the child's own error comes back.
    real_dump = bulk_table.dump

    def dump(directory, *args, **kwargs):
        real_dump(directory, *args, **kwargs)
        os.remove(next(directory.glob("*-numbers.npy")))

    monkeypatch.setattr(bulk_table, "dump", dump)
    with pytest.raises(OutputError, match="FileNotFoundError") as caught:
        _write(tmp_path / "w.gpkg", period_table(), monkeypatch, child=True)
    assert "\n" not in str(caught.value)
    assert [p.name for p in tmp_path.iterdir()] == ["w.gpkg"]  # payload removed
    assert _children() == []


def test_failure_alongside_stops_the_child(tmp_path, monkeypatch):
    def fail() -> None:
        raise OSError(28, "No space left on device")

    with pytest.raises(OSError, match="No space left"):
        _write(tmp_path / "w.gpkg", period_table(), monkeypatch, child=True, alongside=fail)
    assert [p.name for p in tmp_path.iterdir()] == ["w.gpkg"]
    assert _children() == []


def test_child_exits_when_its_parent_dies(tmp_path):
    # A parent that starts a child and is then SIGKILLed before saying "go".
    code = (
        "import sys; from pathlib import Path; import pandas as pd; "
        "import lakeloss.io.gpkg as g; from lakeloss.io import bulk_table as b; "
        "t = g._encode_table('t', pd.DataFrame({'a': range(10)})); "
        f"w = b.TableWriter(Path({str(tmp_path / 'x.gpkg')!r}), [t], block_rows=100, "
        "in_child=True).__enter__(); "
        "print(w._process.pid, flush=True); import time; time.sleep(60)"
    )
    parent = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE)
    assert parent.stdout is not None
    child_pid = int(parent.stdout.readline())
    assert psutil.pid_exists(child_pid)
    parent.kill()
    parent.wait()
    deadline = time.monotonic() + 20.0
    while time.monotonic() < deadline:
        try:
            if psutil.Process(child_pid).status() == psutil.STATUS_ZOMBIE:
                break
        except psutil.NoSuchProcess:
            break
        time.sleep(0.05)
    else:
        raise AssertionError(f"child {child_pid} outlived its killed parent")
    parent.stdout.close()
