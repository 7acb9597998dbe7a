"""Turbulent transfer over water: wind functions, transfer coefficients, resistances.

A wind function f(u) turns a vapour-pressure deficit into an evaporation rate,
E = f(u) D. Wind functions are given in their published unit, mm day-1 kPa-1, and named by
formula rather than by author-year (docs/methods.md#wind-functions). Wind speeds are at 2 m. Pure,
vectorised functions; NaN in, NaN out.
"""

from __future__ import annotations

import numpy as np

from lakeloss.physics._types import ArrayLike
from lakeloss.physics.atmosphere import WATER_VAPOUR_RATIO

VON_KARMAN = 0.4
"""Von Kármán constant k [-], the value of Chow, Maidment & Mays (1988); FAO-56 uses 0.41."""

OPEN_WATER_ROUGHNESS = 0.0003
"""Roughness length of open water z0 [m]: 0.03 cm, common practice (Chow et al. 1988 Ex. 3.5.2)."""

# Constants (a, b) and length scale of the area-dependent wind functions of McJannet, Webster &
# Cook (2012); their uncertainty is stated once, in docs/methods.md#open-questions.
SMALL_WATER_BODY_FORMS: dict[str, tuple[float, float, str]] = {
    "mcjannet_length": (2.33, 1.65, "length"),
    "mcjannet_area": (2.36, 1.67, "area"),
}


def linear_wind_function(wind_speed_2m: ArrayLike, a: float, b: float) -> ArrayLike:
    """Linear (Dalton-type) wind function f(u) = a + b u2.

    Parameters
    ----------
    wind_speed_2m : array_like
        Wind speed at 2 m. [m s-1]
    a : float
        Still-air term. [mm day-1 kPa-1]
    b : float
        Wind term. [mm day-1 kPa-1 (m s-1)-1]

    Returns
    -------
    array_like
        f(u). [mm day-1 kPa-1]

    Notes
    -----
    McMahon et al. (2013) supplement lists a = 1.313 and a = 2.626 with b = 1.381 under
    Penman's 1956 and 1948 labels; whether the labels are swapped is an open question
    (docs/methods.md#aerodynamic, #open-questions), hence the name by formula.
    """
    return a + b * wind_speed_2m


def shuttleworth_wind_function(wind_speed_2m: ArrayLike, latent_heat: ArrayLike) -> ArrayLike:
    """Open-water wind function of Shuttleworth (1993), in depth units.

    Parameters
    ----------
    wind_speed_2m : array_like
        Wind speed at 2 m. [m s-1]
    latent_heat : array_like
        Latent heat of vaporisation λ. [J kg-1]

    Returns
    -------
    array_like
        f(u) = 6.43 (1 + 0.536 u2) / λ, λ in MJ kg-1; 2.62 + 1.41 u2 at λ = 2.45. [mm day-1 kPa-1]

    References
    ----------
    Shuttleworth, W.J. (1993), Evaporation, in Handbook of Hydrology, eq. 4.2.30.
    """
    latent_heat_mj = latent_heat / 1.0e6  # [MJ kg-1]
    return 6.43 * (1.0 + 0.536 * wind_speed_2m) / latent_heat_mj  # Eq. 4.2.30


def characteristic_length(area: ArrayLike) -> ArrayLike:
    """Diameter of the circle with the water body's area, L = √(4A/π).

    Parameters
    ----------
    area : array_like
        Water-surface area A. [m2]

    Returns
    -------
    array_like
        L. [m]
    """
    with np.errstate(invalid="ignore"):
        return np.sqrt(4.0 * area / np.pi)


