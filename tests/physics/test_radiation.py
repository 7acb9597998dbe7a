"""Radiation against FAO-56 worked examples and the refet 0.5.0 oracle.

The functions return daily-mean fluxes in W m-2; FAO-56 prints daily totals in MJ m-2 day-1, so each
check converts with w_m2_to_mj_m2_day (x 0.0864). FAO-56 example values are the published ones,
each also matched by recomputation (docs/methods.md#fao-56-worked-examples).
"""

import numpy as np
import pytest
import refet
import refet.calcs as refet_calcs

from lakeloss.physics import atmosphere as atm
from lakeloss.physics import radiation as rad

MJ = rad.w_m2_to_mj_m2_day
W = rad.mj_m2_day_to_w_m2
KPA = 1000.0


def test_unit_conversions():
    # docs/methods.md#units-and-conventions: W m-2 x 0.0864 = MJ m-2 day-1, and back.
    assert MJ(1.0) == pytest.approx(0.0864, rel=1e-12)
    values = np.linspace(-100.0, 500.0, 13)
    np.testing.assert_allclose(W(MJ(values)), values, rtol=1e-12)
    # FAO-56 Gsc = 0.0820 MJ m-2 min-1 is 1366.7 W m-2.
    assert rad.SOLAR_CONSTANT == pytest.approx(1366.67, abs=0.01)


def test_fao56_examples_8_and_9_extraterrestrial_radiation():
    # FAO-56 Ex. 8/9: 20 degS, J 246 (3 September) -> dr 0.985, delta 0.120 rad,
    # omega_s 1.527 rad, Ra 32.2 MJ m-2 day-1, N 11.7 h.
    assert rad.inverse_relative_distance(246) == pytest.approx(0.985, abs=5e-4)
    assert rad.solar_declination(246) == pytest.approx(0.120, abs=5e-4)
    assert rad.sunset_hour_angle(-20.0, 246) == pytest.approx(1.527, abs=5e-4)
    assert MJ(rad.extraterrestrial_radiation(-20.0, 246)) == pytest.approx(32.2, abs=0.05)
    assert rad.daylight_hours(-20.0, 246) == pytest.approx(11.7, abs=0.05)


def test_fao56_example10_solar_radiation_from_sunshine():
    # FAO-56 Ex. 10: 22 deg 54' S, J 135 (15 May), n 7.1 h -> Ra 25.1, N 10.9, Rs 14.5.
    # Rs tolerance 0.051: FAO rounds Ra and N before multiplying (docs/methods.md#check-values).
    latitude = -(22.0 + 54.0 / 60.0)
    ra = rad.extraterrestrial_radiation(latitude, 135)
    n_max = rad.daylight_hours(latitude, 135)
    assert MJ(ra) == pytest.approx(25.1, abs=0.05)
    assert n_max == pytest.approx(10.9, abs=0.05)
    assert MJ(rad.solar_radiation_from_sunshine(ra, 7.1, n_max)) == pytest.approx(14.5, abs=0.051)


def test_fao56_example11_net_longwave():
    # FAO-56 Ex. 11: Tmax 25.1, Tmin 19.1 degC, ea 2.1 kPa, Rs 14.5, Rso 18.8 -> Rnl 3.5.
    rnl = rad.net_longwave_radiation(25.1, 19.1, 2.1 * KPA, W(14.5), W(18.8))
    assert MJ(rnl) == pytest.approx(3.5, abs=0.05)


def test_fao56_example12_net_radiation_grass_albedo():
    # FAO-56 Ex. 12: Rs 14.5, albedo 0.23 -> Rns 11.1 (as printed; 11.165 exactly, hence +-0.1), Rnl
    # 3.5 (Ex. 11) -> Rn 7.6 (+-0.06, FAO's rounding cascade; docs/methods.md#check-values).
    rns = rad.net_shortwave_radiation(W(14.5), 0.23)
    assert MJ(rns) == pytest.approx(11.1, abs=0.1)
    rn = rad.net_radiation(W(14.5), 25.1, 19.1, 2.1 * KPA, W(18.8), 0.23)
    assert MJ(rn) == pytest.approx(7.6, abs=0.06)


def test_fao56_example15_hargreaves():
    # FAO-56 Ex. 15: Ra 40.6, Tmax 26.6, Tmin 14.8 degC, kRs 0.16 -> Rs 22.3.
    rs = rad.solar_radiation_from_temperature(W(40.6), 26.6, 14.8, 0.16)
    assert MJ(rs) == pytest.approx(22.3, abs=0.05)


