"""Supporting meteorology: vapour pressure, humidity, pressure, psychrometrics, wind height.

Every function is a pure, vectorised function of array-likes (scalars, numpy arrays, pandas
and xarray objects work by numpy semantics). Units are SI: pressures in Pa, temperatures in
°C at the boundary, latent heat in J kg-1. The published FAO-56 constants (kPa, MJ) are
converted once, here, and the tests check against the published units.

NaN in gives NaN out; numpy warnings for NaN or out-of-domain values are suppressed so that
one bad cell never interrupts a vectorised call.
"""

from __future__ import annotations

import numpy as np

from lakeloss.physics._types import ArrayLike

KELVIN_OFFSET = 273.15
"""Celsius to kelvin offset [K]. FAO-56 writes 273.16 in places; the difference is negligible."""

WATER_VAPOUR_RATIO = 0.622
"""Ratio of molecular weights of water vapour and dry air, epsilon [-] (FAO-56 eq. 8)."""

SPECIFIC_HEAT_AIR = 1013.0
"""Specific heat of moist air at constant pressure, cp [J kg-1 K-1] (FAO-56 eq. 8: 1.013e-3 MJ)."""

GAS_CONSTANT_DRY_AIR = 287.05
"""Specific gas constant of dry air, Rd [J kg-1 K-1]."""

LATENT_HEAT_FAO = 2.45e6
"""Latent heat of vaporisation fixed by FAO-56 for reference evapotranspiration [J kg-1]."""

# Tetens constants of FAO-56 eq. 11 converted from kPa to Pa once.
_TETENS_E0 = 610.8  # [Pa] (0.6108 kPa)
_TETENS_A = 17.27  # [-]
_TETENS_B = 237.3  # [°C]


def saturation_vapour_pressure(temperature: ArrayLike) -> ArrayLike:
    """Saturation vapour pressure over flat liquid water (Tetens form).

    Parameters
    ----------
    temperature : array_like
        Temperature of the air or of the water surface. [°C]

    Returns
    -------
    array_like
        Saturation vapour pressure e°(T). [Pa]

    Notes
    -----
    e°(T) = 610.8 exp[17.27 T / (T + 237.3)]  (FAO-56 eq. 11, 0.6108 kPa written as Pa).
    Chow et al. (1988) eq. 3.2.9 uses 611 Pa; use this one form for both sides of a vapour
    deficit (docs/methods.md#saturation-vapour-pressure), since mixing forms biases the deficit
    by about 0.5 % of e°. Salinity (about -2 % at 35 g kg-1) is not applied here.

    References
    ----------
    Allen et al. (1998), FAO Irrigation and Drainage Paper 56, eq. 11.
    """
    with np.errstate(invalid="ignore", over="ignore"):
        return _TETENS_E0 * np.exp(_TETENS_A * temperature / (temperature + _TETENS_B))  # Eq. 11


def saturation_vapour_pressure_slope(temperature: ArrayLike) -> ArrayLike:
    """Slope of the saturation vapour pressure curve, Δ.

    Parameters
    ----------
    temperature : array_like
        Temperature at which the slope is taken (daily mean for daily forms). [°C]

    Returns
    -------
    array_like
        Δ = de°/dT. [Pa K-1]

    Notes
    -----
    Δ = 4098 e°(T) / (T + 237.3)²  (FAO-56 eq. 13; Chow et al. 1988 eq. 3.2.10).
    ASCE-EWRI (2005) eq. 5 writes 2503 exp(...) for 4098 x 0.6108 = 2503.06; the difference
    is below 6e-3 Pa K-1.

    References
    ----------
    Allen et al. (1998), FAO-56, eq. 13.
    """
    return slope_from_saturation_vapour_pressure(
        saturation_vapour_pressure(temperature), temperature
    )


