"""Benchmark of the zonal engine against exactextract on synthetic pond layers.

For each layer size (10^3 .. 10^6 ponds of 0.1-50 ha plus a few 10-100 km2 reservoirs with
islands, Albers equal-area CRS; see ``synthetic.py``) over a 0.05 degree lat/lon grid of
400 x 400 cells with 365 daily steps, prints:

* the shared reprojection of the layer to the grid CRS (``reproject_to_grid``), timed alone;
* ``build_weights`` time (after reprojection), peak memory and nnz;
* ``ZonalWeights.apply`` time for one variable-year (365 x 400 x 400 float32 with a fixed
  missing-data patch) and its peak memory, then the time of a second variable-year in the
  same process (the first call also pays for the operating system handing out fresh pages
  for the (365 x n) float64 output: 2.9 GB at 10^6 ponds), the same call into an output
  buffer written once before, the call in the pipeline's 16-step blocks, and the 16-step
  blocks for one column per group of bodies with identical means (``lakeloss.grouping``);
* exactextract in the same process on the same reprojected polygons: its per-cell weights
  (``["cell_id", "coverage"]``) and, up to ``--ee-mean-max`` ponds, its own 365-band
  area-weighted mean (with a check that both means agree);
* the speed ratios.

Peak memory is the growth of the process's peak resident set (Linux VmHWM, reset through
``/proc/self/clear_refs`` just before each measured call) over the resident set at that
moment: it counts GEOS and numpy allocations alike. Every size runs in a fresh subprocess so
one size's heap does not hide the next one's growth.

Usage::

    python benchmarks/zonal.py                       # all sizes
    python benchmarks/zonal.py --sizes 1000,10000    # quick run
    python benchmarks/zonal.py --ee-mean-max 100000  # also the 365-band mean at 10^5
"""

from __future__ import annotations

import argparse
import json
import platform
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
from affine import Affine

sys.path.insert(0, str(Path(__file__).resolve().parent))

from synthetic import REGION, cached_layer  # noqa: E402

from lakeloss.grouping import group_bodies  # noqa: E402
from lakeloss.zonal import GridSpec, build_weights, reproject_to_grid  # noqa: E402
from lakeloss.zonal.grid import geographic_cell_area  # noqa: E402

CELL = 0.05  # [degrees]


def benchmark_grid() -> GridSpec:
    """The 400 x 400, 0.05 degree north-up lat/lon grid over the synthetic region."""
    west, south, east, north = REGION
    nx, ny = round((east - west) / CELL), round((north - south) / CELL)
    return GridSpec.from_transform(Affine(CELL, 0, west, 0, -CELL, north), nx, ny, "EPSG:4326")


