"""Config loading: every key declared once, errors name the key and suggest a fix."""

from __future__ import annotations

import copy

import pytest

from lakeloss.config import load_config
from lakeloss.errors import (
    ConfigError,
    MissingInputError,
    ParameterRangeError,
    UnknownMethodError,
)

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
    assert config.parameters["clip_negative"] is True
    assert config.parameters["wind_height_m"] == 10.0  # taken from the wind entry
    assert config.output.period == "month"
    assert config.strict is True
    assert {c.quantity for c in config.climate} >= {"precipitation", "wind_speed"}
    assert config.waterbodies.group_by == ("zone",)


def test_toml_file_round_trip(tmp_path):
    path = tmp_path / "run.toml"
    path.write_text(
        '[waterbodies]\npath = "a.gpkg"\n[climate]\n'
        'air_temperature = { path = "c.nc", variable = "tas" }\n'
        'surface_downwelling_shortwave_flux_in_air = { path = "c.nc", variable = "rsds" }\n'
        '[method]\nname = "priestley_taylor"\n[output]\ndir = "o"\nprecipitation = false\n'
    )
    config = load_config(path)
    assert config.config_path == path
    assert config.output.precipitation is False


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
    from lakeloss.pipeline import _check_methods

    raw = _with(method={"name": "aerodynamic"})
    del raw["climate"]["wind_speed"]
    config = load_config(raw)
    with pytest.raises(MissingInputError, match=r"aerodynamic.*wind_speed"):
        _check_methods(config)
