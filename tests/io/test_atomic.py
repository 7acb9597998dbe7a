"""OutputDirectory: outputs appear complete under the final name or not at all.

Fixtures are tiny directories of a few text files under pytest's tmp_path. The disk-full cases
run on a real 64 KiB tmpfs when this process may mount one (it runs as root in CI), filled by
a plain file, by GDAL and by netCDF4 (whose errors carry no errno), and fall back to an ENOSPC
raised from inside the block otherwise; both paths assert the same outcome.
"""

from __future__ import annotations

import errno
import os
import signal
import subprocess
import sys
import textwrap
from pathlib import Path

import geopandas as gpd
import numpy as np
import pytest
from shapely.geometry import box

from lakeloss.errors import OutputError
from lakeloss.io import atomic
from lakeloss.io.atomic import OutputDirectory, clean_stale
from lakeloss.io.gpkg import write_geopackage
from lakeloss.io.series import SeriesWriter


def _snapshot(directory: Path) -> dict[str, bytes]:
    """Relative path -> bytes of every file below ``directory``."""
    return {
        str(p.relative_to(directory)): p.read_bytes()
        for p in sorted(directory.rglob("*"))
        if p.is_file()
    }


def _leftovers(parent: Path) -> list[str]:
    return sorted(p.name for p in parent.iterdir() if ".lakeloss-" in p.name)


@pytest.fixture
def previous_run(tmp_path: Path) -> Path:
    """An output directory left by an earlier, successful run."""
    target = tmp_path / "out"
    target.mkdir()
    (target / "run.json").write_text('{"run": 1}\n')
    (target / "tables").mkdir()
    (target / "tables" / "evaporation.csv").write_bytes(b"id,evap_mm\n1,2.5\n")
    return target


def _dead_pid() -> int:
    """Id of a process that has already exited."""
    proc = subprocess.run(
        [sys.executable, "-c", "import os; print(os.getpid())"],
        capture_output=True,
        text=True,
        check=True,
    )
    return int(proc.stdout)


def test_success_moves_into_place(tmp_path):
    target = tmp_path / "out"
    with OutputDirectory(target, overwrite=False) as staging:
        assert staging.parent == tmp_path
        assert staging.name.startswith(f".out.lakeloss-partial-{os.getpid()}-")
        (staging / "run.json").write_text("{}\n")
        assert not target.exists()
    assert (target / "run.json").read_text() == "{}\n"
    assert _leftovers(tmp_path) == []


def test_missing_parents_are_created(tmp_path):
    target = tmp_path / "a" / "b" / "out"
    with OutputDirectory(target, overwrite=False) as staging:
        (staging / "x.txt").write_text("x")
    assert (target / "x.txt").read_text() == "x"


def test_existing_target_refused_without_overwrite(previous_run):
    before = _snapshot(previous_run)
    out = OutputDirectory(previous_run, overwrite=False)
    with pytest.raises(OutputError, match="exists; pass --overwrite to replace it"):
        out.check()
    with pytest.raises(OutputError, match="exists; pass --overwrite"):
        with out:
            raise AssertionError("the block must not run")
    assert _snapshot(previous_run) == before
    assert _leftovers(previous_run.parent) == []


def test_overwrite_replaces_whole_directory(previous_run):
    with OutputDirectory(previous_run, overwrite=True) as staging:
        (staging / "run.json").write_text('{"run": 2}\n')
    assert _snapshot(previous_run) == {"run.json": b'{"run": 2}\n'}
    assert _leftovers(previous_run.parent) == []


def test_exception_mid_write_keeps_previous_output(previous_run):
    before = _snapshot(previous_run)
    with pytest.raises(ZeroDivisionError):
        with OutputDirectory(previous_run, overwrite=True) as staging:
            (staging / "run.json").write_text('{"run": 2}\n')
            _ = 1 / 0
    assert not staging.exists()
    assert _snapshot(previous_run) == before
    assert _leftovers(previous_run.parent) == []


def test_simulated_disk_full_becomes_output_error(previous_run):
    before = _snapshot(previous_run)
    with pytest.raises(OutputError, match="disk full while writing outputs") as info:
        with OutputDirectory(previous_run, overwrite=True) as staging:
            (staging / "part.bin").write_bytes(b"0" * 10)
            raise OSError(errno.ENOSPC, "No space left on device")
    assert "earlier outputs were left untouched" in str(info.value)
    assert "\n" not in str(info.value)
    assert isinstance(info.value.__cause__, OSError)
    assert _snapshot(previous_run) == before
    assert _leftovers(previous_run.parent) == []