def slope_from_saturation_vapour_pressure(
    saturation_vapour_pressure: ArrayLike, temperature: ArrayLike
) -> ArrayLike:
    """Δ from an e°(T) already computed at the same temperature.

    Parameters
    ----------
    saturation_vapour_pressure : array_like
        e°(T) from :func:`saturation_vapour_pressure` at ``temperature``. [Pa]
    temperature : array_like
        Temperature at which the slope is taken. [°C]

    Returns
    -------
    array_like
        Δ = 4098 e°(T) / (T + 237.3)², identical to :func:`saturation_vapour_pressure_slope`.
        [Pa K-1]

    Notes
    -----
    FAO-56 eq. 13. Lets a caller that needs both e°(T) and Δ evaluate the exponential once.

    References
    ----------
    Allen et al. (1998), FAO-56, eq. 13.
    """
    with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
        return 4098.0 * saturation_vapour_pressure / (temperature + _TETENS_B) ** 2  # Eq. 13


def daily_saturation_vapour_pressure(
    air_temperature_max: ArrayLike, air_temperature_min: ArrayLike
) -> ArrayLike:
    """Daily mean saturation vapour pressure from the daily temperature extremes.

    Parameters
    ----------
    air_temperature_max : array_like
        Daily maximum air temperature. [°C]
    air_temperature_min : array_like
        Daily minimum air temperature. [°C]

    Returns
    -------
    array_like
        es = ½[e°(Tmax) + e°(Tmin)]. [Pa]

    Notes
    -----
    FAO-56 eq. 12. Because e° is convex, es from the extremes exceeds e°(Tmean); FAO-56
    warns against using e°(Tmean) for daily steps.

    References
    ----------
    Allen et al. (1998), FAO-56, eq. 12.
    """
    return 0.5 * (  # Eq. 12
        saturation_vapour_pressure(air_temperature_max)
        + saturation_vapour_pressure(air_temperature_min)
    )


def vapour_pressure_from_dew_point(dew_point_temperature: ArrayLike) -> ArrayLike:
    """Actual vapour pressure from the dew-point temperature.

    Parameters
    ----------
    dew_point_temperature : array_like
        Dew-point temperature. [°C]

    Returns
    -------
    array_like
        ea = e°(Tdew). [Pa]

    References
    ----------
    Allen et al. (1998), FAO-56, eq. 14.
    """
    return saturation_vapour_pressure(dew_point_temperature)  # Eq. 14


def dew_point_from_vapour_pressure(vapour_pressure: ArrayLike) -> ArrayLike:
    """Dew-point temperature from actual vapour pressure (inverse of eq. 11).

    Parameters
    ----------
    vapour_pressure : array_like
        Actual vapour pressure, > 0. [Pa]

    Returns
    -------
    array_like
        Tdew = 237.3 L / (17.27 - L), L = ln(ea / 610.8). [°C]

    References
    ----------
    Allen et al. (1998), FAO-56, eq. 11, solved for T.
    """
    with np.errstate(invalid="ignore", divide="ignore"):
        log_ratio = np.log(vapour_pressure / _TETENS_E0)
        return _TETENS_B * log_ratio / (_TETENS_A - log_ratio)


def vapour_pressure_from_relative_humidity(
    saturation_vapour_pressure: ArrayLike, relative_humidity: ArrayLike
) -> ArrayLike:
    """Actual vapour pressure from a mean relative humidity.

    Parameters
    ----------
    saturation_vapour_pressure : array_like
        Saturation vapour pressure the humidity refers to; for daily data es from eq. 12.
        [Pa]
    relative_humidity : array_like
        Relative humidity. [%]

    Returns
    -------
    array_like
        ea = es RHmean / 100. [Pa]

    References
    ----------
    Allen et al. (1998), FAO-56, eq. 19.
    """
    return saturation_vapour_pressure * relative_humidity / 100.0  # Eq. 19


