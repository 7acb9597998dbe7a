"""Configuration mistakes: unknown or misspelled keys, wrong types, values out of range,
unknown methods, methods without their inputs, files that are not TOML.

Every mistake is caught before any input is read or output written.
"""

from __future__ import annotations

import pytest
import tomli_w
from bad_inputs.corpus import Outcome, assert_refused, refused_everywhere
from click.testing import CliRunner

from lakeloss.cli import cli


def _set(config: dict, dotted: str, value) -> None:
    *sections, key = dotted.split(".")
    table = config
    for name in sections:
        table = table.setdefault(name, {})
    table[key] = value


def _rename(config: dict, dotted: str, new_key: str) -> None:
    *sections, key = dotted.split(".")
    table = config
    for name in sections:
        table = table[name]
    table[new_key] = table.pop(key)


@pytest.mark.parametrize(
    ("dotted", "typo", "suggestion"),
    [
        ("output.dir", "dirr", "did you mean 'dir'"),
        ("waterbodies.id_field", "idfield", "did you mean 'id_field'"),
        ("climate.air_temperature", "air_temprature", "did you mean 'air_temperature'"),
        ("climate.wind_speed.height_m", "hieght_m", "did you mean 'height_m'"),
        ("output", "outptu", "did you mean 'output'"),
    ],
)
def test_misspelled_key_suggests_the_nearest(case, dotted, typo, suggestion):
    _rename(case.config, dotted, typo)
    refused_everywhere(case, f"unknown key '{typo}'", suggestion)


def test_misspelled_parameter_suggests_the_nearest(case):
    case.config["parameters"] = {"albdeo": 0.08}
    refused_everywhere(case, "unknown key 'albdeo'", "did you mean 'albedo'")


def test_unknown_key_without_close_match_lists_the_valid_ones(case):
    case.config["output"]["colour"] = "blue"
    refused_everywhere(case, "unknown key 'colour'", "valid keys:", "period")


@pytest.mark.parametrize(
    ("dotted", "value", "words"),
    [
        ("output.series", "yes", ("[output].series", "must be a bool", "'yes'")),
        ("compute.workers", "2", ("[compute].workers", "must be an int", "'2'")),
        ("climate.wind_speed.height_m", "ten", ("height_m", "must be a float", "'ten'")),
        ("waterbodies.group_by", "zone", ("[waterbodies].group_by", "must be a list")),
        ("output.extra_volume_units", [1, 2], ("extra_volume_units", "list of strings")),
        ("method.compare", "priestley_taylor", ("[method].compare", "must be a list")),
        ("checks.strict", 1, ("[checks].strict", "must be a bool")),
    ],
)
def test_wrong_type_names_the_key_and_the_type(case, dotted, value, words):
    _set(case.config, dotted, value)
    refused_everywhere(case, *words)


def test_section_that_is_not_a_table(case):
    case.config["parameters"] = 0.08
    refused_everywhere(case, "[parameters] must be a table")


@pytest.mark.parametrize(
    ("dotted", "value", "words"),
    [
        ("parameters.albedo", 1.5, ("albedo", "1.5")),
        ("parameters.albedo", -0.1, ("albedo", "-0.1")),
        ("parameters.elevation_m", 12000.0, ("elevation_m", "12000")),
        ("climate.wind_speed.height_m", 500.0, ("height_m", "outside 0.5..100 m")),
        ("compute.chunk_steps", -1, ("chunk_steps", "positive")),
        ("compute.workers", -2, ("workers", "positive")),
        ("output.period", "week", ("period", "day, month, year", "'week'")),
        ("output.extra_volume_units", ["GL"], ("unknown unit 'GL'", "ML")),
    ],
)
def test_value_out_of_range(case, dotted, value, words):
    _set(case.config, dotted, value)
    refused_everywhere(case, *words)


def test_unknown_method_lists_the_valid_ones(case):
    case.config["method"]["name"] = "penman_openwater"
    line = refused_everywhere(case, "penman_openwater")
    for valid in ("energy_balance", "priestley_taylor", "penman_open_water", "pan_coefficient"):
        assert valid in line


def test_unknown_compare_method(case):
    case.config["method"]["compare"] = ["priestly_taylor"]
    refused_everywhere(case, "priestly_taylor", "priestley_taylor")


def test_method_without_its_inputs_lists_needs_and_given(case):
    # Penman needs wind and humidity besides radiation and temperature.
    del case.config["climate"]["wind_speed"]
    del case.config["climate"]["relative_humidity"]
    case.config["method"]["name"] = "penman_open_water"
    refused_everywhere(
        case,
        "method 'penman_open_water' needs",
        "wind_speed",
        "relative_humidity",
        "gives only",
        "air_temperature",
        "surface_net_downward_radiative_flux",
    )


def test_pan_method_without_pan_readings(case):
    case.config["method"]["name"] = "pan_coefficient"
    refused_everywhere(case, "pan_coefficient", "pan_evaporation", "gives only")


def test_precipitation_wanted_but_not_given(case):
    case.config["output"]["precipitation"] = True
    refused_everywhere(case, "no precipitation input", "precipitation = false")