@pytest.fixture
def tiny_disk(tmp_path: Path):
    """A 64 KiB tmpfs if this process can mount one, else None (simulated case is used)."""
    mount_point = tmp_path / "tiny"
    mount_point.mkdir()
    try:
        proc = subprocess.run(
            ["mount", "-t", "tmpfs", "-o", "size=64k", "tmpfs", str(mount_point)],
            capture_output=True,
            timeout=10,
        )
    except (OSError, subprocess.TimeoutExpired):
        proc = None
    if proc is None or proc.returncode != 0:
        yield None
        return
    yield mount_point
    # A busy mount means a writer kept a descriptor of a deleted staging file open.
    unmounted = subprocess.run(["umount", str(mount_point)], capture_output=True, timeout=10)
    if unmounted.returncode != 0:
        subprocess.run(["umount", "-l", str(mount_point)], capture_output=True, timeout=10)
    assert unmounted.returncode == 0, unmounted.stderr


def _fill_with_plain_file(staging: Path) -> None:
    with open(staging / "big.bin", "wb") as fh:
        for _ in range(64):  # 256 KiB into 64 KiB: must fail with ENOSPC
            fh.write(b"\0" * 4096)
            fh.flush()


def _fill_with_geopackage(staging: Path) -> None:
    # An empty GeoPackage alone is larger than 64 KiB; GDAL fails in its own words.
    ponds = gpd.GeoDataFrame({"id": [1]}, geometry=[box(0, 0, 10, 10)], crs="EPSG:32633")
    write_geopackage(staging / "w.gpkg", [("waterbodies", ponds)], fields={}, metadata={})


def _fill_with_series(staging: Path) -> None:
    # 200 x 400 random float32 values (~320 KiB, barely compressible); netCDF4 raises
    # RuntimeError, not OSError, when HDF5 cannot write.
    rng = np.random.default_rng(1)
    times = np.arange("2001-01-01", "2002-02-05", dtype="datetime64[D]")
    with SeriesWriter(
        staging / "s.nc",
        waterbody_ids=np.arange(200),
        times=times,
        calendar="standard",
        variables={"e": {"units": "mm", "long_name": "e"}},
        global_attrs={"title": "t"},
        chunk_times=100,
    ) as series:
        for start in range(0, 400, 100):
            series.write("e", slice(start, start + 100), rng.random((100, 200)))


@pytest.mark.parametrize("fill", [_fill_with_plain_file, _fill_with_geopackage, _fill_with_series])
def test_disk_full_real_or_simulated(tiny_disk, tmp_path, fill):
    disk = tiny_disk if tiny_disk is not None else tmp_path / "fallback"
    disk.mkdir(exist_ok=True)
    target = disk / "out"
    target.mkdir()
    (target / "run.json").write_text('{"run": 1}\n')
    before = _snapshot(target)
    with pytest.raises(OutputError, match="disk full while writing outputs") as info:
        with OutputDirectory(target, overwrite=True) as staging:
            if tiny_disk is None:
                raise OSError(errno.ENOSPC, "No space left on device (simulated)")
            fill(staging)
    assert "earlier outputs were left untouched" in str(info.value)
    assert _snapshot(target) == before
    assert _leftovers(disk) == []


def test_failed_final_rename_restores_previous_output(previous_run, monkeypatch):
    before = _snapshot(previous_run)
    real_rename = os.rename

    def rename_failing_into_target(src, dst):
        if Path(dst) == previous_run and ".lakeloss-partial-" in str(src):
            raise PermissionError(errno.EACCES, "rename refused (simulated)")
        real_rename(src, dst)

    monkeypatch.setattr(atomic.os, "rename", rename_failing_into_target)
    with pytest.raises(OutputError, match="cannot write output directory"):
        with OutputDirectory(previous_run, overwrite=True) as staging:
            (staging / "run.json").write_text('{"run": 2}\n')
    assert _snapshot(previous_run) == before
    assert _leftovers(previous_run.parent) == []


def test_target_is_a_file(tmp_path):
    target = tmp_path / "out"
    target.write_text("not a directory")
    with pytest.raises(OutputError, match="is a file, expected a directory"):
        OutputDirectory(target, overwrite=True).check()
    assert target.read_text() == "not a directory"


def test_parent_is_a_file(tmp_path):
    blocker = tmp_path / "plain_file"
    blocker.write_text("x")
    with pytest.raises(OutputError, match="is not a directory"):
        OutputDirectory(blocker / "sub" / "out", overwrite=False).check()


def test_parent_not_writable(tmp_path):
    # Root ignores permission bits, so only assert the refusal where os.access agrees.
    locked = tmp_path / "locked"
    locked.mkdir()
    locked.chmod(0o500)
    try:
        out = OutputDirectory(locked / "out", overwrite=False)
        if os.access(locked, os.W_OK):
            out.check()  # writable for this user (root): no refusal expected
        else:
            with pytest.raises(OutputError, match="is not writable"):
                out.check()
    finally:
        locked.chmod(0o700)


