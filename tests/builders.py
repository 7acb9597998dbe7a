"""Builders of tiny, synthetic, real input files for the tests.

``make_case`` (the fixture in conftest.py) writes a small water-body layer (GeoPackage, UTM zone 55 south, metres) and a
climate NetCDF on a 0.05 degree lat/lon grid that covers it, and returns a config mapping
ready for :func:`lakeloss.load_config`. Everything is invented test data.
"""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely
import xarray as xr
from pyproj import Transformer

LAYER_CRS = "EPSG:32755"
# Grid: 8 x 6 cells of 0.05 degrees, north-up (latitudes descending, as many products store).
LON = 146.0 + 0.05 * (np.arange(8) + 0.5)
LAT = -30.0 - 0.05 * (np.arange(6) + 0.5)


def pond_layer(n_ponds: int = 12, seed: int = 3) -> gpd.GeoDataFrame:
    """Ponds of 0.1 to 5 ha, one crossing a cell corner, and a reservoir with an island."""
    rng = np.random.default_rng(seed)
    to_utm = Transformer.from_crs("EPSG:4326", LAYER_CRS, always_xy=True)
    lon = rng.uniform(LON[1], LON[-2], n_ponds)
    lat = rng.uniform(LAT[-2], LAT[1], n_ponds)
    lon[0], lat[0] = 146.15, -30.10  # exactly on a cell corner
    x, y = to_utm.transform(lon, lat)
    radius = np.sqrt(rng.uniform(1e3, 5e4, n_ponds) / np.pi)
    ponds = list(shapely.buffer(shapely.points(x, y), radius, quad_segs=8))
    cx, cy = to_utm.transform(146.2, -30.15)
    reservoir = shapely.Polygon(
        shapely.buffer(shapely.Point(cx, cy), 3000.0).exterior.coords,
        [shapely.buffer(shapely.Point(cx + 500, cy), 600.0).exterior.coords[::-1]],
    )
    geoms = [*ponds, reservoir]
    n = len(geoms)
    return gpd.GeoDataFrame(
        {
            "pond_id": np.arange(101, 101 + n),
            "name": [f"pond {i}" for i in range(n - 1)] + ["reservoir"],
            "zone": ["east" if g.centroid.x > cx else "west" for g in geoms],
        },
        geometry=geoms,
        crs=LAYER_CRS,
    )


def climate_dataset(
    times: pd.DatetimeIndex | np.ndarray,
    fields: dict[str, tuple],
    lat: np.ndarray = LAT,
    lon: np.ndarray = LON,
) -> xr.Dataset:
    """A CF dataset; ``fields[name] = (values (t, y, x) or scalar, units, standard_name)``."""
    shape = (len(times), len(lat), len(lon))
    data = {}
    for name, (values, units, standard_name) in fields.items():
        array = np.broadcast_to(np.asarray(values, dtype=np.float64), shape).astype(np.float32)
        data[name] = (
            ("time", "lat", "lon"),
            array,
            {"units": units, "standard_name": standard_name, "grid_mapping": "crs"},
        )
    ds = xr.Dataset(
        data,
        coords={
            "time": ("time", times),
            "lat": ("lat", lat, {"units": "degrees_north", "standard_name": "latitude"}),
            "lon": ("lon", lon, {"units": "degrees_east", "standard_name": "longitude"}),
        },
        attrs={"Conventions": "CF-1.8"},
    )
    ds["crs"] = xr.DataArray(
        0,
        attrs={
            "grid_mapping_name": "latitude_longitude",
            "semi_major_axis": 6378137.0,
            "inverse_flattening": 298.257223563,
        },
    )
    return ds


def write_netcdf(ds: xr.Dataset, path: Path) -> Path:
    ds.to_netcdf(path, engine="netcdf4")
    return path


