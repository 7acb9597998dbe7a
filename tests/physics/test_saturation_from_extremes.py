"""Saturation vapour pressure when the mean and the daily extremes are both configured.

FAO-56 (Allen et al. 1998) eq. 12 averages e°(Tmax) and e°(Tmin); e° is convex, so e°(Tmean)
understates es and the vapour-pressure deficit. The extremes must win whenever both are
given, the mean temperature still setting Δ, λ and γ, and every method of a run must see the
same es and ea.

Sources: FAO-56 Examples 5 and 6 (published digits; the figures here are also recomputed
with eqs. 11, 12, 17 and 19 and agree with the printed ones to their last digit);
refet 0.5.0 (PyPI), whose daily ASCE-EWRI (2005) equations compute es by eq. 12, for one
invented site-year.
"""

import numpy as np
import pandas as pd
import pytest
import refet

from lakeloss.physics import atmosphere as atm
from lakeloss.physics import registry

# FAO-56 Example 5 weather: Tmin 18, Tmax 25 °C, RHmax 82 %, RHmin 54 %, mean RH 68 %.
EX5 = {
    "air_temperature_max": 25.0,
    "air_temperature_min": 18.0,
    "relative_humidity_max": 82.0,
    "relative_humidity_min": 54.0,
}


@pytest.mark.parametrize("with_mean", [False, True])
def test_fao56_example6_deficit(with_mean):
    # FAO-56 Example 6 (vapour pressure deficit, from Example 5's data): es = (3.168 +
    # 2.064)/2 = 2.616 kPa, ea = 1.70 kPa (eq. 17), es - ea = 0.91 kPa
    # (recomputed 2.6159, 1.7015, 0.9144). A configured mean temperature (21.5 °C) must not
    # replace eq. 12: e°(21.5) = 2.564 kPa would give a deficit of 0.86 kPa.
    inputs = {**EX5, "air_temperature": 21.5} if with_mean else dict(EX5)
    es, ea = registry.vapour_pressures(inputs)
    assert es / 1000.0 == pytest.approx(2.616, abs=5e-4)
    assert ea / 1000.0 == pytest.approx(1.70, abs=5e-3)
    assert (es - ea) / 1000.0 == pytest.approx(0.91, abs=5e-3)


def test_fao56_example5_mean_relative_humidity_uses_eq12():
    # FAO-56 Example 5, eq. 19: ea = RHmean/100 * es with es from eq. 12 = 0.68 * 2.616 =
    # 1.78 kPa (recomputed 1.7788), also when a mean temperature is configured.
    inputs = {
        "air_temperature": 21.5,
        "air_temperature_max": 25.0,
        "air_temperature_min": 18.0,
        "relative_humidity": 68.0,
    }
    _, ea = registry.vapour_pressures(inputs)
    assert ea / 1000.0 == pytest.approx(1.78, abs=5e-3)


def test_mean_temperature_alone_uses_e0_of_mean():
    es, _ = registry.vapour_pressures({"air_temperature": 21.5, "relative_humidity": 68.0})
    assert es == pytest.approx(atm.saturation_vapour_pressure(21.5), rel=1e-12)


# A hot, dry day of the demo's climate with a wide diurnal range (Tmax 35, Tmin 15 °C).
HOT_DAY = {
    "air_temperature_max": 35.0,
    "air_temperature_min": 15.0,
    "relative_humidity": 40.0,
    "wind_speed": 3.0,
    "surface_downwelling_shortwave_flux_in_air": 310.0,
    "latitude": -30.5,
    "day_of_year": 15,
    "area_m2": 5.0e3,
}


