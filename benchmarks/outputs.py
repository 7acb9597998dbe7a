"""Time assembling and writing a run's outputs from synthetic arrays (no climate needed).

Builds the period sums of N invented ponds x 12 monthly periods, assembles the period table
and the summaries with the same functions a run uses (``lakeloss.results``), then writes the
GeoPackage (layer ``waterbodies`` and table ``evaporation_by_period``) and the CSVs with
``lakeloss.io.write_run.write_result``. Prints seconds per stage.

Usage: ``python benchmarks/outputs.py`` (10^5 and 10^6) or ``--sizes 100000``. The last
column is the 1-minute load average when the size finished: the writer overlaps work on two
cores, so figures taken while other jobs use them are not comparable.
"""

from __future__ import annotations

import argparse
import os
import tempfile
import time
from pathlib import Path
from types import SimpleNamespace

import geopandas as gpd
import numpy as np
import shapely

from lakeloss.io.write_run import write_result
from lakeloss.results import _field_info, _period_table, _summaries

_VERTICES = 16
_STARTS = tuple(f"2031-{m:02d}-01" for m in range(1, 13))
_DAYS = np.array([31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31], dtype=float)


def _layer(n: int, rng: np.random.Generator) -> gpd.GeoDataFrame:
    """N wobbly 16-gons on a 500 m lattice, with the result columns a run adds."""
    side = int(np.ceil(np.sqrt(n)))
    centres = np.stack([np.arange(n) % side, np.arange(n) // side], axis=1) * 500.0
    angle = np.linspace(0.0, 2 * np.pi, _VERTICES, endpoint=False)
    radius = rng.uniform(20.0, 200.0, (n, 1)) * rng.uniform(0.7, 1.0, (n, _VERTICES))
    ring = np.stack(
        [centres[:, :1] + radius * np.cos(angle), centres[:, 1:] + radius * np.sin(angle)], -1
    )
    ring = np.concatenate([ring, ring[:, :1]], axis=1)
    geometry = shapely.polygons(ring)
    ids = np.array([f"P{i:07d}" for i in range(n)], dtype=object)
    area = shapely.area(geometry)
    evap = rng.uniform(800.0, 1600.0, n)
    precip = rng.uniform(200.0, 900.0, n)
    frame = gpd.GeoDataFrame({"pond_id": ids}, geometry=geometry, crs="EPSG:3577")
    frame["area_m2"] = area
    frame["area_before_repair_m2"] = np.nan
    frame["evap_mm"] = evap
    frame["evap_m3"] = evap * area / 1000.0
    frame["evap_mm_per_year"] = evap
    frame["precip_mm"] = precip
    frame["net_mm"] = evap - precip
    frame["net_m3"] = (evap - precip) * area / 1000.0
    frame["climate_coverage"] = 1.0
    order = np.argsort(-frame["evap_m3"].to_numpy(), kind="stable")
    rank = np.empty(n, dtype=np.int64)
    rank[order] = np.arange(1, n + 1)
    frame["loss_rank"] = rank
    frame["qa_flags"] = np.where(rng.random(n) < 0.01, "climate_gaps", "").astype(object)
    return frame[[c for c in frame.columns if c != "geometry"] + ["geometry"]]


def _fakes(layer: gpd.GeoDataFrame, rng: np.random.Generator) -> tuple:
    """Stand-ins for the config, inputs, body facts and sums the assembly functions read."""
    n = len(layer)
    config = SimpleNamespace(
        method=SimpleNamespace(name="penman_open_water", compare=()),
        output=SimpleNamespace(precipitation=True, extra_volume_units=()),
        waterbodies=SimpleNamespace(group_by=()),
    )
    periods = SimpleNamespace(
        starts=_STARTS,
        ends=tuple(f"{s[:8]}{int(d):02d}" for s, d in zip(_STARTS, _DAYS, strict=True)),
        days=_DAYS,
    )
    inputs = SimpleNamespace(
        periods=periods, layer=SimpleNamespace(frame=layer, id_field="pond_id")
    )
    facts = SimpleNamespace(area_m2=layer["area_m2"].to_numpy())
    sums = SimpleNamespace(
        depth={"penman_open_water": rng.uniform(50.0, 200.0, (12, n))},
        precip=rng.uniform(0.0, 120.0, (12, n)),
    )
    return config, inputs, facts, sums


def run(n: int) -> dict[str, float]:
    """Seconds per stage for N ponds x 12 periods."""
    rng = np.random.default_rng(0)
    layer = _layer(n, rng)
    config, inputs, facts, sums = _fakes(layer, rng)
    times = {}
    start = time.perf_counter()
    by_period = _period_table(config, inputs, facts, sums)
    summary, _ = _summaries(config, layer, by_period, len(_STARTS))
    times["assemble"] = time.perf_counter() - start
    result = SimpleNamespace(
        waterbodies=layer,
        by_period=by_period,
        summary_by_period=summary,
        summary_by_group=None,
        series=None,
        provenance={"benchmark": "outputs", "n": n},
        id_field="pond_id",
        field_info=_field_info(config, layer),
    )
    with tempfile.TemporaryDirectory() as tmp:
        start = time.perf_counter()
        write_result(result, Path(tmp) / "out", overwrite=False)
        times["write"] = time.perf_counter() - start
    times["total"] = times["assemble"] + times["write"]
    return times


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[100_000, 1_000_000])
    args = parser.parse_args()
    print("| ponds | rows | assemble s | write s | total s | load |")
    print("|---|---|---|---|---|---|")
    for n in args.sizes:
        t = run(n)
        print(
            f"| {n} | {12 * n} | {t['assemble']:.1f} | {t['write']:.1f} | {t['total']:.1f} "
            f"| {os.getloadavg()[0]:.1f} |",
            flush=True,
        )


if __name__ == "__main__":
    main()