# Chow, Maidment & Mays (1988) Examples 3.5.1-3.5.4 conditions (docs/methods.md#chow-examples):
# net radiation 200 W m-2, air at 25 °C, RH 40 %, pressure 101.3 kPa, wind 3 m s-1 at 2 m.
CHOW_FIELDS = {
    "rnet": (200.0, "W m-2", "surface_net_downward_radiative_flux"),
    "tas": (298.15, "K", "air_temperature"),
    "hurs": (40.0, "%", "relative_humidity"),
    "wind": (3.0, "m s-1", "wind_speed"),
    "ps": (101300.0, "Pa", "surface_air_pressure"),
    "pr": (1.0 / 86400.0, "kg m-2 s-1", "precipitation_flux"),
}
CHOW_CLIMATE = {
    "surface_net_downward_radiative_flux": "rnet",
    "air_temperature": "tas",
    "relative_humidity": "hurs",
    "wind_speed": "wind",
    "surface_air_pressure": "ps",
    "precipitation_flux": "pr",
}


def case_config(
    layer_path: Path,
    climate_path: Path,
    out_dir: Path,
    method: str,
    climate: dict[str, str],
    **sections: dict,
) -> dict:
    config = {
        "waterbodies": {
            "path": str(layer_path),
            "layer": "ponds",
            "id_field": "pond_id",
            "group_by": ["zone"],
        },
        "climate": {
            key: {"path": str(climate_path), "variable": var} for key, var in climate.items()
        },
        "method": {"name": method},
        "output": {"dir": str(out_dir), "period": "month"},
        "compute": {"cache_dir": str(out_dir.parent / "cache")},
    }
    if "wind_speed" in climate:
        config["climate"]["wind_speed"]["height_m"] = 2.0
    for name, table in sections.items():
        config.setdefault(name, {}).update(table)
    return config


def write_geotiff(
    path: Path, values: np.ndarray, units: str, crs: str | None = "EPSG:4326"
) -> Path:
    """A band stack (band, y, x) on the LON/LAT grid, north-up, with a ``units`` tag."""
    import rasterio
    from affine import Affine

    transform = Affine(0.05, 0.0, LON[0] - 0.025, 0.0, -0.05, LAT[0] + 0.025)
    with rasterio.open(
        path,
        "w",
        driver="GTiff",
        width=len(LON),
        height=len(LAT),
        count=values.shape[0],
        dtype="float32",
        crs=crs,
        transform=transform,
    ) as dst:
        dst.write(values.astype(np.float32))
        dst.update_tags(units=units)
    return path


def temperature_stack(path: Path, bands: int, crs: str | None = "EPSG:4326") -> Path:
    """A uniform 298.15 K GeoTIFF stack of ``bands`` steps."""
    return write_geotiff(path, np.full((bands, len(LAT), len(LON)), 298.15), "K", crs)


def attribute_rich_layer(n_ponds: int = 12, seed: int = 3) -> gpd.GeoDataFrame:
    """:func:`pond_layer` plus attributes of every kind a surveyed layer carries.

    A survey date (DATE), an inspection time (DATETIME, some at midnight), a nullable
    count, a float and owner text with commas, quotes and a line break, with gaps; a sixth
    pond outside the climate grid (no result, no rank); the eleventh in two parts.
    """
    layer = pond_layer(n_ponds, seed)
    # One more pond far east of the climate grid: no result, so no loss_rank.
    x, y = Transformer.from_crs("EPSG:4326", LAYER_CRS, always_xy=True).transform(147.5, -30.1)
    outside = gpd.GeoDataFrame(
        {"pond_id": [99], "name": ["far pond"], "zone": ["east"]},
        geometry=[shapely.Point(x, y).buffer(80.0)],
        crs=LAYER_CRS,
    )
    layer = pd.concat([layer.iloc[:5], outside, layer.iloc[5:]], ignore_index=True)
    # A pond in two parts late in the layer: the GeoPackage layer becomes MultiPolygon.
    first = layer.geometry.iloc[10]
    layer.loc[10, "geometry"] = shapely.MultiPolygon(
        [first, shapely.affinity.translate(first, 600.0, 0.0)]
    )
    n = len(layer)
    surveyed = pd.to_datetime([f"2030-{1 + i % 12:02d}-{1 + i % 28:02d}" for i in range(n)])
    layer["surveyed"] = surveyed.where(np.arange(n) % 5 != 3)
    layer["inspected"] = surveyed + pd.to_timedelta((np.arange(n) % 3) * 5.5, unit="h")
    layer["licences"] = pd.array([None if i % 4 == 1 else i % 3 for i in range(n)], dtype="Int64")
    layer["wall_height_m"] = np.round(np.linspace(1.0, 9.0, n), 2)
    owners = ['Creek, "Upper"', "Hill\nfarm", None, "Flat"]
    layer["owner"] = [owners[i % 4] for i in range(n)]
    geometry = layer.geometry.name
    return layer[[c for c in layer.columns if c != geometry] + [geometry]]