@pytest.mark.parametrize("name", [n for n in registry.method_names() if n != "pan_coefficient"])
def test_adding_the_mean_temperature_changes_no_vapour_pressure(name):
    # With the mean equal to (Tmax + Tmin)/2, configuring it as well changes nothing: the
    # mean already set Δ, λ and γ, and es stays eq. 12. Before the fix the methods that
    # use es moved by up to 6 % here, and the methods of one run disagreed on es.
    extremes_only = registry.evaporate(name, HOT_DAY)
    with_mean = registry.evaporate(name, {**HOT_DAY, "air_temperature": 25.0})
    assert with_mean == pytest.approx(extremes_only, rel=1e-12)


def test_every_method_of_a_run_sees_the_same_vapour_pressures():
    # energy_balance reads ea only for the longwave term, by a different code path from the
    # turbulent methods; with a mean temperature configured both must use eq. 12.
    inputs = {**HOT_DAY, "air_temperature": 24.0}
    es, ea = registry.vapour_pressures(inputs)
    assert es == pytest.approx(atm.daily_saturation_vapour_pressure(35.0, 15.0), rel=1e-12)
    assert ea == pytest.approx(0.40 * es, rel=1e-12)
    without_humidity_path = registry.evaporate("energy_balance", inputs)
    with_given_ea = registry.evaporate(
        "energy_balance",
        {
            **{k: v for k, v in inputs.items() if k != "relative_humidity"},
            "water_vapor_partial_pressure_in_air": ea,
        },
    )
    assert without_humidity_path == pytest.approx(with_given_ea, rel=1e-12)


def _site_year():
    """An invented inland site at 420 m, one year of daily weather (seeded, southern seasons)."""
    rng = np.random.default_rng(2031)
    days = pd.date_range("2031-01-01", "2031-12-31", freq="D")
    phase = 2.0 * np.pi * (days.day_of_year.to_numpy() - 15) / 365.0
    t_mean = 17.0 + 8.0 * np.cos(phase) + rng.normal(0.0, 2.0, len(days))
    diurnal_range = 13.0 + 3.0 * np.cos(phase) + rng.normal(0.0, 2.0, len(days))
    t_min = t_mean - diurnal_range / 2.0
    return pd.DataFrame(
        {
            "tmax": t_mean + diurnal_range / 2.0,
            "tmin": t_min,
            "tmean": t_mean,
            # below Tmin (dry air; refet clips a negative deficit to 0, lakeloss keeps it)
            "tdew": t_min
            - 1.0
            - 3.0 * np.cos(phase) ** 2
            - np.abs(rng.normal(0.0, 3.0, len(days))),
            "wind_2m": rng.gamma(4.0, 0.6, len(days)),
            "rn_w_m2": 110.0 + 80.0 * np.cos(phase) + rng.normal(0.0, 20.0, len(days)),
        },
        index=days,
    )


SITE_ELEVATION = 420.0


def _site_inputs(site):
    return {
        "air_temperature": site["tmean"].to_numpy(),
        "air_temperature_max": site["tmax"].to_numpy(),
        "air_temperature_min": site["tmin"].to_numpy(),
        "dew_point_temperature": site["tdew"].to_numpy(),
        "wind_speed": site["wind_2m"].to_numpy(),
        "surface_net_downward_radiative_flux": site["rn_w_m2"].to_numpy(),
        "elevation": SITE_ELEVATION,
    }


def _refet_day(site):
    # refet 0.5.0 (PyPI), the ASCE-EWRI (2005) daily equations: es = [e°(Tmax) + e°(Tmin)]/2,
    # ea = e°(Tdew), vpd, Δ at (Tmax + Tmin)/2, P by eq. 7 and γ = 0.000665 P, u2 by eq. 47.
    return refet.Daily(
        tmin=site["tmin"].to_numpy(),
        tmax=site["tmax"].to_numpy(),
        tdew=site["tdew"].to_numpy(),
        rs=np.full(len(site), 20.0),  # not used here: net radiation is given
        uz=site["wind_2m"].to_numpy(),
        zw=2.0,
        elev=SITE_ELEVATION,
        lat=-31.0,
        doy=site.index.day_of_year.to_numpy(),
        method="asce",
    )


