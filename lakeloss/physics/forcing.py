"""Forcing preparation: from glossary-named inputs to the quantities the methods take.

Pure functions of a mapping of glossary names to arrays (already in glossary units: °C,
percent, kg kg-1, Pa, m s-1, W m-2, m) and of validated parameters. Nothing here reads files
or holds state; each function documents which inputs it reads and in which order of
preference.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from lakeloss.physics import atmosphere as atm
from lakeloss.physics import radiation as rad
from lakeloss.physics._types import ArrayLike

Inputs = Mapping[str, ArrayLike]

Alternative = tuple[str, ...]
"""Glossary names that together give one quantity (e.g. the two wind components)."""

HUMIDITY_ALTERNATIVES: tuple[Alternative, ...] = (
    ("water_vapor_partial_pressure_in_air",),
    ("dew_point_temperature",),
    ("specific_humidity", "surface_air_pressure"),
    (
        "relative_humidity_max",
        "relative_humidity_min",
        "air_temperature_max",
        "air_temperature_min",
    ),
    ("relative_humidity_max", "air_temperature_min"),
    ("relative_humidity",),
)
"""Ways to obtain the actual vapour pressure, in the order :func:`vapour_pressure` prefers them."""

TEMPERATURE_EXTREMES: Alternative = ("air_temperature_max", "air_temperature_min")
TEMPERATURE_ALTERNATIVES: tuple[Alternative, ...] = (("air_temperature",), TEMPERATURE_EXTREMES)
WIND_COMPONENTS: Alternative = ("eastward_wind", "northward_wind")
WIND_ALTERNATIVES: tuple[Alternative, ...] = (("wind_speed",), WIND_COMPONENTS)
RADIATION_ALTERNATIVES: tuple[Alternative, ...] = (
    ("surface_net_downward_radiative_flux",),
    ("surface_downwelling_shortwave_flux_in_air", "latitude", "day_of_year"),
)


def _has(inputs: Inputs, alternative: Alternative) -> bool:
    return all(name in inputs for name in alternative)


def mean_temperature(inputs: Inputs) -> ArrayLike:
    """Daily mean air temperature [°C]: ``air_temperature``, else (Tmax + Tmin)/2."""
    if "air_temperature" in inputs:
        return inputs["air_temperature"]
    return 0.5 * (inputs["air_temperature_max"] + inputs["air_temperature_min"])


def has_temperature_extremes(inputs: Inputs) -> bool:
    """Whether ``air_temperature_max`` and ``air_temperature_min`` are both given."""
    return _has(inputs, TEMPERATURE_EXTREMES)


def temperature_extremes(inputs: Inputs) -> tuple[ArrayLike, ArrayLike]:
    """(Tmax, Tmin) [°C] when both are given, else the mean temperature twice."""
    if _has(inputs, TEMPERATURE_EXTREMES):
        return inputs["air_temperature_max"], inputs["air_temperature_min"]
    mean = mean_temperature(inputs)
    return mean, mean


def saturation_vapour_pressure(inputs: Inputs) -> ArrayLike:
    """Daily saturation vapour pressure es [Pa]: FAO-56 eq. 12 from Tmax/Tmin, else e°(T).

    The extremes win whenever both are given, also when ``air_temperature`` is given too:
    e° is convex, so e°(Tmean) is below the mean of e°(Tmax) and e°(Tmin).
    """
    if has_temperature_extremes(inputs):
        return atm.daily_saturation_vapour_pressure(
            inputs["air_temperature_max"], inputs["air_temperature_min"]
        )
    return atm.saturation_vapour_pressure(inputs["air_temperature"])


def surface_pressure(inputs: Inputs, elevation_m: float) -> ArrayLike:
    """Air pressure [Pa]: ``surface_air_pressure``, else FAO-56 eq. 7 at ``elevation``, else
    at the ``elevation_m`` parameter."""
    if "surface_air_pressure" in inputs:
        return inputs["surface_air_pressure"]
    return atm.pressure_from_elevation(surface_elevation(inputs, elevation_m))


def surface_elevation(inputs: Inputs, elevation_m: float) -> ArrayLike:
    """Water-surface elevation [m]: the ``elevation`` input, else the ``elevation_m`` parameter."""
    return inputs["elevation"] if "elevation" in inputs else elevation_m


def vapour_pressure(inputs: Inputs, saturation: ArrayLike = None) -> ArrayLike:
    """Actual vapour pressure ea [Pa] from the first available humidity input.

    ``saturation`` is es [Pa] as :func:`saturation_vapour_pressure` would return it, when the
    caller has it already; it is used only by the mean-RH alternative and saves one e°.

    Order (:data:`HUMIDITY_ALTERNATIVES`): vapour pressure given directly; dew point
    (FAO-56 eq. 14); specific humidity with surface pressure; RHmax and RHmin with Tmax and
    Tmin (eq. 17); RHmax with Tmin (eq. 18); mean RH times es (eq. 19, es from eq. 12 when
    Tmax/Tmin are given). The order follows FAO-56's ranking of humidity data by reliability.
    """
    if "water_vapor_partial_pressure_in_air" in inputs:
        return inputs["water_vapor_partial_pressure_in_air"]
    if "dew_point_temperature" in inputs:
        return atm.vapour_pressure_from_dew_point(inputs["dew_point_temperature"])
    if _has(inputs, HUMIDITY_ALTERNATIVES[2]):
        return atm.vapour_pressure_from_specific_humidity(
            inputs["specific_humidity"], inputs["surface_air_pressure"]
        )
    if _has(inputs, HUMIDITY_ALTERNATIVES[3]):
        return atm.vapour_pressure_from_daily_relative_humidity(
            inputs["air_temperature_max"],
            inputs["air_temperature_min"],
            inputs["relative_humidity_max"],
            inputs["relative_humidity_min"],
        )
    if _has(inputs, HUMIDITY_ALTERNATIVES[4]):
        return atm.vapour_pressure_from_relative_humidity_max(
            inputs["air_temperature_min"], inputs["relative_humidity_max"]
        )
    if saturation is None:
        saturation = saturation_vapour_pressure(inputs)
    return atm.vapour_pressure_from_relative_humidity(saturation, inputs["relative_humidity"])


def wind_speed_2m(
    inputs: Inputs, wind_height_m: float, wind_profile: str, roughness_length_m: float
) -> ArrayLike:
    """Wind speed at 2 m [m s-1] from ``wind_speed`` (or the magnitude of the eastward and
    northward components) measured at ``wind_height_m``.

    ``wind_profile`` "fao56" applies FAO-56 eq. 47 (land-representative wind, the default for
    gridded 10 m winds); "log" applies the neutral log law with ``roughness_length_m``. The
    magnitude of daily-mean components underestimates the daily-mean speed when the wind
    direction turns during the day.
    """
    if "wind_speed" in inputs:
        speed = inputs["wind_speed"]
    else:
        speed = np.hypot(inputs["eastward_wind"], inputs["northward_wind"])
    if wind_profile == "log":
        return atm.wind_speed_log_profile(speed, wind_height_m, 2.0, roughness_length_m)
    return atm.wind_speed_fao56_profile(speed, wind_height_m)


def net_radiation(
    inputs: Inputs, actual_vapour_pressure: ArrayLike, albedo: float, elevation_m: float
) -> ArrayLike:
    """Net radiation over water [W m-2].

    ``surface_net_downward_radiative_flux`` when given; otherwise from incoming shortwave with
    the water ``albedo``, FAO-56 eq. 39 longwave (Tmax/Tmin if given, else the mean
    temperature for both) and Rso from latitude, day of year and elevation (eq. 37).
    """
    if "surface_net_downward_radiative_flux" in inputs:
        return inputs["surface_net_downward_radiative_flux"]
    shortwave = inputs["surface_downwelling_shortwave_flux_in_air"]
    clear_sky = rad.clear_sky_radiation(
        rad.extraterrestrial_radiation(inputs["latitude"], inputs["day_of_year"]),
        surface_elevation(inputs, elevation_m),
    )
    t_max, t_min = temperature_extremes(inputs)
    return rad.net_radiation(shortwave, t_max, t_min, actual_vapour_pressure, clear_sky, albedo)


def heat_storage_flux(inputs: Inputs) -> ArrayLike:
    """Heat into storage G [W m-2]: ``heat_storage_flux`` if given, else 0."""
    return inputs.get("heat_storage_flux", 0.0)