def vapour_pressure_from_daily_relative_humidity(
    air_temperature_max: ArrayLike,
    air_temperature_min: ArrayLike,
    relative_humidity_max: ArrayLike,
    relative_humidity_min: ArrayLike,
) -> ArrayLike:
    """Actual vapour pressure from the daily extremes of temperature and humidity.

    Parameters
    ----------
    air_temperature_max, air_temperature_min : array_like
        Daily maximum and minimum air temperature. [°C]
    relative_humidity_max, relative_humidity_min : array_like
        Daily maximum and minimum relative humidity. [%]

    Returns
    -------
    array_like
        ea = ½[e°(Tmin) RHmax + e°(Tmax) RHmin] / 100. [Pa]

    Notes
    -----
    RHmax occurs near Tmin and RHmin near Tmax, hence the pairing (FAO-56 eq. 17).

    References
    ----------
    Allen et al. (1998), FAO-56, eq. 17.
    """
    return (
        0.5
        * (  # Eq. 17
            saturation_vapour_pressure(air_temperature_min) * relative_humidity_max
            + saturation_vapour_pressure(air_temperature_max) * relative_humidity_min
        )
        / 100.0
    )


def vapour_pressure_from_relative_humidity_max(
    air_temperature_min: ArrayLike, relative_humidity_max: ArrayLike
) -> ArrayLike:
    """Actual vapour pressure from RHmax alone (when RHmin is unreliable).

    Parameters
    ----------
    air_temperature_min : array_like
        Daily minimum air temperature. [°C]
    relative_humidity_max : array_like
        Daily maximum relative humidity. [%]

    Returns
    -------
    array_like
        ea = e°(Tmin) RHmax / 100. [Pa]

    References
    ----------
    Allen et al. (1998), FAO-56, eq. 18.
    """
    return saturation_vapour_pressure(air_temperature_min) * relative_humidity_max / 100.0


def vapour_pressure_from_specific_humidity(
    specific_humidity: ArrayLike, surface_air_pressure: ArrayLike
) -> ArrayLike:
    """Actual vapour pressure from specific humidity and pressure.

    Parameters
    ----------
    specific_humidity : array_like
        Specific humidity, q. [kg kg-1]
    surface_air_pressure : array_like
        Air pressure, P. [Pa]

    Returns
    -------
    array_like
        ea = q P / (0.622 + 0.378 q). [Pa]

    Notes
    -----
    Inverse of the definition q = ε ea / (P - (1 - ε) ea), ε = 0.622.
    """
    return (
        specific_humidity * surface_air_pressure / (WATER_VAPOUR_RATIO + 0.378 * specific_humidity)
    )


def specific_humidity_from_vapour_pressure(
    vapour_pressure: ArrayLike, surface_air_pressure: ArrayLike
) -> ArrayLike:
    """Specific humidity from actual vapour pressure and pressure.

    Parameters
    ----------
    vapour_pressure : array_like
        Actual vapour pressure, ea. [Pa]
    surface_air_pressure : array_like
        Air pressure, P. [Pa]

    Returns
    -------
    array_like
        q = 0.622 ea / (P - 0.378 ea). [kg kg-1]
    """
    return WATER_VAPOUR_RATIO * vapour_pressure / (surface_air_pressure - 0.378 * vapour_pressure)


def vapour_pressure_from_psychrometer(
    dry_bulb_temperature: ArrayLike,
    wet_bulb_temperature: ArrayLike,
    surface_air_pressure: ArrayLike,
    psychrometer_coefficient: float = 0.000662,
) -> ArrayLike:
    """Actual vapour pressure from psychrometer readings.

    Parameters
    ----------
    dry_bulb_temperature, wet_bulb_temperature : array_like
        Dry- and wet-bulb temperatures. [°C]
    surface_air_pressure : array_like
        Air pressure. [Pa]
    psychrometer_coefficient : float, optional
        apsy: 0.000662 ventilated (default), 0.000800 natural, 0.001200 indoor. [K-1]

    Returns
    -------
    array_like
        ea = e°(Twet) - apsy P (Tdry - Twet). [Pa]

    References
    ----------
    Allen et al. (1998), FAO-56, eqs. 15-16; the coefficients are those listed under eq. 16.
    """
    psychrometer_constant = psychrometer_coefficient * surface_air_pressure  # Eq. 16
    return saturation_vapour_pressure(wet_bulb_temperature) - psychrometer_constant * (  # Eq. 15
        dry_bulb_temperature - wet_bulb_temperature
    )


