"""Gaps in the climate: short ones filled by linear interpolation, long ones left missing.

The policy (README, "When inputs are wrong"): a run of at most ``[checks] max_gap_steps``
missing steps in a body's zonal mean of one variable, with a valid step on each side, is
filled linearly in time; a longer run, or one at the start or end of the data, is not.

The files are real NetCDF files written like a provider's daily product (invented weather,
smooth in time and space, on the 8 x 6 cell test grid), with whole-grid missing days written
as NaN: one day, five days, three days across block boundaries, one day on half the grid and
one on the first day. Every run must give the same bits whatever the blocks of time steps.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from builders import LAT, LON, case_config, climate_dataset, pond_layer, write_netcdf

from lakeloss import load_config
from lakeloss.gaps import fill_short_gaps, halo_needed
from lakeloss.pipeline import run_stages

N_STEPS = 40
TIMES = pd.date_range("2031-01-01", periods=N_STEPS, freq="D")
CLIMATE = {
    "surface_net_downward_radiative_flux": "rnet",
    "air_temperature": "tas",
    "relative_humidity": "hurs",
    "wind_speed": "wind",
    "precipitation_flux": "pr",
}
shows_warnings = pytest.mark.filterwarnings("always::lakeloss.errors.LakelossWarning")


# --------------------------------------------------------------------------- the rule


def test_a_straight_line_is_recovered_exactly():
    # Linear interpolation of a linear series is that series (to rounding).
    t = np.arange(12.0)
    truth = np.stack([3.0 + 0.5 * t, 100.0 - 2.0 * t], axis=1)
    gappy = truth.copy()
    gappy[4:7, 0] = np.nan  # three steps, the limit
    gappy[2, 1] = np.nan
    filled, was_filled = fill_short_gaps(gappy, 3)
    np.testing.assert_allclose(filled, truth, rtol=0, atol=1e-12)
    assert was_filled.sum() == 4
    assert was_filled[4:7, 0].all() and was_filled[2, 1]


def test_long_gaps_and_gaps_at_the_ends_stay_missing():
    values = np.arange(14.0)[:, np.newaxis].repeat(2, axis=1)
    values[0, 0] = np.nan  # first step: no valid value before it
    values[4:8, 0] = np.nan  # four steps: longer than the limit of 3
    values[-2:, 0] = np.nan  # last steps: no valid value after them
    values[:, 1] = np.nan  # never valid
    filled, was_filled = fill_short_gaps(values, 3)
    assert not was_filled.any()
    np.testing.assert_array_equal(np.isnan(filled), np.isnan(values))
    assert not fill_short_gaps(np.array([[1.0], [np.nan], [3.0]]), 0)[1].any()


def test_halo_is_needed_only_for_short_runs_at_the_edges():
    block = np.array([[np.nan, 1.0, 1.0], [1.0, 1.0, np.nan], [1.0, 1.0, np.nan]])
    # column 0: one missing step at the start; column 2: two at the end.
    assert halo_needed(block, 3) == (True, True)
    assert halo_needed(block, 1) == (True, False)
    assert halo_needed(np.ones((3, 2)), 3) == (False, False)
    assert halo_needed(np.full((5, 1), np.nan), 3) == (False, False)  # longer than 3 anyway


# --------------------------------------------------------------------------- runs on files


def _weather() -> dict[str, np.ndarray]:
    t = np.arange(N_STEPS)[:, None, None].astype(float)
    y = np.arange(LAT.size)[None, :, None].astype(float)
    x = np.arange(LON.size)[None, None, :].astype(float)
    shape = (N_STEPS, LAT.size, LON.size)
    return {
        "rnet": np.broadcast_to(150.0 + 60.0 * np.sin(t / 5.0) + 3.0 * x - 2.0 * y, shape),
        "tas": np.broadcast_to(293.0 + 4.0 * np.cos(t / 7.0) + 0.2 * x, shape),
        "hurs": np.broadcast_to(50.0 + 10.0 * np.sin(t / 4.0) + y, shape),
        "wind": np.broadcast_to(3.0 + np.cos(t / 3.0) + 0.1 * y, shape),
        "pr": np.broadcast_to((1.0 + np.sin(t / 3.0) ** 2 + 0.05 * y) / 86400.0, shape),
    }


UNITS = {
    "rnet": ("W m-2", "surface_net_downward_radiative_flux"),
    "tas": ("K", "air_temperature"),
    "hurs": ("%", "relative_humidity"),
    "wind": ("m s-1", "wind_speed"),
    "pr": ("kg m-2 s-1", "precipitation_flux"),
}


def _write_case(root, gaps: dict[str, list], name: str) -> dict:
    """Layer + climate NetCDF with ``gaps[var]`` = steps (or (step, cells)) set to NaN."""
    weather = {k: np.array(v, dtype=np.float64) for k, v in _weather().items()}
    for variable, steps in gaps.items():
        for step in steps:
            if isinstance(step, tuple):
                day, cells = step
                weather[variable][(day, *cells)] = np.nan
            else:
                weather[variable][step] = np.nan
    fields = {k: (v, *UNITS[k]) for k, v in weather.items()}
    layer_path = root / "ponds.gpkg"
    if not layer_path.exists():
        pond_layer().to_file(layer_path, layer="ponds", driver="GPKG")
    climate_path = write_netcdf(climate_dataset(TIMES, fields), root / f"{name}.nc")
    config = case_config(layer_path, climate_path, root / f"out-{name}", "energy_balance", CLIMATE)
    config["method"]["compare"] = ["priestley_taylor"]
    return config


# One day of net radiation missing on the whole grid; five days of air temperature (too
# long); three days of precipitation across the boundaries of blocks of 4, 7 and 8 steps;
# one day of net radiation on the western half of the grid only; humidity on the first day.
GAPS = {
    "rnet": [10, (30, (slice(None), slice(0, 4)))],
    "tas": [20, 21, 22, 23, 24],
    "pr": [6, 7, 8],
    "hurs": [0],
}


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    root = tmp_path_factory.mktemp("gaps")
    gappy = _write_case(root, GAPS, "gappy")
    clean = _write_case(root, {}, "clean")
    return root, gappy, clean


def _run(config: dict, **compute):
    config = {**config, "compute": {**config["compute"], **compute}}
    return run_stages(load_config(config), series=True)


@shows_warnings
@pytest.mark.parametrize("chunk_steps", [1, 2, 3, 4, 7, 8, 16])
def test_filling_is_the_same_for_every_block_size(runs, chunk_steps):
    _, gappy, _ = runs
    reference = _run(gappy, chunk_steps=40)  # the whole run in one block
    result = _run(gappy, chunk_steps=chunk_steps)
    pd.testing.assert_frame_equal(
        result.waterbodies.drop(columns="geometry"),
        reference.waterbodies.drop(columns="geometry"),
        check_exact=True,
    )
    pd.testing.assert_frame_equal(result.by_period, reference.by_period, check_exact=True)
    for name in ("evaporation_rate", "precipitation_rate"):
        np.testing.assert_array_equal(
            result.series[name].values, reference.series[name].values, strict=True
        )
    assert result.provenance["climate_gaps"] == reference.provenance["climate_gaps"]
    assert result.provenance["counts"] == reference.provenance["counts"]


@shows_warnings
def test_short_gaps_are_linear_between_the_neighbours(runs):
    _, gappy, clean = runs
    result, truth = _run(gappy, chunk_steps=4), _run(clean, chunk_steps=4)
    # (time, body) zonal mean rain [mm day-1]
    rain = result.series["precipitation_rate"].transpose("time", "waterbody").values
    true_rain = truth.series["precipitation_rate"].transpose("time", "waterbody").values
    for step in (6, 7, 8):  # between the valid days 5 and 9
        expected = true_rain[5] + (true_rain[9] - true_rain[5]) * (step - 5) / 4
        np.testing.assert_allclose(rain[step], expected, rtol=1e-6)
    np.testing.assert_array_equal(rain[:6], true_rain[:6])
    np.testing.assert_array_equal(rain[9:], true_rain[9:])


@shows_warnings
def test_gaps_are_flagged_counted_and_warned(runs):
    _, gappy, _ = runs
    with pytest.warns(Warning) as seen:
        result = _run(gappy, chunk_steps=7)
    bodies = result.waterbodies.set_index("pond_id")
    n = len(bodies)
    gaps = result.provenance["climate_gaps"]
    assert gaps["max_gap_steps"] == 3
    assert gaps["filled"]["precipitation"] == {
        "steps": 3,
        "values": 3 * n,
        "dates": "2031-01-07..2031-01-09",
    }
    net = gaps["filled"]["surface_net_downward_radiative_flux"]
    # Day 11 for every body; day 31 only for the bodies wholly on the western half.
    assert net["dates"] == "2031-01-11, 2031-01-31"
    assert n + 1 <= net["values"] < 2 * n
    assert gaps["not_filled"]["air_temperature"] == {
        "steps": 5,
        "bodies": n,
        "dates": "2031-01-21..2031-01-25",
    }
    assert gaps["not_filled"]["relative_humidity"]["dates"] == "2031-01-01"
    # Every body: January has no total (long gaps), nor has the run; February is complete.
    january = result.by_period[result.by_period["period_start"] == "2031-01-01"]
    february = result.by_period[result.by_period["period_start"] == "2031-02-01"]
    assert january["evap_mm"].isna().all() and february["evap_mm"].notna().all()
    assert bodies["evap_mm"].isna().all()
    assert bodies["loss_rank"].isna().all()
    for flags in bodies["qa_flags"]:
        assert {"climate_gaps", "climate_gaps_filled"} <= set(flags.split(";"))
    counts = result.provenance["counts"]
    assert counts["qa_flags"]["climate_gaps"] == n
    assert counts["qa_flags"]["climate_gaps_filled"] == n
    assert counts["without_result"] == n and counts["without_any_result"] == 0
    # Filled steps per body: 3 of rain, 1 or 2 of net radiation (the same day counts once).
    assert counts["filled_climate_steps"] == 3 * n + net["values"]
    texts = [str(w.message) for w in seen]
    assert any("air_temperature is missing for 13 water bodies" in t for t in texts)
    assert any("2031-01-21..2031-01-25" in t for t in texts)
    assert all(t in result.provenance["warnings"] for t in texts if "is missing" in t)


@shows_warnings
def test_max_gap_steps_zero_fills_nothing(runs, tmp_path):
    _, gappy, _ = runs
    result = run_stages(load_config({**gappy, "checks": {"max_gap_steps": 0}}), series=False)
    gaps = result.provenance["climate_gaps"]
    assert gaps["filled"] == {} and gaps["max_gap_steps"] == 0
    assert gaps["not_filled"]["precipitation"]["dates"] == "2031-01-07..2031-01-09"
    assert result.provenance["counts"]["filled_climate_steps"] == 0


def test_negative_max_gap_steps_is_refused(runs):
    from lakeloss.errors import ConfigError

    _, gappy, _ = runs
    with pytest.raises(ConfigError, match="max_gap_steps"):
        load_config({**gappy, "checks": {"max_gap_steps": -1}})


@shows_warnings
def test_monthly_data_is_not_filled_by_default(tmp_path):
    months = pd.date_range("2031-01-01", periods=6, freq="MS")
    weather = {k: np.array(v[:6]) for k, v in _weather().items()}
    weather["tas"][2] = np.nan
    fields = {k: (v, *UNITS[k]) for k, v in weather.items()}
    pond_layer().to_file(tmp_path / "ponds.gpkg", layer="ponds", driver="GPKG")
    climate = write_netcdf(climate_dataset(months, fields), tmp_path / "monthly.nc")
    config = case_config(
        tmp_path / "ponds.gpkg", climate, tmp_path / "out", "energy_balance", CLIMATE
    )
    result = run_stages(load_config(config), series=False)
    assert result.provenance["climate_gaps"]["max_gap_steps"] == 0
    assert result.provenance["climate_gaps"]["not_filled"]["air_temperature"]["dates"] == (
        "2031-03-01"
    )
    march = result.by_period[result.by_period["period_start"] == "2031-03-01"]
    assert march["evap_mm"].isna().all()
    assert result.by_period["evap_mm"].notna().sum() == 5 * len(result.waterbodies)
    json.dumps(result.provenance["climate_gaps"])  # plain JSON


def test_a_step_has_the_same_zonal_means_in_any_block(runs):
    # A block holding a gap day (or a day missing on part of the grid) must not change the
    # zonal means of its other days: each day's means are computed with the weights
    # renormalised for that day's own missing cells, never for the block's.
    from lakeloss.blocks import extract_block
    from lakeloss.pipeline import block_context, build_weights, load_inputs

    _, gappy, _ = runs
    config = load_config(gappy)
    inputs = load_inputs(config, whole_layer=True)
    weights, _ = build_weights(config, inputs)
    context = block_context(config, inputs)
    whole = extract_block(context, weights, slice(0, 40))[0]
    for step in (9, 11, 29, 31):  # beside the whole-grid and the half-grid gap days
        alone = extract_block(context, weights, slice(step, step + 1))[0]
        for name, values in alone.items():
            np.testing.assert_array_equal(values[0], whole[name][step], strict=True)


@shows_warnings
def test_a_local_cluster_fills_the_same(runs):
    # Two real worker processes, blocks of 7 steps: the gaps across block boundaries are
    # filled on workers that each read their own halo.
    _, gappy, _ = runs
    reference = _run(gappy, chunk_steps=40)
    result = _run(gappy, chunk_steps=7, workers=2)
    pd.testing.assert_frame_equal(
        result.waterbodies.drop(columns="geometry"),
        reference.waterbodies.drop(columns="geometry"),
        check_exact=True,
    )
    pd.testing.assert_frame_equal(result.by_period, reference.by_period, check_exact=True)
    assert result.provenance["climate_gaps"] == reference.provenance["climate_gaps"]
