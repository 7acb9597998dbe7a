"""Make the invented Tarrowind Basin demo scenario for lakeloss.

The scenario is fictional: a semi-arid grazing district split into three invented districts
(Quillarn, Stavemoor, Orvenna) with a few hundred farm dams and stock ponds, a township's
detention basins, a mine's tailings cells and three reservoirs with islands. This script
writes

* ``farm_dams.gpkg``, layer ``dams``: the water bodies in a projected CRS (UTM metres);
* ``climate.nc``: two years (2031-2032) of daily gridded climate on a 0.05 degree
  latitude-longitude grid, CF-1.8, packed int16 with zlib compression;
* ``climate_monthly.nc``: the monthly means of the same variables.

All values come from a seeded random generator, so running the script again rewrites the
same contents::

    python demo_layers/make_demo.py            # into demo_layers/
    python demo_layers/make_demo.py --out DIR  # anywhere else

Nothing here describes a real place, period, agency or person.
"""

from __future__ import annotations

import argparse
from dataclasses import dataclass
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import shapely
import xarray as xr
from pyproj import CRS, Transformer
from shapely import affinity
from shapely.geometry import Point, Polygon, box

SEED = 20310101
"""Root seed; the layer and the climate draw from independent child streams of it."""

LAYER_CRS = "EPSG:32754"
"""Projected CRS of the water-body layer (a UTM zone; the coordinates are only numbers)."""

LAYER_NAME = "dams"
LAYER_FILE = "farm_dams.gpkg"
CLIMATE_FILE = "climate.nc"
MONTHLY_FILE = "climate_monthly.nc"

# Extent of the scenario in LAYER_CRS [m]; district borders split it into three parts.
EXTENT = (460_000.0, 6_590_000.0, 530_000.0, 6_650_000.0)
QUILLARN_EAST_EDGE = 488_000.0
STAVEMOOR_SOUTH_EDGE = 6_620_000.0

# Climate grid: cell edges on multiples of 0.05 degree, covering EXTENT with ~0.28 degree margin.
CELL_DEG = 0.05
LON_WEST, N_LON = 140.30, 26
LAT_SOUTH, N_LAT = -31.10, 22
START, END = "2031-01-01", "2032-12-31"
ELEVATION_M = 250.0

# Cells without data, as (lat index, lon index) from the south-west corner: a corner of sea
# (masked as a land-only product would) and a two-cell data gap inside the district.
SEA_CELLS = tuple((j, i) for j in range(4) for i in range(4) if i + j < 4)
GAP_CELLS = ((10, 12), (10, 13))

FILL_INT16 = np.int16(-32767)


@dataclass(frozen=True)
class SmallKind:
    """How one kind of small water body is drawn.

    Attributes
    ----------
    kind : str
        Value of the ``kind`` attribute.
    count : int
        Number of bodies drawn at random positions.
    area_ha : tuple of float
        Log-uniform range of surface area. [ha]
    depth_m : tuple of float
        Uniform range of mean depth. [m]
    label : str
        Word used in the invented name.
    """

    kind: str
    count: int
    area_ha: tuple[float, float]
    depth_m: tuple[float, float]
    label: str


# Size and depth ranges follow the sanity ranges of docs/methods.md#plausible-ranges (farm dams
# 0.05-1 ha and 2-5 m, stock ponds 0.1-2 ha, detention 0.1-5 ha, tailings 10-1000+ ha).
SMALL_KINDS = (
    SmallKind("farm_dam", 226, (0.05, 1.0), (2.0, 5.0), "Dam"),
    SmallKind("stock_pond", 80, (0.1, 2.0), (1.5, 4.0), "Tank"),
    SmallKind("detention_pond", 14, (0.1, 5.0), (1.0, 3.0), "Basin"),
    SmallKind("tailings_pond", 3, (10.0, 100.0), (0.5, 2.0), "Tailings Cell"),
)


@dataclass(frozen=True)
class Reservoir:
    """One of the hand-placed reservoirs.

    Attributes
    ----------
    name : str
        Invented name.
    centre : tuple of float
        Centre in LAYER_CRS. [m]
    area_km2 : float
        Surface area before the islands are cut out. [km2]
    aspect : float
        Length-to-width ratio of the underlying ellipse. [1]
    rotation_deg : float
        Orientation of the long axis, anticlockwise from east. [degree]
    islands : int
        Number of islands (holes).
    depth_m : float
        Mean depth. [m]
    """

    name: str
    centre: tuple[float, float]
    area_km2: float
    aspect: float
    rotation_deg: float
    islands: int
    depth_m: float


