"""A general-purpose reference pipeline for the job of the end-to-end benchmark.

What an analyst would write with general libraries to get what ``lakeloss run`` gives for
the configuration of ``benchmarks/end_to_end.py`` (``penman_open_water``, monthly periods):

1. read the pond layer with geopandas;
2. open the five NetCDF variables with xarray and convert them to the units of the physics
   (K to °C, kg m-2 s-1 to mm day-1);
3. cell weights per polygon from exactextract (``cell_id`` and ``coverage`` on the layer in
   the grid's CRS), times the true (ellipsoidal) area of each cell, so that a body's mean is
   weighted by the true area of its part of each cell, as lakeloss weights it;
4. daily zonal means of every variable, month by month, as one sparse (bodies x cells)
   product per variable and month;
5. the Penman open-water rate from those means through
   ``lakeloss.physics.registry.evaporate("penman_open_water", ...)``: the physics is the
   very same code as lakeloss's, so what the benchmark compares is the pipeline around it
   (reading, weights, zonal means, sums, writing), not two implementations of the formula;
6. monthly sums with xarray (``resample``), negative daily rates set to 0 first as lakeloss
   does by default; depth net of rain; volumes = depth x the polygon's area;
7. a GeoPackage layer of the bodies with their yearly totals (geopandas/pyogrio) and a CSV of
   the per-body, per-month table (pandas).

The daily rates of the year are held whole (two (365, n) float64 arrays: 0.6 GB at 10^5
bodies) for xarray's monthly sums; the means and the physics go month by month, which is what
an analyst does once the whole year in one call runs out of memory (at 10^5 bodies the process
then peaked at 6.4 GB and the physics took about four times as long as month by month).

Differences from lakeloss that remain on purpose (see ``--check``):

* the latitude of a body (it enters the clear-sky ratio of the longwave term) is its
  centroid's; lakeloss takes the area-weighted latitude of the cell centres the body covers;
* exactextract's coverage is the share of a cell's extent in degrees; lakeloss clips in the
  grid's CRS too, so shares agree to rounding;
* bodies entirely outside the grid get NaN, as in lakeloss; bodies partly outside get the
  mean of their inside part and a volume over their whole area, as in lakeloss.

Usage::

    python benchmarks/reference_pipeline.py LAYER.gpkg CLIMATE.nc OUT_DIR
    python benchmarks/reference_pipeline.py LAYER.gpkg CLIMATE.nc OUT_DIR --check LAKELOSS_OUT

``--check`` reads lakeloss's ``waterbodies.gpkg`` (table ``evaporation_by_period``) from a run
on the same inputs after the reference has run, and prints the largest relative differences
of the monthly depths. Figures only; nothing here passes or fails.
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import scipy.sparse
import xarray as xr
from exactextract import exact_extract
from exactextract.raster import NumPyRasterSource
from pyproj import CRS, Geod

from lakeloss.physics.registry import evaporate

#: NetCDF variable of each physics input in the benchmark's climate file.
VARIABLES = {
    "air_temperature": "tas",
    "relative_humidity": "hurs",
    "wind_speed": "wind",
    "surface_downwelling_shortwave_flux_in_air": "rsds",
    "precipitation": "pr",
}
#: (scale, offset) from the file's unit to the unit the physics takes.
TO_PHYSICS_UNITS = {
    "K": (1.0, -273.15),  # -> °C
    "kg m-2 s-1": (86400.0, 0.0),  # -> mm day-1
    "%": (1.0, 0.0),
    "m s-1": (1.0, 0.0),
    "W m-2": (1.0, 0.0),
}
PARAMETERS = {"elevation_m": 300.0, "wind_height_m": 10.0}


def cell_weights(layer: gpd.GeoDataFrame, lon: np.ndarray, lat: np.ndarray):
    """Sparse (bodies x cells) weights of a north-up lat/lon grid, rows summing to 1.

    Each weight is exactextract's covered share of the cell times the cell's true area;
    rows of bodies that touch no cell are all zero.
    """
    dx, dy = abs(lon[1] - lon[0]), abs(lat[1] - lat[0])
    west, east = lon.min() - dx / 2, lon.max() + dx / 2
    south, north = lat.min() - dy / 2, lat.max() + dy / 2
    wgs84 = CRS.from_epsg(4326)
    template = NumPyRasterSource(
        np.zeros((lat.size, lon.size)), west, south, east, north, srs_wkt=wgs84.to_wkt()
    )
    table = exact_extract(template, layer.to_crs(wgs84), ["cell_id", "coverage"], output="pandas")
    counts = table["cell_id"].map(len).to_numpy()
    cells = np.concatenate(table["cell_id"].to_numpy()).astype(np.int64)
    coverage = np.concatenate(table["coverage"].to_numpy())
    # true area of one cell in each row (all cells of a row are alike) [m2]
    geod = Geod(ellps="WGS84")
    row_area = np.array(
        [
            abs(geod.polygon_area_perimeter([0, dx, dx, 0], [y - dy / 2] * 2 + [y + dy / 2] * 2)[0])
            for y in lat
        ]
    )
    weight = coverage * row_area[cells // lon.size]
    bodies = np.repeat(np.arange(len(layer)), counts)
    matrix = scipy.sparse.csr_matrix(
        (weight, (bodies, cells)), shape=(len(layer), lat.size * lon.size)
    )
    total = np.asarray(matrix.sum(axis=1)).ravel()
    scale = np.divide(1.0, total, out=np.zeros_like(total), where=total > 0)
    return scipy.sparse.diags(scale) @ matrix, total > 0


def daily_rates(
    climate: xr.Dataset, weights, inside: np.ndarray, latitude: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Evaporation and precipitation rates per day and body, (time, body). [mm day-1]

    Month by month: each variable's month of grid values, converted to the physics' units,
    goes through one sparse product into the bodies' area-weighted means, and the means
    through the physics. (A whole year at once holds 0.3 GB per (365, 10^5) array; the
    process then peaked at 6.4 GB and the physics took about four times as long.)
    """
    n_days = climate.sizes["time"]
    day_of_year = climate.time.dt.dayofyear.values
    evaporation = np.empty((n_days, inside.size))
    precipitation = np.empty((n_days, inside.size))
    month = climate.time.dt.year.values * 100 + climate.time.dt.month.values  # e.g. 203101
    for _, days in pd.Series(np.arange(n_days)).groupby(month):
        rows = days.to_numpy()
        means = {}
        for quantity, name in VARIABLES.items():
            scale, offset = TO_PHYSICS_UNITS[climate[name].attrs["units"]]
            values = climate[name].isel(time=rows).values.reshape(rows.size, -1)
            mean = weights @ (values * scale + offset).T  # (body, day)
            mean[~inside] = np.nan
            means[quantity] = mean.T
        precipitation[rows] = means.pop("precipitation")
        means |= {"latitude": latitude, "day_of_year": day_of_year[rows, np.newaxis]}
        evaporation[rows] = evaporate("penman_open_water", means, PARAMETERS)
    evaporation[evaporation < 0] = 0.0  # lakeloss's default: no condensation credited
    return evaporation, precipitation