def test_vapour_pressures_match_refet_over_a_site_year():
    # With the mean temperature configured as well, es and the deficit are refet's, day by day.
    site = _site_year()
    day = _refet_day(site)
    es, ea = registry.vapour_pressures(_site_inputs(site))
    np.testing.assert_allclose(es / 1000.0, day.es, rtol=1e-12)
    np.testing.assert_allclose((es - ea) / 1000.0, day.vpd, rtol=1e-12)


def test_penman_open_water_matches_a_site_year_built_on_refet():
    # Shuttleworth's (1993) eq. 4.2.30, E = [Δ (Rn - G) + γ 6.43 (1 + 0.536 u2) D] /
    # [λ (Δ + γ)] (MJ m-2 day-1, kPa, MJ kg-1), evaluated here on refet's es, vpd, Δ, γ and u2
    # with λ from FAO-56 Annex 3 eq. 3-1. Left different: lakeloss's γ = cp P/(0.622 λ(T))
    # (0.2 % from 0.000665 P) and λ(T) of Chow et al. (1988) eq. 2.7.6 (0.01 %). Measured:
    # annual totals 0.05 % apart, days at most 0.023 mm. The code before the fix (e°(Tmean)
    # whenever air_temperature was given) put the annual total 6.4 % low.
    # pyet 1.4.0's penman is checked in the next test.
    site = _site_year()
    ours = registry.evaporate(
        "penman_open_water",
        _site_inputs(site),
        {"wind_height_m": 2.0, "wind_profile": "fao56"},
    )
    day = _refet_day(site)
    latent_heat = 2.501 - 0.002361 * site["tmean"].to_numpy()  # MJ kg-1
    net_radiation = site["rn_w_m2"].to_numpy() * 0.0864  # MJ m-2 day-1
    wind_term = day.psy * 6.43 * (1.0 + 0.536 * day.u2) * day.vpd
    reference = (day.es_slope * net_radiation + wind_term) / (
        latent_heat * (day.es_slope + day.psy)
    )
    assert ours.sum() == pytest.approx(reference.sum(), rel=2e-3)
    np.testing.assert_allclose(ours, reference, rtol=1e-2, atol=0.02)


def test_penman_open_water_matches_pyet_over_a_site_year():
    # pyet 1.4.0 (PyPI; 1.5 requires pandas < 3), penman(): PET = [Δ (Rn - G)/λ + γ fu (es - ea)]
    # / (Δ + γ) with es by FAO-56 eq. 12 from Tmax and Tmin. With fu = 6.43 (1 + 0.536 u2) / λ it
    # is Shuttleworth's (1993) eq. 4.2.30. Left different: pyet's γ = 0.000665 P against
    # cp P / (0.622 λ) here (0.2 %), so the annual totals agree to 0.05 % and days to 1 %. The
    # code before the eq. 12 fix was 6 % low against it.
    import pyet  # test extra, pinned to 1.4.0

    site = _site_year()
    ours = registry.evaporate(
        "penman_open_water",
        _site_inputs(site),
        {"wind_height_m": 2.0, "wind_profile": "fao56"},
    )
    latent_heat = 2.501 - 0.002361 * site["tmean"]  # MJ kg-1, as pyet computes it
    reference = pyet.penman(
        site["tmean"],
        site["wind_2m"],
        rn=site["rn_w_m2"] * 0.0864,
        tmax=site["tmax"],
        tmin=site["tmin"],
        ea=0.6108 * np.exp(17.27 * site["tdew"] / (site["tdew"] + 237.3)),  # FAO-56 eq. 14
        elevation=SITE_ELEVATION,
        aw=6.43 / latent_heat,
        bw=6.43 * 0.536 / latent_heat,
        clip_zero=False,
    ).to_numpy()
    assert ours.sum() == pytest.approx(reference.sum(), rel=1e-3)
    np.testing.assert_allclose(ours, reference, rtol=1e-2, atol=0.02)
