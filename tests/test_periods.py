"""Reporting periods of whole runs: water years, seasons, custom period tables and the
``[time]`` window, on real files written here.

The climate is invented: 930 daily steps (2030-03-01..2032-09-15, a leap February in 2032)
of net radiation, air temperature and rain that vary by day and grid cell (seeded random),
over the pond layer of ``builders.pond_layer``. A period's totals are sums of per-step
amounts, so the totals of a longer period must equal the sums of the months (or days) it is
made of, whatever the blocks the run is cut into; only the last bits may differ, from the
2**-32 mm fixed point of the sums.
"""

from __future__ import annotations

import json
import sqlite3

import cftime
import numpy as np
import pandas as pd
import pyogrio
import pytest
import tomli_w
from builders import CHOW_CLIMATE, case_config, climate_dataset, pond_layer, write_netcdf

import lakeloss
from lakeloss.io.gpkg import read_field_descriptions

COLUMNS = ["evap_mm", "evap_m3", "precip_mm", "net_mm"]
FIRST_DAY, STEPS = "2030-03-01", 930  # to 2032-09-15


def varying_fields(count: int, seed: int = 5) -> dict:
    rng = np.random.default_rng(seed)
    shape = (count, 6, 8)
    return {
        "rnet": (60.0 + 180.0 * rng.random(shape), "W m-2", "surface_net_downward_radiative_flux"),
        "tas": (280.0 + 20.0 * rng.random(shape), "K", "air_temperature"),
        "hurs": (40.0, "%", "relative_humidity"),
        "wind": (3.0, "m s-1", "wind_speed"),
        "ps": (101300.0, "Pa", "surface_air_pressure"),
        "pr": (rng.exponential(2.0, shape) / 86400.0, "kg m-2 s-1", "precipitation_flux"),
    }


def write_case(folder, times, **sections) -> dict:
    folder.mkdir(parents=True, exist_ok=True)
    pond_layer().to_file(folder / "ponds.gpkg", layer="ponds", driver="GPKG")
    write_netcdf(climate_dataset(times, varying_fields(len(times))), folder / "climate.nc")
    return case_config(
        folder / "ponds.gpkg",
        folder / "climate.nc",
        folder / "out",
        "energy_balance",
        CHOW_CLIMATE,
        **sections,
    )


@pytest.fixture(scope="module")
def daily(tmp_path_factory):
    times = pd.date_range(FIRST_DAY, periods=STEPS, freq="D")
    return write_case(tmp_path_factory.mktemp("daily"), times)


_RUNS: dict[str, pd.DataFrame] = {}


def run(config: dict, **output) -> pd.DataFrame:
    """The period table of a run (runs repeated by several tests are made once)."""
    changed = {**config, "output": {**config["output"], **output}}
    key = json.dumps(changed, sort_keys=True, default=str)
    if key not in _RUNS:
        _RUNS[key] = lakeloss.run(changed).by_period
    return _RUNS[key].copy()


def with_section(config: dict, name: str, table: dict) -> dict:
    return {**config, name: table}


def sum_by(months: pd.DataFrame, key: pd.Series) -> pd.DataFrame:
    """Sums of the month rows per (body, key)."""
    frame = months[COLUMNS].copy()
    frame["key"] = key.to_numpy()
    return frame.groupby([frame.index, "key"], sort=False).sum()


def assert_totals_match(longer: pd.DataFrame, summed: pd.DataFrame) -> None:
    keyed = longer.set_index("period_label", append=True)[COLUMNS]
    keyed.index.names = summed.index.names
    joined = keyed.join(summed.add_suffix("_parts"), how="outer")
    assert not joined.isna().any().any()
    for column in COLUMNS:
        np.testing.assert_allclose(joined[column], joined[f"{column}_parts"], rtol=1e-12, atol=1e-6)


def water_year_of(month_labels: pd.Series, first_month: int) -> pd.Series:
    year = month_labels.str[:4].astype(int)
    month = month_labels.str[5:7].astype(int)
    begin = year - (month < first_month)
    if first_month == 1:
        return begin.map(lambda y: f"{y:04d}")
    return begin.map(lambda y: f"{y:04d}-{(y + 1) % 100:02d}")


# ----------------------------------------------------------------------------- water years


