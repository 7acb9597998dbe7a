"""Output directories that cannot be used, and a disk that fills up during the write.

A failed write must leave the earlier outputs byte-identical and no staging directory
behind. The tests may run as root, who can write into a directory of mode 555, so "not
writable" is simulated where the writer asks the operating system (``os.access``), and a full
disk by writers that raise ``OSError(ENOSPC)`` part-way through.
"""

from __future__ import annotations

import errno
import os

import pytest
from bad_inputs.corpus import assert_refused

import lakeloss
from lakeloss.errors import OutputError
from lakeloss.io import atomic, gpkg, write_run


def test_existing_output_directory_without_overwrite(case):
    before = case.place_earlier_outputs()
    assert_refused(case.invoke("run", overwrite=False), "exists", "--overwrite")
    assert case.snapshot() == before
    assert case.leftovers() == []


def test_output_path_is_a_file(case):
    case.out.write_bytes(b"not a directory\n")
    assert_refused(case.invoke("run"), "is a file", "output.dir")
    assert case.out.read_bytes() == b"not a directory\n"


def test_output_directory_below_a_file(case):
    (case.tmp / "plain_file").write_bytes(b"x")
    case.config["output"]["dir"] = str(case.tmp / "plain_file" / "out")
    assert_refused(case.invoke("run"), "plain_file", "is not a directory")
    assert (case.tmp / "plain_file").read_bytes() == b"x"


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
    assert_refused(case.invoke("run"), "read_only", "not writable")
    assert list(parent.iterdir()) == []


def _fails_on_call(real, failing_call: int):
    """A writer that works ``failing_call - 1`` times, then writes half a file and fails."""
    calls = {"n": 0}

    def writer(path, *args, **kwargs):
        calls["n"] += 1
        if calls["n"] == failing_call:
            with open(path, "wb") as handle:
                handle.write(b"half a table")
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(path))
        return real(path, *args, **kwargs)

    return writer


@pytest.mark.parametrize(
    ("module", "writer", "failing_call"),
    [
        pytest.param(write_run, "write_csv", 2, id="second-csv"),
        pytest.param(gpkg, "_write_layer", 1, id="geopackage"),
        pytest.param(write_run, "write_json", 1, id="run-json"),
    ],
)
def test_disk_full_during_the_write_leaves_earlier_outputs(
    case, monkeypatch, module, writer, failing_call
):
    first = case.invoke("run")
    assert first.code == 0, first.stderr
    before = case.snapshot()
    assert "waterbodies.gpkg" in before
    monkeypatch.setattr(module, writer, _fails_on_call(getattr(module, writer), failing_call))
    assert_refused(case.invoke("run"), "disk full", "earlier outputs were left untouched")
    assert case.snapshot() == before
    assert case.leftovers() == []


def test_disk_full_through_the_python_api(case, monkeypatch):
    case.place_earlier_outputs()
    before = case.snapshot()
    result = lakeloss.run(case.config)
    monkeypatch.setattr(write_run, "write_csv", _fails_on_call(write_run.write_csv, 1))
    with pytest.raises(OutputError, match="disk full") as caught:
        result.write(case.out, overwrite=True)
    assert "\n" not in str(caught.value)
    assert case.snapshot() == before
    assert case.leftovers() == []
    # The same result writes fine once there is space again.
    monkeypatch.undo()
    result.write(case.out, overwrite=True)
    assert (case.out / "summary_by_waterbody.csv").read_bytes() != before[
        "summary_by_waterbody.csv"
    ]
