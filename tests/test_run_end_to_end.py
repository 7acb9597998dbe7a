"""The batch run end to end, through the command line, on small generated inputs.

Uniform grids give answers known from published worked examples; a non-uniform grid is
checked against zonal means computed independently here (plain shapely, one polygon at a
time); GeoTIFF and NetCDF inputs, and daily and monthly inputs, must agree.
"""

from __future__ import annotations

import json
import sqlite3

import numpy as np
import pandas as pd
import pyogrio
import pytest
import shapely
import tomli_w
from builders import LAT, LON, climate_dataset, write_geotiff, write_netcdf
from click.testing import CliRunner
from pyproj import Geod

import lakeloss
from lakeloss.cli import cli
from lakeloss.io.gpkg import read_field_descriptions


def _write_config(tmp_path, config):
    path = tmp_path / "run.toml"
    path.write_text(tomli_w.dumps(config))
    return path


def _run(args):
    result = CliRunner().invoke(cli, args)
    return result.exit_code, result.output + (result.stderr if result.stderr_bytes else "")


def _geodesic_area(layer):
    geod = Geod(ellps="WGS84")
    return np.array([abs(geod.geometry_area_perimeter(g)[0]) for g in layer.to_crs(4326).geometry])


@pytest.fixture
def chow_run(make_case, tmp_path):
    config = make_case("energy_balance", parameters={"clip_negative": True})
    code, output = _run(["run", str(_write_config(tmp_path, config)), "-q"])
    assert code == 0, output
    return config, tmp_path / "out"


def test_uniform_grid_reproduces_chow_energy_balance(chow_run):
    # Chow, Maidment & Mays (1988) Example 3.5.1 (docs/methods.md#chow-examples): Rn = 200 W m-2
    # at 25 °C gives 7.10 mm/day with rho_w = 997 kg m-3. lakeloss converts mass to depth with
    # exactly 1000 kg m-3 (docs/methods.md#units-and-conventions), so the expected rate is 7.10 * 997 / 1000.
    # Tolerance: half a unit of the printed 7.10 (7e-4) plus lambda 2441 vs 2441.75 kJ/kg.
    config, out = chow_run
    layer = pyogrio.read_dataframe(out / "waterbodies.gpkg", layer="waterbodies")
    days = 59
    expected_rate = 7.10 * 997.0 / 1000.0
    np.testing.assert_allclose(layer["evap_mm"], expected_rate * days, rtol=1.5e-3)
    np.testing.assert_allclose(layer["precip_mm"], 1.0 * days, rtol=1e-6)
    np.testing.assert_allclose(layer["net_mm"], layer["evap_mm"] - layer["precip_mm"], rtol=1e-9)
    np.testing.assert_allclose(
        layer["evap_m3"], layer["evap_mm"] * layer["area_m2"] / 1000, rtol=1e-9
    )
    np.testing.assert_allclose(layer["area_m2"], _geodesic_area(layer), rtol=1e-4)
    assert (layer["qa_flags"] == "").all()
    np.testing.assert_allclose(layer["climate_coverage"], 1.0)


def test_uniform_grid_reproduces_chow_priestley_taylor(make_case, tmp_path):
    # Chow et al. (1988) Example 3.5.4: alpha = 1.3 gives 6.81 mm/day with
    # rho_w = 997; we use 1000 (factor 0.997) and cp = 1013 J/kg/K in gamma (FAO-56), which
    # lowers the weight 0.738 by ~0.2 %: tolerance 0.5 %.
    config = make_case("priestley_taylor", parameters={"priestley_taylor_alpha": 1.3})
    code, output = _run(["run", str(_write_config(tmp_path, config)), "-q"])
    assert code == 0, output
    by_period = pyogrio.read_dataframe(
        tmp_path / "out" / "waterbodies.gpkg", layer="evaporation_by_period"
    )
    rate = by_period["evap_mm"] / by_period["days"]
    np.testing.assert_allclose(rate, 6.81 * 0.997, rtol=5e-3)
    assert set(by_period["days"]) == {31, 28}


