"""Config loading: every key declared once, errors name the key and suggest a fix."""

from __future__ import annotations

import copy
import dataclasses
import re
import tomllib
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from lakeloss.cli import cli
from lakeloss.config import (
    ClimateInput,
    ComputeConfig,
    MethodConfig,
    OutputConfig,
    RunConfig,
    WaterBodiesConfig,
    load_config,
    reference_keys,
)
from lakeloss.errors import (
    ConfigError,
    InputDataError,
    MissingInputError,
    ParameterRangeError,
    UnknownMethodError,
)

ROOT = Path(__file__).resolve().parents[1]

BASE = {
    "waterbodies": {"path": "ponds.gpkg", "id_field": "pond_id", "group_by": ["zone"]},
    "climate": {
        "air_temperature": {"path": "c.nc", "variable": "tas"},
        "relative_humidity": {"path": "c.nc", "variable": "hurs"},
        "wind_speed": {"path": "c.nc", "variable": "wind", "height_m": 10},
        "surface_downwelling_shortwave_flux_in_air": {"path": "c.nc", "variable": "rsds"},
        "precipitation_flux": {"path": "c.nc", "variable": "pr"},
    },
    "method": {"name": "penman_open_water", "compare": ["priestley_taylor"]},
    "parameters": {"albedo": 0.08},
    "output": {"dir": "out/x", "period": "month"},
}


def _with(**changes):
    raw = copy.deepcopy(BASE)
    for dotted, value in changes.items():
        section, _, key = dotted.partition("__")
        if key:
            raw[section][key] = value
        else:
            raw[section] = value
    return raw


def test_valid_config_loads_with_defaults():
    config = load_config(BASE)
    assert config.method.all == ("penman_open_water", "priestley_taylor")
    assert config.clip_negative is True
    assert config.parameters["wind_height_m"] == 10.0  # taken from the wind entry
    assert config.output.period == "month"
    assert config.strict is True
    assert {c.quantity for c in config.climate} >= {"precipitation", "wind_speed"}
    assert config.waterbodies.group_by == ("zone",)


SMALL_TOML = (
    "# a small run\n"
    '[waterbodies]\npath = "a.gpkg"\n[climate]\n'
    'air_temperature = { path = "c.nc", variable = "tas" }\n'
    'surface_downwelling_shortwave_flux_in_air = { path = "c.nc", variable = "rsds" }\n'
    '[method]\nname = "priestley_taylor"\n[output]\ndir = "o"\nprecipitation = false\n'
)


def _inputs_beside(folder: Path) -> None:
    # The loader only checks that relative input paths exist; the contents are not read.
    for name in ("a.gpkg", "c.nc"):
        (folder / name).touch()


def test_toml_file_round_trip(tmp_path):
    _inputs_beside(tmp_path)
    path = tmp_path / "run.toml"
    path.write_text(SMALL_TOML)
    config = load_config(path)
    assert config.config_path == path
    assert config.output.precipitation is False
    assert config.waterbodies.path == tmp_path / "a.gpkg"


# --------------------------------------------------------------------------- encodings


def test_windows_editor_file_with_bom_and_crlf_loads(tmp_path):
    # What Notepad and many Windows editors save: a UTF-8 byte-order mark and CRLF ends.
    _inputs_beside(tmp_path)
    path = tmp_path / "run.toml"
    path.write_bytes(b"\xef\xbb\xbf" + SMALL_TOML.replace("\n", "\r\n").encode("utf-8"))
    config = load_config(path)
    assert config.method.name == "priestley_taylor"
    assert config.output.dir == tmp_path / "o"
    assert [c.variable for c in config.climate] == ["tas", "rsds"]


def test_invalid_toml_with_a_bom_still_gets_the_one_line_toml_error(tmp_path):
    path = tmp_path / "bad.toml"
    path.write_bytes(b"\xef\xbb\xbf[waterbodies\r\npath = 1\r\n")
    with pytest.raises(ConfigError, match=r"not valid TOML.*line 1, column 13") as err:
        load_config(path)
    assert "\n" not in str(err.value)


