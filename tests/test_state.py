"""State carried through time: the stateful-method interface and its runs.

The test method ``relaxation_check`` relaxes a rate r towards the penman_open_water rate E
with a time constant tau: dr/dt = (E - r) / tau. With E constant, r(t) = E + (r0 - E)
exp(-t / tau) (the solution of a linear first-order equation with constant forcing, e.g.
Boyce & DiPrima, Elementary Differential Equations, section 2.1), so its total over N days is
E N + (r0 - E) tau (1 - exp(-N / tau)): the closed form every run below is compared with.
The runs use real NetCDF files and GeoPackage layers, cut into any blocks of time steps, run
on threads or on a local dask cluster, and must give the same bits.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from builders import CHOW_CLIMATE, CHOW_FIELDS

from lakeloss.errors import UnknownMethodError
from lakeloss.physics import registry
from lakeloss.physics.stateful import relaxation_step
from lakeloss.pipeline import run_stages


def _forcing(steps: int, bodies: int) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(7)
    shape = (steps, bodies)
    return {
        "air_temperature": 15.0 + 10.0 * rng.random(shape),
        "relative_humidity": 30.0 + 50.0 * rng.random(shape),
        "wind_speed": 0.5 + 5.0 * rng.random(shape),
        "surface_net_downward_radiative_flux": 50.0 + 150.0 * rng.random(shape),
        "step_days": np.ones((steps, 1)),
    }


def test_relaxation_matches_the_closed_form():
    tau, n, e, r0 = 4.0, 30, 6.0, 1.5
    means, end = relaxation_step(np.array([r0]), np.full((n, 1), e), np.ones((n, 1)), tau, 1.0)
    total = e * n + (r0 - e) * tau * (1.0 - math.exp(-n / tau))
    assert means.sum() == pytest.approx(total, rel=1e-12)
    assert end[0] == pytest.approx(e + (r0 - e) * math.exp(-n / tau), rel=1e-12)


def test_relaxation_over_monthly_steps_uses_the_step_length():
    # One step of 31 days equals 31 daily steps in total: the solution is exact per step.
    tau, e = 10.0, 4.0
    daily, _ = relaxation_step(np.array([0.0]), np.full((31, 1), e), np.ones((31, 1)), tau, 1.0)
    month, _ = relaxation_step(np.array([0.0]), np.full((1, 1), e), np.full((1, 1), 31.0), tau, 1.0)
    assert month[0, 0] * 31.0 == pytest.approx(daily.sum(), rel=1e-12)


def test_a_missing_step_keeps_the_state_and_an_unstarted_body_starts_at_its_first_target():
    target = np.array([[np.nan, 2.0], [5.0, np.nan], [5.0, 2.0]])
    means, end = relaxation_step(np.array([np.nan, 1.0]), target, np.ones((3, 1)), 2.0, 0.5)
    assert np.isnan(means[0, 0]) and np.isnan(means[1, 1])
    # body 0 starts at 0.5 x 5 at step 1; body 1 holds its state over the missing step
    decay = math.exp(-0.5)
    r1 = 5.0 + (2.5 - 5.0) * decay
    assert end[0] == pytest.approx(5.0 + (r1 - 5.0) * decay)
    after_first = 2.0 + (1.0 - 2.0) * decay
    assert end[1] == pytest.approx(2.0 + (after_first - 2.0) * decay)


@pytest.mark.parametrize("cut", [1, 5, 17, 29])
def test_advancing_in_two_calls_gives_the_same_bits_as_one(cut):
    forcing = _forcing(30, 9)
    params = {"relaxation_days": 3.0, "relaxation_start_fraction": 0.2}
    start = registry.initial_state("relaxation_check", {}, params, 9)
    whole, end = registry.advance("relaxation_check", start, forcing, params)
    head = {k: v[:cut] for k, v in forcing.items()}
    tail = {k: v[cut:] for k, v in forcing.items()}
    first, middle = registry.advance("relaxation_check", start, head, params)
    second, end2 = registry.advance("relaxation_check", middle, tail, params)
    np.testing.assert_array_equal(np.concatenate([first, second]), whole)
    np.testing.assert_array_equal(end2["rate"], end["rate"])
    assert np.isnan(start["rate"]).all()  # the input state is not modified


def test_the_registry_records_which_methods_carry_state():
    assert registry.carries_state("relaxation_check")
    assert not any(registry.carries_state(name) for name in registry.method_names())
    assert "relaxation_check" not in registry.method_names()  # a test method, not offered
    with pytest.raises(UnknownMethodError) as err:
        registry.get("relaxation_chek")
    assert "relaxation_check" not in str(err.value).split("expected one of:")[1]


# --------------------------------------------------------------------------- runs


TAU = 6.0
N_DAYS = 59  # January and February 2031


@pytest.fixture
def relaxed(make_case):
    def make(compare=(), **sections):
        config = make_case(
            "relaxation_check",
            CHOW_FIELDS,
            CHOW_CLIMATE,
            parameters={"relaxation_days": TAU, "relaxation_start_fraction": 0.0},
            **sections,
        )
        config["method"]["compare"] = list(compare)
        return config

    return make


def _by_period(result) -> pd.DataFrame:
    return result.by_period.reset_index()


def test_a_run_with_constant_climate_follows_the_closed_form(relaxed):
    # Constant Chow conditions: E is the same every day, r starts at 0.
    config = relaxed(compare=["penman_open_water"])
    result = run_stages(config)
    table = _by_period(result)
    e = table["evap_mm_penman_open_water"].iloc[0] / 31.0  # the constant target [mm/day]
    assert np.isfinite(e) and e > 0
    first = table.groupby("period_label", sort=False)["evap_mm"].first()
    jan = e * 31 - e * TAU * (1.0 - math.exp(-31 / TAU))
    both = e * N_DAYS - e * TAU * (1.0 - math.exp(-N_DAYS / TAU))
    assert first.iloc[0] == pytest.approx(jan, rel=1e-9)
    assert first.iloc[0] + first.iloc[1] == pytest.approx(both, rel=1e-9)


def _numbers(result) -> pd.DataFrame:
    return _by_period(result)[["evap_mm", "evap_m3", "net_mm", "net_m3"]]


@pytest.mark.parametrize("chunk_steps", [1, 4, 7, 30])
def test_state_is_carried_exactly_across_any_block_size(relaxed, chunk_steps):
    reference = run_stages(relaxed(compute={"chunk_steps": 59}))
    result = run_stages(relaxed(compute={"chunk_steps": chunk_steps}))
    pd.testing.assert_frame_equal(_numbers(result), _numbers(reference), check_exact=True)


def test_a_local_cluster_carries_the_state_the_same(relaxed):
    # Two real worker processes, blocks of 7 steps: each block's physics waits for the
    # state its predecessor left, on whichever worker that ran.
    reference = run_stages(relaxed(compute={"chunk_steps": 59}))
    result = run_stages(relaxed(compute={"chunk_steps": 7, "workers": 2}))
    pd.testing.assert_frame_equal(_numbers(result), _numbers(reference), check_exact=True)
    pd.testing.assert_frame_equal(
        result.waterbodies.drop(columns="geometry"),
        reference.waterbodies.drop(columns="geometry"),
        check_exact=True,
    )
