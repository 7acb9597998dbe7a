"""Climate in one file per year vs one file per variable: read speed and a whole run.

Inputs (generated once, cached under ``benchmarks/_cache/``, which git ignores): the synthetic
pond layer of ``benchmarks/synthetic.py`` and ``--years`` years (from 2031, daily, standard
calendar) of the invented weather of ``benchmarks/end_to_end.py`` on a lat/lon grid of
``--grid`` x ``--grid`` cells over the same box, written twice with identical values: one
NetCDF per variable, and one NetCDF per variable and year (``tas_2031.nc`` ...; each with its
own "days since" epoch, as providers cut series).

Two measurements:

* ``read``: open air temperature and read it in blocks of 16 steps, in time order, as the
  pipeline does: one file through lakeloss, the yearly files through lakeloss (a glob), and
  the yearly files through ``xarray.open_mfdataset`` (dask, combined by coordinates).
* ``run``: ``lakeloss run`` (``penman_open_water``, monthly periods, weights cached by a
  warm-up) on one file per variable and on the yearly files, alternated ``--runs`` times;
  median wall times, their ratio, and whether the CSVs are byte-equal.

Usage::

    python benchmarks/multifile.py                                  # full: 10^5 ponds, 200 x 200, 20 years
    python benchmarks/multifile.py --ponds 10000 --grid 50 --runs 3 # reduced

Figures only; nothing here passes or fails.
"""

from __future__ import annotations

import argparse
import datetime as dt
import os
import platform
import statistics
import subprocess
import sys
import time
from pathlib import Path

import netCDF4
import numpy as np
import tomli_w

sys.path.insert(0, str(Path(__file__).resolve().parent))
from end_to_end import _VARIABLES, LAKELOSS, _weather, layer_path  # noqa: E402
from synthetic import CACHE, REGION  # noqa: E402

FIRST_YEAR = 2031
BLOCK = 16  # steps per read, the pipeline's default block length
KEYS = {
    "air_temperature": "tas",
    "relative_humidity": "hurs",
    "wind_speed": "wind",
    "surface_downwelling_shortwave_flux_in_air": "rsds",
    "precipitation_flux": "pr",
}


def _grid(cells: int) -> tuple[np.ndarray, np.ndarray]:
    west, south, east, north = REGION
    step = (east - west) / cells
    lon = west + step * (np.arange(cells) + 0.5)
    lat = north - step * (np.arange(cells) + 0.5)
    return lon, lat


def _days_in(year: int) -> int:
    return (dt.date(year + 1, 1, 1) - dt.date(year, 1, 1)).days


def _create(path: Path, name: str, steps: int, epoch: str, lon, lat):
    nc = netCDF4.Dataset(path, "w", format="NETCDF4")
    nc.Conventions = "CF-1.8"
    nc.createDimension("time", steps)
    nc.createDimension("lat", lat.size)
    nc.createDimension("lon", lon.size)
    times = nc.createVariable("time", "f8", ("time",))
    times.units, times.calendar = f"days since {epoch}", "standard"
    times[:] = np.arange(steps)
    for coord, values, unit, standard in (
        ("lat", lat, "degrees_north", "latitude"),
        ("lon", lon, "degrees_east", "longitude"),
    ):
        variable = nc.createVariable(coord, "f8", (coord,))
        variable.units, variable.standard_name = unit, standard
        variable[:] = values
    crs = nc.createVariable("crs", "i4")
    crs.grid_mapping_name = "latitude_longitude"
    crs.semi_major_axis, crs.inverse_flattening = 6378137.0, 298.257223563
    unit, standard = _VARIABLES[name]
    var = nc.createVariable(name, "f4", ("time", "lat", "lon"), chunksizes=(1, lat.size, lon.size))
    var.units, var.standard_name, var.grid_mapping = unit, standard, "crs"
    return nc


def climate_files(cells: int, years: int) -> tuple[Path, Path]:
    """Folders ``single/`` (one file per variable) and ``yearly/`` (one per variable and year)."""
    root = CACHE / f"multifile-{cells}x{cells}-{years}y"
    single, yearly = root / "single", root / "yearly"
    if (root / "done").exists():
        return single, yearly
    started = time.perf_counter()
    single.mkdir(parents=True, exist_ok=True)
    yearly.mkdir(parents=True, exist_ok=True)
    lon, lat = _grid(cells)
    total = sum(_days_in(FIRST_YEAR + k) for k in range(years))
    whole = {
        n: _create(single / f"{n}.nc", n, total, f"{FIRST_YEAR}-01-01", lon, lat)
        for n in KEYS.values()
    }
    offset = 0
    for k in range(years):
        year = FIRST_YEAR + k
        days = _days_in(year)
        rng = np.random.default_rng(year)
        weather = _weather(np.arange(offset, offset + days) % 365, lon, lat, rng)
        for name, values in weather.items():
            values = values.astype(np.float32)
            whole[name][name][offset : offset + days] = values
            with _create(yearly / f"{name}_{year}.nc", name, days, f"{year}-01-01", lon, lat) as nc:
                nc[name][:] = values
        offset += days
    for nc in whole.values():
        nc.close()
    (root / "done").write_text("")
    print(
        f"wrote {years} years of {cells} x {cells} climate in {time.perf_counter() - started:.0f} s"
    )
    return single, yearly


