"""run.json records every parameter a run used, with its source, and the sea-level note.

Real runs on tiny generated inputs (layer GeoPackage + climate NetCDF written to tmp_path):
the parameters a user did not write (albedo, alpha, roughness, wind height, elevation...)
must appear in run.json with the value used and where it came from; a run whose pressure
falls back to sea level says so once, in run.json and on stderr.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import tomli_w
from builders import CHOW_CLIMATE, LAT, LON, pond_layer, write_geotiff

import lakeloss
from lakeloss.physics import registry

ROOT = Path(__file__).resolve().parents[1]

# Chow conditions without the pressure input: the pressure then comes from the elevation.
NO_PRESSURE = {k: v for k, v in CHOW_CLIMATE.items() if k != "surface_air_pressure"}


def _run_json(config) -> dict:
    result = lakeloss.run(config)
    out = result.write()
    return json.loads((out / "run.json").read_text())


def test_run_json_lists_defaults_and_config_values(make_case):
    config = make_case(
        "penman_open_water",
        climate=NO_PRESSURE,
        parameters={"albedo": 0.06, "elevation_m": 420.0},
    )
    config["method"]["compare"] = ["priestley_taylor"]
    run = _run_json(config)
    used = run["method"]["effective_parameters"]
    assert used["albedo"] == {
        "value": 0.06,
        "unit": "1",
        "source": "config",
        "methods": ["penman_open_water", "priestley_taylor"],
    }
    assert used["priestley_taylor_alpha"]["value"] == 1.26
    assert used["priestley_taylor_alpha"]["source"] == "default"
    assert used["priestley_taylor_alpha"]["methods"] == ["priestley_taylor"]
    assert used["roughness_length_m"] == {
        "value": 0.0003,
        "unit": "m",
        "source": "default",
        "methods": ["penman_open_water"],
    }
    assert used["wind_profile"]["value"] == "fao56"
    assert used["wind_height_m"]["value"] == 2.0  # [climate].wind_speed.height_m
    assert used["wind_height_m"]["source"] == "config"
    assert used["elevation_m"]["value"] == 420.0
    assert used["elevation_m"]["source"] == "config"
    assert used["clip_negative"]["source"] == "default"
    assert "von_karman" not in used  # no method of this run reads it
    assert run["notes"] == []
    # what the user wrote is still recorded as written
    assert run["method"]["parameters"]["albedo"] == 0.06


def test_elevation_from_a_field_is_recorded_as_field(make_case):
    layer = pond_layer()
    layer["surface_m"] = np.linspace(150.0, 600.0, len(layer))
    config = make_case(
        "aerodynamic",
        climate=NO_PRESSURE,
        layer=layer,
        waterbodies={"elevation_field": "surface_m"},
    )
    run = _run_json(config)
    elevation = run["method"]["effective_parameters"]["elevation_m"]
    assert elevation["source"] == "field"
    assert run["notes"] == []
    used = run["method"]["effective_parameters"]
    assert used["von_karman"] == {
        "value": 0.4,
        "unit": "1",
        "source": "default",
        "methods": ["aerodynamic"],
    }


def test_elevation_from_a_raster_is_recorded_as_raster_with_its_fallback(make_case, tmp_path):
    # A uniform 600 m elevation GeoTIFF over the grid; elevation_m = 90 only for bodies off it.
    write_geotiff(tmp_path / "dem.tif", np.full((1, len(LAT), len(LON)), 600.0), "m")
    config = make_case(
        "priestley_taylor",
        climate={"surface_net_downward_radiative_flux": "rnet", "air_temperature": "tas"},
        output={"precipitation": False},
        parameters={"elevation_m": 90.0},
    )
    config["climate"]["elevation"] = {"path": str(tmp_path / "dem.tif")}
    run = _run_json(config)
    assert run["method"]["effective_parameters"]["elevation_m"] == {
        "value": 90.0,
        "unit": "m",
        "source": "raster",
        "methods": ["priestley_taylor"],
    }
    assert run["notes"] == []


def test_pressure_input_needs_no_elevation(make_case):
    run = _run_json(make_case("penman_open_water"))  # CHOW_CLIMATE has surface_air_pressure
    assert run["notes"] == []
    assert run["method"]["effective_parameters"]["elevation_m"]["source"] == "default"


def test_sea_level_default_is_a_note_in_run_json_and_once_on_stderr(make_case, tmp_path):
    config = make_case("priestley_taylor", climate=NO_PRESSURE)
    config["method"]["compare"] = ["aerodynamic"]
    path = tmp_path / "run.toml"
    path.write_text(tomli_w.dumps(config))
    done = subprocess.run(
        [sys.executable, "-m", "lakeloss.cli", "run", str(path)],
        capture_output=True,
        text=True,
        cwd=ROOT,
        timeout=300,
    )
    assert done.returncode == 0, done.stderr
    run = json.loads((tmp_path / "out" / "run.json").read_text())
    assert run["notes"] == [registry.SEA_LEVEL_PRESSURE_NOTE]
    assert run["method"]["effective_parameters"]["elevation_m"] == {
        "value": 0.0,
        "unit": "m",
        "source": "default",
        "methods": ["priestley_taylor", "aerodynamic"],
    }
    assert done.stderr.count("air pressure is taken at sea level") == 1


def test_energy_balance_alone_needs_no_pressure_note(make_case):
    run = _run_json(make_case("energy_balance", climate=NO_PRESSURE))
    assert run["notes"] == []
