"""What a run tells its user: the summary line on stdout, one note per qa flag on stderr,
the flag counts in run.json, no rank for bodies without a result, and quiet libraries.

The cases are the bad-input corpus's small clean run (``bad_inputs/corpus.py``: three ponds
and a reservoir, four daily steps on an 8 x 6 cell grid) with ponds added off the grid, and,
for the cluster, the same case run by ``lakeloss`` in a child process.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import shapely
from bad_inputs.corpus import Case
from builders import LAYER_CRS, pond_layer
from pyproj import Transformer


def _square_at(lon: float, lat: float, side: float = 400.0) -> shapely.Polygon:
    x, y = Transformer.from_crs("EPSG:4326", LAYER_CRS, always_xy=True).transform(lon, lat)
    return shapely.box(x - side / 2, y - side / 2, x + side / 2, y + side / 2)


def _with_ponds_off_the_grid(case: Case) -> None:
    # The grid spans 146.0..146.4 E: ponds 201 and 202 lie 5 and 10 km east of it.
    extra = gpd.GeoDataFrame(
        {"pond_id": [201, 202], "name": ["off", "far"], "zone": ["east", "east"]},
        geometry=[_square_at(146.45, -30.15), _square_at(146.5, -30.15)],
        crs=LAYER_CRS,
    )
    case.write_layer(pd.concat([pond_layer(n_ponds=3), extra], ignore_index=True))


def test_bodies_without_a_result_get_no_rank_and_sort_last(tmp_path):
    case = Case(tmp_path)
    _with_ponds_off_the_grid(case)
    outcome = case.invoke("run")
    assert outcome.code == 0, outcome.stderr
    layer = pyogrio.read_dataframe(case.out / "waterbodies.gpkg", layer="waterbodies")
    ranks = layer.set_index("pond_id")["loss_rank"]
    assert ranks.loc[[201, 202]].isna().all()
    assert sorted(ranks.drop([201, 202]).astype(int)) == [1, 2, 3, 4]
    # The largest volume is rank 1.
    best = layer.loc[layer["evap_m3"].idxmax(), "pond_id"]
    assert ranks.loc[best] == 1
    table = pd.read_csv(case.out / "summary_by_waterbody.csv")
    assert list(table["pond_id"].iloc[-2:]) == [201, 202]
    assert table["loss_rank"].iloc[-2:].isna().all()
    assert list(table["loss_rank"].iloc[:4]) == [1, 2, 3, 4]


def test_flags_are_counted_and_noted(tmp_path):
    case = Case(tmp_path)
    _with_ponds_off_the_grid(case)
    outcome = case.invoke("run")
    assert outcome.code == 0, outcome.stderr
    run = json.loads((case.out / "run.json").read_text())
    counts = run["counts"]
    assert counts["qa_flags"] == {"outside_grid": 2}
    assert counts["without_result"] == 2 and counts["without_any_result"] == 2
    assert counts["flagged"] == 2
    notes = [line for line in outcome.stderr.splitlines() if line.startswith("note:")]
    assert notes[0].startswith("note: 2 water bodies flagged outside_grid (pond_id 201, 202)")
    assert any("2 water bodies have no whole-run result" in line for line in notes)


def test_summary_line_is_the_only_output_on_stdout(tmp_path):
    case = Case(tmp_path)
    _with_ponds_off_the_grid(case)
    outcome = case.invoke("run")
    assert outcome.code == 0, outcome.stderr
    [line] = outcome.stdout.splitlines()
    assert line.startswith("6 water bodies, 1 periods (2031-01-01..2031-01-04): ")
    assert "m3 evaporated over 4 days (energy_balance) by the 4 with a whole-run result" in line
    assert "; 2 without; 2 flagged; outputs in " in line
    assert "m3 evaporated" not in outcome.stderr
    total = pd.read_csv(case.out / "summary_by_waterbody.csv")["evap_m3"].sum()
    assert f"{total:,.0f} m3" in line
    assert case.invoke("run", "-q").stdout == ""


def test_summary_line_names_years_and_the_volume_per_year(make_case, tmp_path):
    import tomli_w
    from click.testing import CliRunner

    from lakeloss.cli import cli

    times = pd.date_range("2031-01-01", "2032-12-31", freq="D")  # 731 days
    config = make_case(times=times)
    path = tmp_path / "run.toml"
    path.write_text(tomli_w.dumps(config))
    result = CliRunner().invoke(cli, ["run", str(path)])
    assert result.exit_code == 0, result.stderr
    [line] = result.stdout.splitlines()
    assert "over 2.0 years, " in line and " m3 per year " in line
    total = float(line.split(": ")[1].split(" m3")[0].replace(",", ""))
    per_year = float(line.split("years, ")[1].split(" m3")[0].replace(",", ""))
    np.testing.assert_allclose(per_year, total / (731 / 365.2425), rtol=1e-5)


def _cli_run(case: Case, *extra: str) -> subprocess.CompletedProcess:
    env = {k: v for k, v in os.environ.items() if not k.startswith("DASK_")}
    return subprocess.run(
        [sys.executable, "-m", "lakeloss.cli", "run", str(case.toml()), "--overwrite", *extra],
        capture_output=True,
        text=True,
        env=env,
        timeout=300,
        check=False,
    )


def test_a_local_cluster_is_quiet_unless_verbose(tmp_path):
    # A real cluster of two worker processes; its library logs at INFO some 30 lines.
    case = Case(tmp_path)
    quiet = _cli_run(case, "--workers", "2")
    assert quiet.returncode == 0, quiet.stderr
    assert quiet.stderr.strip() == "", quiet.stderr
    assert len(quiet.stdout.splitlines()) == 1
    verbose = _cli_run(case, "--workers", "2", "-v")
    assert verbose.returncode == 0, verbose.stderr
    assert "Scheduler" in verbose.stderr  # -v lets them through
