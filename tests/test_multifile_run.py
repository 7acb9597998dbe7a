"""Whole runs over climate split into many files, or stored as Zarr, give the same bytes.

The climate varies from cell to cell and day to day (random fields), so a step read from the
wrong file or in the wrong order would change the totals. The split is the way providers cut
a series: at arbitrary days, one file per piece, each with its own time epoch.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import tomli_w
from builders import CHOW_FIELDS, LAT, LON, case_config, climate_dataset, pond_layer, write_geotiff
from click.testing import CliRunner

from lakeloss.cli import cli

CSV_FILES = ("summary_by_waterbody.csv", "summary_by_period.csv", "summary_by_group.csv")
CLIMATE = {
    "surface_net_downward_radiative_flux": "rnet",
    "air_temperature": "tas",
    "precipitation_flux": "pr",
}
TIMES = pd.date_range("2031-01-01", periods=59, freq="D")
CUTS = (20, 45)  # mid-January and mid-February


def _fields(seed: int = 5) -> dict:
    rng = np.random.default_rng(seed)
    shape = (len(TIMES), len(LAT), len(LON))
    return {
        "rnet": (rng.uniform(60.0, 240.0, shape), *CHOW_FIELDS["rnet"][1:]),
        "tas": (rng.uniform(285.0, 305.0, shape), *CHOW_FIELDS["tas"][1:]),
        "pr": (rng.uniform(0.0, 4e-5, shape), *CHOW_FIELDS["pr"][1:]),
    }


def _run(tmp_path, name: str, config: dict) -> tuple[int, str]:
    config = {**config, "output": {**config["output"], "dir": str(tmp_path / name)}}
    path = tmp_path / f"{name}.toml"
    path.write_text(tomli_w.dumps(config))
    result = CliRunner().invoke(cli, ["run", str(path), "-q"])
    return result.exit_code, result.output  # stdout and stderr, as a terminal shows them


def _csvs(folder) -> dict[str, bytes]:
    return {name: (folder / name).read_bytes() for name in CSV_FILES}


@pytest.fixture
def split_case(tmp_path):
    """One NetCDF of 59 days, the same data cut into three files, and a Zarr store of it."""
    layer_path = tmp_path / "ponds.gpkg"
    pond_layer().to_file(layer_path, layer="ponds", driver="GPKG")
    dataset = climate_dataset(TIMES, _fields())
    dataset.to_netcdf(tmp_path / "climate.nc", engine="netcdf4")
    bounds = [0, *CUTS, len(TIMES)]
    parts = []
    for k, (lo, hi) in enumerate(zip(bounds[:-1], bounds[1:], strict=True)):
        part = tmp_path / "pieces" / f"climate_{k}.nc"
        part.parent.mkdir(exist_ok=True)
        epoch = str(TIMES[lo].date())
        dataset.isel(time=slice(lo, hi)).to_netcdf(
            part, engine="netcdf4", encoding={"time": {"units": f"days since {epoch}"}}
        )
        parts.append(part)
    dataset.to_zarr(tmp_path / "climate.zarr", zarr_format=2, consolidated=True)
    config = case_config(
        layer_path, tmp_path / "climate.nc", tmp_path / "out", "priestley_taylor", CLIMATE
    )
    return config, parts


def _with_path(config: dict, path) -> dict:
    climate = {key: {**entry, "path": path} for key, entry in config["climate"].items()}
    return {**config, "climate": climate}


def test_split_files_glob_list_and_zarr_give_byte_equal_csvs(split_case, tmp_path):
    config, parts = split_case
    code, output = _run(tmp_path, "single", config)
    assert code == 0, output
    single = _csvs(tmp_path / "single")
    variants = {
        "glob": str(tmp_path / "pieces" / "climate_*.nc"),
        "list": [str(parts[2]), str(parts[0]), str(parts[1])],
        "zarr": str(tmp_path / "climate.zarr"),
    }
    for name, path in variants.items():
        code, output = _run(tmp_path, name, _with_path(config, path))
        assert code == 0, f"{name}: {output}"
        assert _csvs(tmp_path / name) == single, name


def test_daily_geotiffs_named_by_date_give_the_stack_s_csvs(tmp_path):
    layer_path = tmp_path / "ponds.gpkg"
    pond_layer().to_file(layer_path, layer="ponds", driver="GPKG")
    fields = _fields(seed=9)
    config = case_config(layer_path, tmp_path / "unused.nc", tmp_path / "o", "priestley_taylor", {})
    config["output"].update(precipitation=False, period="day")
    stacks, series = {}, {}
    for key, name in (("surface_net_downward_radiative_flux", "rnet"), ("air_temperature", "tas")):
        values, units, _ = fields[name]
        write_geotiff(tmp_path / f"{name}.tif", values, units)
        stacks[key] = {"path": str(tmp_path / f"{name}.tif"), "start": "2031-01-01", "step": "day"}
        folder = tmp_path / name
        folder.mkdir()
        for k, day in enumerate(TIMES):
            write_geotiff(folder / f"{name}_{day:%Y%m%d}.tif", values[k : k + 1], units)
        series[key] = {"path": str(folder / "*.tif"), "date_pattern": "%Y%m%d"}
    code, output = _run(tmp_path, "stack", {**config, "climate": stacks})
    assert code == 0, output
    code, output = _run(tmp_path, "series", {**config, "climate": series})
    assert code == 0, output
    for name in CSV_FILES[:2]:
        assert (tmp_path / "series" / name).read_bytes() == (tmp_path / "stack" / name).read_bytes()


def test_check_names_the_files_of_a_glob(split_case, tmp_path):
    config, parts = split_case
    path = tmp_path / "check.toml"
    path.write_text(tomli_w.dumps(_with_path(config, str(tmp_path / "pieces" / "*.nc"))))
    result = CliRunner().invoke(cli, ["check", str(path)])
    assert result.exit_code == 0, result.output
    assert f"air_temperature <- {parts[0]} .. {parts[2]} (3 files):tas [K]" in result.output
    assert "2031-01-01..2031-02-28, daily" in result.output


def test_a_gap_between_files_stops_the_run_before_anything_is_written(split_case, tmp_path):
    config, parts = split_case
    code, output = _run(tmp_path, "gap", _with_path(config, [str(parts[0]), str(parts[2])]))
    assert code != 0
    lines = output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ")
    assert "climate_0.nc' and '" in lines[0] and "2031-01-20" in lines[0]
    assert "2031-02-15" in lines[0] and "expected 2031-01-21" in lines[0]
    assert not (tmp_path / "gap").exists()


def test_a_glob_matching_nothing_stops_the_run(split_case, tmp_path):
    config, _ = split_case
    code, output = _run(tmp_path, "none", _with_path(config, str(tmp_path / "tas_*.nc")))
    assert code != 0
    assert output.strip().startswith("error: climate path pattern")
    assert "matches no file" in output and len(output.strip().splitlines()) == 1
    assert not (tmp_path / "none").exists()


def test_split_files_on_a_cluster_with_short_blocks_give_the_same_csvs(split_case, tmp_path):
    # Worker processes get the joined field pickled; 7-step blocks straddle both file ends.
    config, parts = split_case
    code, output = _run(tmp_path, "single", config)
    assert code == 0, output
    clustered = {**_with_path(config, [str(p) for p in parts]), "compute": {
        **config["compute"], "workers": 2, "chunk_steps": 7}}  # fmt: skip
    code, output = _run(tmp_path, "cluster", clustered)
    assert code == 0, output
    assert _csvs(tmp_path / "cluster") == _csvs(tmp_path / "single")


def test_relative_globs_and_lists_resolve_against_the_config_file_s_folder(split_case, tmp_path):
    # The configuration sits in tmp_path; the run starts elsewhere (the test's own folder).
    config, parts = split_case
    code, output = _run(tmp_path, "single", config)
    assert code == 0, output
    for name, path in (("rel_glob", "pieces/climate_*.nc"), ("rel_list", ["pieces/climate_1.nc",
                       "pieces/climate_0.nc", "pieces/climate_2.nc"])):  # fmt: skip
        code, output = _run(tmp_path, name, _with_path(config, path))
        assert code == 0, f"{name}: {output}"
        assert _csvs(tmp_path / name) == _csvs(tmp_path / "single"), name


def test_a_time_window_across_file_ends_gives_the_single_file_s_csvs(split_case, tmp_path):
    config, parts = split_case
    window = {"time": {"start": "2031-01-10", "end": "2031-02-20"}}
    code, output = _run(tmp_path, "single", {**config, **window})
    assert code == 0, output
    code, output = _run(
        tmp_path, "window", {**_with_path(config, [str(p) for p in parts]), **window}
    )
    assert code == 0, output
    assert _csvs(tmp_path / "window") == _csvs(tmp_path / "single")
