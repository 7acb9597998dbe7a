"""Open-water evaporation methods: one function per published method, rates in mm day-1.

Each function computes one time step from prepared forcing (see :mod:`lakeloss.physics.forcing`) in
SI units: pressures and deficits in Pa, Δ and γ in Pa K-1, fluxes as daily means in W m-2, latent
heat in J kg-1. Rates are depth rates in mm day-1; positive is loss, negative (condensation,
negative net radiation) is returned as computed. A mass flux becomes a depth with ρw = 1000 kg m-3
unless stated (docs/methods.md#units-and-conventions).
"""

from __future__ import annotations

from lakeloss.physics._types import ArrayLike
from lakeloss.physics.atmosphere import SPECIFIC_HEAT_AIR
from lakeloss.physics.radiation import SECONDS_PER_DAY

MM_PER_M = 1000.0
"""Millimetres per metre."""


def energy_balance_evaporation(
    net_radiation: ArrayLike,
    latent_heat: ArrayLike,
    heat_storage_flux: ArrayLike = 0.0,
    water_density: ArrayLike = 1000.0,
) -> ArrayLike:
    """Evaporation when all available energy goes to evaporation (radiation method).

    Parameters
    ----------
    net_radiation : array_like
        Net radiation into the water surface Rn, daily mean. [W m-2]
    latent_heat : array_like
        Latent heat of vaporisation λ. [J kg-1]
    heat_storage_flux : array_like, optional
        Heat going into storage G (> 0 when the water warms). [W m-2]
    water_density : array_like, optional
        ρw, converting the mass flux to a depth. [kg m-3]

    Returns
    -------
    array_like
        Er = (Rn - G) / (λ ρw), as a depth rate. [mm day-1]

    Notes
    -----
    Sensible heat is neglected. Chow Ex. 3.5.1: Rn = 200 W m-2, λ = 2441 kJ kg-1,
    ρw = 997 kg m-3 give 8.22e-8 m s-1 = 7.10 mm day-1.

    References
    ----------
    Chow, Maidment & Mays (1988), Applied Hydrology, §3.5, energy balance method, Ex. 3.5.1.
    """
    mass_flux = (net_radiation - heat_storage_flux) / latent_heat  # [kg m-2 s-1]
    return mass_flux / water_density * SECONDS_PER_DAY * MM_PER_M


def aerodynamic_evaporation(
    vapour_pressure_deficit: ArrayLike,
    mass_transfer_coefficient: ArrayLike,
) -> ArrayLike:
    """Aerodynamic (mass-transfer) evaporation Ea = B (eas - ea).

    Parameters
    ----------
    vapour_pressure_deficit : array_like
        eas - ea, with eas at the air temperature (a potential rate, as Chow does) or at the
        water-surface temperature when known. [Pa]
    mass_transfer_coefficient : array_like
        B from :func:`lakeloss.physics.windfunctions.mass_transfer_coefficient`. [m Pa-1 s-1]

    Returns
    -------
    array_like
        Ea; zero when saturated, negative (condensation) when ea > eas. [mm day-1]

    References
    ----------
    Chow, Maidment & Mays (1988), Applied Hydrology, §3.5, Ex. 3.5.2.
    """
    return mass_transfer_coefficient * vapour_pressure_deficit * SECONDS_PER_DAY * MM_PER_M


def combination_evaporation(
    energy_rate: ArrayLike,
    aerodynamic_rate: ArrayLike,
    slope: ArrayLike,
    psychrometric_constant: ArrayLike,
) -> ArrayLike:
    """Penman-type combination of the energy-balance and aerodynamic rates.

    Parameters
    ----------
    energy_rate : array_like
        Er from :func:`energy_balance_evaporation`. [mm day-1]
    aerodynamic_rate : array_like
        Ea from :func:`aerodynamic_evaporation`. [mm day-1]
    slope : array_like
        Δ at the air temperature. [Pa K-1]
    psychrometric_constant : array_like
        γ. [Pa K-1]

    Returns
    -------
    array_like
        E = Δ/(Δ+γ) Er + γ/(Δ+γ) Ea, between Er and Ea. [mm day-1]

    References
    ----------
    Chow, Maidment & Mays (1988), Applied Hydrology, eq. 3.5.21, Ex. 3.5.3.
    """
    weight = slope / (slope + psychrometric_constant)
    return weight * energy_rate + (1.0 - weight) * aerodynamic_rate  # Eq. 3.5.21