def test_outputs_and_columns(chow_run):
    config, out = chow_run
    names = sorted(p.name for p in out.iterdir())
    assert names == [
        "run.json",
        "summary_by_group.csv",
        "summary_by_period.csv",
        "summary_by_waterbody.csv",
        "waterbodies.gpkg",
    ]
    layers = [name for name, _ in pyogrio.list_layers(out / "waterbodies.gpkg")]
    assert set(layers) == {"waterbodies", "evaporation_by_period"}
    layer = pyogrio.read_dataframe(out / "waterbodies.gpkg", layer="waterbodies")
    assert layer.crs.to_epsg() == 32755
    for column in [
        "pond_id",
        "name",
        "zone",
        "area_m2",
        "evap_mm",
        "evap_m3",
        "evap_mm_per_year",
        "precip_mm",
        "net_mm",
        "net_m3",
        "climate_coverage",
        "qa_flags",
        "loss_rank",
    ]:
        assert column in layer.columns, column
    fields = read_field_descriptions(out / "waterbodies.gpkg", "waterbodies")
    assert "m3" in (fields["evap_m3"].unit or "")
    assert fields["evap_mm"].unit == "mm"
    period_fields = read_field_descriptions(out / "waterbodies.gpkg", "evaporation_by_period")
    assert {"period_start", "period_end", "days", "evap_mm", "net_m3"} <= set(period_fields)
    period_info = pyogrio.read_info(out / "waterbodies.gpkg", layer="evaporation_by_period")
    types = dict(zip(period_info["fields"], period_info["ogr_types"], strict=True))
    dates = [types["period_start"], types["period_end"]]
    assert dates == ["OFTDate", "OFTDate"]  # GIS software sees dates, not text
    with sqlite3.connect(out / "waterbodies.gpkg") as db:
        extensions = {row[0] for row in db.execute("select extension_name from gpkg_extensions")}
    assert {"gpkg_schema", "gpkg_metadata"} <= extensions

    by_body = pd.read_csv(out / "summary_by_waterbody.csv")
    assert by_body.columns[0] == "pond_id"
    assert list(by_body["loss_rank"]) == sorted(by_body["loss_rank"])
    assert by_body.iloc[0]["name"] == "reservoir"  # the largest loss ranks first
    by_period = pd.read_csv(out / "summary_by_period.csv")
    assert list(by_period.columns) == [
        "period_label",
        "period_start",
        "period_end",
        "days",
        "days_in_period",
        "period_complete",
        "n_waterbodies",
        "area_m2",
        "evap_m3",
        "precip_m3",
        "net_m3",
    ]
    assert list(by_period["period_start"]) == ["2031-01-01", "2031-02-01"]
    assert list(by_period["period_end"]) == ["2031-01-31", "2031-02-28"]
    np.testing.assert_allclose(by_period["evap_m3"].sum(), layer["evap_m3"].sum(), rtol=1e-6)
    by_group = pd.read_csv(out / "summary_by_group.csv")
    assert set(by_group["zone"]) == {"east", "west"}
    np.testing.assert_allclose(by_group["net_m3"].sum(), layer["net_m3"].sum(), rtol=1e-6)

    run = json.loads((out / "run.json").read_text())
    assert run["counts"]["waterbodies"] == len(layer)
    assert "screening" in run["caution"]
    assert all(item["sha256"] for item in run["inputs"])
    assert run["versions"]["lakeloss"] == lakeloss.__version__


def test_overwrite_behaviour(chow_run, tmp_path):
    config, out = chow_run
    path = _write_config(tmp_path, config)
    before = (out / "summary_by_waterbody.csv").read_bytes()
    code, output = _run(["run", str(path), "-q"])
    assert code == 2
    assert "--overwrite" in output and "error:" in output
    assert (out / "summary_by_waterbody.csv").read_bytes() == before
    code, output = _run(["run", str(path), "-q", "--overwrite"])
    assert code == 0, output
    assert (out / "summary_by_waterbody.csv").read_bytes() == before  # byte-identical rerun
    run = json.loads((out / "run.json").read_text())
    assert run["weights_from_cache"] is True


def _independent_means(layer, values):
    """Zonal means by brute force: every polygon against every cell, true cell areas."""
    geod = Geod(ellps="WGS84")
    lon_edges = np.r_[LON - 0.025, LON[-1] + 0.025]
    lat_edges = np.r_[LAT + 0.025, LAT[-1] - 0.025]
    polygons = layer.to_crs(4326).geometry
    out = []
    for polygon in polygons:
        total, weight = 0.0, 0.0
        for row in range(len(LAT)):
            for col in range(len(LON)):
                cell = shapely.box(
                    lon_edges[col], lat_edges[row + 1], lon_edges[col + 1], lat_edges[row]
                )
                piece = polygon.intersection(cell)
                if piece.is_empty:
                    continue
                area = abs(geod.geometry_area_perimeter(piece)[0])
                total += area * values[row, col]
                weight += area
        out.append(total / weight)
    return np.array(out)


