"""Partitioned runs (issue 15): ``lakeloss run`` on 10^6 and 10^7 synthetic ponds.

Same inputs as ``benchmarks/end_to_end.py`` (its layer, climate and configuration; 400 x 400
cells, 365 daily steps, ``penman_open_water``, monthly periods), run as a subprocess the way a
user runs it. Each run records the wall time, the peak of the summed RSS of the process tree
(polled every 0.2 s), the peak RSS of each process in the tree, the load average before and
after, and run.json's ``timings_s`` and ``partitions``. Results are appended to
``benchmarks/_cache/partitions-results.json``; ``--report`` prints them as the markdown of
benchmarks/README.md's section "Partitions (issue 15)", including the estimate for 10^8 bodies
computed from the measured per-partition figures.

Items, run in this order (the 10^6 ones first):

* ``--cold``: 10^6 ponds, a fresh empty weights cache each run, default partitions, then
  ``partition_bodies = 1048576`` (one partition).
* ``--cluster``: 10^6 ponds, weights cached: local, ``workers = 1``, ``workers = 2`` (GeoPackage
  output), and local with ``format = "geoparquet"`` to measure the files of each partition.
  The ``_parts/`` directories in the staging area are watched during the cluster runs too.
* ``--stateful``: 10^6 ponds, weights cached, ``relaxation_check`` and ``penman_open_water``
  alternated A B A B (``--rounds`` pairs); ratio of the medians.
* ``--ten-million``: the 10^7-pond layer of ``synthetic.cached_geoparquet`` (generated once,
  in chunks of 10^6 ponds, GeoParquet with row groups of 65 536 rows), run with
  ``format = "geoparquet"``, then with the GeoPackage output. Outputs are deleted after
  measuring; a fresh weights cache is used and deleted too.

Usage::

    python benchmarks/partitions.py --cold --stateful --cluster
    python benchmarks/partitions.py --ten-million
    python benchmarks/partitions.py --report          # markdown of the figures so far

Figures only; nothing here passes or fails.
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import os
import platform
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
import tomllib
from pathlib import Path

import numpy as np
import psutil
import tomli_w

sys.path.insert(0, str(Path(__file__).resolve().parent))
from end_to_end import LAKELOSS, POLL_S, climate_path, layer_path, machine, write_config  # noqa: E402
from synthetic import CACHE, cached_geoparquet  # noqa: E402

RESULTS = CACHE / "partitions-results.json"
MILLION = 1_000_000
TEN_MILLION = 10_000_000
DEFAULT_PARTITION = 262_144


# --------------------------------------------------------------------------- configuration


def config_for(
    n_ponds: int,
    out_dir: Path,
    cache_dir: Path,
    *,
    method: str = "penman_open_water",
    compute: dict | None = None,
    output_format: str | None = None,
    layer: Path | None = None,
    name: str = "partitions",
) -> Path:
    """end_to_end's configuration for ``n_ponds`` with the given changes, written to a file.

    ``layer`` replaces the layer (a GeoParquet file, no layer name); end_to_end's GeoPackage
    of ``n_ponds`` is used otherwise.
    """
    base = write_config(MILLION if layer is not None else n_ponds, out_dir, cache_dir)
    config = tomllib.loads(base.read_text())
    if layer is not None:
        config["waterbodies"] = {"path": str(layer), "id_field": "pond_id"}
    config["method"]["name"] = method
    config["compute"].update(compute or {})
    if output_format is not None:
        config["output"]["format"] = output_format
    path = CACHE / f"{name}.toml"
    path.write_text(tomli_w.dumps(config))
    return path


# --------------------------------------------------------------------------- measuring


def _dir_bytes(path: Path) -> int:
    total = 0
    for root, _dirs, files in os.walk(path):
        for name in files:
            try:
                total += os.stat(os.path.join(root, name)).st_size
            except OSError:
                continue
    return total


def _watch_parts(parent: Path, seen: dict[str, int]) -> None:
    """Largest size seen of every ``STAGING/_parts/NNNNNN`` directory under ``parent``."""
    for parts in parent.glob("*/_parts"):
        try:
            entries = list(os.scandir(parts))
        except OSError:
            continue
        for entry in entries:
            size = _dir_bytes(Path(entry.path))
            seen[entry.name] = max(seen.get(entry.name, 0), size)


def measure_tree(command: list[str], watch: Path | None = None) -> dict:
    """Run ``command``: wall time, peak RSS of the process tree and of each process in it.

    The same measurement as ``end_to_end.measure`` (sum of RSS over the process and all its
    children, polled every 0.2 s), also keeping each process's own peak, so that a cluster's
    client and workers can be told apart. With ``watch``, the part directories of a staging
    area under ``watch`` are sized every second.
    """
    load_before = os.getloadavg()[0]
    started = time.perf_counter()
    child = subprocess.Popen(command, stderr=subprocess.PIPE, text=True)
    root = psutil.Process(child.pid)
    peak = 0
    per_process: dict[int, dict] = {}
    parts: dict[str, int] = {}
    last_watch = 0.0
    while child.poll() is None:
        try:
            members = [root, *root.children(recursive=True)]
        except psutil.NoSuchProcess:
            members = []
        total = 0
        for member in members:
            try:
                rss = member.memory_info().rss
            except psutil.NoSuchProcess:
                continue
            total += rss
            entry = per_process.get(member.pid)
            if entry is None:
                try:
                    text = " ".join(member.cmdline())
                except psutil.Error:
                    text = ""
                entry = per_process[member.pid] = {"cmd": text[:160], "peak": 0}
            entry["peak"] = max(entry["peak"], rss)
        peak = max(peak, total)
        now = time.perf_counter()
        if watch is not None and now - last_watch >= 1.0:
            _watch_parts(watch, parts)
            last_watch = now
        time.sleep(POLL_S)
    wall = time.perf_counter() - started
    stderr = child.stderr.read() if child.stderr else ""
    if child.returncode != 0:
        raise SystemExit(f"{' '.join(command)} failed ({child.returncode}):\n{stderr}")
    client = per_process.get(child.pid, {"peak": 0})["peak"]
    others = [v["peak"] for pid, v in per_process.items() if pid != child.pid]
    return {
        "wall_s": wall,
        "peak_gib": peak / 2**30,
        "client_peak_gib": client / 2**30,
        "largest_child_peak_gib": max(others, default=0) / 2**30,
        "children": len(others),
        "load_before": load_before,
        "load_after": os.getloadavg()[0],
        "parts_seen": len(parts),
        "parts_bytes": sum(parts.values()),
    }


def run(
    item: str,
    label: str,
    n_ponds: int,
    *,
    cold: bool = False,
    method: str = "penman_open_water",
    compute: dict | None = None,
    output_format: str | None = None,
    layer: Path | None = None,
    keep_output: bool = False,
) -> dict:
    """One ``lakeloss run``; prints and stores its figures."""
    out_parent = CACHE / "partitions-out"
    out_parent.mkdir(parents=True, exist_ok=True)
    out_dir = out_parent / f"out-{n_ponds}"
    if cold:
        cache_dir = Path(tempfile.mkdtemp(prefix="weights-cold-", dir=CACHE))
    elif layer is not None:
        cache_dir = CACHE / f"weights-{n_ponds}-parquet"
    else:
        cache_dir = CACHE / f"weights-{n_ponds}"
    config = config_for(
        n_ponds,
        out_dir,
        cache_dir,
        method=method,
        compute=compute,
        output_format=output_format,
        layer=layer,
    )
    command = [str(LAKELOSS), "run", str(config), "--overwrite", "-q"]
    when = dt.datetime.now(dt.UTC).strftime("%Y-%m-%d %H:%M UTC")
    commit = _commit()
    figures = measure_tree(command, watch=out_parent)
    record = json.loads((out_dir / "run.json").read_text())
    row = {
        "item": item,
        "label": label,
        "n": n_ponds,
        "when": when,
        "commit": commit,
        "method": method,
        "format": output_format or "geopackage",
        "compute": compute or {},
        **figures,
        "timings_s": record.get("timings_s", {}),
        "partitions": record.get("partitions", {}),
        "output_bytes": _dir_bytes(out_dir),
        "file_bytes": _file_sizes(out_dir),
    }
    if cold:
        shutil.rmtree(cache_dir, ignore_errors=True)
    if not keep_output:
        shutil.rmtree(out_dir, ignore_errors=True)
    _store(row)
    timings = "  ".join(f"{k} {v:.1f}" for k, v in row["timings_s"].items())
    print(
        f"{item:<11} {label:<26} wall {row['wall_s']:7.1f} s  peak {row['peak_gib']:5.2f} GiB"
        f"  load {row['load_before']:.1f}-{row['load_after']:.1f}  {timings}"
        f"  partitions {row['partitions']}",
        flush=True,
    )
    return row


def _commit() -> str:
    """The checked-out commit of the tree that is run, ``+`` when it has uncommitted changes."""
    root = Path(__file__).resolve().parent.parent
    try:
        head = subprocess.run(
            ["git", "-C", str(root), "rev-parse", "--short", "HEAD"],
            capture_output=True,
            text=True,
            check=True,
        ).stdout.strip()
        dirty = subprocess.run(
            ["git", "-C", str(root), "status", "--porcelain", "--", "lakeloss"],
            capture_output=True,
            text=True,
            check=True,
        ).stdout.strip()
    except (OSError, subprocess.CalledProcessError):
        return "?"
    return head + ("+" if dirty else "")


def _file_sizes(out_dir: Path) -> dict[str, int]:
    """Bytes of each output file, and of each GeoParquet dataset directory."""
    sizes: dict[str, int] = {}
    if not out_dir.exists():
        return sizes
    for entry in sorted(out_dir.iterdir()):
        if entry.is_dir():
            files = sorted(p.stat().st_size for p in entry.iterdir() if p.is_file())
            sizes[entry.name + "/"] = sum(files)
            sizes[entry.name + "/files"] = len(files)
        else:
            sizes[entry.name] = entry.stat().st_size
    return sizes


def _store(row: dict) -> None:
    rows = json.loads(RESULTS.read_text()) if RESULTS.exists() else []
    rows.append(row)
    RESULTS.write_text(json.dumps(rows, indent=1))


# --------------------------------------------------------------------------- items


def item_cold(n: int) -> None:
    run("cold", "default partitions", n, cold=True)
    run("cold", "one partition (1048576)", n, cold=True,
        compute={"partition_bodies": 1_048_576})  # fmt: skip


def item_stateful(n: int, rounds: int) -> None:
    if not (CACHE / f"weights-{n}").exists():  # --cluster before fills it
        run("warmup", "penman_open_water", n)
    for _ in range(rounds):
        run("stateful", "relaxation_check", n, method="relaxation_check")
        run("stateful", "penman_open_water", n)


def item_cluster(n: int) -> None:
    run("cluster", "local", n)
    run("cluster", "workers = 1", n, compute={"workers": 1})
    run("cluster", "workers = 2", n, compute={"workers": 2})
    run("cluster", "local, geoparquet", n, output_format="geoparquet")


def item_ten_million() -> None:
    started = time.perf_counter()
    layer = cached_geoparquet(TEN_MILLION)
    print(f"layer {layer.name}: {time.perf_counter() - started:.0f} s", flush=True)
    free = shutil.disk_usage(CACHE).free / 2**30
    print(f"free disk: {free:.0f} GiB", flush=True)
    if free < 40:
        raise SystemExit(f"only {free:.0f} GiB free; the 10^7 outputs need about 20 GiB")
    cache_dir = CACHE / f"weights-{TEN_MILLION}-parquet"
    shutil.rmtree(cache_dir, ignore_errors=True)  # the first run is cold
    try:
        run("ten-million", "geoparquet (cold)", TEN_MILLION, layer=layer,
            output_format="geoparquet")  # fmt: skip
        run("ten-million", "geopackage (warm)", TEN_MILLION, layer=layer)
    finally:
        shutil.rmtree(cache_dir, ignore_errors=True)


# --------------------------------------------------------------------------- report


def _rows() -> list[dict]:
    return json.loads(RESULTS.read_text()) if RESULTS.exists() else []


def _n(n: int) -> str:
    return {MILLION: "10^6", TEN_MILLION: "10^7"}.get(n, str(n))


def _table(rows: list[dict]) -> list[str]:
    lines = [
        "| when, commit | load avg before-after | ponds | run | partitions | wall s | peak GiB "
        "| client GiB | largest child GiB | load s | weights s | evaporate s | output MiB |",
        "|---|---|---|---|---|---|---|---|---|---|---|---|---|",
    ]
    for r in rows:
        t = r["timings_s"]
        part = r["partitions"]
        cells = [
            r["when"] + (f", {r['commit']}" if "commit" in r else ""),
            f"{r['load_before']:.1f}-{r['load_after']:.1f}",
            _n(r["n"]),
            r["label"],
            f"{part.get('count', '?')} x {part.get('bodies_each', '?')}",
            f"{r['wall_s']:.1f}",
            f"{r['peak_gib']:.2f}",
            f"{r['client_peak_gib']:.2f}",
            f"{r['largest_child_peak_gib']:.2f}" if r["children"] else "-",
            *(f"{t[k]:.1f}" if k in t else "-" for k in ("load", "weights", "evaporate")),
            f"{r['output_bytes'] / 2**20:.0f}",
        ]
        lines.append("| " + " | ".join(cells) + " |")
    return lines


def _estimate(rows: list[dict]) -> list[str]:
    """10^8 bodies on N workers, from the measured per-partition figures (see README)."""
    by = {(r["item"], r["label"]): r for r in rows}
    one = by.get(("cluster", "workers = 1"))
    two = by.get(("cluster", "workers = 2"))
    local = by.get(("cluster", "local"))
    cold = by.get(("cold", "default partitions"))
    parquet = by.get(("cluster", "local, geoparquet"))
    if not (one and two and local and cold and parquet):
        return ["(the estimate needs the --cold and --cluster items)"]
    n = one["n"]
    count = one["partitions"]["count"]
    size = one["partitions"]["bodies_each"]
    t1 = one["timings_s"]
    part_s = (t1.get("weights", 0.0) + t1.get("evaporate", 0.0)) / count  # warm, one worker
    cold_weights = cold["timings_s"].get("weights", 0.0) / cold["partitions"]["count"]
    warm_weights = t1.get("weights", 0.0) / count
    part_cold_s = part_s - warm_weights + cold_weights
    serial_s = one["wall_s"] - part_s * count  # client: start, load, writing not overlapped
    speedup = one["wall_s"] / two["wall_s"]
    files = parquet["file_bytes"]
    dataset = files.get("waterbodies/", 0) + files.get("evaporation_by_period/", 0)
    part_bytes = dataset / parquet["partitions"]["count"]
    if one["parts_seen"]:
        part_bytes_seen = one["parts_bytes"] / one["parts_seen"]
    else:  # none caught by the poll: the dataset's files are the parts with the rank
        part_bytes_seen = part_bytes
    big = 100_000_000
    parts_big = -(-big // size)
    scale = big / n
    worker_gib = one["largest_child_peak_gib"]
    lines = [
        f"Measured at {_n(n)} ponds, partitions of {size} bodies ({count} partitions):",
        "",
        f"* one partition on one worker (weights cached): {part_s:.1f} s "
        f"(weights {warm_weights:.1f} s + evaporation); with the weights built (cold run): "
        f"{part_cold_s:.1f} s;",
        f"* the rest of the `workers = 1` run (cluster start, load, writing, not overlapped "
        f"with the partitions): {serial_s:.1f} s of {one['wall_s']:.1f} s;",
        f"* `workers = 2` against `workers = 1`: {speedup:.2f}x faster on this 2-core "
        f"machine; local (threads) {local['wall_s']:.1f} s;",
        f"* peak RSS of the largest worker process: {worker_gib:.2f} GiB (`workers = 1`), "
        f"{two['largest_child_peak_gib']:.2f} GiB (`workers = 2`); the client's: "
        f"{one['client_peak_gib']:.2f} GiB and {two['client_peak_gib']:.2f} GiB;",
        f"* files of one partition: {part_bytes / 2**20:.0f} MiB in the GeoParquet output "
        f"(`waterbodies/` + `evaporation_by_period/`, {dataset / 2**20:.0f} MiB for "
        f"{parquet['partitions']['count']} partitions); part files seen in `_parts/` during "
        f"the `workers = 1` run: "
        + (
            f"{part_bytes_seen / 2**20:.0f} MiB each ({one['parts_seen']} seen)."
            if one["parts_seen"]
            else "none caught by the 1 s poll."
        ),
        "",
        f"For 10^8 bodies ({parts_big} partitions of {size}), N workers of one core each, "
        "scaling these figures linearly. The client's own part (cluster start, the layer's "
        "survey, the rank, writing the GeoPackage and the CSVs, as in the `workers = 1` run) "
        "is taken as proportional to the number of bodies and as not overlapping the "
        "partitions, so the totals are upper bounds for this output:",
        "",
        "| N workers | total, weights cached | total, weights built | of which client "
        "| memory per worker | part files to shared storage | GeoParquet dataset "
        "| summary CSV |",
        "|---|---|---|---|---|---|---|---|",
    ]
    csv_bytes = parquet["file_bytes"].get("summary_by_waterbody.csv", 0) * scale
    client_h = serial_s * scale / 3600
    for workers in (1, 8, 32, 128):
        waves = -(-parts_big // workers)
        warm_h = waves * part_s / 3600 + client_h
        cold_h = waves * part_cold_s / 3600 + client_h
        lines.append(
            f"| {workers} | {warm_h:.2f} h | {cold_h:.2f} h | {client_h:.2f} h "
            f"| {worker_gib:.1f} GiB | {parts_big * part_bytes_seen / 2**30:.0f} GiB "
            f"| {parts_big * part_bytes / 2**30:.0f} GiB | {csv_bytes / 2**30:.1f} GiB |"
        )
    ids = _id_bytes(n)
    per_body = {kind: b + 8 + 9 for kind, b in ids.items()}  # + volume (f8), rank (i8 + mask)
    lines += [
        "",
        f"What the client holds at 10^8: the ids, one float64 volume per body for the rank "
        f"and the rank itself (8 + 9 bytes). This layer's ids (`P0` ... `P99999999`) take "
        f"{ids['object']:.0f} bytes each as Python strings in an object array (what "
        f"`LayerSurvey.body_ids` hands the rank now) and {ids['arrow']:.0f} bytes as Arrow "
        f"strings (pandas' `str` dtype): "
        f"{per_body['object']:.0f} or {per_body['arrow']:.0f} bytes per body, "
        f"{per_body['object'] * big / 2**30:.1f} or {per_body['arrow'] * big / 2**30:.1f} "
        "GiB, plus the summaries by period and group (a few thousand rows) and the "
        "partitions' small outcomes. The client's measured peak at 10^6 "
        f"({one['client_peak_gib']:.2f} GiB with one worker) is mostly the interpreter, the "
        "libraries, the scheduler and the writer's buffers, which do not grow with the "
        "bodies.",
    ]
    return lines


def _id_bytes(n: int) -> dict[str, float]:
    """Bytes per id of ``P0`` ... ``P{n-1}`` held as Python strings and as Arrow strings."""
    import pandas as pd

    ids = pd.Series(np.char.add("P", np.arange(n).astype(str)), dtype=object)
    arrow = ids.astype("string[pyarrow]")
    return {
        "object": ids.memory_usage(deep=True, index=False) / n,
        "arrow": arrow.memory_usage(deep=True, index=False) / n,
    }


def report() -> None:
    rows = _rows()
    if not rows:
        raise SystemExit(f"no figures yet in {RESULTS}")
    print("## Partitions (issue 15)\n")
    print(f"Machine: {machine()}; {platform.platform()}.\n")
    for item in ("cold", "stateful", "cluster", "ten-million"):
        chosen = [r for r in rows if r["item"] == item]
        if not chosen:
            continue
        print(f"### {item}\n")
        print("\n".join(_table(chosen)))
        if item == "stateful":
            a = [r["wall_s"] for r in chosen if r["method"] == "relaxation_check"]
            b = [r["wall_s"] for r in chosen if r["method"] == "penman_open_water"]
            if a and b:
                ratio = statistics.median(a) / statistics.median(b)
                print(
                    f"\nrelaxation_check / penman_open_water: median {statistics.median(a):.1f}"
                    f" s / {statistics.median(b):.1f} s = {ratio:.2f}"
                )
        print()
    print("### 10^8 bodies on N workers (estimate)\n")
    print("\n".join(_estimate(rows)))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cold", action="store_true", help="10^6 cold, default and one partition")
    parser.add_argument("--stateful", action="store_true", help="relaxation_check vs penman")
    parser.add_argument("--rounds", type=int, default=2, help="A B pairs of --stateful")
    parser.add_argument("--cluster", action="store_true", help="local, workers = 1 and 2")
    parser.add_argument("--ten-million", action="store_true", help="10^7 ponds, both formats")
    parser.add_argument("--report", action="store_true", help="print the README markdown")
    parser.add_argument(
        "--ponds", type=int, default=MILLION, help="ponds of --cold, --stateful, --cluster"
    )
    parser.add_argument("--reset", action="store_true", help=f"forget {RESULTS.name} first")
    args = parser.parse_args()
    if args.reset:
        RESULTS.unlink(missing_ok=True)
    runs = args.cold or args.stateful or args.cluster or args.ten_million
    if runs:
        print(machine(), flush=True)
        layer_path(args.ponds)  # inputs first, so their one-off cost is in no timing
        climate_path()
    if args.cold:
        item_cold(args.ponds)
    if args.cluster:
        item_cluster(args.ponds)
    if args.stateful:
        item_stateful(args.ponds, args.rounds)
    if args.ten_million:
        item_ten_million()
    if args.report or not runs:
        report()


if __name__ == "__main__":
    main()
