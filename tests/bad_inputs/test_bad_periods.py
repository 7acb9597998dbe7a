"""Time windows and reporting periods that cannot work: each is refused by ``check`` and
``run`` with one line naming the key (or the period table's file and line), and nothing is
written. The clean case holds four daily steps, 2031-01-01..2031-01-04 (corpus.py).
"""

from __future__ import annotations

import pandas as pd
import pytest
from bad_inputs.corpus import BASE_FIELDS, refused_everywhere
from builders import climate_dataset

HELD = "2031-01-01..2031-01-04"

BAD_WINDOWS = {
    "start-before-data": ({"start": "2030-12-01"}, ["[time] start", "2030-12-01", HELD]),
    "end-after-data": ({"end": "2031-02-01"}, ["[time] end", "2031-02-01", HELD]),
    "window-after-data": (
        {"start": "2031-03-01", "end": "2031-03-05"},
        ["[time] start", "outside the data", HELD],
    ),
    "start-after-end": ({"start": "2031-01-03", "end": "2031-01-02"}, ["[time].start", "after"]),
    "not-a-date": ({"start": "3 January 2031"}, ["[time].start", "YYYY-MM-DD"]),
    "not-in-calendar": ({"end": "2031-02-30"}, ["[time] end", "2031-02-30", "standard"]),
    "number": ({"start": 20310101}, ["[time].start", "str"]),
}


@pytest.mark.parametrize("kind", BAD_WINDOWS)
def test_bad_time_window(case, kind):
    window, words = BAD_WINDOWS[kind]
    case.config["time"] = window
    refused_everywhere(case, *words)


@pytest.mark.parametrize("month", [0, 13, -1])
def test_year_start_month_outside_1_to_12(case, month):
    case.config["output"].update(period="water_year", year_start_month=month)
    refused_everywhere(case, "[output].year_start_month", str(month), "1..12")


def test_year_start_month_with_another_period(case):
    case.config["output"].update(period="season", year_start_month=10)
    refused_everywhere(case, "[output].year_start_month", "water_year", "season")


def test_unknown_period(case):
    case.config["output"]["period"] = "fortnight"
    refused_everywhere(case, "[output].period", "water_year", "season", "fortnight")


BAD_TABLES = {
    "overlap": (
        "name,start,end\na,2031-01-01,2031-01-02\nb,2031-01-02,2031-01-04\n",
        ["periods.csv", "line 3", "'b'", "overlaps", "'a'"],
    ),
    "overlap-out-of-order": (
        "name,start,end\nb,2031-01-02,2031-01-04\na,2031-01-01,2031-01-03\n",
        ["periods.csv", "line 2", "overlaps", "line 3"],
    ),
    "bad-date": (
        "name,start,end\na,2031-13-01,2031-01-04\n",
        ["periods.csv", "line 2", "start", "2031-13-01"],
    ),
    "not-iso": (
        "name,start,end\na,01/01/2031,2031-01-04\n",
        ["periods.csv", "line 2", "YYYY-MM-DD"],
    ),
    "end-before-start": (
        "name,start,end\na,2031-01-01,2031-01-02\nb,2031-01-04,2031-01-03\n",
        ["periods.csv", "line 3", "before it starts"],
    ),
    "missing-column": ("name,from,end\na,2031-01-01,2031-01-04\n", ["periods.csv", "start"]),
    "no-header": ("a,2031-01-01,2031-01-04\n", ["periods.csv", "name, start, end"]),
    "empty-cell": ("name,start,end\na,2031-01-01,\n", ["periods.csv", "line 2", "end is empty"]),
    "duplicate-name": (
        "name,start,end\na,2031-01-01,2031-01-02\na,2031-01-03,2031-01-04\n",
        ["periods.csv", "line 3", "'a'", "line 2"],
    ),
    "outside-data": (
        "name,start,end\nold,2030-01-01,2030-12-31\nnow,2031-01-01,2031-01-04\n",
        ["periods.csv", "line 2", "outside the data", HELD],
    ),
    "no-rows": ("name,start,end\n", ["periods.csv", "no periods"]),
}


@pytest.mark.parametrize("kind", BAD_TABLES)
def test_bad_period_table(case, kind):
    text, words = BAD_TABLES[kind]
    (case.tmp / "periods.csv").write_text(text)
    case.config["output"]["period_table"] = "periods.csv"  # next to run.toml
    case.config["output"].pop("period")
    refused_everywhere(case, *words)


def test_period_table_that_does_not_exist(case):
    case.config["output"].update(period="table", period_table="missing.csv")
    refused_everywhere(case, "[output].period_table", "missing.csv", "config file's folder")


def test_period_table_with_another_period(case):
    (case.tmp / "periods.csv").write_text("name,start,end\na,2031-01-01,2031-01-04\n")
    case.config["output"].update(period="month", period_table="periods.csv")
    refused_everywhere(case, "[output].period_table", "month")


def test_table_period_without_a_table(case):
    case.config["output"]["period"] = "table"
    refused_everywhere(case, "[output].period", "period_table")


MONTH_CUTS = {
    "table": (
        {"period": "table", "period_table": "periods.csv"},
        {},
        ["periods.csv", "line 2", "splits a month", "monthly"],
    ),
    "window-start": ({}, {"start": "2031-01-10"}, ["[time] start", "cuts a month", "2031-01-01"]),
    "window-end": ({}, {"end": "2031-03-15"}, ["[time] end", "cuts a month", "2031-03-31"]),
}


@pytest.mark.parametrize("kind", MONTH_CUTS)
def test_window_or_table_cutting_a_month_of_monthly_climate(case, kind):
    output, window, words = MONTH_CUTS[kind]
    times = pd.date_range("2031-01-01", periods=4, freq="MS")
    case.write_climate(climate_dataset(times, BASE_FIELDS))
    (case.tmp / "periods.csv").write_text("name,start,end\nq,2031-01-01,2031-02-14\n")
    case.config["output"].update(output)
    case.config["time"] = window
    refused_everywhere(case, *words)