RESERVOIRS = (
    Reservoir("Orvenna Reservoir", (514_000.0, 6_604_000.0), 15.0, 7.0, 20.0, 2, 14.0),
    Reservoir("Stavemoor Weir Pool", (519_200.0, 6_631_300.0), 6.0, 7.0, -40.0, 1, 7.5),
    Reservoir("Quillarn Storage", (472_000.0, 6_628_000.0), 1.6, 1.8, 70.0, 1, 9.0),
)

# The two larger reservoirs sit on climate-cell corners so that they span several cells.
# Township and mine sites around which detention basins and tailings cells are drawn [m].
TOWNSHIP = ("Quillarn Township", (478_500.0, 6_611_000.0), 1_500.0)
MINE = ("Stavemoor Mine", (522_000.0, 6_645_000.0), 1_800.0)


# --------------------------------------------------------------------------- shapes


def perturbed_ellipse(
    rng: np.random.Generator,
    area_m2: float,
    aspect: float,
    roughness: float,
    n_vertices: int,
    n_harmonics: int = 5,
) -> Polygon:
    """Draw an irregular, star-shaped outline of a given area centred on the origin.

    Parameters
    ----------
    rng : numpy.random.Generator
        Random stream.
    area_m2 : float
        Area of the outline. [m2]
    aspect : float
        Length-to-width ratio of the underlying ellipse (long axis along x). [1]
    roughness : float
        Amplitude of the log-radius harmonics; 0 gives a plain ellipse. [1]
    n_vertices : int
        Number of vertices.
    n_harmonics : int
        Highest harmonic used (from 2).

    Returns
    -------
    shapely.Polygon
        A valid polygon: the radius is positive at every angle, so the outline is simple.
    """
    theta = np.linspace(0.0, 2.0 * np.pi, n_vertices, endpoint=False)
    radius = aspect / np.hypot(np.cos(theta), aspect * np.sin(theta))
    orders = np.arange(2, n_harmonics + 2)
    amplitudes = roughness * rng.uniform(0.3, 1.0, orders.size) / orders
    phases = rng.uniform(0.0, 2.0 * np.pi, orders.size)
    # exp() keeps the radius positive whatever the draw, hence a simple (valid) outline.
    radius = radius * np.exp(np.cos(np.outer(theta, orders) + phases) @ amplitudes)
    outline = Polygon(np.column_stack([radius * np.cos(theta), radius * np.sin(theta)]))
    return affinity.scale(outline, *(2 * [np.sqrt(area_m2 / outline.area)]), origin=(0, 0))


def farm_dam_outline(rng: np.random.Generator, area_m2: float) -> Polygon:
    """Draw a farm-dam outline: an irregular ellipse with one straight side (the wall).

    Parameters
    ----------
    rng : numpy.random.Generator
        Random stream.
    area_m2 : float
        Area of the outline. [m2]

    Returns
    -------
    shapely.Polygon
        Valid polygon centred near the origin.
    """
    outline = perturbed_ellipse(rng, area_m2, rng.uniform(1.1, 1.8), 0.25, 28)
    xmin, ymin, xmax, ymax = outline.bounds
    wall_x = xmin + rng.uniform(0.72, 0.85) * (xmax - xmin)
    walled = outline.intersection(box(xmin - 1, ymin - 1, wall_x, ymax + 1))
    return affinity.scale(walled, *(2 * [np.sqrt(area_m2 / walled.area)]), origin=(0, 0))


def place(outline: Polygon, rng: np.random.Generator, centre: tuple[float, float]) -> Polygon:
    """Rotate an outline by a random angle and move it to ``centre`` [m]."""
    turned = affinity.rotate(outline, rng.uniform(0.0, 180.0), origin=(0, 0))
    return affinity.translate(turned, *centre)


def reservoir_polygon(rng: np.random.Generator, spec: Reservoir) -> Polygon:
    """Draw a reservoir with arms and ``spec.islands`` islands cut out as holes.

    Parameters
    ----------
    rng : numpy.random.Generator
        Random stream.
    spec : Reservoir
        Size, shape and position.

    Returns
    -------
    shapely.Polygon
        Valid polygon with ``spec.islands`` interior rings.
    """
    outline = perturbed_ellipse(rng, spec.area_km2 * 1e6, spec.aspect, 0.45, 360, 9)
    outline = affinity.rotate(outline, spec.rotation_deg, origin=(0, 0))
    shell = affinity.translate(outline, *spec.centre)
    # Islands sit well inside the shoreline so that they never touch it or each other.
    inner = shell.buffer(-0.25 * np.sqrt(shell.area / spec.aspect))
    islands: list[Polygon] = []
    while len(islands) < spec.islands:
        x, y = _random_point_in(rng, inner)
        island_area = rng.uniform(0.01, 0.03) * shell.area
        island = place(perturbed_ellipse(rng, island_area, 1.6, 0.3, 40), rng, (x, y))
        if island.buffer(60.0).within(shell) and not any(island.intersects(i) for i in islands):
            islands.append(island)
    return Polygon(shell.exterior.coords, [i.exterior.coords for i in islands])


