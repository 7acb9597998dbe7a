"""Radiation over water: extraterrestrial, clear-sky, shortwave, longwave and net radiation.

Fluxes are daily-mean flux densities in W m-2 (SI inside, docs/methods.md#units-and-conventions);
FAO-56 publishes them as daily totals in MJ m-2 day-1, and :func:`w_m2_to_mj_m2_day` /
:func:`mj_m2_day_to_w_m2` convert between the two (1 W m-2 = 0.0864 MJ m-2 day-1). Latitude is in
degrees north, day of year is 1..366 (mid-step for multi-day steps). Pure, vectorised functions; NaN
in, NaN out.
"""

from __future__ import annotations

import numpy as np

from lakeloss.physics._types import ArrayLike
from lakeloss.physics.atmosphere import KELVIN_OFFSET

SECONDS_PER_DAY = 86400.0
"""Seconds in a day [s]."""

MJ_M2_DAY_PER_W_M2 = SECONDS_PER_DAY / 1.0e6
"""Daily total per daily-mean flux: 0.0864 MJ m-2 day-1 per W m-2."""

SOLAR_CONSTANT = 0.0820e6 / 60.0
"""Solar constant Gsc = 0.0820 MJ m-2 min-1 (FAO-56 eq. 21) in W m-2 (1366.7)."""

STEFAN_BOLTZMANN_FAO = 4.903e-9 * 1.0e6 / SECONDS_PER_DAY
"""FAO-56 σ = 4.903e-9 MJ K-4 m-2 day-1 in W m-2 K-4 (5.6748e-8). ASCE-EWRI writes 4.901e-9."""

WATER_ALBEDO = 0.08
"""Default shortwave albedo of open water [-], the value Shuttleworth (1993) gives for open
water (docs/methods.md#net-radiation-over-water).

Daily means of 0.05-0.07 are also in use (docs/methods.md#open-questions); the choice moves Rn
by about 2-3 % of Rs.
"""


def w_m2_to_mj_m2_day(flux: ArrayLike) -> ArrayLike:
    """Convert a daily-mean flux density to a daily total.

    Parameters
    ----------
    flux : array_like
        Daily-mean flux density. [W m-2]

    Returns
    -------
    array_like
        Daily total energy. [MJ m-2 day-1]
    """
    return flux * MJ_M2_DAY_PER_W_M2


def mj_m2_day_to_w_m2(energy: ArrayLike) -> ArrayLike:
    """Convert a daily total energy to a daily-mean flux density.

    Parameters
    ----------
    energy : array_like
        Daily total energy. [MJ m-2 day-1]

    Returns
    -------
    array_like
        Daily-mean flux density. [W m-2]
    """
    return energy / MJ_M2_DAY_PER_W_M2


def inverse_relative_distance(day_of_year: ArrayLike) -> ArrayLike:
    """Inverse relative Earth-Sun distance dr.

    Parameters
    ----------
    day_of_year : array_like
        Day of year J (1..366). [-]

    Returns
    -------
    array_like
        dr = 1 + 0.033 cos(2πJ/365). [-]

    References
    ----------
    Allen et al. (1998), FAO-56, eq. 23.
    """
    return 1.0 + 0.033 * np.cos(2.0 * np.pi * day_of_year / 365.0)  # Eq. 23


def solar_declination(day_of_year: ArrayLike) -> ArrayLike:
    """Solar declination δ.

    Parameters
    ----------
    day_of_year : array_like
        Day of year J (1..366). [-]

    Returns
    -------
    array_like
        δ = 0.409 sin(2πJ/365 - 1.39). [rad]

    References
    ----------
    Allen et al. (1998), FAO-56, eq. 24.
    """
    return 0.409 * np.sin(2.0 * np.pi * day_of_year / 365.0 - 1.39)  # Eq. 24


def sunset_hour_angle(latitude: ArrayLike, day_of_year: ArrayLike) -> ArrayLike:
    """Sunset hour angle ωs.

    Parameters
    ----------
    latitude : array_like
        Latitude, positive north. [degrees_north]
    day_of_year : array_like
        Day of year J (1..366). [-]

    Returns
    -------
    array_like
        ωs = arccos(-tan φ tan δ), with the argument limited to [-1, 1] so that polar day
        gives π and polar night 0. [rad]

    References
    ----------
    Allen et al. (1998), FAO-56, eq. 25.
    """
    phi = np.deg2rad(latitude)
    delta = solar_declination(day_of_year)
    with np.errstate(invalid="ignore"):
        return np.arccos(np.clip(-np.tan(phi) * np.tan(delta), -1.0, 1.0))  # Eq. 25


def daylight_hours(latitude: ArrayLike, day_of_year: ArrayLike) -> ArrayLike:
    """Maximum possible sunshine duration N.

    Parameters
    ----------
    latitude : array_like
        Latitude, positive north. [degrees_north]
    day_of_year : array_like
        Day of year J (1..366). [-]

    Returns
    -------
    array_like
        N = 24 ωs / π. [h]

    References
    ----------
    Allen et al. (1998), FAO-56, eq. 34.
    """
    return 24.0 / np.pi * sunset_hour_angle(latitude, day_of_year)  # Eq. 34