def test_non_uniform_grid_matches_independent_zonal_means(make_case, tmp_path):
    # energy_balance is linear in Rn at fixed temperature, so the mean of the rates is the
    # rate of the mean radiation: check the run against brute-force zonal means of Rn.
    rng = np.random.default_rng(7)
    rnet = rng.uniform(80.0, 260.0, (len(LAT), len(LON)))
    fields = {
        "rnet": (rnet[None], "W m-2", "surface_net_downward_radiative_flux"),
        "tas": (298.15, "K", "air_temperature"),
    }
    config = make_case(
        "energy_balance",
        fields=fields,
        climate={"surface_net_downward_radiative_flux": "rnet", "air_temperature": "tas"},
        output={"precipitation": False},
    )
    result = lakeloss.run(config)
    layer = result.waterbodies
    expected_rn = _independent_means(layer, rnet)
    days = 59
    rate = 86400.0 * 1000.0 / (2.501e6 - 2370.0 * 25.0) / 1000.0  # mm/day per W m-2, Chow eq. 2.7.6
    # Geodesic pieces vs the engine's cell-area weighting differ by < 1e-4 relative
    np.testing.assert_allclose(layer["evap_mm"], expected_rn * rate * days, rtol=2e-4)
    assert layer["precip_mm"].isna().all()


def test_geotiff_and_netcdf_inputs_agree(make_case, tmp_path):
    rng = np.random.default_rng(11)
    times = pd.date_range("2031-03-01", periods=10, freq="D")
    rnet = rng.uniform(50.0, 250.0, (10, len(LAT), len(LON)))
    tas = rng.uniform(285.0, 305.0, (10, len(LAT), len(LON)))
    fields = {
        "rnet": (rnet, "W m-2", "surface_net_downward_radiative_flux"),
        "tas": (tas, "K", "air_temperature"),
    }
    climate = {"surface_net_downward_radiative_flux": "rnet", "air_temperature": "tas"}
    config = make_case(
        "priestley_taylor",
        fields=fields,
        climate=climate,
        times=times,
        output={"precipitation": False, "period": "day"},
    )
    from_netcdf = lakeloss.run(config).by_period
    write_geotiff(tmp_path / "rnet.tif", rnet, "W m-2")
    write_geotiff(tmp_path / "tas.tif", tas, "K")
    config["climate"] = {
        "surface_net_downward_radiative_flux": {
            "path": str(tmp_path / "rnet.tif"),
            "start": "2031-03-01",
            "step": "day",
        },
        "air_temperature": {
            "path": str(tmp_path / "tas.tif"),
            "start": "2031-03-01",
            "step": "day",
        },
    }
    from_geotiff = lakeloss.run(config).by_period
    pd.testing.assert_frame_equal(from_netcdf, from_geotiff, rtol=1e-6)


def test_monthly_and_daily_inputs_give_consistent_totals(make_case, tmp_path):
    # Daily climate constant within each month vs its monthly means: a rate computed from
    # monthly means times the days of the month must equal the sum of the daily rates.
    months = pd.date_range("2031-01-01", periods=3, freq="MS")
    rn_month = np.array([230.0, 190.0, 120.0])
    t_month = np.array([300.0, 297.0, 291.0])
    daily = pd.date_range("2031-01-01", "2031-03-31", freq="D")
    month_of_day = daily.month.to_numpy() - 1
    climate = {"surface_net_downward_radiative_flux": "rnet", "air_temperature": "tas"}

    def fields(rn, t):
        return {
            "rnet": (rn[:, None, None], "W m-2", "surface_net_downward_radiative_flux"),
            "tas": (t[:, None, None], "K", "air_temperature"),
        }

    config = make_case(
        "priestley_taylor",
        fields=fields(rn_month[month_of_day], t_month[month_of_day]),
        climate=climate,
        times=daily,
        output={"precipitation": False},
    )
    daily_result = lakeloss.run(config).by_period
    monthly_path = write_netcdf(
        climate_dataset(months + pd.Timedelta(days=14), fields(rn_month, t_month)),
        tmp_path / "monthly.nc",
    )
    for entry in config["climate"].values():
        entry["path"] = str(monthly_path)
    monthly_result = lakeloss.run(config).by_period
    assert list(monthly_result.drop_duplicates("period_start")["days"]) == [31, 28, 31]
    np.testing.assert_allclose(monthly_result["evap_mm"], daily_result["evap_mm"], rtol=1e-9)


def test_api_result_without_touching_disk(make_case, tmp_path):
    config = make_case("energy_balance", output={"series": True})
    result = lakeloss.run(config)
    assert not (tmp_path / "out").exists()
    series = result.series
    assert series["evaporation_rate"].dims == ("waterbody", "time")
    assert series["evaporation_rate"].attrs["units"] == "mm day-1"
    assert series.sizes["time"] == 59
    np.testing.assert_allclose(
        series["evaporation_rate"].sum("time").values,
        result.waterbodies["evap_mm"].to_numpy(),
        rtol=1e-5,
    )
    written = result.write(tmp_path / "out")
    assert (written / "series.nc").exists()