# --------------------------------------------------------------------------- read


def _read_blocks(data) -> float:
    total = 0.0
    for start in range(0, data.sizes["time"], BLOCK):
        block = data.isel(time=slice(start, start + BLOCK))
        total += float(np.asarray(block.compute(scheduler="synchronous").values).sum())
    return total


def read_benchmark(single: Path, yearly: Path) -> None:
    import xarray as xr

    from lakeloss.io import climate

    def lakeloss_field(path):
        return climate.open_netcdf(path, "tas", "air_temperature", chunk_steps=BLOCK).data

    def mfdataset(pattern):
        coder = xr.coders.CFDatetimeCoder(use_cftime=True)
        dataset = xr.open_mfdataset(
            pattern, combine="by_coords", decode_times=coder, chunks={"time": BLOCK},
            engine="netcdf4",
        )  # fmt: skip
        return dataset["tas"]

    cases = {
        "one file, lakeloss": lambda: lakeloss_field(single / "tas.nc"),
        "yearly files, lakeloss": lambda: lakeloss_field(str(yearly / "tas_*.nc")),
        "yearly files, open_mfdataset": lambda: mfdataset(str(yearly / "tas_*.nc")),
    }
    sums = []
    for name, open_ in cases.items():
        started = time.perf_counter()
        data = open_()
        opened = time.perf_counter() - started
        sums.append(_read_blocks(data))
        print(
            f"read  {name:30s} open {opened:6.2f} s  open+read {time.perf_counter() - started:6.2f} s"
        )
    # lakeloss converts to degrees Celsius at ingest; open_mfdataset leaves kelvin.
    print(
        f"read  lakeloss one file and yearly files gave {'equal' if sums[0] == sums[1] else 'DIFFERENT'} totals"
    )


# --------------------------------------------------------------------------- run


def _config(ponds: int, paths: dict[str, str], out: Path, cache: Path) -> Path:
    config = {
        "waterbodies": {"path": str(layer_path(ponds)), "layer": "ponds", "id_field": "pond_id"},
        "climate": {k: {"path": paths[v], "variable": v} for k, v in KEYS.items()},
        "method": {"name": "penman_open_water"},
        "parameters": {"elevation_m": 300.0},
        "output": {"dir": str(out), "period": "month"},
        "compute": {"cache_dir": str(cache)},
    }
    config["climate"]["wind_speed"]["height_m"] = 10.0
    path = out.parent / f"{out.name}.toml"
    path.write_text(tomli_w.dumps(config))
    return path


def _env() -> dict[str, str]:
    """This checkout's lakeloss first, whichever one the virtualenv has installed."""
    here = str(Path(__file__).resolve().parent.parent)
    return {**os.environ, "PYTHONPATH": os.pathsep.join([here, os.environ.get("PYTHONPATH", "")])}


def run_benchmark(ponds: int, single: Path, yearly: Path, runs: int) -> None:
    root = single.parent
    cache = root / "weights"
    configs = {
        "one file per variable": _config(ponds, {v: str(single / f"{v}.nc") for v in KEYS.values()}, root / "out-single", cache),
        "yearly files (glob)": _config(ponds, {v: str(yearly / f"{v}_*.nc") for v in KEYS.values()}, root / "out-yearly", cache),
    }  # fmt: skip
    times: dict[str, list[float]] = {name: [] for name in configs}
    for repeat in range(runs + 1):  # the first round builds the weights cache: not counted
        for name, config in configs.items():
            started = time.perf_counter()
            subprocess.run(
                [str(LAKELOSS), "run", str(config), "-q", "--overwrite"], check=True, env=_env()
            )
            if repeat:
                times[name].append(time.perf_counter() - started)
    medians = {name: statistics.median(values) for name, values in times.items()}
    for name, values in times.items():
        print(
            f"run   {name:24s} median {medians[name]:7.1f} s  ({', '.join(f'{v:.1f}' for v in values)})"
        )
    one, many = medians.values()
    print(f"run   ratio yearly / one file: {many / one:.3f}")
    same = all(
        (root / "out-single" / f).read_bytes() == (root / "out-yearly" / f).read_bytes()
        for f in ("summary_by_waterbody.csv", "summary_by_period.csv")
    )
    print(f"run   CSVs byte-equal: {same}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--ponds", type=int, default=100_000)
    parser.add_argument("--grid", type=int, default=200, help="cells along each side")
    parser.add_argument("--years", type=int, default=20)
    parser.add_argument("--runs", type=int, default=3, help="counted runs of each layout")
    parser.add_argument("--no-run", action="store_true", help="only the read measurement")
    args = parser.parse_args()
    print(
        f"{dt.datetime.now(dt.UTC):%Y-%m-%d %H:%M} UTC, {platform.node()}, "
        f"{platform.processor() or platform.machine()}, Python {platform.python_version()}; "
        f"{args.ponds} ponds, {args.grid} x {args.grid} cells, {args.years} years daily"
    )
    single, yearly = climate_files(args.grid, args.years)
    read_benchmark(single, yearly)
    if not args.no_run:
        run_benchmark(args.ponds, single, yearly, args.runs)


if __name__ == "__main__":
    main()
