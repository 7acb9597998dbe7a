"""The Python API as a notebook user meets it: the documented example, progress bars, a
short summary of the result, dates and the id index of the period table.

The example in ``lakeloss/__init__.py`` runs on the committed invented demo files
(demo_layers/, config/demo.toml); everything it writes goes into tmp_path.
"""

from __future__ import annotations

import doctest
from pathlib import Path

import cftime
import numpy as np
import pandas as pd
import pytest

import lakeloss
from lakeloss.errors import ConfigError
from lakeloss.results import period_dates, progress_bars

ROOT = Path(__file__).resolve().parents[1]


def test_package_docstring_example_runs(tmp_path, monkeypatch):
    # The demo file's paths are relative to the directory lakeloss runs in.
    (tmp_path / "demo_layers").symlink_to(ROOT / "demo_layers")
    (tmp_path / "config").symlink_to(ROOT / "config")
    monkeypatch.chdir(tmp_path)
    outcome = doctest.testmod(lakeloss, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert outcome.attempted >= 6
    assert outcome.failed == 0
    assert (tmp_path / "out" / "demo" / "waterbodies.gpkg").is_file()


def test_progress_true_shows_bars_and_repr_is_a_short_summary(make_case, tmp_path, capsys):
    result = lakeloss.run(make_case("energy_balance"), progress=True)
    assert "evaporation" in capsys.readouterr().err  # tqdm writes its bars to stderr
    text = repr(result)
    assert len(text) < 600 and len(text.splitlines()) == 5
    assert "13 water bodies (pond_id)" in text and "2 periods (month)" in text
    assert "energy_balance" in text and "not yet" in text
    assert "caution" not in text and "sha256" not in text  # no provenance dump
    written = result.write(tmp_path / "api-out", progress=True)
    assert str(written) in repr(result)
    assert lakeloss.run(make_case("energy_balance"), progress=False).by_period.shape[0] == 26
    with pytest.raises(ConfigError, match="expected True, False, None or a callable"):
        progress_bars("yes")


def test_period_table_indexed_by_id_with_dates(make_case):
    result = lakeloss.run(make_case("energy_balance"))
    table = result.by_period
    assert table.index.name == "pond_id"
    assert list(table.columns[:4]) == ["period_label", "period_start", "period_end", "days"]
    assert table["period_start"].dtype.kind == "M" and table["period_end"].dtype.kind == "M"
    one = table.loc[105]
    assert one["period_start"].tolist() == [pd.Timestamp("2031-01-01"), pd.Timestamp("2031-02-01")]
    assert one["period_end"].tolist() == [pd.Timestamp("2031-01-31"), pd.Timestamp("2031-02-28")]
    assert result.summary_by_period["period_start"].dtype.kind == "M"
    # Summing a body's periods is a group-by on the index: the whole-run column again.
    layer = result.waterbodies.set_index("pond_id")
    np.testing.assert_allclose(
        table.groupby(level="pond_id")["evap_mm"].sum().loc[layer.index], layer["evap_mm"]
    )


def test_period_dates_of_calendars_without_gregorian_days():
    # Gregorian-valid days (any calendar's) are Timestamps, even years past pandas' ns range.
    starts, ends = period_dates(["2301-01-01"], ["2301-01-31"], "noleap")
    assert starts[0] == pd.Timestamp("2301-01-01") and ends.dtype.kind == "M"
    # A 360-day February has a 30th: both columns become cftime dates of the calendar.
    starts, ends = period_dates(
        ["2031-02-01", "2031-03-01"], ["2031-02-30", "2031-03-30"], "360_day"
    )
    assert list(ends) == [cftime.Datetime360Day(2031, 2, 30), cftime.Datetime360Day(2031, 3, 30)]
    assert starts[0] == cftime.Datetime360Day(2031, 2, 1)
    # An all-leap calendar's 29 February of a common year, likewise.
    _, ends = period_dates(["2031-02-01"], ["2031-02-29"], "all_leap")
    assert ends[0] == cftime.DatetimeAllLeap(2031, 2, 29)


def test_360_day_run_keeps_its_calendar_days(tmp_path):
    # A climate model's 360-day calendar: February has 30 days, so period_end 2031-02-30.
    import pyogrio
    from builders import CHOW_CLIMATE, CHOW_FIELDS, case_config, climate_dataset, pond_layer
    from builders import write_netcdf as write_climate

    pond_layer().to_file(tmp_path / "ponds.gpkg", layer="ponds", driver="GPKG")
    times = np.array([cftime.Datetime360Day(2031, 1 + d // 30, 1 + d % 30) for d in range(60)])
    write_climate(climate_dataset(times, CHOW_FIELDS), tmp_path / "climate.nc")
    config = case_config(
        tmp_path / "ponds.gpkg", tmp_path / "climate.nc", tmp_path / "out", "energy_balance",
        CHOW_CLIMATE,
    )  # fmt: skip
    result = lakeloss.run(config)
    ends = result.by_period["period_end"]
    assert ends.iloc[1] == cftime.Datetime360Day(2031, 2, 30)
    out = result.write(tmp_path / "out")
    back = pyogrio.read_dataframe(out / "waterbodies.gpkg", layer="evaporation_by_period")
    assert back["period_end"].iloc[:2].tolist() == ["2031-01-30", "2031-02-30"]
    summary = pd.read_csv(out / "summary_by_period.csv", dtype=str)
    assert summary["period_end"].tolist() == ["2031-01-30", "2031-02-30"]


def test_repr_without_precipitation_shows_no_rain_total(make_case):
    result = lakeloss.run(make_case("energy_balance", output={"precipitation": False}))
    text = repr(result)
    assert "evaporation" in text and "rain" not in text and "net loss" not in text
