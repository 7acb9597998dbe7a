"""Faults and repeatability: killed runs leave complete outputs or none; reruns are identical.

A real ``lakeloss run`` on the demo scenario is started in a subprocess and killed with
SIGKILL at several points: early (loading), mid-run, and the moment its staging directory
appears (writing). After each kill the output directory must hold either the previous complete
outputs, byte for byte, or nothing — never a partial file under a final name — and the
weights cache must still serve the next run.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pyogrio
import pytest
import tomli_w

ROOT = Path(__file__).resolve().parents[1]
OUTPUT_NAMES = {
    "run.json",
    "summary_by_group.csv",
    "summary_by_period.csv",
    "summary_by_waterbody.csv",
    "waterbodies.gpkg",
}


def _demo_config(tmp_path: Path) -> Path:
    import tomllib

    raw = tomllib.loads((ROOT / "config" / "demo.toml").read_text())
    raw["waterbodies"]["path"] = str(ROOT / "config" / raw["waterbodies"]["path"])
    for entry in raw["climate"].values():
        entry["path"] = str(ROOT / "config" / entry["path"])
    raw["output"]["dir"] = str(tmp_path / "out")
    raw["compute"] = {"cache_dir": str(tmp_path / "cache"), "chunk_steps": 30}
    path = tmp_path / "run.toml"
    path.write_text(tomli_w.dumps(raw))
    return path


def _start(config: Path) -> subprocess.Popen:
    return subprocess.Popen(
        [sys.executable, "-m", "lakeloss.cli", "run", str(config), "--overwrite", "-q"],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        cwd=ROOT,
    )


def _snapshot(directory: Path) -> dict[str, bytes] | None:
    """The outputs' content: CSV bytes, GeoPackage attribute values, run.json's keys.

    run.json and the GeoPackage's metadata carry time stamps and timings by design, so they
    are compared by content, not bytes; any partial or corrupt file fails to read here.
    """
    if not directory.exists():
        return None
    content = {}
    for path in sorted(directory.iterdir()):
        if path.suffix == ".csv":
            content[path.name] = path.read_bytes()
        elif path.suffix == ".gpkg":
            tables = [
                pyogrio.read_dataframe(path, layer=layer, read_geometry=False).to_csv()
                for layer in ("waterbodies", "evaporation_by_period")
            ]
            content[path.name] = "".join(tables).encode()
        else:
            content[path.name] = ",".join(sorted(json.loads(path.read_text()))).encode()
    return content


def _partials(parent: Path) -> list[Path]:
    return [p for p in parent.iterdir() if ".lakeloss-partial-" in p.name]


def _kill_when(proc: subprocess.Popen, condition, timeout: float = 60.0) -> bool:
    """SIGKILL ``proc`` as soon as ``condition()`` holds; False if it finished first."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            return False
        if condition():
            os.kill(proc.pid, signal.SIGKILL)
            proc.wait()
            return True
        time.sleep(0.005)
    proc.kill()
    raise AssertionError("the run neither finished nor reached the kill point")


def _complete_run(config: Path) -> None:
    proc = _start(config)
    _, err = proc.communicate(timeout=300)
    assert proc.returncode == 0, err.decode()


@pytest.mark.slow
def test_sigkill_at_any_stage_leaves_previous_outputs_or_none(tmp_path):
    config = _demo_config(tmp_path)
    out = tmp_path / "out"

    # 1. Killed before any output existed: nothing under the final name.
    proc = _start(config)
    assert _kill_when(proc, lambda: time.sleep(0.4) is None)
    assert not out.exists()

    # 2. A complete run, then runs killed early, mid-way and while writing.
    _complete_run(config)
    previous = _snapshot(out)
    assert set(previous) == OUTPUT_NAMES
    started = time.monotonic()
    _complete_run(config)
    duration = time.monotonic() - started
    assert _snapshot(out) == previous

    kills = 0
    for label, fraction in (("early", 0.15), ("mid", 0.6), ("writing", None)):
        proc = _start(config)
        t0 = time.monotonic()
        if fraction is None:
            condition = lambda: bool(_partials(tmp_path))  # noqa: E731
        else:
            condition = lambda f=fraction, s=t0: time.monotonic() - s > f * duration  # noqa: E731
        kills += _kill_when(proc, condition)
        after = _snapshot(out)
        assert after is None or after == previous, label
        if after is not None:
            assert set(after) == OUTPUT_NAMES
    assert kills >= 2  # at least the early and the writing kill landed mid-run

    # 3. The next run cleans up stale staging directories and completes.
    _complete_run(config)
    assert _partials(tmp_path) == []
    assert set(_snapshot(out)) == OUTPUT_NAMES


