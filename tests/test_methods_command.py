"""`lakeloss methods` and `lakeloss methods NAME`, through click's CliRunner."""

from __future__ import annotations

import pytest
from click.testing import CliRunner

from lakeloss.cli import cli
from lakeloss.physics import registry


def _invoke(*args):
    result = CliRunner().invoke(cli, ["methods", *args])
    return result.exit_code, result.stdout, result.stderr


def test_list_is_one_line_per_method_within_100_columns():
    code, out, _ = _invoke()
    assert code == 0
    lines = out.splitlines()
    assert max(len(line) for line in lines) <= 100
    method_lines = [line for line in lines if line.split(" ", 1)[0] in registry.method_names()]
    assert [line.split()[0] for line in method_lines] == list(registry.method_names())
    for line in method_lines:
        name = line.split()[0]
        assert registry.get(name).description in line
    assert "lakeloss methods NAME" in out


@pytest.mark.parametrize("name", registry.method_names())
def test_one_method_in_full(name):
    code, out, _ = _invoke(name)
    assert code == 0
    assert max(len(line) for line in out.splitlines()) <= 100
    spec = registry.get(name)
    flat = " ".join(out.split())
    assert out.startswith(f"{name}: {spec.description}")
    assert " ".join(spec.equation.split()) in flat
    assert " ".join(spec.assumptions.split()) in flat
    assert spec.reference in flat
    assert f"docs/methods.md#{name}" in flat
    for param in spec.parameters.values():
        assert f"  {param.name} = " in out
        assert " ".join(param.description.split()) in flat
    for group in spec.requires:  # every alternative of every need, derived inputs hidden
        for alternative in group:
            shown = [p for p in alternative if p not in {"latitude", "day_of_year"}]
            if shown != ["area_m2"]:
                assert " + ".join(shown) in flat


def test_detail_shows_ranges_defaults_and_alternatives():
    code, out, _ = _invoke("penman_open_water")
    assert code == 0
    assert "albedo = 0.08 (0 to 0.3)" in out
    assert "wind_profile = fao56 (one of fao56, log)" in out
    assert "roughness_length_m = 0.0003 m (1e-05 to 0.01 m)" in out
    assert "    air_temperature_max + air_temperature_min\n" in out
    assert "    eastward_wind + northward_wind\n" in out
    # the saturation vapour pressure rule (FAO-56 eq. 12 whenever Tmax and Tmin are given)
    assert "FAO-56 eq. 12" in out and "also when air_temperature is given too" in " ".join(
        out.split()
    )


def test_combination_says_it_is_penman_monteith():
    _, out, _ = _invoke("combination")
    assert "penman_monteith_open_water" in out
    _, out, _ = _invoke("penman_monteith_open_water")
    assert "combination" in out


def test_unknown_name_is_one_line_listing_the_valid_names():
    code, out, err = _invoke("penman_opne")
    assert code == 2
    assert out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: unknown evaporation method")
    assert "did you mean 'penman_open_water'" in lines[0]
    for name in registry.method_names():
        assert name in lines[0]