def test_fao56_example17_radiation_chain():
    # FAO-56 Ex. 17: 13 deg 44' N, z 2 m, J 105, Tmax 34.8, Tmin 25.6, ea 2.85 kPa, n 8.5 h ->
    # Ra 38.06, N 12.31, Rs 22.65, Rso 28.54, Rnl 3.11, Rn 14.33 (grass albedo 0.23).
    latitude = 13.0 + 44.0 / 60.0
    ra = rad.extraterrestrial_radiation(latitude, 105)
    n_max = rad.daylight_hours(latitude, 105)
    rs = rad.solar_radiation_from_sunshine(ra, 8.5, n_max)
    rso = rad.clear_sky_radiation(ra, 2.0)
    assert MJ(ra) == pytest.approx(38.06, abs=5e-3)
    assert n_max == pytest.approx(12.31, abs=5e-3)
    assert MJ(rs) == pytest.approx(22.65, abs=5e-3)
    # Rso recomputed 28.545 sits on the rounding edge of the printed 28.54.
    assert MJ(rso) == pytest.approx(28.54, abs=6e-3)
    # From the printed intermediates (docs/methods.md#fao-56-worked-examples recomputes 3.109 and
    # 14.333).
    rnl = rad.net_longwave_radiation(34.8, 25.6, 2.85 * KPA, W(22.65), W(28.54))
    assert MJ(rnl) == pytest.approx(3.11, abs=5e-3)
    rn = rad.net_radiation(W(22.65), 34.8, 25.6, 2.85 * KPA, W(28.54), 0.23)
    assert MJ(rn) == pytest.approx(14.33, abs=6e-3)


def test_fao56_example18_radiation_chain():
    # FAO-56 Ex. 18: 50 deg 48' N, z 100 m, J 187, n 9.25 h, Tmax 21.5, Tmin 12.3, ea 1.409 ->
    # Ra 41.09, N 16.1, Rs 22.07, Rso 30.90, Rnl 3.71, Rn 13.28 (albedo 0.23).
    latitude = 50.0 + 48.0 / 60.0
    ra = rad.extraterrestrial_radiation(latitude, 187)
    n_max = rad.daylight_hours(latitude, 187)
    rs = rad.solar_radiation_from_sunshine(ra, 9.25, n_max)
    rso = rad.clear_sky_radiation(ra, 100.0)
    ea = atm.vapour_pressure_from_daily_relative_humidity(21.5, 12.3, 84.0, 63.0)
    assert MJ(ra) == pytest.approx(41.09, abs=5e-3)
    assert n_max == pytest.approx(16.1, abs=0.05)
    assert MJ(rs) == pytest.approx(22.07, abs=5e-3)
    assert MJ(rso) == pytest.approx(30.90, abs=5e-3)
    assert MJ(rad.net_longwave_radiation(21.5, 12.3, ea, rs, rso)) == pytest.approx(3.71, abs=5e-3)
    assert MJ(rad.net_radiation(rs, 21.5, 12.3, ea, rso, 0.23)) == pytest.approx(13.28, abs=6e-3)
    # Open-water albedo 0.08 (docs/methods.md#open-water-regression, recomputed only): Rn 16.594.
    assert MJ(rad.net_radiation(rs, 21.5, 12.3, ea, rso)) == pytest.approx(16.594, rel=1e-3)


def _fao56_reference_et(rn_mj, tmean, u2, es, ea, slope_kpa, gamma_kpa):
    """FAO-56 eq. 6 grass reference ET [mm day-1] (test-only; checks the supporting chain)."""
    numerator = 0.408 * slope_kpa * rn_mj + gamma_kpa * 900.0 / (tmean + 273.0) * u2 * (es - ea)
    return numerator / (slope_kpa + gamma_kpa * (1.0 + 0.34 * u2))