def test_water_year_totals_are_the_sums_of_their_months(daily):
    months = run(daily, period="month")
    years = run(daily, period="water_year")
    assert_totals_match(years, sum_by(months, water_year_of(months["period_label"], 7)))
    one = years.loc[101]
    assert one["period_label"].tolist() == ["2029-30", "2030-31", "2031-32", "2032-33"]
    # Mar-Jun 2030 (122 days) of July 2029-June 2030; 2031-32 holds 29 February 2032;
    # 1 July-15 September 2032 is 77 days.
    assert one["days"].tolist() == [122, 365, 366, 77]
    assert one["days_in_period"].tolist() == [365, 365, 366, 365]
    assert one["period_complete"].tolist() == [False, True, True, False]
    assert (
        one["period_start"].tolist()
        == pd.to_datetime(["2030-03-01", "2030-07-01", "2031-07-01", "2032-07-01"]).tolist()
    )
    assert one["period_end"].iloc[-1] == pd.Timestamp("2032-09-15")


def test_water_year_from_october_and_from_january(daily):
    months = run(daily, period="month")
    october = run(daily, period="water_year", year_start_month=10)
    assert_totals_match(october, sum_by(months, water_year_of(months["period_label"], 10)))
    assert october.loc[101, "period_label"].tolist() == ["2029-30", "2030-31", "2031-32"]
    january = run(daily, period="water_year", year_start_month=1)
    assert january.loc[101, "period_label"].tolist() == ["2030", "2031", "2032"]
    calendar_years = run(daily, period="year")
    for column in [*COLUMNS, "days", "days_in_period", "period_complete", "period_label"]:
        assert january[column].tolist() == calendar_years[column].tolist(), column


def test_water_year_totals_do_not_depend_on_the_block_length(daily):
    # Blocks of 5 and 64 steps cut the water years at other days than the automatic length.
    tables = [run(daily, period="water_year")] + [
        run(with_section(daily, "compute", {**daily["compute"], "chunk_steps": steps}),
            period="water_year")
        for steps in (5, 64)
    ]  # fmt: skip
    for table in tables[1:]:
        for column in COLUMNS:
            # Fixed-point sums: the same bits however the axis is cut.
            assert table[column].tolist() == tables[0][column].tolist(), column


# ----------------------------------------------------------------------------- seasons