def equilibrium_evaporation(
    net_radiation: ArrayLike,
    slope: ArrayLike,
    psychrometric_constant: ArrayLike,
    latent_heat: ArrayLike,
    heat_storage_flux: ArrayLike = 0.0,
    water_density: ArrayLike = 1000.0,
) -> ArrayLike:
    """Equilibrium evaporation Δ/(Δ+γ) (Rn - G)/(λ ρw).

    Parameters
    ----------
    net_radiation : array_like
        Net radiation Rn. [W m-2]
    slope : array_like
        Δ. [Pa K-1]
    psychrometric_constant : array_like
        γ. [Pa K-1]
    latent_heat : array_like
        λ. [J kg-1]
    heat_storage_flux : array_like, optional
        G. [W m-2]
    water_density : array_like, optional
        ρw. [kg m-3]

    Returns
    -------
    array_like
        Evaporation into air saturated by the surface, no advection. [mm day-1]

    References
    ----------
    Priestley, C.H.B., Taylor, R.J. (1972), Mon. Weather Rev. 100, 81-92.
    """
    weight = slope / (slope + psychrometric_constant)
    return weight * energy_balance_evaporation(
        net_radiation, latent_heat, heat_storage_flux, water_density
    )


def priestley_taylor_evaporation(
    net_radiation: ArrayLike,
    slope: ArrayLike,
    psychrometric_constant: ArrayLike,
    latent_heat: ArrayLike,
    heat_storage_flux: ArrayLike = 0.0,
    alpha: float = 1.26,
    water_density: ArrayLike = 1000.0,
) -> ArrayLike:
    """Priestley-Taylor evaporation, alpha times the equilibrium rate.

    Parameters
    ----------
    net_radiation : array_like
        Net radiation Rn. [W m-2]
    slope : array_like
        Δ. [Pa K-1]
    psychrometric_constant : array_like
        γ. [Pa K-1]
    latent_heat : array_like
        λ. [J kg-1]
    heat_storage_flux : array_like, optional
        G. [W m-2]
    alpha : float, optional
        Priestley-Taylor coefficient; 1.26 (Priestley & Taylor 1972), Chow Ex. 3.5.4 uses
        1.3. [-]
    water_density : array_like, optional
        ρw. [kg m-3]

    Returns
    -------
    array_like
        E = α Δ/(Δ+γ) (Rn - G)/(λ ρw). [mm day-1]

    References
    ----------
    Priestley & Taylor (1972); Chow, Maidment & Mays (1988), Ex. 3.5.4.
    """
    return alpha * equilibrium_evaporation(
        net_radiation, slope, psychrometric_constant, latent_heat, heat_storage_flux, water_density
    )