def daily_values(grid: GridSpec, steps: int, seed: int = 1) -> np.ndarray:
    """A smooth field with day-to-day noise and a fixed missing patch (a "sea"), float32."""
    rng = np.random.default_rng(seed)
    ny, nx = grid.shape
    day = np.arange(steps)[:, None, None]
    rows, cols = np.mgrid[0:ny, 0:nx]
    field = 20 + 8 * np.sin(2 * np.pi * day / 365) + 0.01 * rows + 0.005 * cols
    values = (field + rng.normal(0, 1, (steps, ny, nx))).astype(np.float32)
    values[:, : ny // 10, : nx // 10] = np.nan
    return values


def _rss_kib(field: str) -> int:
    with open("/proc/self/status") as status:
        for line in status:
            if line.startswith(field):
                return int(line.split()[1])
    raise RuntimeError(f"{field} missing from /proc/self/status")


def measured(call):
    """Run ``call()``; return (result, seconds, peak RSS growth in MiB)."""
    with open("/proc/self/clear_refs", "w") as refs:
        refs.write("5")  # resets VmHWM to the current RSS
    before = _rss_kib("VmRSS:")
    start = time.perf_counter()
    result = call()
    seconds = time.perf_counter() - start
    return result, seconds, (_rss_kib("VmHWM:") - before) / 1024


def _raster(values_2d: np.ndarray, grid: GridSpec, name: str):
    from exactextract.raster import NumPyRasterSource

    xmin, ymin, xmax, ymax = grid.bounds
    return NumPyRasterSource(
        values_2d, xmin, ymin, xmax, ymax, srs_wkt=grid.crs.to_wkt(), name=name
    )


def exactextract_weights(grid, frame, values):
    from exactextract import exact_extract

    raster = _raster(values[0], grid, "v")
    return exact_extract(raster, frame, ["cell_id", "coverage"], output="pandas")


def exactextract_means(grid, frame, values):
    """exactextract's own mean of every band, weighted by true cell area. [unit of values]"""
    from exactextract import exact_extract

    ny, nx = grid.shape
    rows = np.arange(ny)
    area = geographic_cell_area(grid.y_edges[rows], grid.y_edges[rows + 1], CELL, grid.crs)
    weights = _raster(np.repeat(area[:, None], nx, axis=1), grid, "area")
    bands = [_raster(values[t], grid, f"b{t}") for t in range(values.shape[0])]
    table = exact_extract(bands, frame, ["weighted_mean"], weights=weights, output="pandas")
    return table[[f"b{t}_area_weighted_mean" for t in range(values.shape[0])]].to_numpy().T


def apply_in_blocks(weights, values: np.ndarray, steps: int) -> int:
    """Apply ``steps`` time steps at a time, as the pipeline does, keeping no result."""
    count = 0
    buffer = np.empty((weights.n_waterbodies, steps))  # reused, as the pipeline does
    for start in range(0, values.shape[0], steps):
        block = values[start : start + steps]
        out = buffer if block.shape[0] == steps else None
        means, _ = weights.apply(block, out=out)
        count += means.shape[0]
    return count


def run_one(n_ponds: int, steps: int, ee_weights: bool, ee_mean: bool) -> dict:
    """All measurements for one layer size, in this process."""
    grid = benchmark_grid()
    layer = cached_layer(n_ponds)
    values = daily_values(grid, steps)
    figures: dict = {"ponds": n_ponds, "waterbodies": len(layer), "steps": steps}
    reprojected, figures["reproject_s"], figures["reproject_mib"] = measured(
        lambda: reproject_to_grid(layer, grid)
    )
    weights, figures["build_s"], figures["build_mib"] = measured(
        lambda: build_weights(layer, grid, reprojected=reprojected)
    )
    figures["nnz"] = int(weights.matrix.nnz)
    figures["single_cell"] = int((np.diff(weights.matrix.indptr) == 1).sum())
    (means, _), figures["apply_s"], figures["apply_mib"] = measured(lambda: weights.apply(values))
    # a second variable-year in the same process: the output's pages are no longer new
    next_year = values + np.float32(1.0)
    _, figures["apply_again_s"], _ = measured(lambda: weights.apply(next_year))
    # The pipeline applies blocks of a few steps and sums them into periods, never holding
    # the (365, n) result: time that use, with 16-step blocks (sizing.block_steps' cap).
    _, figures["apply_blocks_s"], figures["apply_blocks_mib"] = measured(
        lambda: apply_in_blocks(weights, next_year, 16)
    )
    # A (n, 365) output buffer that has been written once: the call without the price of
    # the operating system's fresh pages.
    buffer = np.empty((weights.n_waterbodies, steps))
    weights.apply(next_year, out=buffer)
    _, figures["apply_reused_s"], _ = measured(lambda: weights.apply(values, out=buffer))
    buffer.resize(0, refcheck=False)  # give the 2.9 GB back before the next measurement
    # What the pipeline computes: one column per group of bodies with identical means
    # (ponds inside one shared cell); a body's means are its group's column.
    groups = group_bodies({"grid": weights}, {}, set())
    figures["groups"] = groups.n_groups
    grouped = weights.take_rows(groups.representative)
    _, figures["apply_groups_s"], _ = measured(lambda: apply_in_blocks(grouped, next_year, 16))
    frame = reprojected.to_frame("geometry").set_geometry("geometry")
    if ee_weights:
        table, figures["ee_weights_s"], figures["ee_weights_mib"] = measured(
            lambda: exactextract_weights(grid, frame, values)
        )
        del table
    if ee_mean:
        inside = weights.grid_area_m2 > 0
        expected, figures["ee_mean_s"], figures["ee_mean_mib"] = measured(
            lambda: exactextract_means(grid, frame[inside], values)
        )
        ours = means[:, inside]
        both = np.isfinite(ours) & np.isfinite(expected)
        figures["ee_mean_max_rel_diff"] = float(
            np.max(np.abs(ours[both] / expected[both] - 1)) if both.any() else np.nan
        )
        figures["ee_mean_nan_mismatch"] = int((np.isfinite(ours) != np.isfinite(expected)).sum())
    return figures


def _ratio(numerator, denominator) -> str:
    if numerator is None or denominator is None:
        return "-"
    return f"{numerator / denominator:.1f}x"


def _fmt(value, unit: str = "") -> str:
    if value is None:
        return "-"
    if isinstance(value, float):
        return f"{value:.3g}{unit}" if value < 100 else f"{value:.0f}{unit}"
    return f"{value}{unit}"


def report(rows: list[dict]) -> None:
    columns = [
        ("water bodies", "waterbodies", ""),
        ("reproject s", "reproject_s", ""),
        ("build s", "build_s", ""),
        ("build MiB", "build_mib", ""),
        ("nnz", "nnz", ""),
        ("apply s/var-yr", "apply_s", ""),
        ("apply again s", "apply_again_s", ""),
        ("apply MiB", "apply_mib", ""),
        ("apply in 16-step blocks s", "apply_blocks_s", ""),
        ("blocks MiB", "apply_blocks_mib", ""),
        ("apply into a used buffer s", "apply_reused_s", ""),
        ("groups", "groups", ""),
        ("groups in 16-step blocks s", "apply_groups_s", ""),
        ("ee weights s", "ee_weights_s", ""),
        ("ee weights MiB", "ee_weights_mib", ""),
        ("ee 365-band mean s", "ee_mean_s", ""),
        ("ee mean MiB", "ee_mean_mib", ""),
    ]
    print("| " + " | ".join(c[0] for c in columns) + " |")
    print("|" + "---|" * len(columns))
    for row in rows:
        print("| " + " | ".join(_fmt(row.get(key), unit) for _, key, unit in columns) + " |")
    print()
    print("| water bodies | build vs ee weights | apply vs ee 365-band mean | means max rel diff |")
    print("|---|---|---|---|")
    for row in rows:
        diff = row.get("ee_mean_max_rel_diff")
        print(
            f"| {row['waterbodies']} | {_ratio(row.get('ee_weights_s'), row['build_s'])} "
            f"| {_ratio(row.get('ee_mean_s'), row['apply_s'])} "
            f"| {'-' if diff is None else f'{diff:.1e}'} |"
        )


def machine() -> str:
    model = "unknown CPU"
    with open("/proc/cpuinfo") as info:
        for line in info:
            if line.startswith("model name"):
                model = line.split(":", 1)[1].strip()
                break
    import os

    return f"{os.cpu_count()} cores, {model}, Python {platform.python_version()}"


def main() -> None:
    parser = argparse.ArgumentParser(description="zonal engine vs exactextract")
    parser.add_argument("--sizes", default="1000,10000,100000,1000000")
    parser.add_argument("--steps", type=int, default=365)
    parser.add_argument(
        "--ee-mean-max",
        type=int,
        default=10000,
        help="largest size at which exactextract's 365-band mean also runs",
    )
    parser.add_argument("--no-exactextract", action="store_true")
    parser.add_argument("--worker", type=int, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.worker:
        ee = not args.no_exactextract
        figures = run_one(args.worker, args.steps, ee, ee and args.worker <= args.ee_mean_max)
        print(json.dumps(figures))
        return
    print(f"# zonal benchmark, {time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())}; {machine()}")
    rows = []
    for size in (int(s) for s in args.sizes.split(",")):
        cached_layer(size)  # generate outside the measured worker
        command = [
            sys.executable,
            __file__,
            "--worker",
            str(size),
            "--steps",
            str(args.steps),
            "--ee-mean-max",
            str(args.ee_mean_max),
        ]
        if args.no_exactextract:
            command.append("--no-exactextract")
        done = subprocess.run(command, capture_output=True, text=True, check=True)
        rows.append(json.loads(done.stdout.strip().splitlines()[-1]))
        print(json.dumps(rows[-1]), file=sys.stderr)
    if any(row["ponds"] > args.ee_mean_max for row in rows) and not args.no_exactextract:
        print(
            f"exactextract's 365-band mean skipped above {args.ee_mean_max} ponds "
            "(time and memory; see --ee-mean-max)"
        )
    report(rows)


if __name__ == "__main__":
    main()
