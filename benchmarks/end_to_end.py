"""End-to-end benchmark: ``lakeloss run`` as a subprocess on 10^5 and 10^6 synthetic ponds.

Inputs (generated once, cached under ``benchmarks/_cache/``, which git ignores):

* the synthetic pond layer of ``benchmarks/synthetic.py`` written to a GeoPackage;
* one year (2031, daily) of invented climate on a 0.05 degree lat/lon grid of 400 x 400
  cells covering the same box: air temperature, relative humidity, 10 m wind, shortwave and
  precipitation, uncompressed float32 NetCDF.

Each size is run three times with ``penman_open_water``, monthly periods, writing the
GeoPackage and CSVs: locally with an empty weights cache (``cold``), locally again with the
weights cached (``warm``), and with ``--workers 2`` on a LocalCluster (weights cached). For
every run the wall time and the peak resident memory of the whole process tree (sum of RSS
over the process and its children, polled every 0.2 s) are printed, then the stage timings
of the run's ``run.json`` and a cProfile top-10 of the smallest size.

Usage::

    python benchmarks/end_to_end.py                      # 10^5 and 10^6
    python benchmarks/end_to_end.py --sizes 100000 --no-cluster --no-profile

Figures only; nothing here passes or fails.
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import os
import platform
import pstats
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import netCDF4
import numpy as np
import psutil
import pyogrio
import tomli_w

sys.path.insert(0, str(Path(__file__).resolve().parent))
from synthetic import CACHE, REGION, cached_layer  # noqa: E402

VENV_BIN = Path(sys.executable).parent
LAKELOSS = VENV_BIN / "lakeloss"
GRID_CELLS = 400  # cells along each side of the climate grid, by default
YEAR = 2031
N_DAYS = 365
POLL_S = 0.2


# --------------------------------------------------------------------------- inputs


def layer_path(n_ponds: int) -> Path:
    """The ``n_ponds`` synthetic layer as a GeoPackage (layer ``ponds``), cached."""
    path = CACHE / f"e2e-ponds-{n_ponds}.gpkg"
    if not path.exists():
        started = time.perf_counter()
        layer = cached_layer(n_ponds)
        temp = path.with_suffix(".part.gpkg")
        temp.unlink(missing_ok=True)
        pyogrio.write_dataframe(layer, temp, layer="ponds", driver="GPKG")
        os.replace(temp, path)
        print(f"wrote {path.name} in {time.perf_counter() - started:.0f} s", flush=True)
    return path


def _grid(cells: int) -> tuple[np.ndarray, np.ndarray]:
    """Centres of ``cells`` x ``cells`` cells over REGION: longitudes ascending, latitudes
    descending (north-up). [degrees]"""
    west, south, east, north = REGION
    lon = west + (east - west) / cells * (np.arange(cells) + 0.5)
    lat = north - (north - south) / cells * (np.arange(cells) + 0.5)
    return lon, lat


def _weather(day: np.ndarray, lon: np.ndarray, lat: np.ndarray, rng: np.random.Generator):
    """Invented daily fields for the days ``day`` (0-based): smooth patterns plus noise."""
    season = np.cos(2 * np.pi * (day[:, None, None] - 15) / 365.0)  # +1 mid-January (south)
    lat3, lon3 = lat[None, :, None], lon[None, None, :]
    inland = np.sin(np.pi * (lon3 - 20.0) / 20.0)  # 0 at the box edges, 1 in the middle
    shape = (day.size, lat.size, lon.size)
    tas = 291.0 + 7.0 * season + 0.35 * (lat3 + 25.0) + 3.0 * inland + rng.normal(0, 1.5, shape)
    hurs = np.clip(62.0 - 18.0 * inland + 8.0 * season + rng.normal(0, 8.0, shape), 5.0, 100.0)
    wind = np.clip(3.2 + 0.8 * np.cos(lon3 / 3.0) + rng.gamma(2.0, 0.6, shape) - 1.2, 0.2, None)
    cloud = rng.beta(2.0, 5.0, shape)
    rsds = (235.0 + 95.0 * season - 2.0 * (lat3 + 25.0)) * (1.0 - 0.6 * cloud)
    wet = rng.random(shape) < 0.18 + 0.1 * season
    pr = np.where(wet, rng.gamma(0.8, 6.0, shape), 0.0) / 86400.0  # mm/day -> kg m-2 s-1
    return {"tas": tas, "hurs": hurs, "wind": wind, "rsds": rsds, "pr": pr}


_VARIABLES = {
    "tas": ("K", "air_temperature"),
    "hurs": ("%", "relative_humidity"),
    "wind": ("m s-1", "wind_speed"),
    "rsds": ("W m-2", "surface_downwelling_shortwave_flux_in_air"),
    "pr": ("kg m-2 s-1", "precipitation_flux"),
}


def climate_path(cells: int = GRID_CELLS) -> Path:
    """One year of daily invented climate on the ``cells`` x ``cells`` grid, cached."""
    lon, lat = _grid(cells)
    path = CACHE / f"e2e-climate-{lat.size}x{lon.size}-{YEAR}.nc"
    if path.exists():
        return path
    started = time.perf_counter()
    CACHE.mkdir(parents=True, exist_ok=True)
    temp = path.with_suffix(".part.nc")
    with netCDF4.Dataset(temp, "w", format="NETCDF4") as nc:
        nc.Conventions = "CF-1.8"
        nc.title = "invented daily climate for the lakeloss end-to-end benchmark"
        nc.createDimension("time", N_DAYS)
        nc.createDimension("lat", lat.size)
        nc.createDimension("lon", lon.size)
        times = nc.createVariable("time", "f8", ("time",))
        times.units, times.calendar = f"days since {YEAR}-01-01", "standard"
        times[:] = np.arange(N_DAYS)
        for name, values, unit, standard in (
            ("lat", lat, "degrees_north", "latitude"),
            ("lon", lon, "degrees_east", "longitude"),
        ):
            coord = nc.createVariable(name, "f8", (name,))
            coord.units, coord.standard_name = unit, standard
            coord[:] = values
        crs = nc.createVariable("crs", "i4")
        crs.grid_mapping_name = "latitude_longitude"
        crs.semi_major_axis, crs.inverse_flattening = 6378137.0, 298.257223563
        out = {}
        for name, (unit, standard) in _VARIABLES.items():
            # one chunk per day and full grid: contiguous reads of whole time blocks
            var = nc.createVariable(
                name, "f4", ("time", "lat", "lon"), chunksizes=(1, lat.size, lon.size)
            )
            var.units, var.standard_name, var.grid_mapping = unit, standard, "crs"
            out[name] = var
        rng = np.random.default_rng(2031)
        for start in range(0, N_DAYS, 30):
            day = np.arange(start, min(start + 30, N_DAYS))
            for name, values in _weather(day, lon, lat, rng).items():
                out[name][day[0] : day[-1] + 1] = values.astype(np.float32)
    os.replace(temp, path)
    print(f"wrote {path.name} in {time.perf_counter() - started:.0f} s", flush=True)
    return path


def write_config(n_ponds: int, out_dir: Path, cache_dir: Path, cells: int = GRID_CELLS) -> Path:
    climate = climate_path(cells)
    keys = {
        "air_temperature": "tas",
        "relative_humidity": "hurs",
        "wind_speed": "wind",
        "surface_downwelling_shortwave_flux_in_air": "rsds",
        "precipitation_flux": "pr",
    }
    config = {
        "waterbodies": {"path": str(layer_path(n_ponds)), "layer": "ponds", "id_field": "pond_id"},
        "climate": {k: {"path": str(climate), "variable": v} for k, v in keys.items()},
        "method": {"name": "penman_open_water"},
        "parameters": {"elevation_m": 300.0},
        "output": {"dir": str(out_dir), "period": "month"},
        "compute": {"cache_dir": str(cache_dir)},
    }
    config["climate"]["wind_speed"]["height_m"] = 10.0
    path = (
        CACHE / f"e2e-{n_ponds}.toml"
        if cells == GRID_CELLS
        else CACHE / f"e2e-{n_ponds}-{cells}.toml"
    )
    path.write_text(tomli_w.dumps(config))
    return path


# --------------------------------------------------------------------------- measuring


def _tree_rss(process: psutil.Process) -> int:
    total = 0
    try:
        members = [process, *process.children(recursive=True)]
    except psutil.NoSuchProcess:
        return 0
    for member in members:
        try:
            total += member.memory_info().rss
        except psutil.NoSuchProcess:
            continue
    return total


def measure(command: list[str]) -> tuple[float, int]:
    """Run ``command``; return wall time [s] and the process tree's peak RSS [bytes]."""
    started = time.perf_counter()
    child = subprocess.Popen(command, stderr=subprocess.PIPE, text=True)
    process = psutil.Process(child.pid)
    peak = 0
    while child.poll() is None:
        peak = max(peak, _tree_rss(process))
        time.sleep(POLL_S)
    wall = time.perf_counter() - started
    stderr = child.stderr.read() if child.stderr else ""
    if child.returncode != 0:
        raise SystemExit(f"{' '.join(command)} failed ({child.returncode}):\n{stderr}")
    return wall, peak


