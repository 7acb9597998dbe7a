"""`combination` and `penman_monteith_open_water` are one equation, written two ways.

Chow, Maidment & Mays (1988) §3.5 weight the energy-balance rate Er and the aerodynamic rate
Ea = B (es - ea) by Δ/(Δ+γ) and γ/(Δ+γ), with B = 0.622 k² ρa u2 / (P ρw ln²(z2/z0)).
FAO-56 eq. 3 (Allen et al. 1998) with rs = 0 and eq. 4's ra = ln²(z2/z0)/(k² u2) is
[Δ(Rn - G) + ρa cp D/ra] / [λ(Δ + γ)]. With γ = cp P/(0.622 λ) (FAO-56 eq. 8 with λ(T)),
γ Ea λ ρw = ρa cp D/ra, so the two agree to rounding; docs/methods.md says so. Only
`combination` reads a water-surface temperature (for Ea), and then they differ.
"""

import numpy as np
import pytest

from lakeloss.physics import registry


def _weather(n=200):
    rng = np.random.default_rng(7)
    return {
        "air_temperature": rng.uniform(-5.0, 38.0, n),
        "relative_humidity": rng.uniform(10.0, 100.0, n),
        "wind_speed": rng.uniform(0.0, 12.0, n),
        "surface_downwelling_shortwave_flux_in_air": rng.uniform(0.0, 350.0, n),
        "latitude": rng.uniform(-60.0, 60.0, n),
        "day_of_year": rng.integers(1, 366, n),
        "elevation": rng.uniform(0.0, 2500.0, n),
    }


@pytest.mark.parametrize(
    "params",
    [
        {},
        {"roughness_length_m": 0.001, "von_karman": 0.41, "wind_profile": "log"},
        {"wind_height_m": 2.0, "albedo": 0.05},
    ],
)
def test_combination_equals_penman_monteith_open_water(params):
    weather = _weather()
    combination = registry.evaporate("combination", weather, params)
    penman_monteith = registry.evaporate("penman_monteith_open_water", weather, params)
    np.testing.assert_allclose(combination, penman_monteith, rtol=1e-12, atol=1e-12)


def test_only_combination_reads_the_water_surface_temperature():
    weather = {**_weather(), "water_surface_temperature": 12.0}
    combination = registry.evaporate("combination", weather)
    penman_monteith = registry.evaporate("penman_monteith_open_water", weather)
    assert not np.allclose(combination, penman_monteith)
    without = {k: v for k, v in weather.items() if k != "water_surface_temperature"}
    np.testing.assert_allclose(
        penman_monteith, registry.evaporate("penman_monteith_open_water", without), rtol=0
    )