def run(layer_path: Path, climate_path: Path, out_dir: Path, id_field: str) -> dict[str, float]:
    """The whole job; returns the wall time of each step [s]."""
    steps: dict[str, float] = {}
    started = time.perf_counter()
    layer = gpd.read_file(layer_path, engine="pyogrio")
    climate = xr.open_dataset(climate_path)
    if climate.lat[0] < climate.lat[-1]:
        climate = climate.isel(lat=slice(None, None, -1))  # north-up for the raster template
    steps["read"] = time.perf_counter() - started

    started = time.perf_counter()
    weights, inside = cell_weights(layer, climate.lon.values, climate.lat.values)
    steps["weights"] = time.perf_counter() - started

    started = time.perf_counter()
    # The layer's CRS is equal-area (Albers): planar areas are true areas. [m2]
    area_m2 = layer.geometry.area.to_numpy()
    centroids = gpd.GeoSeries(layer.geometry.centroid, crs=layer.crs).to_crs(4326)
    latitude = centroids.y.to_numpy()[np.newaxis, :]
    rate, precipitation = daily_rates(climate, weights, inside, latitude)
    steps["means and physics"] = time.perf_counter() - started

    started = time.perf_counter()
    daily = xr.Dataset(
        {"evap_mm": (("time", "pond"), rate), "precip_mm": (("time", "pond"), precipitation)},
        coords={"time": climate.time.values, "pond": layer[id_field].to_numpy()},
    )
    monthly = daily.resample(time="MS").sum(skipna=False)
    monthly["net_mm"] = monthly.evap_mm - monthly.precip_mm
    area = xr.DataArray(area_m2, dims="pond")
    for depth in ("evap", "net"):
        monthly[f"{depth}_m3"] = monthly[f"{depth}_mm"] * area / 1000.0
    yearly = monthly.sum("time", skipna=False)
    steps["sums"] = time.perf_counter() - started

    started = time.perf_counter()
    out_dir.mkdir(parents=True, exist_ok=True)
    table = monthly.transpose("pond", "time").to_dataframe().reset_index()
    table.insert(1, "month", table.pop("time").dt.strftime("%Y-%m"))
    table.rename(columns={"pond": id_field}).to_csv(
        out_dir / "by_month.csv", index=False, float_format="%.3f"
    )
    totals = yearly.to_dataframe().reset_index(drop=True)
    bodies = gpd.GeoDataFrame(
        {id_field: layer[id_field], "area_m2": area_m2, **totals},
        geometry=layer.geometry,
        crs=layer.crs,
    )
    bodies.to_file(out_dir / "bodies.gpkg", layer="bodies", driver="GPKG", engine="pyogrio")
    steps["write"] = time.perf_counter() - started
    return steps