@pytest.mark.parametrize(
    ("encoding", "said"),
    [("utf-16", "UTF-16"), ("utf-16-le", "UTF-16 or UTF-32"), ("utf-32", "UTF-32")],
)
def test_utf16_or_utf32_file_is_refused_with_the_fix(tmp_path, encoding, said):
    # "Unicode" in older Windows editors is UTF-16 (with a byte-order mark, or without one).
    path = tmp_path / "run.toml"
    path.write_bytes(SMALL_TOML.replace("\n", "\r\n").encode(encoding))
    with pytest.raises(ConfigError, match=f"saved as {said} text.*save it again") as err:
        load_config(path)
    assert "\n" not in str(err.value)


def test_windows_code_page_file_is_refused_naming_the_line(tmp_path):
    path = tmp_path / "run.toml"
    text = SMALL_TOML.replace("# a small run", "# Lac Bleu, 25 °C") + "\n"
    path.write_bytes(text.encode("cp1252"))
    with pytest.raises(ConfigError, match=r"not UTF-8 text \(byte 0xb0 on line 1.*UTF-8"):
        load_config(path)


# --------------------------------------------------------------------------- relative paths


def _project(tmp_path: Path) -> Path:
    """project/config/run.toml naming ../data/* inputs and ../out, ../cache outputs."""
    (tmp_path / "project" / "data").mkdir(parents=True)
    (tmp_path / "project" / "config").mkdir()
    _inputs_beside(tmp_path / "project" / "data")
    text = SMALL_TOML.replace('"a.gpkg"', '"../data/a.gpkg"').replace('"c.nc"', '"../data/c.nc"')
    text = text.replace('dir = "o"', 'dir = "../out/run1"')
    text += '[compute]\ncache_dir = "../cache"\nscheduler = "cluster/scheduler.json"\n'
    path = tmp_path / "project" / "config" / "run.toml"
    path.write_text(text)
    return path


def test_relative_paths_resolve_against_the_config_files_folder(tmp_path, monkeypatch):
    path = _project(tmp_path)
    (tmp_path / "elsewhere").mkdir()
    monkeypatch.chdir(tmp_path / "elsewhere")
    config = load_config(Path("..") / "project" / "config" / "run.toml")
    # Resolved against the file's folder and normalised lexically: no "config/.." left in
    # the paths that messages and run.json show.
    project = tmp_path.absolute() / "project"
    assert config.waterbodies.path == project / "data/a.gpkg"
    assert all(c.path == project / "data/c.nc" for c in config.climate)
    assert config.output.dir == project / "out/run1"
    assert config.compute.cache_dir == project / "cache"
    assert config.compute.scheduler == str(project / "config/cluster/scheduler.json")
    assert config.source["output"]["dir"] == "../out/run1"  # run.json keeps what was written
    assert path.is_file()


def test_absolute_paths_and_scheduler_addresses_are_kept(tmp_path):
    _inputs_beside(tmp_path)
    path = tmp_path / "run.toml"
    text = SMALL_TOML.replace('"a.gpkg"', f'"{(tmp_path / "a.gpkg").as_posix()}"')
    path.write_text(text + '[compute]\nscheduler = "tcp://10.0.0.5:8786"\n')
    config = load_config(path)
    assert config.waterbodies.path == tmp_path / "a.gpkg"
    assert config.compute.scheduler == "tcp://10.0.0.5:8786"


def test_missing_relative_input_says_what_it_was_resolved_against(tmp_path, monkeypatch):
    path = _project(tmp_path)
    (tmp_path / "project" / "data" / "c.nc").unlink()
    # The old rule (relative to the current directory) would have found this one.
    (tmp_path / "other" / "data").mkdir(parents=True)
    (tmp_path / "other" / "data" / "c.nc").touch()
    (tmp_path / "other" / "config").mkdir()
    monkeypatch.chdir(tmp_path / "other" / "config")
    with pytest.raises(InputDataError) as err:
        load_config(path)
    message = str(err.value)
    assert "[climate].air_temperature.path '../data/c.nc' does not exist" in message
    resolved = (tmp_path / "project" / "data" / "c.nc").absolute()
    assert f"resolved against the config file's folder: {resolved}" in message
    assert "exists in the current directory" in message and "\n" not in message


def test_config_built_in_python_keeps_paths_relative_to_the_current_directory():
    config = load_config(BASE)
    assert config.waterbodies.path == Path("ponds.gpkg")
    assert config.output.dir == Path("out/x")