def run_once(n_ponds: int, label: str, extra: list[str], *, cold: bool) -> dict:
    out_dir = CACHE / f"out-{n_ponds}"
    cache_dir = CACHE / f"weights-{n_ponds}"
    if cold:
        shutil.rmtree(cache_dir, ignore_errors=True)
    config = write_config(n_ponds, out_dir, cache_dir)
    command = [str(LAKELOSS), "run", str(config), "--overwrite", "-q", *extra]
    wall, peak = measure(command)
    timings = json.loads((out_dir / "run.json").read_text())["timings_s"]
    row = {"size": n_ponds, "run": label, "wall_s": wall, "peak_gib": peak / 2**30, **timings}
    print(
        f"{n_ponds:>8} {label:<10} wall {wall:7.1f} s  peak {peak / 2**30:5.2f} GiB  "
        + "  ".join(f"{k} {v:.1f}" for k, v in timings.items()),
        flush=True,
    )
    return row


# cProfile sees only the thread it runs in, so the profiled run computes its blocks in the
# main thread (one worker thread instead of two); the stage shares are what matter here.
_PROFILE_DRIVER = """
import cProfile, sys
import lakeloss.execution
from lakeloss.cli import cli
lakeloss.execution._local_threads = lambda: 1
out = sys.argv.pop(1)
cProfile.run("cli.main(args=sys.argv[1:], prog_name='lakeloss', standalone_mode=False)", out)
"""


