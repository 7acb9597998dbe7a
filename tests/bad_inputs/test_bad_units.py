"""Units that are missing or cannot be converted, and values that contradict their declared
units. Contradictions are refused by default and with ``--strict``; ``--lenient`` (or
``[checks] strict = false``) completes the run, prints a warning and records it in run.json.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from bad_inputs.corpus import BASE_FIELDS, TIMES, assert_refused, refused_everywhere
from builders import climate_dataset


def _replace_field(case, name: str, values, units: str | None, standard_name: str) -> None:
    fields = {**BASE_FIELDS, name: (values, units or "1", standard_name)}
    ds = climate_dataset(TIMES, fields)
    if units is None:
        del ds[name].attrs["units"]
    case.write_climate(ds)


# --------------------------------------------------------------------------- units


@pytest.mark.parametrize(
    ("units", "words"),
    [
        pytest.param("m s-1", ("'tas'", "m s-1", "degC"), id="not-a-temperature"),
        pytest.param("furlongs per glass", ("'tas'", "furlongs per glass"), id="unparseable"),
    ],
)
def test_temperature_in_units_that_cannot_be_converted(case, units, words):
    _replace_field(case, "tas", 298.15, units, "air_temperature")
    refused_everywhere(case, *words)


def test_missing_units_attribute_is_refused(case):
    _replace_field(case, "tas", 298.15, None, "air_temperature")
    refused_everywhere(case, "'tas'", "no units attribute", "set units")


def test_missing_units_can_be_given_in_the_config(case):
    _replace_field(case, "tas", 298.15, None, "air_temperature")
    case.climate_entry("air_temperature")["units"] = "K"
    outcome = case.invoke("run")
    assert outcome.code == 0, outcome.stderr


def test_config_units_that_cannot_express_the_quantity(case):
    case.climate_entry("wind_speed")["units"] = "W m-2"
    refused_everywhere(case, "W m-2", "m/s")


# --------------------------------------------------------------------------- implausible values

# (field, values, declared units, standard name, climate key, key words of the reason)
IMPLAUSIBLE = {
    "kelvin-declared-celsius": (
        "tas",
        290.0,
        "degC",
        "air_temperature",
        "air_temperature",
        ("look like kelvin", "'degC'"),
    ),
    "humidity-above-100": (
        "hurs",
        130.0,
        "%",
        "relative_humidity",
        "relative_humidity",
        ("relative_humidity", "130", "plausible range"),
    ),
    "percent-holding-fractions": (
        "hurs",
        np.linspace(0.2, 0.9, 48).reshape(1, 6, 8),
        "%",
        "relative_humidity",
        "relative_humidity",
        ("looks like a fraction",),
    ),
    "negative-wind": (
        "wind",
        -2.0,
        "m s-1",
        "wind_speed",
        "wind_speed",
        ("wind_speed", "-2", "plausible range"),
    ),
    "negative-shortwave": (
        "rsds",
        -50.0,
        "W m-2",
        "surface_downwelling_shortwave_flux_in_air",
        "surface_downwelling_shortwave_flux_in_air",
        ("surface_downwelling_shortwave_flux_in_air", "-50", "plausible range"),
    ),
}


def _implausible_case(case, kind: str) -> tuple[str, ...]:
    variable, values, units, standard_name, key, words = IMPLAUSIBLE[kind]
    _replace_field(case, variable, values, units, standard_name)
    entry = {"path": case.climate_entry("air_temperature")["path"], "variable": variable}
    case.config["climate"].setdefault(key, entry)
    return (f"'{variable}'", *words)


@pytest.mark.parametrize("kind", IMPLAUSIBLE)
def test_implausible_values_refused_by_default(case, kind):
    words = _implausible_case(case, kind)
    refused_everywhere(case, *words, "fix the units")


@pytest.mark.parametrize("kind", IMPLAUSIBLE)
def test_strict_flag_overrides_a_lenient_config(case, kind):
    words = _implausible_case(case, kind)
    case.config["checks"] = {"strict": False}
    before = case.place_earlier_outputs()
    assert_refused(case.invoke("run", "--strict"), *words)
    assert case.snapshot() == before


# The suite turns lakeloss warnings into errors; these runs are meant to warn and go on.
shows_warnings = pytest.mark.filterwarnings("always::lakeloss.errors.LakelossWarning")


@shows_warnings
@pytest.mark.parametrize("kind", IMPLAUSIBLE)
def test_lenient_run_completes_and_records_the_warning(case, kind):
    words = _implausible_case(case, kind)
    outcome = case.invoke("run", "--lenient")
    assert outcome.code == 0, outcome.stderr
    printed = [line for line in outcome.stderr.splitlines() if line.startswith("warning:")]
    assert any(all(w.lower() in line.lower() for w in words) for line in printed), printed
    recorded = json.loads((case.out / "run.json").read_text())["warnings"]
    assert any(all(w.lower() in text.lower() for w in words) for text in recorded), recorded


@shows_warnings
def test_lenient_config_completes_without_the_flag(case):
    words = _implausible_case(case, "kelvin-declared-celsius")
    case.config["checks"] = {"strict": False}
    outcome = case.invoke("run")
    assert outcome.code == 0, outcome.stderr
    recorded = json.loads((case.out / "run.json").read_text())["warnings"]
    assert any(all(w in text for w in words) for text in recorded), recorded


def test_lenient_check_reports_the_warning(case):
    words = _implausible_case(case, "negative-wind")
    outcome = case.invoke("check", "--lenient")
    assert outcome.code == 0, outcome.stderr
    assert any(all(w in line for w in words) for line in outcome.stdout.splitlines())
    assert "ready to run" in outcome.stdout


@pytest.mark.parametrize("flag", ["--strict", "--lenient"])
def test_variable_with_no_valid_value(case, flag):
    # Every cell and step is NaN (a wrong _FillValue does this): nothing can be computed.
    _replace_field(case, "tas", np.nan, "K", "air_temperature")
    before = case.place_earlier_outputs()
    for command in ("check", "run"):
        assert_refused(case.invoke(command, flag), "'tas'", "every value is missing")
    assert case.snapshot() == before
