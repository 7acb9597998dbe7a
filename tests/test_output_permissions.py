"""A real run's output directory is shared like any directory the user makes.

Outputs used to be staged with tempfile.mkdtemp, whose mode 0700 survived the final rename.
The run here is the small synthetic case of ``make_case`` (invented ponds, uniform climate)
with every optional output on, so GDAL, netCDF4 and plain writes all take part.
"""

from __future__ import annotations

import os

import pytest

import lakeloss


@pytest.mark.parametrize(
    ("mask", "dir_mode", "file_mode"), [(0o022, 0o755, 0o644), (0o027, 0o750, 0o640)]
)
def test_every_output_gets_the_mode_of_the_umask(make_case, tmp_path, mask, dir_mode, file_mode):
    config = make_case("energy_balance", output={"series": True})
    previous = os.umask(mask)
    try:
        written = lakeloss.run(config).write(tmp_path / "out")
    finally:
        os.umask(previous)
    entries = [written, *written.rglob("*")]
    assert any(p.suffix == ".gpkg" for p in entries) and any(p.suffix == ".nc" for p in entries)
    modes = {p.relative_to(tmp_path).as_posix(): p.stat().st_mode & 0o777 for p in entries}
    expected = {
        p.relative_to(tmp_path).as_posix(): dir_mode if p.is_dir() else file_mode for p in entries
    }
    assert modes == expected