def small_water_body_wind_function(
    wind_speed_2m: ArrayLike, area: ArrayLike, form: str = "mcjannet_length"
) -> ArrayLike:
    """Area-dependent wind function for small water bodies with land-station wind.

    Parameters
    ----------
    wind_speed_2m : array_like
        Land-representative wind speed at 2 m. [m s-1]
    area : array_like
        Water-surface area A, > 0. [m2]
    form : {"mcjannet_length", "mcjannet_area"}, optional
        ``"mcjannet_length"``: (2.33 + 1.65 u2) L^-0.1, L = √(4A/π);
        ``"mcjannet_area"``: (2.36 + 1.67 u2) A^-0.05.

    Returns
    -------
    array_like
        f(u, A), decreasing with area. [mm day-1 kPa-1]

    Notes
    -----
    With short fetch the internal boundary layer is not in equilibrium, so transfer per unit land
    wind rises as the area falls. The constants and their unit are the method's main uncertainty,
    stated in docs/methods.md#open-questions. At u2 = 2 m s-1 the length form gives 3.51 (1 ha)
    and 2.49 (10 km²).

    References
    ----------
    McJannet, D.L., Webster, I.T., Cook, F.J. (2012), Environ. Model. Softw. 31, 76-83.
    """
    a, b, scale = SMALL_WATER_BODY_FORMS[form]
    with np.errstate(invalid="ignore", divide="ignore"):
        if scale == "length":
            return (a + b * wind_speed_2m) * characteristic_length(area) ** -0.1
        return (a + b * wind_speed_2m) * area**-0.05


def aerodynamic_resistance(
    wind_speed: ArrayLike,
    measurement_height: ArrayLike = 2.0,
    roughness_length: ArrayLike = OPEN_WATER_ROUGHNESS,
    von_karman: float = VON_KARMAN,
) -> ArrayLike:
    """Aerodynamic resistance to heat and vapour transfer over water, neutral stability.

    Parameters
    ----------
    wind_speed : array_like
        Wind speed at ``measurement_height``. [m s-1]
    measurement_height : array_like, optional
        Height of wind and humidity measurements. [m]
    roughness_length : array_like, optional
        Roughness length z0, taken equal for momentum and vapour. [m]
    von_karman : float, optional
        Von Kármán constant k. [-]

    Returns
    -------
    array_like
        ra = ln(zm/z0) ln(zh/z0) / (k² uz), zm = zh, d = 0. [s m-1]

    Notes
    -----
    FAO-56 eq. 4 with zero displacement height and z0h = z0m, as is usual over water. With k = 0.41
    and z0 = 1e-3 m, ra = 343.7 / u2 (docs/methods.md#penman_monteith_open_water). Infinite at zero
    wind.

    References
    ----------
    Allen et al. (1998), FAO-56, eq. 4.
    """
    with np.errstate(invalid="ignore", divide="ignore"):
        log_term = np.log(measurement_height / roughness_length)
        return log_term * log_term / (von_karman**2 * wind_speed)  # Eq. 4


def mass_transfer_coefficient(
    wind_speed: ArrayLike,
    air_density: ArrayLike,
    surface_air_pressure: ArrayLike,
    measurement_height: ArrayLike = 2.0,
    roughness_length: ArrayLike = OPEN_WATER_ROUGHNESS,
    von_karman: float = VON_KARMAN,
    water_density: ArrayLike = 1000.0,
) -> ArrayLike:
    """Vapour transfer coefficient B of the log-profile aerodynamic method.

    Parameters
    ----------
    wind_speed : array_like
        Wind speed at ``measurement_height``. [m s-1]
    air_density : array_like
        Air density ρa. [kg m-3]
    surface_air_pressure : array_like
        Air pressure p. [Pa]
    measurement_height : array_like, optional
        Height z2 of the wind and humidity measurements. [m]
    roughness_length : array_like, optional
        Roughness length z0 (not a displacement height). [m]
    von_karman : float, optional
        Von Kármán constant k (Chow et al. 1988 use 0.4). [-]
    water_density : array_like, optional
        ρw; 1000 keeps depth consistent with gridded precipitation
        (docs/methods.md#units-and-conventions). [kg m-3]

    Returns
    -------
    array_like
        B = 0.622 k² ρa u2 / (p ρw [ln(z2/z0)]²). [m Pa-1 s-1]

    Notes
    -----
    Neutral stability, equal roughness for momentum and vapour. Chow Ex. 3.5.2 gives
    B = 4.54e-11 m Pa-1 s-1 for u2 = 3 m s-1, z0 = 0.03 cm, ρa = 1.19, p = 101.3 kPa, ρw = 997.

    References
    ----------
    Chow, Maidment & Mays (1988), Applied Hydrology, eq. 3.5.16, Ex. 3.5.2.
    """
    with np.errstate(invalid="ignore", divide="ignore"):
        log_term = np.log(measurement_height / roughness_length)
        return (  # Eq. 3.5.16
            WATER_VAPOUR_RATIO
            * von_karman**2
            * air_density
            * wind_speed
            / (surface_air_pressure * water_density * log_term * log_term)
        )
