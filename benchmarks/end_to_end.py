"""End-to-end benchmark: ``lakeloss run`` as a subprocess on 10^5 and 10^6 synthetic ponds.

Inputs (generated once, cached under ``benchmarks/_cache/``, which git ignores):

* the synthetic pond layer of ``benchmarks/synthetic.py`` written to a GeoPackage;
* one year (2031, daily) of invented climate on a lat/lon grid covering the same box, 400 x
  400 cells of 0.05 degree by default (``--grid N``: N x N cells): air temperature, relative
  humidity, 10 m wind, shortwave and precipitation, uncompressed float32 NetCDF.

Each size is run three times with ``penman_open_water``, monthly periods, writing the
GeoPackage and CSVs: locally with an empty weights cache (``cold``), locally again with the
weights cached (``warm``), and with ``--workers 2`` on a LocalCluster (weights cached). For
every run the wall time, the CPU time (user + system of the process and the children it
waited for) and the peak resident memory of the whole process tree (sum of RSS over the
process and its children, polled every 0.2 s) are printed, then the stage timings
of the run's ``run.json`` and a cProfile top-10 of the smallest size.

With ``--compare-reference`` (10^5 ponds on 200 x 200 cells unless ``--sizes``/``--grid``
say otherwise) it times instead, in alternated rounds, ``lakeloss run`` cold and warm, the
general-purpose pipeline of ``benchmarks/reference_pipeline.py`` on the same inputs, and a
plain ``xarray.open_dataset(...)[name].load()`` of the five variables, each as a subprocess
measured the same way, with the 1-minute load average just before each run; then the median
ratios lakeloss / reference and lakeloss / xarray load, and how far the reference's monthly
depths are from lakeloss's.

Usage::

    python benchmarks/end_to_end.py                      # 10^5 and 10^6
    python benchmarks/end_to_end.py --sizes 100000 --no-cluster --no-profile
    python benchmarks/end_to_end.py --compare-reference --repeats 3

Figures only; nothing here passes or fails.
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import os
import platform
import pstats
import resource
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


def measure(command: list[str]) -> tuple[float, int, float]:
    """Run ``command``; return wall time [s], the process tree's peak RSS [bytes] and the CPU
    time (user + system) of the process and the children it waited for [s]."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
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
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = after.ru_utime + after.ru_stime - before.ru_utime - before.ru_stime
    return wall, peak, cpu


def _run_dirs(n_ponds: int, cells: int) -> tuple[Path, Path]:
    """Output and weights-cache directories of lakeloss runs on ``n_ponds`` and ``cells``."""
    suffix = f"{n_ponds}" if cells == GRID_CELLS else f"{n_ponds}-{cells}"
    return CACHE / f"out-{suffix}", CACHE / f"weights-{suffix}"


def run_once(
    n_ponds: int, label: str, extra: list[str], *, cold: bool, cells: int = GRID_CELLS
) -> dict:
    out_dir, cache_dir = _run_dirs(n_ponds, cells)
    if cold:
        shutil.rmtree(cache_dir, ignore_errors=True)
    config = write_config(n_ponds, out_dir, cache_dir, cells)
    command = [str(LAKELOSS), "run", str(config), "--overwrite", "-q", *extra]
    load = os.getloadavg()[0]
    wall, peak, cpu = measure(command)
    timings = json.loads((out_dir / "run.json").read_text())["timings_s"]
    row = {
        "size": n_ponds,
        "run": label,
        "wall_s": wall,
        "cpu_s": cpu,
        "peak_gib": peak / 2**30,
        "loadavg": load,
        **timings,
    }
    print(
        f"{n_ponds:>8} {label:<10} wall {wall:7.1f} s  cpu {cpu:6.1f} s  "
        f"peak {peak / 2**30:5.2f} GiB  "
        f"load {load:4.1f}  " + "  ".join(f"{k} {v:.1f}" for k, v in timings.items()),
        flush=True,
    )
    return row


# --------------------------------------------------------------------------- reference


REFERENCE = Path(__file__).resolve().parent / "reference_pipeline.py"

# Just reading the five variables into memory, the floor of any pipeline over these files.
_LOAD_DRIVER = """
import sys
import xarray
path, names = sys.argv[1], sys.argv[2:]
arrays = [xarray.open_dataset(path)[name].load() for name in names]
"""


def _timed(label: str, n_ponds: int, command: list[str]) -> dict:
    load = os.getloadavg()[0]
    wall, peak, cpu = measure(command)
    print(
        f"{n_ponds:>8} {label:<10} wall {wall:7.1f} s  cpu {cpu:6.1f} s  "
        f"peak {peak / 2**30:5.2f} GiB  "
        f"load {load:4.1f}",
        flush=True,
    )
    return {
        "size": n_ponds,
        "run": label,
        "wall_s": wall,
        "cpu_s": cpu,
        "peak_gib": peak / 2**30,
        "loadavg": load,
    }


