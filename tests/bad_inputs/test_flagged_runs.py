"""Inputs that are usable but not clean: the run completes and says what it did, per water
body in ``qa_flags`` and in run.json. Ponds off or over the edge of the grid, gaps in the
climate, and negative daily rates (net radiation below zero) clipped or kept.
"""

from __future__ import annotations

import json

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pytest
import shapely
from bad_inputs.corpus import BASE_FIELDS, TIMES, Case, assert_refused
from builders import LAYER_CRS, climate_dataset, pond_layer
from pyproj import Transformer

shows_warnings = pytest.mark.filterwarnings("always::lakeloss.errors.LakelossWarning")


def _completed(case):
    outcome = case.invoke("run")
    assert outcome.code == 0, outcome.stderr
    layer = pyogrio.read_dataframe(case.out / "waterbodies.gpkg", layer="waterbodies")
    run = json.loads((case.out / "run.json").read_text())
    return layer.set_index("pond_id"), run, outcome


def _tokens(layer, pond_id: int) -> set[str]:
    return set(filter(None, str(layer.loc[pond_id, "qa_flags"]).split(";")))


def _square_at(lon: float, lat: float, side: float = 400.0) -> shapely.Polygon:
    x, y = Transformer.from_crs("EPSG:4326", LAYER_CRS, always_xy=True).transform(lon, lat)
    return shapely.box(x - side / 2, y - side / 2, x + side / 2, y + side / 2)


def test_ponds_off_and_over_the_edge_of_the_grid(case):
    # The grid spans 146.0..146.4 E; pond 201 lies 5 km east of it, pond 202 on its edge.
    extra = gpd.GeoDataFrame(
        {"pond_id": [201, 202], "name": ["off", "edge"], "zone": ["east", "east"]},
        geometry=[_square_at(146.45, -30.15), _square_at(146.4, -30.15)],
        crs=LAYER_CRS,
    )
    case.write_layer(pd.concat([pond_layer(n_ponds=3), extra], ignore_index=True))
    layer, run, _ = _completed(case)
    assert "outside_grid" in _tokens(layer, 201)
    assert np.isnan(layer.loc[201, "evap_mm"])
    assert layer.loc[201, "climate_coverage"] == 0.0
    assert _tokens(layer, 202) == {"partly_outside_grid"}
    np.testing.assert_allclose(layer.loc[202, "climate_coverage"], 0.5, atol=0.02)
    np.testing.assert_allclose(layer.loc[202, "evap_mm"], layer.loc[101, "evap_mm"], rtol=1e-9)
    assert run["counts"]["flagged"] == 2
    assert run["counts"]["no_valid_climate"] == int("no_valid_climate" in _tokens(layer, 201))


def test_a_short_gap_in_the_climate_is_filled(case):
    rnet = np.full((len(TIMES), 6, 8), 200.0)
    rnet[1] = np.nan  # one day missing everywhere, between two valid days
    case.write_climate(climate_dataset(TIMES, {**BASE_FIELDS, "rnet": (rnet, "W m-2", "x")}))
    layer, run, outcome = _completed(case)
    # Coverage is averaged over time, so a day missing everywhere lowers it to 3/4; but that
    # is a gap, not a part of the ponds without climate: no partial_climate_coverage.
    for pond_id in layer.index:
        assert _tokens(layer, pond_id) == {"climate_gaps_filled"}
    np.testing.assert_allclose(layer["climate_coverage"], 0.75, rtol=1e-9)
    # Filled from its neighbours (both 200 W m-2): the same as the run without the gap.
    (case.tmp / "clean").mkdir()
    clean = Case(case.tmp / "clean")
    reference, _, _ = _completed(clean)
    np.testing.assert_allclose(layer["evap_mm"], reference["evap_mm"], rtol=1e-12)
    assert run["counts"]["filled_climate_steps"] == len(layer)
    assert run["counts"]["qa_flags"]["climate_gaps_filled"] == len(layer)
    assert run["climate_gaps"]["filled"]["surface_net_downward_radiative_flux"] == {
        "steps": 1,
        "values": len(layer),
        "dates": "2031-01-02",
    }
    assert "note: 4 water bodies flagged climate_gaps_filled" in outcome.stderr


@shows_warnings
@pytest.mark.parametrize(("day", "limit"), [(1, 0), (0, None), (3, None)])
def test_a_gap_that_cannot_be_filled_leaves_no_result(case, day, limit):
    # With no filling, or a gap on the first or last day (one neighbour only), the single
    # period of the run has no total for any body: the run refuses in one line.
    rnet = np.full((len(TIMES), 6, 8), 200.0)
    rnet[day] = np.nan
    case.write_climate(climate_dataset(TIMES, {**BASE_FIELDS, "rnet": (rnet, "W m-2", "x")}))
    if limit is not None:
        case.config["checks"] = {"max_gap_steps": limit}
    outcome = case.invoke("run")
    line = assert_refused(outcome, "none of the 4 water bodies", "4 climate_gaps")
    assert "nothing was written" in line
    assert "surface_net_downward_radiative_flux is missing for 4 water bodies" in outcome.stderr
    assert case.snapshot() is None


@shows_warnings
def test_no_whole_run_total_for_any_body_writes_the_periods_and_fails(case):
    # Daily periods; day 2 missing everywhere and no filling: every body keeps 3 of its 4
    # periods but has no whole-run total. The outputs hold those periods, the summary line
    # is printed, and the run ends with one error line and exit status 3.
    rnet = np.full((len(TIMES), 6, 8), 200.0)
    rnet[1] = np.nan
    case.write_climate(climate_dataset(TIMES, {**BASE_FIELDS, "rnet": (rnet, "W m-2", "x")}))
    case.config["checks"] = {"max_gap_steps": 0}
    case.config["output"] = {**case.config["output"], "period": "day"}
    outcome = case.invoke("run")
    assert outcome.code == 3, outcome.stderr
    [line] = outcome.error_lines
    assert "none of the 4 water bodies has a whole-run evaporation total" in line
    assert "max_gap_steps" in line
    layer = pyogrio.read_dataframe(case.out / "waterbodies.gpkg", layer="waterbodies")
    assert layer["evap_mm"].isna().all()
    periods = pd.read_csv(case.out / "summary_by_period.csv")
    assert periods["evap_m3"].isna().tolist() == [False, True, False, False]
    assert len(outcome.stdout.splitlines()) == 1


@shows_warnings
@pytest.mark.parametrize(
    ("clip", "token"), [(True, "negative_rates_clipped"), (False, "negative_rates_kept")]
)
def test_negative_daily_rates(case, clip, token):
    # Net radiation of -50 W m-2 (a clear winter night's deficit, plausible) gives
    # condensation in the energy balance: a negative daily rate on every step.
    case.write_climate(
        climate_dataset(
            TIMES, {**BASE_FIELDS, "rnet": (-50.0, "W m-2", "surface_net_downward_radiative_flux")}
        )
    )
    case.config["parameters"] = {"clip_negative": clip}
    layer, run, outcome = _completed(case)
    for pond_id in layer.index:
        assert _tokens(layer, pond_id) == {token}
    steps = len(TIMES) * len(layer)
    assert run["counts"]["negative_rates"] == {"energy_balance": steps}
    assert run["counts"]["negative_rates_clipped"] == (steps if clip else 0)
    if clip:
        assert (layer["evap_mm"] == 0.0).all()
    else:
        assert (layer["evap_mm"] < 0.0).all()
    assert any("negative daily evaporation rates" in w for w in run["warnings"])
    assert "warning:" in outcome.stderr