def test_same_quantity_given_twice(case):
    entry = {"path": case.climate_entry("air_temperature")["path"], "variable": "tas"}
    case.config["climate"]["precipitation_flux"] = dict(entry)
    case.config["climate"]["precipitation_amount"] = dict(entry)
    refused_everywhere(case, "precipitation twice", "keep one")


def test_missing_required_section(case):
    del case.config["output"]
    refused_everywhere(case, "no [output] section")


def test_missing_required_key(case):
    del case.config["waterbodies"]["path"]
    refused_everywhere(case, "[waterbodies] has no 'path'")


def test_climate_file_of_unknown_format(case):
    case.climate_entry("air_temperature")["path"] = str(case.tmp / "tas.grib")
    refused_everywhere(case, "tas.grib", 'format = "netcdf"')


def test_geotiff_without_start(case):
    case.config["climate"]["air_temperature"] = {"path": str(case.tmp / "tas.tif"), "step": "day"}
    refused_everywhere(case, "GeoTIFF", "start")


def test_unknown_group_by_attribute(case):
    case.config["waterbodies"]["group_by"] = ["district"]
    refused_everywhere(case, "'district'", "zone")


def test_unknown_id_field_suggests_the_nearest(case):
    case.config["waterbodies"]["id_field"] = "pondid"
    refused_everywhere(case, "'pondid'", "did you mean 'pond_id'")


def test_unknown_layer_lists_the_layers(case):
    case.config["waterbodies"]["layer"] = "dams"
    refused_everywhere(case, "'dams'", "'ponds'")


def _invoke_file(command: str, path) -> Outcome:
    result = CliRunner().invoke(cli, [command, str(path)])
    return Outcome(result.exit_code, result.stdout, result.stderr)


def test_configuration_that_is_not_toml(case):
    path = case.tmp / "broken.toml"
    path.write_text('[output]\ndir = "out\n')
    for command in ("check", "run"):
        assert_refused(_invoke_file(command, path), "broken.toml", "not valid TOML")
    assert not case.out.exists()


def test_configuration_file_missing(case):
    for command in ("check", "run"):
        assert_refused(
            _invoke_file(command, case.tmp / "absent.toml"), "absent.toml", "does not exist"
        )
    assert not case.out.exists()


def test_configuration_path_is_a_directory(case):
    (case.tmp / "settings.toml").mkdir()
    for command in ("check", "run"):
        outcome = _invoke_file(command, case.tmp / "settings.toml")
        assert_refused(outcome, "settings.toml", "is a directory", "TOML file")
    assert not case.out.exists()


# --------------------------------------------------------------------------- file and folder


def _relative_config(case) -> dict:
    """The clean case with every path written relative to a config in ``case.tmp/configs``."""
    config = case.copy_config()
    config["waterbodies"]["path"] = "../ponds.gpkg"
    for entry in config["climate"].values():
        entry["path"] = "../climate.nc"
    config["output"]["dir"] = "../out"
    config["compute"]["cache_dir"] = "../cache"
    return config


def test_config_in_another_folder_run_from_another_directory(case, monkeypatch):
    (case.tmp / "configs").mkdir()
    path = case.tmp / "configs" / "run.toml"
    path.write_text(tomli_w.dumps(_relative_config(case)))
    # Two levels down: "../ponds.gpkg" from here would be elsewhere/ponds.gpkg (absent).
    (case.tmp / "elsewhere" / "deeper").mkdir(parents=True)
    monkeypatch.chdir(case.tmp / "elsewhere" / "deeper")
    for command in ("check", "run"):
        outcome = _invoke_file(command, path)
        assert outcome.code == 0, outcome.stderr
    assert (case.out / "waterbodies.gpkg").is_file()
    assert list((case.tmp / "elsewhere").rglob("*")) == [case.tmp / "elsewhere" / "deeper"]


def test_missing_relative_input_names_the_config_folder(case, monkeypatch):
    (case.tmp / "configs").mkdir()
    config = _relative_config(case)
    config["climate"]["air_temperature"]["path"] = "climate.nc"  # the folder holds none
    path = case.tmp / "configs" / "run.toml"
    path.write_text(tomli_w.dumps(config))
    monkeypatch.chdir(case.tmp)  # where climate.nc is: the old rule would have found it
    for command in ("check", "run"):
        assert_refused(
            _invoke_file(command, path),
            "[climate].air_temperature.path 'climate.nc' does not exist",
            f"resolved against the config file's folder: {case.tmp / 'configs' / 'climate.nc'}",
            "exists in the current directory",
        )
    assert not case.out.exists()


def test_config_saved_by_a_windows_editor_runs(case):
    path = case.tmp / "run.toml"
    text = "# saved by a Windows editor\n" + tomli_w.dumps(case.config)
    path.write_bytes(b"\xef\xbb\xbf" + text.replace("\n", "\r\n").encode("utf-8"))
    outcome = _invoke_file("run", path)
    assert outcome.code == 0, outcome.stderr
    assert (case.out / "run.json").is_file()


def test_config_saved_as_utf16_is_refused_in_one_line(case):
    path = case.tmp / "run.toml"
    path.write_bytes(tomli_w.dumps(case.config).replace("\n", "\r\n").encode("utf-16"))
    for command in ("check", "run"):
        assert_refused(_invoke_file(command, path), "run.toml", "UTF-16", "UTF-8")
    assert not case.out.exists()
