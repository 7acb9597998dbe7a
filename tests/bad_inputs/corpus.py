"""Helpers of the bad-input corpus: one small clean case that each test breaks in one way.

The clean case is invented test data: three ponds of 0.1 to 5 ha and a reservoir with an
island (``builders.pond_layer``) in a GeoPackage, and four daily steps of net radiation, air
temperature, relative humidity and wind on an 8 x 6 cell, 0.05 degree grid that covers them
(``builders.climate_dataset``). The method is ``energy_balance`` with gross evaporation only,
so that a case needs no more inputs than it breaks.

Every command goes through ``click.testing.CliRunner`` on ``lakeloss.cli.cli`` with a TOML
file written by ``tomli_w``. A refusal must be exit code 2 and exactly one line starting
with ``error:`` (warnings before it are allowed), no traceback, and the output directory as
it was: absent, or byte-identical to the earlier outputs placed there before the run.
"""

from __future__ import annotations

import copy
from dataclasses import dataclass
from pathlib import Path

import geopandas as gpd
import pandas as pd
import tomli_w
from builders import case_config, climate_dataset, pond_layer, write_netcdf
from click.testing import CliRunner

from lakeloss.cli import cli

BASE_FIELDS = {
    "rnet": (200.0, "W m-2", "surface_net_downward_radiative_flux"),
    "tas": (298.15, "K", "air_temperature"),
    "hurs": (40.0, "%", "relative_humidity"),
    "wind": (3.0, "m s-1", "wind_speed"),
}
BASE_CLIMATE = {
    "surface_net_downward_radiative_flux": "rnet",
    "air_temperature": "tas",
    "relative_humidity": "hurs",
    "wind_speed": "wind",
}
TIMES = pd.date_range("2031-01-01", periods=4, freq="D")

# What an earlier, successful run left in the output directory (contents are arbitrary:
# the tests only check that a failed run leaves them byte-identical).
EARLIER_OUTPUTS = {
    "run.json": b'{"earlier": true}\n',
    "summary_by_waterbody.csv": b"pond_id,evap_mm\n101,1.0\n",
}


@dataclass
class Outcome:
    """What one command did: exit code and its two output streams."""

    code: int
    stdout: str
    stderr: str

    @property
    def error_lines(self) -> list[str]:
        return [line for line in self.stderr.splitlines() if line.startswith("error:")]


class Case:
    """A clean run in ``tmp_path`` whose files and config a test may break."""

    def __init__(self, tmp_path: Path) -> None:
        self.tmp = tmp_path
        self.out = tmp_path / "out"
        layer_path = self.write_layer(pond_layer(n_ponds=3))
        climate_path = self.write_climate(climate_dataset(TIMES, BASE_FIELDS))
        self.config = case_config(
            layer_path,
            climate_path,
            self.out,
            "energy_balance",
            BASE_CLIMATE,
            output={"precipitation": False},
        )

    # ----------------------------------------------------------------- files

    def write_layer(
        self, frame: gpd.GeoDataFrame, name: str = "ponds.gpkg", layer: str = "ponds"
    ) -> Path:
        path = self.tmp / name
        frame.to_file(path, layer=layer, driver="GPKG")
        return path

    def write_climate(self, dataset, name: str = "climate.nc") -> Path:
        return write_netcdf(dataset, self.tmp / name)

    def climate_entry(self, key: str) -> dict:
        return self.config["climate"][key]

    def copy_config(self) -> dict:
        return copy.deepcopy(self.config)

    # ----------------------------------------------------------------- running

    def toml(self, config: dict | None = None) -> Path:
        path = self.tmp / "run.toml"
        path.write_text(tomli_w.dumps(self.config if config is None else config))
        return path

    def invoke(
        self, command: str = "run", *extra: str, config: dict | None = None, overwrite=True
    ) -> Outcome:
        """Run ``lakeloss <command> run.toml <extra>``; ``run`` and ``check`` get --overwrite
        by default (``check`` refuses an existing output directory as ``run`` does)."""
        args = [command, str(self.toml(config)), *extra]
        if command in ("run", "check") and overwrite and "--overwrite" not in extra:
            args.append("--overwrite")
        result = CliRunner().invoke(cli, args)
        return Outcome(result.exit_code, result.stdout, result.stderr)

    # ----------------------------------------------------------------- output directory

    def place_earlier_outputs(self) -> dict[str, bytes]:
        self.out.mkdir(parents=True, exist_ok=True)
        for name, content in EARLIER_OUTPUTS.items():
            (self.out / name).write_bytes(content)
        return self.snapshot()

    def snapshot(self) -> dict[str, bytes] | None:
        """Every file under the output directory with its bytes; None when it is absent."""
        if not self.out.exists():
            return None
        return {
            str(p.relative_to(self.out)): p.read_bytes()
            for p in sorted(self.out.rglob("*"))
            if p.is_file()
        }

    def leftovers(self) -> list[str]:
        """Staging or set-aside directories a run left beside the output directory."""
        return sorted(p.name for p in self.out.parent.iterdir() if ".lakeloss-" in p.name)


def assert_refused(outcome: Outcome, *words: str) -> str:
    """Exit code 2, one ``error:`` line holding every key word, nothing else but warnings."""
    assert outcome.code == 2, (outcome.code, outcome.stdout, outcome.stderr)
    assert "Traceback" not in outcome.stderr + outcome.stdout
    assert len(outcome.error_lines) == 1, outcome.stderr
    others = [
        line
        for line in outcome.stderr.splitlines()
        if line.strip() and not line.startswith(("error:", "warning:"))
    ]
    assert not others, outcome.stderr
    line = outcome.error_lines[0]
    for word in words:
        assert word.lower() in line.lower(), (word, line)
    return line


def refused_everywhere(case: Case, *words: str, config: dict | None = None) -> str:
    """Refused by ``check`` and by ``run``: no output directory appears where there was none,
    and earlier outputs stay byte-identical."""
    assert case.snapshot() is None
    assert_refused(case.invoke("check", config=config), *words)
    assert_refused(case.invoke("run", config=config), *words)
    assert case.snapshot() is None
    before = case.place_earlier_outputs()
    line = assert_refused(case.invoke("run", config=config), *words)
    assert case.snapshot() == before
    assert case.leftovers() == []
    return line