@pytest.mark.slow
def test_weights_cache_survives_a_killed_run_and_is_reused(tmp_path):
    config = _demo_config(tmp_path)
    cache = tmp_path / "cache"
    proc = _start(config)
    # Kill once the weights are in the cache but before the run completes.
    killed = _kill_when(proc, lambda: cache.exists() and any(cache.glob("weights-*.npz")))
    assert killed, "the run finished before the cache was written"
    assert not (tmp_path / "out").exists()
    _complete_run(config)
    run = json.loads((tmp_path / "out" / "run.json").read_text())
    assert run["weights_from_cache"] is True


def test_reruns_are_byte_identical_whatever_the_block_size(tmp_path, monkeypatch):
    import lakeloss
    import lakeloss.timeblocks as timeblocks

    config = _demo_config(tmp_path)
    import tomllib

    raw = tomllib.loads(config.read_text())
    first = lakeloss.run(raw)
    first.write(tmp_path / "a")
    raw["compute"]["chunk_steps"] = 97
    monkeypatch.setattr(timeblocks, "_local_threads", lambda: 1)  # one core vs two
    second = lakeloss.run(raw)
    second.write(tmp_path / "b")
    for name in ("summary_by_waterbody.csv", "summary_by_period.csv", "summary_by_group.csv"):
        assert (tmp_path / "a" / name).read_bytes() == (tmp_path / "b" / name).read_bytes(), name
    for layer in ("waterbodies", "evaporation_by_period"):
        a = pyogrio.read_dataframe(tmp_path / "a" / "waterbodies.gpkg", layer=layer)
        b = pyogrio.read_dataframe(tmp_path / "b" / "waterbodies.gpkg", layer=layer)
        for column in a.columns:
            if column == "geometry":
                assert a.geometry.geom_equals_exact(b.geometry, 0.0).all()
            else:
                np.testing.assert_array_equal(a[column].to_numpy(), b[column].to_numpy())
    shutil.rmtree(tmp_path / "a")


def _table_writers(proc: subprocess.Popen) -> list:
    import psutil

    try:
        children = psutil.Process(proc.pid).children(recursive=True)
    except psutil.NoSuchProcess:
        return []
    return [c for c in children if "lakeloss.io.bulk_table" in " ".join(_cmdline(c))]


def _cmdline(process) -> list[str]:
    import psutil

    try:
        return process.cmdline()
    except (psutil.NoSuchProcess, psutil.ZombieProcess, psutil.AccessDenied):
        return []


@pytest.mark.slow
def test_sigkill_while_the_child_inserts_the_period_table(tmp_path):
    # 17 000 ponds x 12 months = 204 000 rows: the attribute table goes to the child
    # process (io/bulk_table.py). Killing the run then must take the child with it and
    # leave no output under the final name; the next run completes.
    import psutil
    from builders import case_config, climate_dataset, pond_layer, write_netcdf

    layer_path = tmp_path / "ponds.gpkg"
    pond_layer(n_ponds=17_000, seed=11).to_file(layer_path, layer="ponds", driver="GPKG")
    times = pd.date_range("2031-01-01", periods=365, freq="D")
    fields = {
        "rnet": (150.0, "W m-2", "surface_net_downward_radiative_flux"),
        "tas": (293.15, "K", "air_temperature"),
        "pr": (1.0 / 86400.0, "kg m-2 s-1", "precipitation_flux"),
    }
    climate = write_netcdf(climate_dataset(times, fields), tmp_path / "climate.nc")
    names = {
        "surface_net_downward_radiative_flux": "rnet",
        "air_temperature": "tas",
        "precipitation_flux": "pr",
    }
    raw = case_config(layer_path, climate, tmp_path / "out", "priestley_taylor", names)
    config = tmp_path / "run.toml"
    config.write_text(tomli_w.dumps(raw))
    proc = _start(config)
    seen: list = []

    def child_inserting() -> bool:
        seen[:] = _table_writers(proc) or seen
        return bool(seen)

    assert _kill_when(proc, child_inserting, timeout=240)
    _, alive = psutil.wait_procs(seen, timeout=10)
    assert alive == [], "the table-writing child outlived its parent"
    assert not (tmp_path / "out").exists()
    _complete_run(config)
    assert (
        pyogrio.read_info(tmp_path / "out" / "waterbodies.gpkg", layer="evaporation_by_period")[
            "features"
        ]
        == 17_001 * 12
    )