def _random_point_in(rng: np.random.Generator, area: Polygon) -> tuple[float, float]:
    """Draw a point uniformly inside ``area`` by rejection from its bounding box."""
    xmin, ymin, xmax, ymax = area.bounds
    while True:
        x, y = rng.uniform(xmin, xmax), rng.uniform(ymin, ymax)
        if area.contains(Point(x, y)):
            return x, y


# --------------------------------------------------------------------------- the layer


def district_of(x: float, y: float) -> str:
    """Name of the invented district holding the point (x, y) [m in LAYER_CRS]."""
    if x < QUILLARN_EAST_EDGE:
        return "Quillarn"
    return "Stavemoor" if y >= STAVEMOOR_SOUTH_EDGE else "Orvenna"


def grid_points_in_layer_crs(lon: np.ndarray, lat: np.ndarray) -> np.ndarray:
    """Project longitude/latitude points [degree] to LAYER_CRS; returns an (n, 2) array [m]."""
    to_layer = Transformer.from_crs("EPSG:4326", LAYER_CRS, always_xy=True)
    x, y = to_layer.transform(np.asarray(lon, float), np.asarray(lat, float))
    return np.column_stack([x, y])


# Ponds placed on purpose: (kind, longitude, latitude [degree], area [ha]). They exercise
# the cell-edge, cell-corner and no-data handling of the zonal weights.
SPECIAL_SITES = (
    ("stock_pond", 140.70, -30.437, 1.2),  # on the 140.70 E cell edge
    ("farm_dam", 140.85, -30.712, 0.6),  # on the 140.85 E cell edge
    ("stock_pond", 141.05, -30.362, 0.8),  # on the 141.05 E cell edge
    ("farm_dam", 141.20, -30.512, 0.4),  # on the 141.20 E cell edge
    ("stock_pond", 140.95, -30.40, 1.5),  # on a cell corner: four cells
    ("farm_dam", 141.10, -30.65, 0.9),  # on a cell corner: four cells
    ("stock_pond", 140.90, -30.58, 0.7),  # on the west edge of the data gap: partly covered
    ("farm_dam", 140.93, -30.60, 0.5),  # on the south edge of the data gap: partly covered
    ("farm_dam", 140.9125, -30.575, 0.3),  # wholly inside the data gap: no valid climate
)


def special_sites() -> list[tuple[str, tuple[float, float], float]]:
    """The SPECIAL_SITES with their centres projected to LAYER_CRS.

    Returns
    -------
    list of (kind, centre, area_ha)
        Kind, centre in LAYER_CRS [m] and surface area [ha] of each site.
    """
    kinds, lon, lat, areas = zip(*SPECIAL_SITES, strict=True)
    centres = grid_points_in_layer_crs(np.array(lon), np.array(lat))
    return [
        (k, (float(c[0]), float(c[1])), a) for k, c, a in zip(kinds, centres, areas, strict=True)
    ]


def _fits(candidate: Polygon, taken: list[Polygon], gap_m: float) -> bool:
    """True when ``candidate`` lies in EXTENT and keeps ``gap_m`` [m] from every taken body."""
    if not candidate.within(box(*EXTENT)):
        return False
    return not taken or not shapely.intersects(candidate.buffer(gap_m), np.array(taken)).any()


def _small_body(rng: np.random.Generator, kind: SmallKind, area_ha: float) -> Polygon:
    """Outline of one small body of ``kind`` and area [ha], centred at the origin."""
    if kind.kind == "farm_dam":
        return farm_dam_outline(rng, area_ha * 1e4)
    return perturbed_ellipse(rng, area_ha * 1e4, rng.uniform(1.0, 2.2), 0.3, 32)