def small_runs(tmp: Path) -> dict[str, object]:
    """Two real small runs (:func:`lakeloss.run`) whose results exercise every output column.

    ``"monthly"``: standard calendar, 59 days, a compared method, ``group_by``, two extra
    volume units, the series file and the attributes of :func:`attribute_rich_layer`, read
    from GeoParquet (polygons and a multipolygon).
    ``"daily_360"``: a 360-day calendar (period dates are cftime dates, 2031-02-30 exists),
    daily periods.
    """
    import cftime

    import lakeloss

    layer = attribute_rich_layer()
    layer.to_file(tmp / "ponds.gpkg", layer="ponds", driver="GPKG")
    layer.to_parquet(tmp / "ponds.parquet")
    standard = pd.date_range("2031-01-01", periods=59, freq="D")
    days_360 = np.array([cftime.Datetime360Day(2031, 1 + d // 30, 1 + d % 30) for d in range(60)])
    runs = {}
    for name, times, sections in [
        (
            "monthly",
            standard,
            {
                "method": {"compare": ["priestley_taylor"]},
                "output": {"extra_volume_units": ["ML", "acre_ft"], "series": True},
            },
        ),
        ("daily_360", days_360, {"output": {"period": "day"}}),
    ]:
        climate = write_netcdf(climate_dataset(times, CHOW_FIELDS), tmp / f"climate_{name}.nc")
        # GeoParquet keeps each feature's own type (polygons beside the multipolygon) and
        # the nullable count; the GeoPackage layer has one type and reads counts as floats.
        layer_path = tmp / ("ponds.parquet" if name == "monthly" else "ponds.gpkg")
        config = case_config(
            layer_path, climate, tmp / f"out_{name}", "energy_balance", CHOW_CLIMATE
        )
        for section, table in sections.items():
            config[section].update(table)
        runs[name] = lakeloss.run(config)
    return runs


def split_tables(
    waterbodies: gpd.GeoDataFrame, by_period: pd.DataFrame, cuts: list[int]
) -> list[tuple[gpd.GeoDataFrame, pd.DataFrame]]:
    """Whole-run tables cut into partitions before the layer rows ``cuts``.

    Each partition holds what a partition's computer hands over: its rows of both tables
    (the period table has the same number of rows for every body), with ``loss_rank`` an
    all-null ``Int64`` column, since the rank is only known once every partition is done.
    """
    per_body = len(by_period) // len(waterbodies)
    bounds = [0, *cuts, len(waterbodies)]
    parts = []
    for start, stop in zip(bounds[:-1], bounds[1:], strict=True):
        bodies = waterbodies.iloc[start:stop].copy()
        bodies["loss_rank"] = pd.array([None] * len(bodies), dtype="Int64")
        parts.append((bodies, by_period.iloc[start * per_body : stop * per_body]))
    return parts


# --------------------------------------------------------------------------- CF checks


def cf_report(path) -> dict:
    """The IOOS compliance checker's CF-1.8 result for a file, as its JSON report.

    Runs offline: the CF standard-name table is the one packaged with the checker and the
    units come from cf_units' bundled UDUNITS-2.
    """
    import json
    import warnings

    from compliance_checker.runner import CheckSuite, ComplianceChecker

    report = path.with_suffix(".cf.json")
    with warnings.catch_warnings():  # the checker's own plugins announce deprecations
        warnings.simplefilter("ignore", DeprecationWarning)
        CheckSuite.load_all_available_checkers()
        ComplianceChecker.run_checker(
            str(path), ["cf:1.8"], 0, "normal", output_filename=str(report), output_format="json"
        )
    return json.loads(report.read_text())["cf:1.8"]


def failed_cf_checks(report: dict) -> list:
    return [
        (item["name"], item["msgs"])
        for priority in ("high_priorities", "medium_priorities", "low_priorities")
        for item in report.get(priority, [])
        if item["value"][0] < item["value"][1]
    ]
