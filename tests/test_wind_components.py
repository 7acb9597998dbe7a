"""Eastward and northward wind are combined to a speed in each grid cell, before the zonal mean.

The wind functions want the mean wind speed over a water body, not the speed of its mean wind
vector: winds that turn from cell to cell cancel in the vector mean but still evaporate water.
The grid here has eastward components of +4 and -4 m/s in alternate columns and a northward
component of 3 m/s everywhere, so every cell has a speed of exactly 5 m/s (a 3-4-5 triangle)
while a body spanning both kinds of column has a mean vector of less than 5 m/s.
"""

from __future__ import annotations

import numpy as np
import pyogrio
import shapely
import tomli_w
from builders import CHOW_CLIMATE, CHOW_FIELDS, LAT, LON
from click.testing import CliRunner

from lakeloss.cli import cli

EAST = np.where(np.arange(len(LON)) % 2 == 0, 4.0, -4.0)[np.newaxis, np.newaxis, :]


def _evaporation(tmp_path, make_case, name, fields, climate, **sections):
    folder = tmp_path / name
    folder.mkdir()
    config = make_case("aerodynamic", fields=fields, climate=climate, **sections)
    config["output"]["dir"] = str(folder / "out")
    config_path = folder / "run.toml"
    config_path.write_text(tomli_w.dumps(config))
    result = CliRunner().invoke(cli, ["run", str(config_path), "-q"])
    assert result.exit_code == 0, result.output
    return pyogrio.read_dataframe(folder / "out" / "waterbodies.gpkg", layer="waterbodies")


def test_components_give_the_mean_of_cell_speeds_not_the_speed_of_the_mean(make_case, tmp_path):
    components = {k: v for k, v in CHOW_FIELDS.items() if k != "wind"}
    components["uas"] = (EAST, "m s-1", "eastward_wind")
    components["vas"] = (3.0, "m s-1", "northward_wind")
    climate = {k: v for k, v in CHOW_CLIMATE.items() if k != "wind_speed"}
    climate |= {"eastward_wind": "uas", "northward_wind": "vas"}
    from_components = _evaporation(
        tmp_path, make_case, "components", components, climate,
        parameters={"wind_height_m": 2.0},
    )  # fmt: skip
    uniform = {**CHOW_FIELDS, "wind": (5.0, "m s-1", "wind_speed")}
    from_speed = _evaporation(tmp_path, make_case, "speed", uniform, CHOW_CLIMATE)

    # The test means something only if some body covers cells of both signs.
    column_edges = np.r_[LON - 0.025, LON[-1] + 0.025]
    outlines = from_components.to_crs(4326).geometry
    spans = [
        {int(i) % 2 for i in range(len(LON)) if g.intersects(
            shapely.box(column_edges[i], LAT[-1] - 0.025, column_edges[i + 1], LAT[0] + 0.025))}
        for g in outlines
    ]  # fmt: skip
    assert any(parity == {0, 1} for parity in spans)

    np.testing.assert_allclose(from_components["evap_mm"], from_speed["evap_mm"], rtol=1e-9)
