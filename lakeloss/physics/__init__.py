"""Pure physics of open-water evaporation: functions of arrays, no I/O.

Modules
-------
atmosphere
    Vapour pressure, humidity conversions, latent heat, densities, pressure, psychrometric
    constant, wind-height adjustment.
radiation
    Extraterrestrial, clear-sky, shortwave, longwave and net radiation over water.
windfunctions
    Wind functions, mass-transfer coefficient, aerodynamic resistance.
methods
    One function per evaporation method, rates in mm day-1.
forcing
    From glossary-named inputs to the quantities the methods take.
registry
    Method specifications, input and parameter checks, and :func:`registry.evaporate`.
"""

from lakeloss.physics import atmosphere, forcing, methods, radiation, registry, windfunctions

__all__ = ["atmosphere", "forcing", "methods", "radiation", "registry", "windfunctions"]