def test_season_totals_are_the_sums_of_their_months(daily):
    months = run(daily, period="month")
    seasons = run(daily, period="season")
    labels = months["period_label"]
    year, month = labels.str[:4].astype(int), labels.str[5:7].astype(int)
    names = np.array(["DJF", "MAM", "JJA", "SON"])[(month.to_numpy() % 12) // 3]
    key = pd.Series(
        [f"{y + (m == 12):04d}-{s}" for y, m, s in zip(year, month, names, strict=True)]
    )
    assert_totals_match(seasons, sum_by(months, key))
    one = seasons.loc[101]
    assert one["period_label"].iloc[:5].tolist() == [
        "2030-MAM", "2030-JJA", "2030-SON", "2031-DJF", "2031-MAM"
    ]  # fmt: skip
    djf = one[one["period_label"] == "2031-DJF"].iloc[0]
    # December 2030 to February 2031: 31 + 31 + 28 days.
    assert djf["period_start"] == pd.Timestamp("2030-12-01")
    assert djf["period_end"] == pd.Timestamp("2031-02-28")
    assert (djf["days"], djf["days_in_period"], djf["period_complete"]) == (90, 90, True)
    last = one.iloc[-1]  # 2032-SON: 1-15 September only
    assert (last["period_label"], last["days"], last["days_in_period"]) == ("2032-SON", 15, 91)
    assert not last["period_complete"]


# ----------------------------------------------------------------------------- custom table


PERIOD_CSV = """Name,Start,End,note
early wet,2030-02-10,2030-04-30,starts before the data
dry,2030-05-01,2030-10-15,
second wet,2030-11-01,2031-03-31,after a gap of 16 days

late,2032-09-01,2032-12-31,ends after the data
"""


def test_custom_period_totals_are_the_sums_of_their_days(daily, tmp_path):
    # The table is written next to a TOML configuration in another folder: its path is
    # resolved against the configuration file's folder.
    folder = tmp_path / "setup"
    folder.mkdir()
    (folder / "periods.csv").write_bytes(
        b"\xef\xbb\xbf" + PERIOD_CSV.replace("\n", "\r\n").encode()
    )
    config = {**daily, "output": {**daily["output"], "period_table": "periods.csv"}}
    config["output"].pop("period")
    (folder / "run.toml").write_text(tomli_w.dumps(config))
    custom = lakeloss.run(folder / "run.toml")
    table = custom.by_period
    days = run(daily, period="day")
    one = table.loc[101]
    assert one["period_label"].tolist() == ["early wet", "dry", "second wet", "late"]
    assert one["days"].tolist() == [61, 168, 151, 15]
    assert one["days_in_period"].tolist() == [80, 168, 151, 122]
    assert one["period_complete"].tolist() == [False, True, True, False]
    assert one["period_start"].iloc[0] == pd.Timestamp("2030-03-01")
    # Each period is the sum of its days; days between periods are in no period.
    day = pd.to_datetime(days["period_label"])
    bounds = {"early wet": ("2030-02-10", "2030-04-30"), "dry": ("2030-05-01", "2030-10-15"),
              "second wet": ("2030-11-01", "2031-03-31"), "late": ("2032-09-01", "2032-12-31")}  # fmt: skip
    key = pd.Series(np.full(len(days), "", dtype=object))
    for name, (first, last) in bounds.items():
        key[((day >= first) & (day <= last)).to_numpy()] = name
    inside = (key != "").to_numpy()
    assert_totals_match(table, sum_by(days[inside], key[inside]))
    # The whole-run columns still cover every day of the run, gaps included.
    whole = custom.waterbodies.set_index("pond_id")["evap_mm"]
    np.testing.assert_allclose(whole, days.groupby(level=0)["evap_mm"].sum(), rtol=1e-12)
    summary = custom.summary_by_period
    assert summary["period_label"].tolist() == ["early wet", "dry", "second wet", "late"]
    assert custom.provenance["counts"]["periods"] == 4


# ----------------------------------------------------------------------------- time window


def test_window_gives_the_full_runs_numbers_for_the_periods_inside_it(daily):
    full = run(daily, period="month")
    window = with_section(daily, "time", {"start": "2030-06-10", "end": "2031-08-20"})
    result = lakeloss.run(window)
    cut = result.by_period
    one = cut.loc[101]
    assert one["period_label"].iloc[[0, -1]].tolist() == ["2030-06", "2031-08"]
    assert (one["days"].iloc[0], one["days_in_period"].iloc[0]) == (21, 30)
    assert (one["days"].iloc[-1], one["days_in_period"].iloc[-1]) == (20, 31)
    assert one["period_complete"].tolist() == [False] + [True] * 13 + [False]
    assert one["period_start"].iloc[0] == pd.Timestamp("2030-06-10")
    assert one["period_end"].iloc[-1] == pd.Timestamp("2031-08-20")
    complete = cut[cut["period_complete"]].set_index("period_label", append=True)
    same = full.set_index("period_label", append=True).loc[complete.index]
    for column in COLUMNS:
        assert complete[column].tolist() == same[column].tolist(), column
    steps = len(pd.date_range("2030-06-10", "2031-08-20", freq="D"))
    assert result.provenance["counts"]["time_steps"] == steps == one["days"].sum()
    assert result.provenance["time_axis"].startswith("2030-06-10..2031-08-20")


def test_window_reads_only_its_steps(daily):
    from lakeloss.config import load_config
    from lakeloss.pipeline import load_inputs

    config = load_config(with_section(daily, "time", {"start": "2031-07-01", "end": "2031-07-31"}))
    inputs = load_inputs(config)
    assert len(inputs.axis) == 31
    for field in inputs.fields.values():
        assert field.data.sizes["time"] == 31
        assert str(field.times[0])[:10] == "2031-07-01"


def test_window_of_one_water_year_is_one_complete_period(daily):
    window = with_section(daily, "time", {"start": "2030-07-01", "end": "2031-06-30"})
    one = run(window, period="water_year").loc[[101]]
    full = run(daily, period="water_year").loc[[101]]
    assert one["period_label"].tolist() == ["2030-31"]
    assert bool(one["period_complete"].iloc[0])
    np.testing.assert_array_equal(
        one[COLUMNS].to_numpy(dtype=float), full[full["period_label"] == "2030-31"][COLUMNS]
    )


def test_window_dates_may_be_toml_dates(daily, tmp_path):
    config = with_section(daily, "time", {})
    text = tomli_w.dumps(config) + "start = 2031-01-01\nend = 2031-01-31\n"
    (tmp_path / "run.toml").write_text(text)
    assert lakeloss.run(tmp_path / "run.toml").by_period.loc[[101], "days"].tolist() == [31]


# ----------------------------------------------------------------------------- calendars


@pytest.mark.parametrize(
    ("make", "calendar", "year_days"),
    [(cftime.DatetimeNoLeap, "noleap", 365), (cftime.Datetime360Day, "360_day", 360)],
)
def test_water_years_in_model_calendars(tmp_path, make, calendar, year_days):
    # 1 July 2030 to the end of 2031: one whole water year and half of the next.
    times = np.array(make(2030, 7, 1)) + np.array(
        [pd.Timedelta(days=d).to_pytimedelta() for d in range(year_days + year_days // 2)]
    )
    config = write_case(tmp_path, times)
    months = run(config, period="month")
    years = run(config, period="water_year")
    assert_totals_match(years, sum_by(months, water_year_of(months["period_label"], 7)))
    one = years.loc[101]
    assert one["period_label"].tolist() == ["2030-31", "2031-32"]
    assert one["days"].tolist() == [year_days, year_days // 2]
    assert one["days_in_period"].tolist() == [year_days, year_days]
    assert one["period_complete"].tolist() == [True, False]
    if calendar == "360_day":
        # The 360-day water year 2031-32 ends (inclusively) on 30 December 2031.
        assert str(one["period_end"].iloc[-1])[:10] == "2031-12-30"


# ----------------------------------------------------------------------------- monthly climate


@pytest.fixture(scope="module")
def monthly(tmp_path_factory):
    times = pd.date_range("2030-01-01", periods=30, freq="MS") + pd.Timedelta(days=14)
    return write_case(tmp_path_factory.mktemp("monthly"), times)


def test_monthly_climate_water_years_and_seasons(monthly):
    months = run(monthly, period="month")
    years = run(monthly, period="water_year")
    assert_totals_match(years, sum_by(months, water_year_of(months["period_label"], 7)))
    one = years.loc[101]
    assert one["days"].tolist() == [181, 365, 366]  # Jan-Jun 2030, 2030-31, Jul 2031-Jun 2032
    assert one["period_complete"].tolist() == [False, True, True]
    seasons = run(monthly, period="season").loc[101]
    assert seasons["period_label"].iloc[0] == "2030-DJF"
    assert (seasons["days"].iloc[0], seasons["days_in_period"].iloc[0]) == (59, 90)


def test_monthly_climate_custom_table_of_whole_months(monthly, tmp_path):
    table = tmp_path / "quarters.csv"
    table.write_text("name,start,end\nQ3,2030-07-01,2030-09-30\nQ4,2030-10-01,2030-12-31\n")
    custom = run(monthly, period_table=str(table), period="table").loc[101]
    months = run(monthly, period="month").loc[101].set_index("period_label")
    assert custom["days"].tolist() == [92, 92]
    expected = months.loc[["2030-07", "2030-08", "2030-09"], "evap_mm"].sum()
    assert custom["evap_mm"].iloc[0] == pytest.approx(expected, rel=1e-12)


# ----------------------------------------------------------------------------- written files


def test_period_columns_are_written_and_described(daily, tmp_path):
    config = {
        **daily,
        "output": {**daily["output"], "period": "water_year", "dir": str(tmp_path / "o")},
    }
    out = lakeloss.run(config).write()
    back = pyogrio.read_dataframe(out / "waterbodies.gpkg", layer="evaporation_by_period")
    assert back.columns[:7].tolist() == [
        "pond_id", "period_label", "period_start", "period_end", "days", "days_in_period",
        "period_complete",
    ]  # fmt: skip
    assert back["period_label"].iloc[:4].tolist() == ["2029-30", "2030-31", "2031-32", "2032-33"]
    assert back["period_complete"].iloc[:4].tolist() == [False, True, True, False]
    with sqlite3.connect(out / "waterbodies.gpkg") as db:
        kinds = dict(
            db.execute("SELECT name, type FROM pragma_table_info('evaporation_by_period')")
        )
    assert (kinds["period_complete"], kinds["days_in_period"]) == ("BOOLEAN", "INTEGER")
    described = read_field_descriptions(out / "waterbodies.gpkg", "evaporation_by_period")
    for column in ("period_label", "days", "days_in_period", "period_complete"):
        assert described[column].description, column
    assert "partial" in described["period_complete"].description
    summary = pd.read_csv(out / "summary_by_period.csv", dtype=str)
    assert summary.columns[:6].tolist() == [
        "period_label", "period_start", "period_end", "days", "days_in_period", "period_complete"
    ]  # fmt: skip
    assert summary["period_label"].tolist() == ["2029-30", "2030-31", "2031-32", "2032-33"]
    assert summary["period_complete"].tolist() == ["false", "true", "true", "false"]


def test_summary_line_counts_the_days_between_custom_periods(daily, tmp_path):
    from lakeloss.report import summary_line

    (tmp_path / "p.csv").write_text("name,start,end\nmid,2031-01-01,2031-01-31\n")
    config = with_section(daily, "time", {"start": "2030-12-01", "end": "2031-02-28"})
    config["output"] = {
        **daily["output"],
        "period": "table",
        "period_table": str(tmp_path / "p.csv"),
    }
    result = lakeloss.run(config)
    assert result.provenance["counts"]["days"] == 90
    assert result.provenance["counts"]["periods"] == 1
    line = summary_line(result, tmp_path)
    # The whole-run volume covers the window's 90 days, not only the period's 31.
    assert "1 periods (2030-12-01..2031-02-28)" in line and "over 90 days" in line
    volume = float(result.waterbodies["evap_m3"].sum())
    assert volume > 2.5 * float(result.by_period["evap_m3"].sum())