def compare_reference(n_ponds: int, cells: int, repeats: int) -> None:
    """Time lakeloss (cold, warm), the reference pipeline and a plain xarray load, alternated.

    Each round runs the three in a rotated order (lakeloss cold then warm stay together, as
    warm needs cold's cache), so that a drift of the shared machine's speed falls on all
    three; ratios are taken within each round and their median printed.
    """
    out_dir, _ = _run_dirs(n_ponds, cells)
    reference_dir = CACHE / f"reference-{n_ponds}-{cells}"
    climate = climate_path(cells)
    reference = [
        sys.executable,
        str(REFERENCE),
        str(layer_path(n_ponds)),
        str(climate),
        str(reference_dir),
        "--quiet",
    ]
    xarray_load = [sys.executable, "-c", _LOAD_DRIVER, str(climate), *_VARIABLES]

    def lakeloss() -> list[dict]:
        cold = run_once(n_ponds, "cold", [], cold=True, cells=cells)
        return [cold, run_once(n_ponds, "warm", [], cold=False, cells=cells)]

    jobs = [
        lakeloss,
        lambda: [_timed("reference", n_ponds, reference)],
        lambda: [_timed("xr-load", n_ponds, xarray_load)],
    ]
    rounds = []
    for round_ in range(repeats):
        print(f"round {round_ + 1} of {repeats}", flush=True)
        rows = []
        for job in jobs[round_ % 3 :] + jobs[: round_ % 3]:
            rows.extend(job())
        rounds.append({row["run"]: row for row in rows})
    _print_comparison(rounds, n_ponds, cells)
    sys.path.insert(0, str(REFERENCE.parent))
    from reference_pipeline import check

    check(reference_dir, out_dir, "pond_id")


def _print_comparison(rounds: list[dict], n_ponds: int, cells: int) -> None:
    def median(values) -> float:
        return float(np.median(list(values)))

    print(f"\n{n_ponds} ponds, {cells} x {cells} x {N_DAYS}, {len(rounds)} rounds: median")
    for label in ("cold", "warm", "reference", "xr-load"):
        runs = [r[label] for r in rounds]
        walls = [run["wall_s"] for run in runs]
        loads = [run["loadavg"] for run in runs]
        print(
            f"  {label:<10} wall {median(walls):6.1f} s (min {min(walls):.1f}, max "
            f"{max(walls):.1f})  cpu {median(run['cpu_s'] for run in runs):6.1f} s  "
            f"peak {median(run['peak_gib'] for run in runs):5.2f} GiB  "
            f"load {min(loads):.1f}-{max(loads):.1f}"
        )
    print("  ratios, each the median of the rounds' ratios (wall; cpu):")
    for run in ("cold", "warm"):
        for other in ("reference", "xr-load"):
            walls = [r[run]["wall_s"] / r[other]["wall_s"] for r in rounds]
            cpus = [r[run]["cpu_s"] / r[other]["cpu_s"] for r in rounds]
            print(
                f"  lakeloss {run} / {other}: wall {median(walls):.2f} "
                f"(rounds {', '.join(f'{x:.2f}' for x in walls)}); cpu {median(cpus):.2f}"
            )


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


def profile(n_ponds: int, top: int = 10, cells: int = GRID_CELLS) -> None:
    """cProfile of one warm local run, blocks in one thread: top functions by time."""
    out_dir, cache_dir = _run_dirs(n_ponds, cells)
    config = write_config(n_ponds, out_dir, cache_dir, cells)
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
    parser.add_argument(
        "--sizes",
        help="comma-separated pond counts (default 100000,1000000; 100000 with "
        "--compare-reference)",
    )
    parser.add_argument(
        "--grid",
        type=int,
        help=f"cells along each side of the climate grid (default {GRID_CELLS}; 200 with "
        "--compare-reference)",
    )
    parser.add_argument("--no-cluster", action="store_true", help="skip the --workers 2 runs")
    parser.add_argument("--no-profile", action="store_true", help="skip the cProfile run")
    parser.add_argument(
        "--compare-reference",
        action="store_true",
        help="time lakeloss beside benchmarks/reference_pipeline.py and a plain xarray load",
    )
    parser.add_argument("--repeats", type=int, default=3, help="rounds of --compare-reference")
    args = parser.parse_args()
    compare = args.compare_reference
    default_sizes = "100000" if compare else "100000,1000000"
    sizes = [int(s) for s in (args.sizes or default_sizes).split(",") if s.strip()]
    cells = args.grid or (200 if compare else GRID_CELLS)
    print(machine(), dt.datetime.now(dt.UTC).strftime("%H:%M UTC"), flush=True)
    for n in sizes:  # inputs first, so their one-off cost is not in any timing
        layer_path(n)
    climate_path(cells)
    if compare:
        for n in sizes:
            compare_reference(n, cells, args.repeats)
        return
    rows = []
    for n in sizes:
        rows.append(run_once(n, "cold", [], cold=True, cells=cells))
        warm = run_once(n, "warm", [], cold=False, cells=cells)
        rows.append(warm)
        if not args.no_cluster:
            cluster = run_once(n, "workers=2", ["--workers", "2"], cold=False, cells=cells)
            rows.append(cluster)
            print(
                f"{n:>8} workers=2 / warm local wall ratio {cluster['wall_s'] / warm['wall_s']:.2f}"
            )
    if not args.no_profile:
        profile(min(sizes), cells=cells)


if __name__ == "__main__":
    main()