def vapour_pressure_deficit(
    saturation_vapour_pressure: ArrayLike, actual_vapour_pressure: ArrayLike
) -> ArrayLike:
    """Vapour-pressure deficit D = es - ea.

    Parameters
    ----------
    saturation_vapour_pressure : array_like
        es, from :func:`saturation_vapour_pressure` or eq. 12. [Pa]
    actual_vapour_pressure : array_like
        ea, computed with the same e° form as es. [Pa]

    Returns
    -------
    array_like
        D; negative when ea > es (e.g. from averaging), returned as computed. [Pa]
    """
    return saturation_vapour_pressure - actual_vapour_pressure


def latent_heat_of_vaporisation(temperature: ArrayLike) -> ArrayLike:
    """Latent heat of vaporisation of water as a function of temperature.

    Parameters
    ----------
    temperature : array_like
        Temperature of the evaporating surface (air temperature when unknown). [°C]

    Returns
    -------
    array_like
        λ = 2.501e6 - 2370 T. [J kg-1]

    Notes
    -----
    Chow et al. (1988) eq. 2.7.6: 2.44175e6 at 25 °C. FAO-56 Annex 3 eq. 3-1 gives
    2.501 - 0.002361 T MJ kg-1 (2.4420 at 25 °C, 0.003 % apart).

    References
    ----------
    Chow, Maidment & Mays (1988), Applied Hydrology, eq. 2.7.6.
    """
    return 2.501e6 - 2370.0 * temperature  # Eq. 2.7.6


def water_density(temperature: ArrayLike) -> ArrayLike:
    """Density of pure liquid water as a function of temperature.

    Parameters
    ----------
    temperature : array_like
        Water temperature. [°C]

    Returns
    -------
    array_like
        ρw. [kg m-3]

    Notes
    -----
    ρw = 1000 [1 - (T + 288.9414)(T - 3.9863)² / (508929.2 (T + 68.12963))], a Thiesen-type
    fit; it reproduces the tabulated density of pure water (Kell 1975) within 0.05 kg m-3 from
    0 to 40 °C (998.23 at 20 °C against 998.21). Depth rates in lakeloss use 1000 kg m-3 by default
    so that E - P balances against gridded precipitation (docs/methods.md#units-and-conventions);
    this function serves the Chow worked examples and users who want ρw(T).

    References
    ----------
    Kell, G.S. (1975), J. Chem. Eng. Data 20, 97-105 (the table the fit is checked against).
    """
    return 1000.0 * (
        1.0
        - (temperature + 288.9414)
        * (temperature - 3.9863) ** 2
        / (508929.2 * (temperature + 68.12963))
    )


def air_density(
    air_temperature: ArrayLike,
    surface_air_pressure: ArrayLike,
    vapour_pressure: ArrayLike = 0.0,
) -> ArrayLike:
    """Density of moist air from the ideal gas law with virtual temperature.

    Parameters
    ----------
    air_temperature : array_like
        Air temperature. [°C]
    surface_air_pressure : array_like
        Air pressure, P. [Pa]
    vapour_pressure : array_like, optional
        Actual vapour pressure, ea; 0 gives dry air. [Pa]

    Returns
    -------
    array_like
        ρa = P / (Rd Tv), Tv = T_K / (1 - 0.378 ea / P), Rd = 287.05 J kg-1 K-1. [kg m-3]

    Notes
    -----
    FAO-56 Annex 3 eqs. 3-5/3-6 write 3.486 P / Tkv with P in kPa, i.e. Rd = 286.9 (0.05 %
    higher density). Dry air, 101.3 kPa, 25 °C: 1.1836 kg m-3 here.

    References
    ----------
    Allen et al. (1998), FAO-56, Annex 3, eqs. 3-5 and 3-6.
    """
    virtual_temperature = (air_temperature + KELVIN_OFFSET) / (  # Eq. 3-6
        1.0 - 0.378 * vapour_pressure / surface_air_pressure
    )
    return surface_air_pressure / (GAS_CONSTANT_DRY_AIR * virtual_temperature)  # Eq. 3-5


