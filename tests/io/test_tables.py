"""CSV and JSON writers: deterministic bytes, fixed decimals, empty fields for missing values.

The fixture table is a small invented per-period result for three water bodies.
"""

from __future__ import annotations

import datetime
import json
import math
from pathlib import Path

import cftime
import numpy as np
import pandas as pd
import pytest

from lakeloss.io.tables import to_jsonable, write_csv, write_json


@pytest.fixture
def periods() -> pd.DataFrame:
    """Three water bodies, one period each; body 3 has no precipitation data."""
    return pd.DataFrame(
        {
            "id": [3, 1, 2],
            "name": ["Pond, north", 'The "long" lake', "Reed marsh"],
            "period_start": pd.to_datetime(["2001-01-01", "2001-01-01", "2001-01-01"]),
            "days": [31, 31, 31],
            "evap_mm": [12.3456, 0.004, 101.5],
            "precip_mm": [np.nan, 3.25, 40.0],
            "net_mm": [-0.0001, -3.246, 61.5],
            "flagged": [True, False, False],
        }
    )


DECIMALS = {"evap_mm": 2, "precip_mm": 1, "net_mm": 3}


def test_byte_identical_twice(tmp_path, periods):
    first, second = tmp_path / "a.csv", tmp_path / "b.csv"
    write_csv(first, periods, decimals=DECIMALS)
    write_csv(second, periods.copy(), decimals=DECIMALS)
    assert first.read_bytes() == second.read_bytes()


def test_exact_bytes(tmp_path, periods):
    path = tmp_path / "t.csv"
    write_csv(path, periods, decimals=DECIMALS)
    expected = (
        "id,name,period_start,days,evap_mm,precip_mm,net_mm,flagged\n"
        '3,"Pond, north",2001-01-01,31,12.35,,0.000,true\n'
        '1,"The ""long"" lake",2001-01-01,31,0.00,3.2,-3.246,false\n'
        "2,Reed marsh,2001-01-01,31,101.50,40.0,61.500,false\n"
    )
    assert path.read_bytes() == expected.encode("utf-8")
    assert b"\r" not in path.read_bytes()


def test_reads_back_with_pandas(tmp_path, periods):
    path = tmp_path / "t.csv"
    write_csv(path, periods, decimals=DECIMALS)
    back = pd.read_csv(path)
    assert list(back.columns) == list(periods.columns)
    assert back["id"].tolist() == [3, 1, 2]  # caller's row order kept
    assert back["name"].tolist() == periods["name"].tolist()
    assert math.isnan(back["precip_mm"][0])
    assert back["flagged"].tolist() == [True, False, False]


def test_float_without_decimals_round_trips(tmp_path):
    values = np.array([0.1, 1 / 3, 1e-12, 12345678.9, -2.5])
    path = tmp_path / "t.csv"
    write_csv(path, pd.DataFrame({"x": values, "y": values.astype(np.float32)}))
    lines = path.read_text().splitlines()
    assert lines[1] == "0.1,0.1"  # float32 written as its own shortest form
    back = pd.read_csv(path)
    np.testing.assert_array_equal(back["x"].to_numpy(), values)
    np.testing.assert_array_equal(back["y"].to_numpy(dtype=np.float32), values.astype(np.float32))


def test_cftime_noleap_dates_and_nullable_types(tmp_path):
    frame = pd.DataFrame(
        {
            "period_end": [cftime.DatetimeNoLeap(2001, 2, 28), None],
            "stamp": [cftime.DatetimeNoLeap(2001, 2, 28, 12), cftime.DatetimeNoLeap(2001, 3, 1)],
            "count": pd.array([4, None], dtype="Int64"),
            "share": pd.array([0.25, None], dtype="Float64"),
        }
    )
    path = tmp_path / "t.csv"
    write_csv(path, frame, decimals={"share": 2})
    assert path.read_text() == (
        "period_end,stamp,count,share\n"
        "2001-02-28,2001-02-28T12:00:00,4,0.25\n"
        ",2001-03-01T00:00:00,,\n"
    )


def test_integers_take_decimals_when_asked(tmp_path):
    path = tmp_path / "t.csv"
    write_csv(path, pd.DataFrame({"area_m2": [10, 2000]}), decimals={"area_m2": 1})
    assert path.read_text() == "area_m2\n10.0\n2000.0\n"