def _site_centre(
    rng: np.random.Generator, kind: SmallKind, blocks: np.ndarray
) -> tuple[float, float]:
    """Draw a centre [m] for a small body: near the township, the mine, or a grazing block."""
    if kind.kind == "detention_pond":
        _, (cx, cy), spread = TOWNSHIP
    elif kind.kind == "tailings_pond":
        _, (cx, cy), spread = MINE
    else:
        cx, cy = blocks[rng.integers(len(blocks))]
        spread = 1_300.0
    return float(cx + rng.normal(0, spread)), float(cy + rng.normal(0, spread))


def draw_small_bodies(rng: np.random.Generator, taken: list[Polygon]) -> list[dict]:
    """Draw every small water body, clustered on grazing blocks, the township and the mine.

    Parameters
    ----------
    rng : numpy.random.Generator
        Random stream.
    taken : list of shapely.Polygon
        Bodies already placed (reservoirs); extended in place.

    Returns
    -------
    list of dict
        One record per body with keys ``kind``, ``depth_m`` [m] and ``geometry``; the
        SPECIAL_SITES come first (placed as they are: the default seed leaves them disjoint).
    """
    xmin, ymin, xmax, ymax = EXTENT
    blocks = np.column_stack(
        [rng.uniform(xmin + 2e3, xmax - 2e3, 64), rng.uniform(ymin + 2e3, ymax - 2e3, 64)]
    )
    by_kind = {k.kind: k for k in SMALL_KINDS}
    records = []
    for kind_name, centre, area_ha in special_sites():
        kind = by_kind[kind_name]
        body = place(_small_body(rng, kind, area_ha), rng, centre)
        taken.append(body)
        records.append({"kind": kind.kind, "depth_m": rng.uniform(*kind.depth_m), "geometry": body})
    for kind in SMALL_KINDS:
        drawn = 0
        while drawn < kind.count:
            area_ha = float(np.exp(rng.uniform(*np.log(kind.area_ha))))
            body = place(_small_body(rng, kind, area_ha), rng, _site_centre(rng, kind, blocks))
            if _fits(body, taken, 120.0 if kind.kind != "tailings_pond" else 40.0):
                taken.append(body)
                depth = rng.uniform(*kind.depth_m)
                records.append({"kind": kind.kind, "depth_m": depth, "geometry": body})
                drawn += 1
    return records