def extraterrestrial_radiation(latitude: ArrayLike, day_of_year: ArrayLike) -> ArrayLike:
    """Daily extraterrestrial radiation Ra as a daily-mean flux.

    Parameters
    ----------
    latitude : array_like
        Latitude, positive north. [degrees_north]
    day_of_year : array_like
        Day of year J (1..366). [-]

    Returns
    -------
    array_like
        Ra. [W m-2]

    Notes
    -----
    Ra = (24·60/π) Gsc dr [ωs sin φ sin δ + cos φ cos δ sin ωs]  (FAO-56 eq. 21, MJ m-2 day-1),
    here divided by 0.0864 so that Ra = (Gsc/π) dr [...] with Gsc in W m-2.

    References
    ----------
    Allen et al. (1998), FAO-56, eqs. 21-25.
    """
    phi = np.deg2rad(latitude)
    delta = solar_declination(day_of_year)
    omega = sunset_hour_angle(latitude, day_of_year)
    distance = inverse_relative_distance(day_of_year)
    return (  # Eq. 21
        SOLAR_CONSTANT
        / np.pi
        * distance
        * (omega * np.sin(phi) * np.sin(delta) + np.cos(phi) * np.cos(delta) * np.sin(omega))
    )


def clear_sky_radiation(
    extraterrestrial_radiation: ArrayLike, elevation: ArrayLike = 0.0
) -> ArrayLike:
    """Clear-sky shortwave radiation Rso from Ra and elevation.

    Parameters
    ----------
    extraterrestrial_radiation : array_like
        Ra. [W m-2]
    elevation : array_like, optional
        Elevation above sea level, z. [m]

    Returns
    -------
    array_like
        Rso = (0.75 + 2e-5 z) Ra. [W m-2]

    References
    ----------
    Allen et al. (1998), FAO-56, eq. 37.
    """
    return (0.75 + 2.0e-5 * elevation) * extraterrestrial_radiation  # Eq. 37


def solar_radiation_from_sunshine(
    extraterrestrial_radiation: ArrayLike,
    sunshine_hours: ArrayLike,
    daylight_hours: ArrayLike,
    angstrom_a: float = 0.25,
    angstrom_b: float = 0.50,
) -> ArrayLike:
    """Incoming shortwave radiation from sunshine duration (Ångström formula).

    Parameters
    ----------
    extraterrestrial_radiation : array_like
        Ra. [W m-2]
    sunshine_hours : array_like
        Actual sunshine duration n. [h]
    daylight_hours : array_like
        Maximum possible sunshine duration N. [h]
    angstrom_a, angstrom_b : float, optional
        Regression constants as, bs (FAO-56 defaults 0.25, 0.50). [-]

    Returns
    -------
    array_like
        Rs = (as + bs n/N) Ra. [W m-2]

    References
    ----------
    Allen et al. (1998), FAO-56, eq. 35.
    """
    return (angstrom_a + angstrom_b * sunshine_hours / daylight_hours) * extraterrestrial_radiation


def solar_radiation_from_temperature(
    extraterrestrial_radiation: ArrayLike,
    air_temperature_max: ArrayLike,
    air_temperature_min: ArrayLike,
    hargreaves_coefficient: float = 0.16,
) -> ArrayLike:
    """Incoming shortwave radiation from the daily temperature range (Hargreaves).

    Parameters
    ----------
    extraterrestrial_radiation : array_like
        Ra. [W m-2]
    air_temperature_max, air_temperature_min : array_like
        Daily maximum and minimum air temperature. [°C]
    hargreaves_coefficient : float, optional
        kRs: 0.16 for interior, 0.19 for coastal locations. [°C-0.5]

    Returns
    -------
    array_like
        Rs = kRs √(Tmax - Tmin) Ra. [W m-2]

    References
    ----------
    Allen et al. (1998), FAO-56, eq. 50.
    """
    with np.errstate(invalid="ignore"):
        temperature_range = np.sqrt(air_temperature_max - air_temperature_min)
    return hargreaves_coefficient * temperature_range * extraterrestrial_radiation  # Eq. 50


def net_shortwave_radiation(
    shortwave_radiation: ArrayLike, albedo: ArrayLike = WATER_ALBEDO
) -> ArrayLike:
    """Net shortwave radiation absorbed by the surface.

    Parameters
    ----------
    shortwave_radiation : array_like
        Incoming shortwave radiation Rs. [W m-2]
    albedo : array_like, optional
        Shortwave albedo α; 0.08 for open water, not the 0.23 of grass. [-]

    Returns
    -------
    array_like
        Rns = (1 - α) Rs. [W m-2]

    Notes
    -----
    Water albedo rises at low sun angles (high-latitude winter); a daily constant is an
    approximation (Cogley 1979; docs/methods.md#net-radiation-over-water).

    References
    ----------
    Allen et al. (1998), FAO-56, eq. 38.
    """
    return (1.0 - albedo) * shortwave_radiation  # Eq. 38