@pytest.mark.parametrize("cwd", ["root", "elsewhere"])
def test_demo_config_is_checked_from_the_repo_root_and_from_elsewhere(tmp_path, monkeypatch, cwd):
    monkeypatch.chdir(ROOT if cwd == "root" else tmp_path)
    config_path = "config/demo.toml" if cwd == "root" else str(ROOT / "config" / "demo.toml")
    result = CliRunner().invoke(cli, ["check", config_path])
    assert result.exit_code == 0, result.output
    assert load_config(config_path).output.dir.resolve() == ROOT / "out" / "demo"


def test_unknown_key_suggests_nearest():
    with pytest.raises(ConfigError, match=r"unknown key 'id_feild'.*did you mean 'id_field'"):
        load_config(_with(waterbodies__id_feild="x"))


def test_unknown_section_is_an_error():
    raw = _with()
    raw["paramters"] = {}
    with pytest.raises(ConfigError, match="did you mean 'parameters'"):
        load_config(raw)


def test_wrong_type_names_key():
    with pytest.raises(ConfigError, match=r"\[output\]\.period must be a str"):
        load_config(_with(output__period=3))


def test_unknown_method_lists_valid_names():
    with pytest.raises(UnknownMethodError, match="priestley_taylor"):
        load_config(_with(method={"name": "penmann"}))


def test_out_of_range_parameter_names_parameter():
    with pytest.raises(ParameterRangeError, match="albedo"):
        load_config(_with(parameters={"albedo": 1.7}))


def test_unknown_parameter_suggests():
    with pytest.raises(ConfigError, match="did you mean 'albedo'"):
        load_config(_with(parameters={"albdo": 0.1}))


def test_missing_precipitation_is_refused_unless_opted_out():
    raw = _with()
    del raw["climate"]["precipitation_flux"]
    with pytest.raises(ConfigError, match="precipitation = false"):
        load_config(raw)
    raw["output"]["precipitation"] = False
    assert load_config(raw).output.precipitation is False


def test_geotiff_needs_band_dates():
    raw = _with()
    raw["climate"]["air_temperature"] = {"path": "tas.tif", "units": "K"}
    with pytest.raises(ConfigError, match="start"):
        load_config(raw)


def test_same_quantity_twice_is_refused():
    raw = _with()
    raw["climate"]["precipitation_amount"] = {"path": "c.nc", "variable": "pr2"}
    with pytest.raises(ConfigError, match="twice"):
        load_config(raw)


def test_missing_file(tmp_path):
    with pytest.raises(ConfigError, match="does not exist"):
        load_config(tmp_path / "nope.toml")


def test_bad_toml(tmp_path):
    path = tmp_path / "bad.toml"
    path.write_text("[waterbodies\npath = 1")
    with pytest.raises(ConfigError, match="not valid TOML"):
        load_config(path)


def test_period_value_checked():
    with pytest.raises(ConfigError, match="day, month, year"):
        load_config(_with(output__period="week"))


def test_missing_inputs_checked_by_pipeline():
    # The registry knows what each method needs; the pipeline's first check uses it.
    from lakeloss.checks import check_methods

    raw = _with(method={"name": "aerodynamic"})
    del raw["climate"]["wind_speed"]
    config = load_config(raw)
    with pytest.raises(MissingInputError, match=r"aerodynamic.*wind_speed"):
        check_methods(config)


# --------------------------------------------------------------------------- README reference

_README = ROOT / "README.md"
_ROW = re.compile(r"^\| `\[([^\]]+)\]` \| `([^`]+)` \| ([^|]+?) \| ([^|]+?) \| .+ \|$")


def _reference_rows() -> dict[tuple[str, str], tuple[str, str]]:
    """(table, key) -> (type, default cell) of the README's configuration reference table."""
    text = _README.read_text(encoding="utf-8")
    section = text[text.index("## Configuration reference") :]
    section = section[: section.index("\n## ", 1)]
    rows: dict[tuple[str, str], tuple[str, str]] = {}
    for line in section.splitlines():
        match = _ROW.match(line)
        if match:
            table, key, kind, default = match.groups()
            assert (table, key) not in rows, f"{table}.{key} is documented twice"
            rows[(table, key)] = (kind, default)
    return rows