def _invented_names(records: list[dict]) -> list[str]:
    """Name each body after its site and kind: 'Orvenna Block 076 Dam 2' and the like."""
    label = {k.kind: k.label for k in SMALL_KINDS}
    counts: dict[str, int] = {}
    names = []
    for rec in records:
        if rec["kind"] == "reservoir":
            names.append(rec["name"])
            continue
        centre = rec["geometry"].centroid
        if rec["kind"] == "detention_pond":
            site = TOWNSHIP[0]
        elif rec["kind"] == "tailings_pond":
            site = MINE[0]
        else:
            # Grazing blocks are 5 km squares numbered within the district.
            block = int((centre.x - EXTENT[0]) // 5e3) + 14 * int((centre.y - EXTENT[1]) // 5e3)
            site = f"{district_of(centre.x, centre.y)} Block {block:03d}"
        key = f"{site} {label[rec['kind']]}"
        counts[key] = counts.get(key, 0) + 1
        names.append(f"{key} {counts[key]}")
    return names


def make_layer(rng: np.random.Generator) -> gpd.GeoDataFrame:
    """Build the invented water-body layer.

    Parameters
    ----------
    rng : numpy.random.Generator
        Random stream.

    Returns
    -------
    geopandas.GeoDataFrame
        Columns ``dam_id`` (unique int), ``name``, ``kind``, ``district``, ``depth_m`` [m]
        and polygon ``geometry`` in LAYER_CRS, sorted by ``dam_id``.
    """
    records = []
    for spec in RESERVOIRS:
        body = reservoir_polygon(rng, spec)
        records.append(
            {"kind": "reservoir", "name": spec.name, "depth_m": spec.depth_m, "geometry": body}
        )
    records += draw_small_bodies(rng, [r["geometry"] for r in records])
    names = _invented_names(records)
    frame = gpd.GeoDataFrame(
        {
            "dam_id": rng.permutation(len(records)).astype("int64") + 1001,
            "name": names,
            "kind": [r["kind"] for r in records],
            "district": [district_of(*r["geometry"].centroid.coords[0]) for r in records],
            "depth_m": np.round([r["depth_m"] for r in records], 1),
        },
        geometry=shapely.set_precision([r["geometry"] for r in records], 0.01),
        crs=LAYER_CRS,
    )
    return frame.sort_values("dam_id", ignore_index=True)


# --------------------------------------------------------------------------- the climate


def grid_coordinates() -> tuple[np.ndarray, np.ndarray]:
    """Cell-centre longitudes and latitudes of the demo grid, ascending [degree]."""
    lon = np.round(LON_WEST + CELL_DEG * (np.arange(N_LON) + 0.5), 6)
    lat = np.round(LAT_SOUTH + CELL_DEG * (np.arange(N_LAT) + 0.5), 6)
    return lon, lat


def extraterrestrial_radiation(latitude_deg: np.ndarray, day_of_year: np.ndarray) -> np.ndarray:
    """Daily extraterrestrial radiation Ra [MJ m-2 d-1] (FAO-56, Allen et al. 1998, eqs. 21-25).

    Parameters
    ----------
    latitude_deg : array_like
        Latitude, south negative. [degree]
    day_of_year : array_like
        Day of the year, 1-366. [1]

    Returns
    -------
    numpy.ndarray
        Ra broadcast over the inputs. [MJ m-2 d-1]
    """
    phi = np.deg2rad(latitude_deg)
    angle = 2.0 * np.pi * np.asarray(day_of_year) / 365.0
    inverse_distance = 1.0 + 0.033 * np.cos(angle)  # Eq. 23
    declination = 0.409 * np.sin(angle - 1.39)  # Eq. 24
    sunset = np.arccos(np.clip(-np.tan(phi) * np.tan(declination), -1.0, 1.0))  # Eq. 25
    return (
        (24.0 * 60.0 / np.pi)
        * 0.0820
        * inverse_distance
        * (  # Eq. 21
            sunset * np.sin(phi) * np.sin(declination)
            + np.cos(phi) * np.cos(declination) * np.sin(sunset)
        )
    )


def _ar1(rng: np.random.Generator, n: int, persistence: float, spread: float) -> np.ndarray:
    """Stationary AR(1) series of length n with lag-1 correlation and standard deviation."""
    shocks = rng.normal(0.0, spread * np.sqrt(1.0 - persistence**2), n)
    series = np.empty(n)
    series[0] = rng.normal(0.0, spread)
    for t in range(1, n):
        series[t] = persistence * series[t - 1] + shocks[t]
    return series


def _rain_days(rng: np.random.Generator, season_winter: np.ndarray) -> np.ndarray:
    """Wet-day occurrence (bool per day) from a two-state Markov chain, a little wetter in winter."""
    start_wet = 0.115 + 0.035 * season_winter
    wet = np.zeros(season_winter.size, dtype=bool)
    for t in range(1, wet.size):
        wet[t] = rng.uniform() < (0.42 if wet[t - 1] else start_wet[t])
    return wet


def _rainfall(
    rng: np.random.Generator,
    wet: np.ndarray,
    season_summer: np.ndarray,
    lon2d: np.ndarray,
    lat2d: np.ndarray,
    relief: np.ndarray,
) -> np.ndarray:
    """Daily rain depth per cell: one storm footprint of random centre and size per wet day.

    Parameters
    ----------
    rng : numpy.random.Generator
        Random stream.
    wet : numpy.ndarray of bool
        Wet-day occurrence, one per day.
    season_summer : numpy.ndarray
        Seasonal index, +1 at the height of summer, -1 in winter. [1]
    lon2d, lat2d : numpy.ndarray
        Cell-centre longitude and latitude on (lat, lon). [degree]
    relief : numpy.ndarray
        Height of the cell above the plain, which adds orographic rain. [m]

    Returns
    -------
    numpy.ndarray
        Rain on (time, lat, lon); amounts below 0.2 mm d-1 set to 0. [mm d-1]
    """
    rain = np.zeros((wet.size, *lon2d.shape))
    for t in np.flatnonzero(wet):
        # Summer storms are fewer (see _rain_days) but heavier than winter frontal rain.
        depth = rng.gamma(0.8, 13.0 + 5.0 * season_summer[t])
        clon = rng.uniform(lon2d.min() - 0.3, lon2d.max() + 0.3)
        clat = rng.uniform(lat2d.min() - 0.3, lat2d.max() + 0.3)
        size = rng.uniform(0.25, 0.8)
        distance2 = (lon2d - clon) ** 2 + (lat2d - clat) ** 2
        rain[t] = depth * (0.3 + 0.7 * np.exp(-distance2 / (2 * size**2))) * (1 + relief / 500)
    return np.where(rain < 0.2, 0.0, rain)


def _smooth_anomaly(
    rng: np.random.Generator,
    n: int,
    xn: np.ndarray,
    yn: np.ndarray,
    persistence: float,
    spread: float,
    tilt: float,
) -> np.ndarray:
    """Daily anomaly field: an AR(1) domain value plus AR(1) west-east and south-north tilts.

    Smooth in space on purpose: real daily anomalies are large-scale at 0.05 degree, and
    smooth fields pack and compress far better than cell-by-cell noise.

    Parameters
    ----------
    rng : numpy.random.Generator
        Random stream.
    n : int
        Number of days.
    xn, yn : numpy.ndarray
        Position across the grid, -1 (west, south) to +1 (east, north), on (lat, lon). [1]
    persistence : float
        Lag-1 autocorrelation of every component. [1]
    spread : float
        Standard deviation of the domain value. [unit of the field]
    tilt : float
        Standard deviation of each tilt, edge to centre. [unit of the field]

    Returns
    -------
    numpy.ndarray
        Anomaly on (time, lat, lon).
    """
    level = _ar1(rng, n, persistence, spread)[:, None, None]
    east = _ar1(rng, n, persistence, tilt)[:, None, None]
    north = _ar1(rng, n, persistence, tilt)[:, None, None]
    return level + east * xn + north * yn


def make_climate(rng: np.random.Generator) -> xr.Dataset:
    """Generate the invented daily climate as plain (unpacked) physical values.

    Seasons are southern-hemisphere (hot January). Temperature, humidity and wind are
    smooth seasonal-spatial climatologies plus persistent daily anomalies coupled to rain
    days; shortwave is the FAO-56 clear-sky value (eq. 37) times a cloudiness factor.

    Parameters
    ----------
    rng : numpy.random.Generator
        Random stream.

    Returns
    -------
    xarray.Dataset
        ``tas`` [K], ``hurs`` [%], ``wind`` [m s-1], ``rsds`` [W m-2], ``pr``
        [kg m-2 s-1] on (time, lat, lon), NaN in the no-data cells.
    """
    lon, lat = grid_coordinates()
    time = pd.date_range(START, END, freq="D") + pd.Timedelta(hours=12)
    doy = time.day_of_year.to_numpy()
    n = time.size
    lon2d, lat2d = np.meshgrid(lon, lat)
    xn = (lon2d - lon.mean()) / (lon.max() - lon.mean())
    yn = (lat2d - lat.mean()) / (lat.max() - lat.mean())
    relief = 160.0 * np.exp(-((xn - 0.5) ** 2 + (yn - 0.4) ** 2) / 0.3)  # hills to the NE [m]
    summer = np.cos(2 * np.pi * (doy - 20) / 365.25)  # +1 late January
    winter = np.cos(2 * np.pi * (doy - 200) / 365.25)  # +1 mid July
    wet = _rain_days(rng, winter)
    wet_memory = np.convolve(wet.astype(float), 0.5 ** np.arange(1, 6))[:n]
    wet_memory = np.concatenate([[0.0], wet_memory[:-1]])
    rain = _rainfall(rng, wet, summer, lon2d, lat2d, relief)

    s3, w3, wet3, mem3 = (a[:, None, None] for a in (summer, winter, wet.astype(float), wet_memory))
    temp_anomaly = _smooth_anomaly(rng, n, xn, yn, 0.8, 2.2, 0.4) - 2.5 * wet3 - 1.0 * mem3
    tas_c = 18.5 + 7.5 * s3 + 0.6 * yn - 0.4 * xn - 0.0065 * relief + temp_anomaly
    hurs = (
        50.0
        + 12.0 * w3
        + 3.0 * xn
        - 3.0 * yn
        - 1.8 * temp_anomaly
        + 20.0 * wet3
        + 8.0 * mem3
        + _smooth_anomaly(rng, n, xn, yn, 0.6, 5.0, 1.5)
    )
    spring = np.cos(2 * np.pi * (doy - 290) / 365.25)[:, None, None]
    gustiness = np.exp(_smooth_anomaly(rng, n, xn, yn, 0.5, 0.3, 0.05))
    wind = (2.9 + 0.5 * spring - 0.3 * xn + 0.7 * wet3) * gustiness
    cloud = _cloud_factor(rng, wet, wet_memory)[:, None, None] * (1.0 - 0.02 * xn)
    clear_sky = (0.75 + 2e-5 * ELEVATION_M) * extraterrestrial_radiation(lat2d, doy[:, None, None])
    fields = {
        "tas": tas_c + 273.15,
        "hurs": np.clip(hurs, 6.0, 99.0),
        "wind": np.maximum(wind, 0.3),
        "rsds": clear_sky * np.clip(cloud, 0.2, 1.0) / 0.0864,  # MJ m-2 d-1 -> W m-2
        "pr": rain / 86400.0,  # mm d-1 -> kg m-2 s-1 (1 mm = 1 kg m-2)
    }
    return _as_dataset(fields, time, lon, lat)


def _cloud_factor(rng: np.random.Generator, wet: np.ndarray, memory: np.ndarray) -> np.ndarray:
    """Ratio of daily shortwave to its clear-sky value: near 1 on dry days, low on wet days."""
    dry_days = 1.0 - 0.35 * rng.beta(1.1, 5.0, wet.size) - 0.15 * np.minimum(memory, 1.0)
    wet_days = rng.uniform(0.3, 0.65, wet.size)
    return np.where(wet, wet_days, dry_days)


VARIABLE_ATTRS = {
    "tas": {
        "standard_name": "air_temperature",
        "long_name": "Daily mean near-surface air temperature",
        "units": "K",
        "height": "2 m",
    },
    "hurs": {
        "standard_name": "relative_humidity",
        "long_name": "Daily mean near-surface relative humidity",
        "units": "%",
        "height": "2 m",
    },
    "wind": {
        "standard_name": "wind_speed",
        "long_name": "Daily mean wind speed at 10 m",
        "units": "m s-1",
        "height": "10 m",
    },
    "rsds": {
        "standard_name": "surface_downwelling_shortwave_flux_in_air",
        "long_name": "Daily mean surface downwelling shortwave radiation",
        "units": "W m-2",
    },
    "pr": {
        "standard_name": "precipitation_flux",
        "long_name": "Daily mean precipitation rate",
        "units": "kg m-2 s-1",
    },
}

# Packing: (scale_factor, add_offset) chosen so the int16 range holds every plausible value
# with a resolution finer than any product would report (0.01 K, 0.01 %, 0.01 mm d-1 ...).
PACKING = {
    "tas": (0.01, 290.0),
    "hurs": (0.005, 50.0),
    "wind": (0.001, 0.0),
    "rsds": (0.02, 0.0),
    "pr": (0.01 / 86400.0, 0.0),
}


def _as_dataset(
    fields: dict[str, np.ndarray], time: pd.DatetimeIndex, lon: np.ndarray, lat: np.ndarray
) -> xr.Dataset:
    """Wrap the physical fields with CF coordinates, bounds, the CRS variable and no-data cells."""
    nodata = np.zeros((lat.size, lon.size), dtype=bool)
    for j, i in SEA_CELLS + GAP_CELLS:
        nodata[j, i] = True
    data_vars = {
        name: (
            ("time", "lat", "lon"),
            np.where(nodata, np.nan, values),
            {**VARIABLE_ATTRS[name], "grid_mapping": "crs", "cell_methods": "time: mean"},
        )
        for name, values in fields.items()
    }
    day_start = time - pd.Timedelta(hours=12)
    bounds = {
        "time_bnds": (
            ("time", "nv"),
            np.column_stack([day_start, day_start + pd.Timedelta(days=1)]),
        ),
        "lat_bnds": (("lat", "nv"), np.column_stack([lat - CELL_DEG / 2, lat + CELL_DEG / 2])),
        "lon_bnds": (("lon", "nv"), np.column_stack([lon - CELL_DEG / 2, lon + CELL_DEG / 2])),
    }
    dataset = xr.Dataset(
        {**data_vars, **bounds, "crs": ((), np.int32(0), _crs_attrs())},
        coords={
            "time": ("time", time, {"standard_name": "time", "axis": "T", "bounds": "time_bnds"}),
            "lat": ("lat", lat, _axis_attrs("latitude", "degrees_north", "Y")),
            "lon": ("lon", lon, _axis_attrs("longitude", "degrees_east", "X")),
        },
        attrs=_global_attrs("daily"),
    )
    return dataset.set_coords(["time_bnds", "lat_bnds", "lon_bnds"])


def _axis_attrs(standard_name: str, units: str, axis: str) -> dict:
    """CF attributes of a latitude or longitude coordinate."""
    return {
        "standard_name": standard_name,
        "long_name": standard_name,
        "units": units,
        "axis": axis,
        "bounds": f"{standard_name[:3]}_bnds",
    }


def _crs_attrs() -> dict:
    """CF grid-mapping attributes of the WGS 84 latitude-longitude grid."""
    return {
        "grid_mapping_name": "latitude_longitude",
        "longitude_of_prime_meridian": 0.0,
        "semi_major_axis": 6378137.0,
        "inverse_flattening": 298.257223563,
        "crs_wkt": CRS.from_epsg(4326).to_wkt(),
    }


def _global_attrs(step: str) -> dict:
    """Global attributes; no creation time, so that regenerating gives the same file."""
    return {
        "Conventions": "CF-1.8",
        "title": f"Tarrowind Basin {step} climate (invented demonstration data)",
        "source": f"synthetic weather generator demo_layers/make_demo.py, seed {SEED}",
        "comment": "All values are invented for demonstration; they describe no real place or period.",
        "frequency": "day" if step == "daily" else "mon",
    }


def monthly_means(daily: xr.Dataset) -> xr.Dataset:
    """Monthly means of the daily climate, stamped on the 15th with month bounds.

    Parameters
    ----------
    daily : xarray.Dataset
        Output of :func:`make_climate`.

    Returns
    -------
    xarray.Dataset
        Same variables and attributes, one step per calendar month.
    """
    names = list(VARIABLE_ATTRS)
    monthly = daily[names].resample(time="MS").mean(keep_attrs=True)
    month_start = pd.DatetimeIndex(monthly["time"].to_numpy())
    bounds = np.column_stack([month_start, month_start + pd.offsets.MonthBegin(1)])
    monthly = monthly.assign_coords(
        time=("time", month_start + pd.Timedelta(days=14), daily["time"].attrs),
        time_bnds=(("time", "nv"), bounds),
    )
    monthly = monthly.assign(crs=daily["crs"]).assign_coords(
        lat_bnds=daily["lat_bnds"], lon_bnds=daily["lon_bnds"]
    )
    monthly.attrs = _global_attrs("monthly")
    return monthly


# --------------------------------------------------------------------------- writing


def _encoding(dataset: xr.Dataset) -> dict:
    """Packed int16 + zlib for the climate variables; plain doubles for coordinates."""
    time_units = "days since 2031-01-01 00:00:00"
    encoding: dict[str, dict] = {
        name: {
            "dtype": "int16",
            "scale_factor": np.float32(scale),
            "add_offset": np.float32(offset),
            "_FillValue": FILL_INT16,
            "zlib": True,
            "complevel": 6,
            "shuffle": True,
        }
        for name, (scale, offset) in PACKING.items()
    }
    for name in ("lat", "lon", "lat_bnds", "lon_bnds"):
        encoding[name] = {"_FillValue": None, "dtype": "float64"}
    for name in ("time", "time_bnds"):
        encoding[name] = {
            "_FillValue": None,
            "units": time_units,
            "calendar": "standard",
            "dtype": "float64",
        }
    return {k: v for k, v in encoding.items() if k in dataset.variables}


def write_demo(out_dir: Path | str, seed: int = SEED) -> dict[str, Path]:
    """Generate the whole scenario and write its three files into ``out_dir``.

    Parameters
    ----------
    out_dir : path-like
        Directory to write into (created if missing); existing files are replaced.
    seed : int
        Root seed; the default reproduces the committed demo files.

    Returns
    -------
    dict of str to pathlib.Path
        Paths written, keyed ``layer``, ``climate`` and ``climate_monthly``.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    layer_rng, climate_rng = (
        np.random.default_rng(s) for s in np.random.SeedSequence(seed).spawn(2)
    )
    paths = {
        "layer": out / LAYER_FILE,
        "climate": out / CLIMATE_FILE,
        "climate_monthly": out / MONTHLY_FILE,
    }
    for path in paths.values():
        path.unlink(missing_ok=True)
    # A fixed GeoPackage timestamp keeps the file identical from run to run.
    pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": "2031-01-01T00:00:00.000Z"})
    try:
        make_layer(layer_rng).to_file(paths["layer"], layer=LAYER_NAME, driver="GPKG")
    finally:
        pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": None})
    daily = make_climate(climate_rng)
    daily.to_netcdf(paths["climate"], encoding=_encoding(daily), engine="netcdf4")
    monthly = monthly_means(daily)
    monthly.to_netcdf(paths["climate_monthly"], encoding=_encoding(monthly), engine="netcdf4")
    return paths


def main(argv: list[str] | None = None) -> None:
    """Command-line entry point: ``python demo_layers/make_demo.py [--out DIR]``."""
    parser = argparse.ArgumentParser(description="Write the invented lakeloss demo scenario.")
    parser.add_argument("--out", default=Path(__file__).resolve().parent, type=Path)
    args = parser.parse_args(argv)
    for path in write_demo(args.out).values():
        print(f"wrote {path} ({path.stat().st_size / 1e6:.2f} MB)")


if __name__ == "__main__":
    main()