def relative_shortwave_radiation(
    shortwave_radiation: ArrayLike, clear_sky_radiation: ArrayLike
) -> ArrayLike:
    """Cloudiness ratio Rs/Rso used by the longwave formula.

    Parameters
    ----------
    shortwave_radiation : array_like
        Incoming shortwave radiation Rs. [W m-2]
    clear_sky_radiation : array_like
        Clear-sky radiation Rso. [W m-2]

    Returns
    -------
    array_like
        Rs/Rso limited to [0.3, 1.0]; 1.0 where Rso = 0 (polar night). [-]

    Notes
    -----
    FAO-56 eq. 39 requires Rs/Rso ≤ 1. The lower limit 0.3 is the ASCE-EWRI (2005) eq. 18
    form; it keeps the cloud factor 1.35 Rs/Rso - 0.35 positive. Treating polar night as
    clear sky (ratio 1) is a convention, no source: ASCE-EWRI suggests carrying the ratio over
    from earlier periods, which a per-step pure function cannot do.
    """
    with np.errstate(invalid="ignore", divide="ignore"):
        # np.divide: a Python-float Rso of 0 gives inf, not ZeroDivisionError, before np.where.
        ratio = np.divide(shortwave_radiation, clear_sky_radiation)
    return np.clip(np.where(clear_sky_radiation == 0, 1.0, ratio), 0.3, 1.0)


def net_longwave_radiation(
    air_temperature_max: ArrayLike,
    air_temperature_min: ArrayLike,
    vapour_pressure: ArrayLike,
    shortwave_radiation: ArrayLike,
    clear_sky_radiation: ArrayLike,
) -> ArrayLike:
    """Net outgoing longwave radiation, FAO-56 eq. 39 form.

    Parameters
    ----------
    air_temperature_max, air_temperature_min : array_like
        Daily maximum and minimum air temperature; pass the mean temperature for both when
        the extremes are unknown. [°C]
    vapour_pressure : array_like
        Actual vapour pressure ea. [Pa]
    shortwave_radiation : array_like
        Incoming shortwave radiation Rs. [W m-2]
    clear_sky_radiation : array_like
        Clear-sky radiation Rso. [W m-2]

    Returns
    -------
    array_like
        Rnl, positive when the surface loses energy. [W m-2]

    Notes
    -----
    Rnl = σ ½(Tmax,K⁴ + Tmin,K⁴)(0.34 - 0.14 √ea)(1.35 Rs/Rso - 0.35), ea in kPa,
    σ = 4.903e-9 MJ K-4 m-2 day-1 (here in W m-2 K-4), T_K = T + 273.15.
    Eq. 39 is a fit over land using air temperature; over water the surface emits at the
    water temperature (docs/methods.md#net-radiation-over-water), an approximation accepted
    here for shallow water.

    References
    ----------
    Allen et al. (1998), FAO-56, eq. 39.
    """
    t_max_k = air_temperature_max + KELVIN_OFFSET
    t_min_k = air_temperature_min + KELVIN_OFFSET
    ea_kpa = vapour_pressure / 1000.0
    with np.errstate(invalid="ignore"):
        emissivity_factor = 0.34 - 0.14 * np.sqrt(ea_kpa)
    cloud_factor = (
        1.35 * relative_shortwave_radiation(shortwave_radiation, clear_sky_radiation) - 0.35
    )
    return (  # Eq. 39
        STEFAN_BOLTZMANN_FAO * (0.5 * (t_max_k**4 + t_min_k**4)) * emissivity_factor * cloud_factor
    )


def net_radiation(
    shortwave_radiation: ArrayLike,
    air_temperature_max: ArrayLike,
    air_temperature_min: ArrayLike,
    vapour_pressure: ArrayLike,
    clear_sky_radiation: ArrayLike,
    albedo: ArrayLike = WATER_ALBEDO,
) -> ArrayLike:
    """Net all-wave radiation over water from incoming shortwave.

    Parameters
    ----------
    shortwave_radiation : array_like
        Incoming shortwave radiation Rs. [W m-2]
    air_temperature_max, air_temperature_min : array_like
        Daily maximum and minimum air temperature (mean for both when unknown). [°C]
    vapour_pressure : array_like
        Actual vapour pressure ea. [Pa]
    clear_sky_radiation : array_like
        Clear-sky radiation Rso. [W m-2]
    albedo : array_like, optional
        Shortwave albedo of the water. [-]

    Returns
    -------
    array_like
        Rn = (1 - α) Rs - Rnl; may be negative (winter, night-long steps). [W m-2]

    References
    ----------
    Allen et al. (1998), FAO-56, eqs. 38-40.
    """
    longwave = net_longwave_radiation(
        air_temperature_max,
        air_temperature_min,
        vapour_pressure,
        shortwave_radiation,
        clear_sky_radiation,
    )
    return net_shortwave_radiation(shortwave_radiation, albedo) - longwave  # Eq. 40