def _code_default(table: str, key: str) -> object:
    """What lakeloss takes when the key is absent (MISSING when nothing simple)."""
    from lakeloss.physics import registry

    if table == "parameters":
        if key in registry.parameter_specs():
            return registry.parameter_specs()[key].default
        return getattr(load_config(BASE), key)  # pipeline parameters: their default
    owner = {
        "waterbodies": WaterBodiesConfig,
        "climate.<name>": ClimateInput,
        "method": MethodConfig,
        "output": OutputConfig,
        "compute": ComputeConfig,
        "checks": RunConfig,
    }.get(table)
    if owner is None:
        return dataclasses.MISSING
    found = {f.name: f for f in dataclasses.fields(owner)}.get(key)
    if found is None or found.default is dataclasses.MISSING:
        return dataclasses.MISSING
    return list(found.default) if isinstance(found.default, tuple) else found.default


def test_readme_reference_table_documents_every_key_and_no_other():
    documented = {key: kind for key, (kind, _) in _reference_rows().items()}
    accepted = reference_keys()
    assert sorted(set(accepted) - set(documented)) == [], "keys missing from the README table"
    assert sorted(set(documented) - set(accepted)) == [], "README documents unknown keys"
    assert documented == accepted  # and the same types


def test_readme_reference_defaults_are_the_code_defaults():
    for (table, key), (_, cell) in _reference_rows().items():
        default = _code_default(table, key)
        has_value = default is not dataclasses.MISSING and default is not None
        if cell.startswith("`"):
            written = tomllib.loads(f"v = {cell.strip('`')}")["v"]
            assert has_value and written == default, (table, key, cell, default)
        else:
            assert not has_value or default == [], (table, key, cell, default)


def test_readme_example_loads_and_its_parameters_are_the_defaults():
    from lakeloss.physics import registry

    text = _README.read_text(encoding="utf-8")
    start = text.index("```toml\n", text.index("## Configuration reference")) + len("```toml\n")
    example = tomllib.loads(text[start : text.index("```", start)])
    config = load_config(example)  # a mapping: paths are not looked up
    assert config.method.name == "penman_open_water"
    specs = registry.parameter_specs()
    for name, value in example["parameters"].items():
        expected = specs[name].default if name in specs else _code_default("parameters", name)
        assert value == expected, f"README example: {name} = {value}, default {expected}"


def test_heat_storage_flux_entry_is_used_as_documented(tmp_path):
    # The README: the energy-based methods evaporate Rn - G. For energy_balance,
    # E = (Rn - G) / (lambda rho_w) (Chow, Maidment & Mays 1988, section 3.5), so G = 50 W m-2
    # under Rn = 200 W m-2 gives exactly 150/200 of the depth without G.
    import pandas as pd
    import tomli_w
    from builders import climate_dataset, pond_layer, write_netcdf

    layer = tmp_path / "ponds.gpkg"
    pond_layer(n_ponds=3).to_file(layer, layer="ponds", driver="GPKG")
    times = pd.date_range("2031-01-01", periods=4, freq="D")
    fields = {
        "rnet": (200.0, "W m-2", "surface_net_downward_radiative_flux"),
        "tas": (298.15, "K", "air_temperature"),
        "g": (50.0, "W m-2", "heat_storage_flux"),
    }
    climate = write_netcdf(climate_dataset(times, fields), tmp_path / "climate.nc")
    entries = {
        "surface_net_downward_radiative_flux": {"path": "climate.nc", "variable": "rnet"},
        "air_temperature": {"path": "climate.nc", "variable": "tas"},
    }
    depths = []
    for name, extra in (("without", {}), ("with", {"heat_storage_flux": "g"})):
        climate_table = {
            **entries,
            **{k: {"path": climate.name, "variable": v} for k, v in extra.items()},
        }
        raw = {
            "waterbodies": {"path": "ponds.gpkg", "layer": "ponds", "id_field": "pond_id"},
            "climate": climate_table,
            "method": {"name": "energy_balance"},
            "output": {"dir": f"out_{name}", "precipitation": False},
            "compute": {"cache_dir": "cache"},
        }
        (tmp_path / f"{name}.toml").write_text(tomli_w.dumps(raw))
        result = CliRunner().invoke(cli, ["run", str(tmp_path / f"{name}.toml"), "-q"])
        assert result.exit_code == 0, result.output
        table = pd.read_csv(tmp_path / f"out_{name}" / "summary_by_waterbody.csv")
        depths.append(table.sort_values("pond_id")["evap_mm"].to_numpy())
    assert (depths[0] > 0).all()
    np.testing.assert_allclose(depths[1], depths[0] * 150.0 / 200.0, rtol=1e-6)