def test_fao56_example18_reference_et_chain_and_refet():
    # FAO-56 Ex. 18 ETo 3.9 mm/day (printed; recomputed 3.880 in
    # docs/methods.md#fao-56-worked-examples), and refet's Daily.eto gives 3.880
    # (docs/methods.md#reference-libraries). This exercises eqs. 7, 8, 12, 13, 17, 21-25, 35, 37, 39
    # and 47 together.
    latitude = 50.0 + 48.0 / 60.0
    ra = rad.extraterrestrial_radiation(latitude, 187)
    rs = rad.solar_radiation_from_sunshine(ra, 9.25, rad.daylight_hours(latitude, 187))
    ea = atm.vapour_pressure_from_daily_relative_humidity(21.5, 12.3, 84.0, 63.0)
    rn = rad.net_radiation(rs, 21.5, 12.3, ea, rad.clear_sky_radiation(ra, 100.0), 0.23)
    u2 = atm.wind_speed_fao56_profile(10.0 / 3.6, 10.0)
    es = atm.daily_saturation_vapour_pressure(21.5, 12.3)
    gamma = atm.psychrometric_constant(atm.pressure_from_elevation(100.0))
    slope = atm.saturation_vapour_pressure_slope(16.9)
    eto = _fao56_reference_et(MJ(rn), 16.9, u2, es / KPA, ea / KPA, slope / KPA, gamma / KPA)
    assert eto == pytest.approx(3.9, abs=0.05)
    # refet.Daily takes latitude in degrees (it converts to radians itself).
    oracle = refet.Daily(tmin=12.3, tmax=21.5, rs=MJ(rs), uz=10.0 / 3.6, zw=10.0, elev=100.0,
                         lat=latitude, doy=187, ea=ea / KPA, method="asce").eto()  # fmt: skip
    # refet's sigma 4.901e-9 and T + 273.16 move Rnl by ~0.0015 MJ
    # (docs/methods.md#reference-libraries).
    assert eto == pytest.approx(float(np.squeeze(oracle)), abs=2e-3)


# ---------------------------------------------------------------------------------------
# refet 0.5.0 oracle over grids of latitude, day of year and weather
# ---------------------------------------------------------------------------------------

LATITUDES, DAYS = np.meshgrid(np.linspace(-66.0, 66.0, 23), np.arange(1, 366, 7))


def test_refet_extraterrestrial_radiation_grid():
    oracle = refet_calcs.ra_daily(np.deg2rad(LATITUDES), DAYS, method="asce")
    np.testing.assert_allclose(MJ(rad.extraterrestrial_radiation(LATITUDES, DAYS)), oracle,
                               rtol=1e-12, atol=1e-12)  # fmt: skip


def test_refet_clear_sky_grid():
    ra = rad.extraterrestrial_radiation(LATITUDES, DAYS)
    for elevation in (0.0, 750.0, 2500.0):
        oracle = refet_calcs.rso_simple(MJ(ra), elevation)
        np.testing.assert_allclose(MJ(rad.clear_sky_radiation(ra, elevation)), oracle, rtol=1e-12)


def test_refet_net_longwave_grid():
    t_min, spread, ea, ratio = np.meshgrid(
        np.linspace(-5.0, 30.0, 8), np.linspace(2.0, 18.0, 5), np.linspace(0.3, 4.0, 6),
        np.linspace(0.1, 1.2, 7),
    )  # fmt: skip
    t_max = t_min + spread
    rso = np.full_like(t_min, 25.0)  # MJ m-2 day-1
    rs = ratio * rso
    oracle = refet_calcs.rnl_daily(t_max, t_min, ea, refet_calcs.fcd_daily(rs, rso))
    mine = MJ(rad.net_longwave_radiation(t_max, t_min, ea * KPA, W(rs), W(rso)))
    # sigma 4.903e-9 vs 4.901e-9 (+4.1e-4) and 273.15 vs 273.16 (-1.4e-4)
    # (docs/methods.md#reference-libraries).
    np.testing.assert_allclose(mine, oracle, rtol=5e-4)


def test_polar_night_and_day():
    # Polar night: Ra = 0, N = 0; polar day: N = 24 h. No warnings, no NaN.
    with np.errstate(all="raise"):
        assert MJ(rad.extraterrestrial_radiation(80.0, 355)) == pytest.approx(0.0, abs=1e-9)
        assert rad.daylight_hours(80.0, 355) == pytest.approx(0.0, abs=1e-9)
        assert rad.daylight_hours(80.0, 172) == pytest.approx(24.0, abs=1e-9)
        rnl = rad.net_longwave_radiation(-20.0, -30.0, 100.0, 0.0, 0.0)
    # Rso = 0 is treated as clear sky (ratio 1): the longwave loss stays positive and finite.
    assert np.isfinite(rnl) and rnl > 0


def test_relative_shortwave_limits_and_nan():
    ratio = rad.relative_shortwave_radiation(np.array([0.0, 50.0, 400.0, np.nan, 10.0]),
                                             np.array([100.0, 100.0, 100.0, 100.0, np.nan]))  # fmt: skip
    np.testing.assert_allclose(ratio[:3], [0.3, 0.5, 1.0])
    assert np.isnan(ratio[3:]).all()


def test_net_radiation_can_be_negative():
    # A clear, dry midwinter day at 60 degN: outgoing longwave exceeds absorbed shortwave.
    rso = rad.clear_sky_radiation(rad.extraterrestrial_radiation(60.0, 350))
    assert rad.net_radiation(rso, 2.0, -4.0, 300.0, rso) < 0