def pressure_from_elevation(elevation: ArrayLike) -> ArrayLike:
    """Mean atmospheric pressure at an elevation (standard-atmosphere approximation).

    Parameters
    ----------
    elevation : array_like
        Elevation above sea level, z. [m]

    Returns
    -------
    array_like
        P = 101300 [(293 - 0.0065 z) / 293]^5.26. [Pa]

    Notes
    -----
    FAO-56 eq. 7 = ASCE-EWRI (2005) eq. 3. Prefer gridded surface pressure when available.

    References
    ----------
    Allen et al. (1998), FAO-56, eq. 7.
    """
    with np.errstate(invalid="ignore"):
        return 101300.0 * ((293.0 - 0.0065 * elevation) / 293.0) ** 5.26  # Eq. 7


def psychrometric_constant(
    surface_air_pressure: ArrayLike,
    latent_heat: ArrayLike = LATENT_HEAT_FAO,
    specific_heat: float = SPECIFIC_HEAT_AIR,
) -> ArrayLike:
    """Psychrometric constant γ.

    Parameters
    ----------
    surface_air_pressure : array_like
        Air pressure, P. [Pa]
    latent_heat : array_like, optional
        Latent heat of vaporisation, λ; FAO-56 fixes 2.45e6. [J kg-1]
    specific_heat : float, optional
        Specific heat of air at constant pressure, cp. [J kg-1 K-1]

    Returns
    -------
    array_like
        γ = cp P / (ε λ). [Pa K-1]

    Notes
    -----
    With the defaults γ = 0.665e-3 P (FAO-56 eq. 8). With λ(T) this is Shuttleworth's
    (1993) eq. 4.2.28 form 0.0016286 P / λ (P in kPa, λ in MJ kg-1).

    References
    ----------
    Allen et al. (1998), FAO-56, eq. 8.
    """
    return specific_heat * surface_air_pressure / (WATER_VAPOUR_RATIO * latent_heat)  # Eq. 8


def wind_speed_log_profile(
    wind_speed: ArrayLike,
    measurement_height: ArrayLike,
    target_height: ArrayLike = 2.0,
    roughness_length: ArrayLike = 0.0003,
) -> ArrayLike:
    """Move a wind speed between heights with the neutral logarithmic profile.

    Parameters
    ----------
    wind_speed : array_like
        Wind speed at ``measurement_height``. [m s-1]
    measurement_height : array_like
        Height of the measurement above the surface, > roughness_length. [m]
    target_height : array_like, optional
        Height the wind is wanted at. [m]
    roughness_length : array_like, optional
        Aerodynamic roughness length z0; 0.0003 m is common practice for open water
        (Chow et al. 1988 Ex. 3.5.2 uses 0.03 cm). [m]

    Returns
    -------
    array_like
        u(z2) = u(z1) ln(z2/z0) / ln(z1/z0). [m s-1]

    Notes
    -----
    Neutral stability, zero displacement height over water. u2/u10 = 0.851 for z0 = 2e-4 m.
    """
    with np.errstate(invalid="ignore", divide="ignore"):
        return (
            wind_speed
            * np.log(target_height / roughness_length)
            / np.log(measurement_height / roughness_length)
        )


def wind_speed_fao56_profile(wind_speed: ArrayLike, measurement_height: ArrayLike) -> ArrayLike:
    """Wind speed at 2 m from a wind measured over grass at another height.

    Parameters
    ----------
    wind_speed : array_like
        Wind speed at ``measurement_height``. [m s-1]
    measurement_height : array_like
        Measurement height above the ground, > 0.08 m. [m]

    Returns
    -------
    array_like
        u2 = uz 4.87 / ln(67.8 z - 5.42). [m s-1]

    Notes
    -----
    FAO-56 eq. 47 (= ASCE-EWRI 2005 eq. 33) for a short-grass surface: factor 0.748 at 10 m.
    Applied to truly over-water wind it gives u2 9-13 % low; for gridded 10 m winds, which
    represent land, it is the consistent choice with land-calibrated wind functions
    (docs/methods.md#wind-at-2-m).

    References
    ----------
    Allen et al. (1998), FAO-56, eq. 47.
    """
    with np.errstate(invalid="ignore", divide="ignore"):
        return wind_speed * 4.87 / np.log(67.8 * measurement_height - 5.42)  # Eq. 47