def test_clean_stale_removes_dead_and_keeps_live(tmp_path):
    target = tmp_path / "out"
    target.mkdir()
    dead = _dead_pid()
    dead_partial = tmp_path / f".out.lakeloss-partial-{dead}-abc123"
    dead_old = tmp_path / f".out.lakeloss-old-{dead}"
    live_partial = tmp_path / f".out.lakeloss-partial-{os.getppid()}-xyz"
    other_target = tmp_path / f".other.lakeloss-partial-{dead}-abc"
    for d in (dead_partial, dead_old, live_partial, other_target):
        d.mkdir()
    removed = clean_stale(target)
    assert sorted(removed) == sorted([dead_partial, dead_old])
    assert not dead_partial.exists() and not dead_old.exists()
    assert live_partial.exists() and other_target.exists()


def test_clean_stale_restores_output_lost_between_renames(tmp_path):
    target = tmp_path / "out"
    aside = tmp_path / f".out.lakeloss-old-{_dead_pid()}"
    aside.mkdir()
    (aside / "run.json").write_text('{"run": 1}\n')
    clean_stale(target)
    assert (target / "run.json").read_text() == '{"run": 1}\n'
    assert not aside.exists()


_KILLED_WRITER = textwrap.dedent(
    """
    import sys, time
    from lakeloss.io.atomic import OutputDirectory
    with OutputDirectory(sys.argv[1], overwrite=True) as staging:
        (staging / "run.json").write_text('{"run": 2}')
        print(staging, flush=True)
        time.sleep(60)
    """
)


def test_sigkill_mid_write_leaves_old_target_and_is_cleaned(previous_run):
    before = _snapshot(previous_run)
    proc = subprocess.Popen(
        [sys.executable, "-c", _KILLED_WRITER, str(previous_run)], stdout=subprocess.PIPE, text=True
    )
    try:
        staging = Path(proc.stdout.readline().strip())
        assert staging.is_dir() and (staging / "run.json").exists()
    finally:
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=30)
        proc.stdout.close()
    assert proc.returncode == -signal.SIGKILL
    assert _snapshot(previous_run) == before
    assert staging.exists()  # nothing could clean up after SIGKILL
    with OutputDirectory(previous_run, overwrite=True) as new_staging:
        assert not staging.exists()  # the new run removed the dead run's partial directory
        (new_staging / "run.json").write_text('{"run": 3}')
    assert _snapshot(previous_run) == {"run.json": b'{"run": 3}'}
    assert _leftovers(previous_run.parent) == []


def test_overwrite_of_symlinked_output_keeps_link_target(tmp_path, previous_run):
    # The link is replaced by a real directory; what it pointed to is not deleted.
    link = tmp_path / "latest"
    link.symlink_to(previous_run, target_is_directory=True)
    before = _snapshot(previous_run)
    with OutputDirectory(link, overwrite=True) as staging:
        (staging / "run.json").write_text('{"run": 2}\n')
    assert not link.is_symlink() and (link / "run.json").read_text() == '{"run": 2}\n'
    assert _snapshot(previous_run) == before
    assert _leftovers(tmp_path) == []


@pytest.fixture
def umask():
    """Set the process umask for one test and restore the previous one afterwards."""
    previous = os.umask(0o022)
    try:
        yield os.umask
    finally:
        os.umask(previous)


@pytest.mark.parametrize(
    ("mask", "dir_mode", "file_mode"),
    [(0o022, 0o755, 0o644), (0o027, 0o750, 0o640), (0o002, 0o775, 0o664)],
)
def test_output_directory_gets_the_umask_mode(tmp_path, umask, mask, dir_mode, file_mode):
    # The staging directory used to come from tempfile.mkdtemp (0700) and kept that mode
    # after the swap, so nobody else could read shared results.
    umask(mask)
    target = tmp_path / "out"
    with OutputDirectory(target, overwrite=False) as staging:
        (staging / "run.json").write_text("{}\n")
        (staging / "tables").mkdir()
        (staging / "tables" / "evaporation.csv").write_text("id\n")
    assert target.stat().st_mode & 0o777 == dir_mode
    assert (target / "tables").stat().st_mode & 0o777 == dir_mode
    assert (target / "run.json").stat().st_mode & 0o777 == file_mode
    assert (target / "tables" / "evaporation.csv").stat().st_mode & 0o777 == file_mode


def test_overwritten_output_gets_the_umask_mode_too(previous_run, umask):
    umask(0o022)
    previous_run.chmod(0o700)
    with OutputDirectory(previous_run, overwrite=True) as staging:
        (staging / "run.json").write_text('{"run": 2}\n')
    assert previous_run.stat().st_mode & 0o777 == 0o755


def test_staging_names_stay_unique(tmp_path):
    made = {atomic._make_staging(tmp_path, ".out.lakeloss-partial-1-") for _ in range(50)}
    assert len(made) == 50
    assert all(p.is_dir() and p.name.startswith(".out.lakeloss-partial-1-") for p in made)