def check(out_dir: Path, lakeloss_dir: Path, id_field: str) -> None:
    """Print how far the reference's monthly depths are from lakeloss's.

    The reference's CSV holds depths to 0.001 mm, so the relative differences are taken over
    the body-months where lakeloss's depth is at least 1 mm (elsewhere the rounding alone
    could reach 5e-4 of the value or more), and the largest absolute difference over all.
    """
    ours = pd.read_csv(out_dir / "by_month.csv")
    theirs = pyogrio.read_dataframe(
        lakeloss_dir / "waterbodies.gpkg",
        layer="evaporation_by_period",
        columns=[id_field, "period_label", "evap_mm", "precip_mm", "net_mm"],
        read_geometry=False,
    ).rename(columns={"period_label": "month"})
    both = ours.merge(theirs, on=[id_field, "month"], suffixes=("_ref", "_lakeloss"))
    print(f"check: {len(both)} body-months in both ({len(ours)} reference, {len(theirs)} lakeloss)")
    for column in ("evap_mm", "precip_mm", "net_mm"):
        ref, lake = both[f"{column}_ref"], both[f"{column}_lakeloss"]
        absolute = (ref - lake).abs()
        large = lake.abs() >= 1.0
        relative = absolute[large] / lake[large].abs()
        print(
            f"check: {column}: max relative difference {relative.max():.2e} "
            f"(99th percentile {relative.quantile(0.99):.2e}) where |lakeloss| >= 1 mm; "
            f"max absolute difference {absolute.max():.4f} mm; "
            f"NaN in one only: {int((ref.isna() != lake.isna()).sum())}, "
            f"in both: {int((ref.isna() & lake.isna()).sum())}"
        )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("layer", type=Path, help="pond layer (GeoPackage)")
    parser.add_argument("climate", type=Path, help="NetCDF with tas, hurs, wind, rsds, pr")
    parser.add_argument("out_dir", type=Path)
    parser.add_argument("--id-field", default="pond_id")
    parser.add_argument("--check", type=Path, metavar="LAKELOSS_OUT", help="compare with lakeloss")
    parser.add_argument("--quiet", action="store_true", help="print no step times")
    args = parser.parse_args()
    steps = run(args.layer, args.climate, args.out_dir, args.id_field)
    if not args.quiet:
        print("reference: " + "  ".join(f"{k} {v:.1f} s" for k, v in steps.items()))
    if args.check:
        check(args.out_dir, args.check, args.id_field)


if __name__ == "__main__":
    main()