def test_elevation_from_raster_attribute_or_constant_agree(make_case, tmp_path):
    # Priestley-Taylor depends on elevation through pressure and gamma (FAO-56 eqs. 7-8):
    # a uniform 1800 m raster, an attribute of 1800 m and the constant must agree, and differ
    # from sea level.
    climate = {"surface_net_downward_radiative_flux": "rnet", "air_temperature": "tas"}
    config = make_case(
        "priestley_taylor",
        climate=climate,
        output={"precipitation": False},
        parameters={"elevation_m": 1800.0},
    )
    constant = lakeloss.run(config).waterbodies["evap_mm"].to_numpy()
    dem = np.full((1, len(LAT), len(LON)), 1800.0)
    write_geotiff(tmp_path / "dem.tif", dem, "m")
    config["parameters"] = {"elevation_m": 0.0}
    config["climate"]["elevation"] = {"path": str(tmp_path / "dem.tif")}
    from_raster = lakeloss.run(config).waterbodies["evap_mm"].to_numpy()
    np.testing.assert_allclose(from_raster, constant, rtol=1e-9)
    del config["climate"]["elevation"]
    layer = pyogrio.read_dataframe(config["waterbodies"]["path"], layer="ponds")
    layer["surface_m"] = 1800.0
    layer.to_file(config["waterbodies"]["path"], layer="ponds", driver="GPKG")
    config["waterbodies"]["elevation_field"] = "surface_m"
    from_attribute = lakeloss.run(config).waterbodies["evap_mm"].to_numpy()
    np.testing.assert_allclose(from_attribute, constant, rtol=1e-9)
    config["waterbodies"].pop("elevation_field")
    sea_level = lakeloss.run(config).waterbodies["evap_mm"].to_numpy()
    assert np.all(sea_level < constant)  # lower gamma at altitude raises the radiative weight


def test_check_prints_the_plan_without_computing(make_case, tmp_path):
    config = make_case("penman_open_water", compute={"chunk_steps": 10})
    code, output = _run(["check", str(_write_config(tmp_path, config))])
    assert code == 0, output
    for words in (
        "water bodies : 13",
        "2031-01-01..2031-02-28",
        "periods      : 2 x month",
        "penman_open_water",
        "8 x 6",
        "10 time steps per block",
        "GiB",
        "ready to run",
    ):
        assert words in output, words
    assert not (tmp_path / "out").exists()
    assert not (tmp_path / "cache").exists()  # no weights were built


def test_extra_volume_units(make_case):
    config = make_case("energy_balance", output={"extra_volume_units": ["ML", "acre_ft"]})
    bodies = lakeloss.run(config).waterbodies
    # 1 ML = 1000 m3; 1 acre-foot = 1233.48183754752 m3 (international foot, by definition)
    np.testing.assert_allclose(bodies["evap_ML"], bodies["evap_m3"] / 1000.0, rtol=1e-12)
    np.testing.assert_allclose(
        bodies["net_acre_ft"], bodies["net_m3"] / 1233.48183754752, rtol=1e-12
    )


def test_methods_command_lists_every_method_with_its_source():
    from lakeloss.physics import registry

    code, output = _run(["methods"])
    assert code == 0
    for name in registry.method_names():
        assert f"\n{name} " in f"\n{output}"
    code, output = _run(["methods", "penman_open_water"])
    assert code == 0
    assert "Shuttleworth (1993)" in output and "Inputs" in output


class _Bar:
    """A tqdm stand-in that records what a run reports."""

    def __init__(self, total, label, log):
        self.total, self.label, self.n, self.closed = total, label, 0, False
        log.append(self)

    def update(self, k):
        self.n += k

    def close(self):
        self.closed = True


def test_progress_is_reported_for_weights_evaporation_and_writing(make_case, tmp_path):
    bars = []
    config = make_case("penman_open_water", compute={"chunk_steps": 10})
    result = lakeloss.run(config, progress=lambda total, label: _Bar(total, label, bars))
    result.write(tmp_path / "out", progress=lambda total, label: _Bar(total, label, bars))
    by_label = {bar.label: bar for bar in bars}
    assert set(by_label) == {"weights", "evaporation", "writing"}
    assert by_label["evaporation"].total == 59
    for bar in bars:
        assert bar.closed and bar.n == bar.total, bar.label
    assert by_label["writing"].total == len(list((tmp_path / "out").iterdir()))