def profile(n_ponds: int, top: int = 10) -> None:
    """cProfile of one warm local run, blocks in one thread: top functions by time."""
    out_dir = CACHE / f"out-{n_ponds}"
    config = write_config(n_ponds, out_dir, CACHE / f"weights-{n_ponds}")
    with tempfile.TemporaryDirectory() as tmp:
        stats_path = Path(tmp) / "run.prof"
        command = [sys.executable, "-c", _PROFILE_DRIVER, str(stats_path)]
        subprocess.run(
            [*command, "run", str(config), "--overwrite", "-q"], check=True, capture_output=True
        )
        stats = pstats.Stats(str(stats_path))
        print(f"\ncProfile, {n_ponds} ponds, warm local run in one thread: top {top} by own time")
        stats.sort_stats("tottime").print_stats(top)
        print(f"cProfile, {n_ponds} ponds: top {top} lakeloss functions by cumulative time")
        stats.sort_stats("cumulative").print_stats(r"lakeloss[/\\]", top)


def machine() -> str:
    model = platform.processor() or "unknown CPU"
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                model = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    memory = psutil.virtual_memory().total / 2**30
    return f"{os.cpu_count()} cores ({model}), {memory:.0f} GiB RAM, {dt.date.today()}"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="100000,1000000", help="comma-separated pond counts")
    parser.add_argument("--no-cluster", action="store_true", help="skip the --workers 2 runs")
    parser.add_argument("--no-profile", action="store_true", help="skip the cProfile run")
    args = parser.parse_args()
    sizes = [int(s) for s in args.sizes.split(",") if s.strip()]
    print(machine(), flush=True)
    for n in sizes:  # inputs first, so their one-off cost is not in any timing
        layer_path(n)
    climate_path()
    rows = []
    for n in sizes:
        rows.append(run_once(n, "cold", [], cold=True))
        warm = run_once(n, "warm", [], cold=False)
        rows.append(warm)
        if not args.no_cluster:
            cluster = run_once(n, "workers=2", ["--workers", "2"], cold=False)
            rows.append(cluster)
            print(
                f"{n:>8} workers=2 / warm local wall ratio {cluster['wall_s'] / warm['wall_s']:.2f}"
            )
    if not args.no_profile:
        profile(min(sizes))


if __name__ == "__main__":
    main()
