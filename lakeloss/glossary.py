"""The one glossary of quantity names and the units lakeloss computes in.

Climate inputs are keyed by their CF standard name where one exists (``air_temperature``,
``relative_humidity``, ...) and by a plain descriptive name otherwise
(``air_temperature_max``, ``pan_evaporation``). ``io/`` converts every input to the
``unit`` given here at ingest; ``physics/`` takes arrays in exactly these units; nothing
else converts units.

``unit`` is written in a form the pint library parses. ``limits`` are the physical bounds
outside which a value contradicts its declared unit (used by the plausibility checks at
ingest); they are deliberately wide: they catch Kelvin read as Celsius or fractions read as
percent, not unusual weather.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Quantity:
    """One named physical quantity of the glossary.

    Attributes
    ----------
    name : str
        Glossary name, used as config key and as input name of the physics functions.
    unit : str
        Unit lakeloss holds the quantity in (pint syntax).
    description : str
        One line for humans.
    limits : tuple of float
        Physical lower and upper bounds in ``unit`` (NaN-free data outside them is refused).
    cf_standard_name : str or None
        CF standard name of the quantity, where CF has one.
    """

    name: str
    unit: str
    description: str
    limits: tuple[float, float]
    cf_standard_name: str | None = None


_QUANTITIES = (
    Quantity(
        "air_temperature",
        "degC",
        "air temperature near the surface (daily mean)",
        (-90.0, 65.0),
        "air_temperature",
    ),
    Quantity(
        "air_temperature_max",
        "degC",
        "daily maximum air temperature",
        (-90.0, 65.0),
        "air_temperature",
    ),
    Quantity(
        "air_temperature_min",
        "degC",
        "daily minimum air temperature",
        (-90.0, 65.0),
        "air_temperature",
    ),
    Quantity(
        "relative_humidity",
        "percent",
        "relative humidity over water (daily mean)",
        (0.0, 105.0),
        "relative_humidity",
    ),
    Quantity(
        "relative_humidity_max",
        "percent",
        "daily maximum relative humidity",
        (0.0, 105.0),
        "relative_humidity",
    ),
    Quantity(
        "relative_humidity_min",
        "percent",
        "daily minimum relative humidity",
        (0.0, 105.0),
        "relative_humidity",
    ),
    Quantity(
        "dew_point_temperature",
        "degC",
        "dew-point temperature",
        (-100.0, 40.0),
        "dew_point_temperature",
    ),
    Quantity(
        "specific_humidity",
        "kg/kg",
        "specific humidity of the air",
        (0.0, 0.05),
        "specific_humidity",
    ),
    Quantity(
        "water_vapor_partial_pressure_in_air",
        "Pa",
        "actual vapour pressure",
        (0.0, 8000.0),
        "water_vapor_partial_pressure_in_air",
    ),
    Quantity(
        "wind_speed", "m/s", "wind speed at the measurement height", (0.0, 75.0), "wind_speed"
    ),
    Quantity("eastward_wind", "m/s", "eastward wind component", (-75.0, 75.0), "eastward_wind"),
    Quantity("northward_wind", "m/s", "northward wind component", (-75.0, 75.0), "northward_wind"),
    Quantity(
        "surface_downwelling_shortwave_flux_in_air",
        "W/m**2",
        "incoming solar (shortwave) radiation, daily mean flux",
        (-1.0, 1400.0),
        "surface_downwelling_shortwave_flux_in_air",
    ),
    Quantity(
        "surface_net_downward_radiative_flux",
        "W/m**2",
        "net all-wave radiation into the surface, daily mean flux",
        (-400.0, 1100.0),
        "surface_net_downward_radiative_flux",
    ),
    Quantity(
        "surface_air_pressure",
        "Pa",
        "air pressure at the surface",
        (30000.0, 110000.0),
        "surface_air_pressure",
    ),
    Quantity(
        "precipitation",
        "mm/day",
        "precipitation as a daily depth rate",
        (0.0, 2000.0),
        "precipitation_flux",
    ),
    Quantity(
        "pan_evaporation",
        "mm/day",
        "evaporation pan reading as a daily depth rate",
        (-5.0, 60.0),
        None,
    ),
    Quantity(
        "elevation", "m", "surface elevation above sea level", (-450.0, 9000.0), "surface_altitude"
    ),
    Quantity(
        "water_surface_temperature",
        "degC",
        "temperature of the water surface",
        (-5.0, 50.0),
        "surface_temperature",
    ),
    Quantity(
        "heat_storage_flux",
        "W/m**2",
        "heat going into storage in the water body (G)",
        (-1000.0, 1000.0),
        None,
    ),
)

QUANTITIES: dict[str, Quantity] = {q.name: q for q in _QUANTITIES}
"""Every climate quantity lakeloss can ingest, by glossary name."""

# Config keys that arrive in another form and become a glossary quantity at ingest.
# CF names precipitation_amount (kg m-2 per step) and precipitation_flux (kg m-2 s-1) both
# become `precipitation` [mm/day]; pan evaporation may arrive per step as well.
ALIASES: dict[str, str] = {
    "precipitation_amount": "precipitation",
    "precipitation_flux": "precipitation",
    "pan_evaporation_amount": "pan_evaporation",
}

# Inputs the pipeline derives for every run rather than reading from climate files.
DERIVED_INPUTS: dict[str, tuple[str, str]] = {
    "latitude": ("degrees_north", "latitude of the water body's centroid"),
    "day_of_year": ("1", "day of year at the middle of the time step (1..366)"),
    "area_m2": ("m**2", "water-surface area: the polygon's true area, or its area attribute"),
    "elevation": ("m", "water-surface elevation (constant, attribute or raster)"),
}

# Other CF standard names that mean a glossary quantity (amounts and rates in other forms).
STANDARD_NAME_SYNONYMS: dict[str, str] = {
    "precipitation_amount": "precipitation",
    "lwe_thickness_of_precipitation_amount": "precipitation",
    "lwe_precipitation_rate": "precipitation",
    "thickness_of_rainfall_amount": "precipitation",
    "rainfall_amount": "precipitation",
    "rainfall_flux": "precipitation",
    "integral_of_surface_downwelling_shortwave_flux_in_air_wrt_time": (
        "surface_downwelling_shortwave_flux_in_air"
    ),
}
"""CF standard names beyond each quantity's own ``cf_standard_name`` (used to recognise
variables in files, never as config keys)."""

SHORT_NAMES: dict[str, tuple[str, ...]] = {
    "air_temperature": ("tas", "t2m", "tg", "tmp", "tmean", "tavg", "tair", "t2"),
    "air_temperature_max": ("tasmax", "mx2t", "tx", "tmx", "tmax", "tmmx", "max_temp"),
    "air_temperature_min": ("tasmin", "mn2t", "tn", "tmn", "tmin", "tmmn", "min_temp"),
    "dew_point_temperature": ("d2m", "tdps", "tdew", "tdmean", "dewpoint"),
    "relative_humidity": ("hurs", "hu", "rh", "rhum"),
    "relative_humidity_max": ("hursmax", "rmax", "rh_tmin"),
    "relative_humidity_min": ("hursmin", "rmin", "rh_tmax"),
    "specific_humidity": ("huss", "q2m", "qair", "sph"),
    "water_vapor_partial_pressure_in_air": ("vp", "vap", "vpr"),
    "wind_speed": ("sfcwind", "si10", "fg", "ws", "vs", "wind", "wspd"),
    "eastward_wind": ("uas", "u10"),
    "northward_wind": ("vas", "v10"),
    "surface_downwelling_shortwave_flux_in_air": ("rsds", "ssrd", "qq", "srad", "swdown"),
    "surface_net_downward_radiative_flux": ("rnet", "netrad"),
    "surface_air_pressure": ("ps", "sp", "psurf", "pres"),
    "precipitation": ("pr", "tp", "rr", "pre", "prcp", "ppt", "precip", "rainf", "daily_rain"),
    "pan_evaporation": ("epan", "evap_pan", "pan_evap"),
    "elevation": ("orog", "elevation", "altitude", "surface_altitude", "dem"),
}
"""Variable names that data products commonly give each quantity (matched ignoring case):
ERA5 (``t2m``, ``d2m``, ``u10``, ``v10``, ``si10``, ``ssrd``, ``tp``, ``sp``, ``mx2t``,
``mn2t``), CMIP (``tas``, ``tasmax``, ``tasmin``, ``hurs``, ``huss``, ``sfcWind``,
``uas``, ``vas``, ``rsds``, ``pr``, ``ps``, ``orog``), and gridded-observation products:
E-OBS-style (``tg``, ``tx``, ``tn``, ``rr``, ``hu``, ``qq``, ``fg``), CRU-style (``tmp``,
``tmx``, ``tmn``, ``pre``, ``vap``), Daymet/gridMET/PRISM/TerraClimate-style (``tmax``,
``tmin``, ``tmmx``, ``tmmn``, ``prcp``, ``ppt``, ``srad``, ``vp``, ``vs``, ``ws``,
``rmax``, ``rmin``, ``sph``), SILO-style (``max_temp``, ``min_temp``, ``daily_rain``,
``evap_pan``, ``rh_tmax``, ``rh_tmin``) and WFDE5-style (``Tair``, ``Qair``, ``Wind``,
``SWdown``, ``Rainf``, ``PSurf``). A name only proposes a match: the file's units must
still express the quantity. Humidity at the time of the daily maximum temperature is the
day's minimum relative humidity, hence ``rh_tmax`` under ``relative_humidity_min``."""