def test_unknown_decimals_column_refused(tmp_path, periods):
    with pytest.raises(ValueError, match=r"columns \['evap_m3'\]"):
        write_csv(tmp_path / "t.csv", periods, decimals={"evap_m3": 1})
    with pytest.raises(ValueError, match="negative decimals"):
        write_csv(tmp_path / "t.csv", periods, decimals={"evap_mm": -1})


def test_empty_table_writes_header_only(tmp_path, periods):
    path = tmp_path / "t.csv"
    write_csv(path, periods.iloc[:0], decimals=DECIMALS)
    assert path.read_text() == "id,name,period_start,days,evap_mm,precip_mm,net_mm,flagged\n"


def test_blocks_join_seamlessly(tmp_path, monkeypatch):
    # Several blocks must give exactly the text of one block.
    import lakeloss.io.tables as tables

    frame = pd.DataFrame({"id": np.arange(25), "v": np.linspace(0, 1, 25)})
    one, many = tmp_path / "one.csv", tmp_path / "many.csv"
    write_csv(one, frame, decimals={"v": 4})
    monkeypatch.setattr(tables, "_BLOCK_ROWS", 7)
    write_csv(many, frame, decimals={"v": 4})
    assert one.read_bytes() == many.read_bytes()
    assert len(many.read_text().splitlines()) == 26


def test_json_sorted_indented_nan_null(tmp_path):
    obj = {
        "zeta": 1,
        "alpha": {"nan": float("nan"), "inf": np.float64("inf"), "n": np.int64(3)},
        "array": np.array([1.5, np.nan]),
        "path": Path("out/run.json"),
        "when": datetime.date(2001, 1, 31),
        "tags": {"b", "a"},
    }
    path = tmp_path / "run.json"
    write_json(path, obj)
    text = path.read_text(encoding="utf-8")
    assert text.endswith("}\n")
    assert text.index('"alpha"') < text.index('"array"') < text.index('"zeta"')
    assert '\n  "alpha": {\n    "inf": null,' in text
    assert json.loads(text) == {
        "alpha": {"inf": None, "n": 3, "nan": None},
        "array": [1.5, None],
        "path": "out/run.json",
        "tags": ["a", "b"],
        "when": "2001-01-31",
        "zeta": 1,
    }
    write_json(tmp_path / "again.json", obj)
    assert (tmp_path / "again.json").read_bytes() == path.read_bytes()


def test_json_refuses_unknown_types():
    with pytest.raises(TypeError, match="cannot write a object to JSON"):
        to_jsonable({"x": object()})


def test_numpy_datetimes_date_or_time_and_nat(tmp_path):
    frame = pd.DataFrame(
        {
            "day": pd.to_datetime(["2001-01-01", None]),
            "hour": pd.to_datetime(["2001-01-01 06:00", "2001-01-01 00:00"]),
        }
    )
    path = tmp_path / "t.csv"
    write_csv(path, frame)
    assert path.read_text() == "day,hour\n2001-01-01,2001-01-01T06:00:00\n,2001-01-01T00:00:00\n"


def test_negative_zeros_nan_and_infinities_exact(tmp_path):
    # Tiny negatives print as zero at the given decimals; -0.0006 still rounds to -0.001.
    values = [-0.0, -0.0004, -0.0006, np.nan, np.inf, -np.inf, -0.4, 1.0005]
    frame = pd.DataFrame({"three": values, "none": values, "zero": values})
    write_csv(tmp_path / "z.csv", frame, decimals={"three": 3, "zero": 0})
    rows = (tmp_path / "z.csv").read_text(encoding="utf-8").splitlines()[1:]
    assert rows == [
        "0.000,-0.0,0",
        "0.000,-0.0004,0",
        "-0.001,-0.0006,0",
        ",,",
        "inf,inf,inf",
        "-inf,-inf,-inf",
        "-0.400,-0.4,0",
        "1.000,1.0005,1",
    ]


def test_string_column_quoting_and_missing(tmp_path):
    texts = pd.array(["plain", "a,b", 'say "hi"', "two\nlines", "cr\r", None, ""], dtype="string")
    write_csv(tmp_path / "s.csv", pd.DataFrame({"name": texts}))
    body = (tmp_path / "s.csv").read_bytes().decode("utf-8")
    assert body == 'name\nplain\n"a,b"\n"say ""hi"""\n"two\nlines"\n"cr\r"\n\n\n'
