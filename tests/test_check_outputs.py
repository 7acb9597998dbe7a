"""``lakeloss check`` finds what ``run`` would refuse about the output directory, before
any other work, and reports the climate gaps it can see without computing.

The case is the bad-input corpus's small clean run (``bad_inputs/corpus.py``). As in
``bad_inputs/test_bad_output.py``, "not writable" is simulated where lakeloss asks the
operating system (``os.access``), since the tests may run as root.
"""

from __future__ import annotations

import os

import numpy as np
import pytest
from bad_inputs.corpus import BASE_FIELDS, TIMES, Case, assert_refused
from builders import climate_dataset

from lakeloss.io import atomic


@pytest.fixture
def case(tmp_path) -> Case:
    return Case(tmp_path)


def _check(case, *extra, overwrite=False):
    return case.invoke("check", *extra, overwrite=overwrite)


def test_existing_output_directory_needs_overwrite(case):
    before = case.place_earlier_outputs()
    assert_refused(_check(case), "exists", "--overwrite")
    accepted = _check(case, overwrite=True)
    assert accepted.code == 0, accepted.stderr
    assert "ready to run" in accepted.stdout
    assert case.snapshot() == before


def test_output_path_is_a_file(case):
    case.out.write_bytes(b"not a directory\n")
    assert_refused(_check(case, overwrite=True), "is a file", "output.dir")
    assert case.out.read_bytes() == b"not a directory\n"


def test_output_directory_below_a_file(case):
    (case.tmp / "plain_file").write_bytes(b"x")
    case.config["output"]["dir"] = str(case.tmp / "plain_file" / "out")
    assert_refused(_check(case), "plain_file", "is not a directory")


def test_output_parent_not_writable(case, monkeypatch):
    parent = case.tmp / "read_only"
    parent.mkdir()
    case.config["output"]["dir"] = str(parent / "out")
    real_access = os.access

    def access(path, mode, *args, **kwargs):
        if os.path.abspath(path) == str(parent) and mode & os.W_OK:
            return False
        return real_access(path, mode, *args, **kwargs)

    monkeypatch.setattr(atomic.os, "access", access)
    assert_refused(_check(case), "read_only", "not writable")
    assert list(parent.iterdir()) == []


def test_output_is_checked_before_the_inputs_are_read(case):
    # A climate file that is not there: the output directory is refused first, as by run.
    case.place_earlier_outputs()
    case.config["climate"]["air_temperature"]["path"] = str(case.tmp / "missing.nc")
    assert_refused(_check(case), "exists", "--overwrite")
    assert_refused(case.invoke("run", overwrite=False), "exists", "--overwrite")


@pytest.mark.parametrize(
    ("days", "limit", "word"),
    [([1], None, "filled by linear interpolation"), ([1], 0, "longer than"), ([0], None, "start")],
)
def test_whole_grid_gaps_are_reported(case, days, limit, word):
    rnet = np.full((len(TIMES), 6, 8), 200.0)
    rnet[days] = np.nan
    fields = {**BASE_FIELDS, "rnet": (rnet, "W m-2", "surface_net_downward_radiative_flux")}
    case.write_climate(climate_dataset(TIMES, fields))
    if limit is not None:
        case.config["checks"] = {"max_gap_steps": limit}
    outcome = _check(case)
    assert outcome.code == 0, outcome.stderr
    [line] = [x for x in outcome.stdout.splitlines() if "missing on the whole grid" in x]
    assert "surface_net_downward_radiative_flux" in line
    assert f"2031-01-0{days[0] + 1}" in line and word in line
    last = outcome.stdout.splitlines()[-1]
    filled = word.startswith("filled")
    assert last == "all inputs checked: ready to run" + (
        "" if filled else ", with the warnings above"
    )


def test_clean_inputs_report_no_gap(case):
    outcome = _check(case)
    assert outcome.code == 0, outcome.stderr
    assert "missing on the whole grid" not in outcome.stdout
    assert outcome.stdout.splitlines()[-1] == "all inputs checked: ready to run"