def penman_evaporation(
    net_radiation: ArrayLike,
    vapour_pressure_deficit: ArrayLike,
    wind_function: ArrayLike,
    slope: ArrayLike,
    psychrometric_constant: ArrayLike,
    latent_heat: ArrayLike,
    heat_storage_flux: ArrayLike = 0.0,
) -> ArrayLike:
    """Penman combination equation with an empirical wind function.

    Parameters
    ----------
    net_radiation : array_like
        Net radiation Rn (water albedo). [W m-2]
    vapour_pressure_deficit : array_like
        D = es - ea. [Pa]
    wind_function : array_like
        f(u), e.g. :func:`~lakeloss.physics.windfunctions.shuttleworth_wind_function`.
        [mm day-1 kPa-1]
    slope : array_like
        Δ. [Pa K-1]
    psychrometric_constant : array_like
        γ. [Pa K-1]
    latent_heat : array_like
        λ. [J kg-1]
    heat_storage_flux : array_like, optional
        G. [W m-2]

    Returns
    -------
    array_like
        E = [Δ (Rn - G)/λ + γ f(u) D] / (Δ + γ). [mm day-1]

    Notes
    -----
    With f(u) = 6.43 (1 + 0.536 u2)/λ this is Shuttleworth's (1993) open-water Penman
    equation E = [Δ(Rn - G) + γ 6.43 (1 + 0.536 u2) D] / [λ (Δ + γ)].

    References
    ----------
    Penman, H.L. (1948), Proc. R. Soc. Lond. A 193, 120-145; Shuttleworth (1993), eq. 4.2.30.
    """
    radiative = energy_balance_evaporation(net_radiation, latent_heat, heat_storage_flux)
    aerodynamic = wind_function * vapour_pressure_deficit / 1000.0  # D in kPa
    return (slope * radiative + psychrometric_constant * aerodynamic) / (  # Eq. 4.2.30
        slope + psychrometric_constant
    )


def penman_monteith_open_water_evaporation(
    net_radiation: ArrayLike,
    vapour_pressure_deficit: ArrayLike,
    aerodynamic_resistance: ArrayLike,
    air_density: ArrayLike,
    slope: ArrayLike,
    psychrometric_constant: ArrayLike,
    latent_heat: ArrayLike,
    heat_storage_flux: ArrayLike = 0.0,
    specific_heat: float = SPECIFIC_HEAT_AIR,
) -> ArrayLike:
    """Penman-Monteith evaporation for open water (zero surface resistance).

    Parameters
    ----------
    net_radiation : array_like
        Net radiation Rn. [W m-2]
    vapour_pressure_deficit : array_like
        D. [Pa]
    aerodynamic_resistance : array_like
        ra from :func:`~lakeloss.physics.windfunctions.aerodynamic_resistance`. [s m-1]
    air_density : array_like
        ρa. [kg m-3]
    slope : array_like
        Δ. [Pa K-1]
    psychrometric_constant : array_like
        γ. [Pa K-1]
    latent_heat : array_like
        λ. [J kg-1]
    heat_storage_flux : array_like, optional
        G. [W m-2]
    specific_heat : float, optional
        cp of air. [J kg-1 K-1]

    Returns
    -------
    array_like
        E = [Δ (Rn - G) + ρa cp D / ra] / [λ (Δ + γ)], as a depth rate. [mm day-1]

    Notes
    -----
    FAO-56 eq. 3 with rs = 0. The equivalent wind function 86400 ρa cp/(λ γ ra) has no
    still-air term, so PM is lower than the empirical functions in calm conditions.

    References
    ----------
    Allen et al. (1998), FAO-56, eq. 3.
    """
    energy = slope * (net_radiation - heat_storage_flux)
    ventilation = air_density * specific_heat * vapour_pressure_deficit / aerodynamic_resistance
    mass_flux = (energy + ventilation) / (latent_heat * (slope + psychrometric_constant))  # Eq. 3
    return mass_flux * SECONDS_PER_DAY  # kg m-2 day-1 = mm day-1 with ρw = 1000


def pan_coefficient_evaporation(
    pan_evaporation: ArrayLike, pan_coefficient: ArrayLike = 0.7
) -> ArrayLike:
    """Lake evaporation from pan evaporation times a pan coefficient.

    Parameters
    ----------
    pan_evaporation : array_like
        Pan evaporation rate. [mm day-1]
    pan_coefficient : array_like, optional
        Kp; 0.7 for a Class A pan on an annual basis, range about 0.6-0.8 (Kohler, Nordenson
        & Fox 1955). [-]

    Returns
    -------
    array_like
        E = Kp Epan. [mm day-1]

    Notes
    -----
    FAO-56 Table 5 pan coefficients give grass reference ET, not lake evaporation, and must
    not be used here. Monthly Kp varies with heat storage in deep lakes.

    References
    ----------
    Kohler, Nordenson & Fox (1955), US Weather Bureau Research Paper 38.
    """
    return pan_coefficient * pan_evaporation
