"""Time ``registry.evaporate`` per method on pipeline-shaped inputs.

Climate fields are (steps, n) float64, per-body inputs (latitude, area_m2, elevation) are
(1, n) and day_of_year is (steps, 1), as ``lakeloss.blocks.evaporate_block`` passes them;
``--columns 4096`` evaluates them in slices of that many bodies, as that function does
(``lakeloss.blocks.PHYSICS_COLUMNS``), 0 in one call. The scenario is invented: uniform
random weather over a 90° latitude band.

    python benchmarks/physics.py                    # (16, 10^6)
    python benchmarks/physics.py --bodies 100000 --repeat 5
    git archive <commit> lakeloss | tar -x -C /tmp/before   # the code before a change
    python benchmarks/physics.py --lakeloss-path /tmp/before  # time that tree alone
    python benchmarks/physics.py --before /tmp/before --rounds 3 --columns 4096

Each method is timed ``--repeat`` times and the best time is printed, with the cost per
body-step. ``--before`` runs the exported tree and the current code in alternating
subprocesses (``--rounds`` times each, so that load from other processes hits both alike)
and prints, per method, the median over the rounds of each round's best CPU time (user +
system of this process, which other processes' load disturbs far less than wall time),
before, after and their ratio, then the same as markdown rows for benchmarks/README.md.
"""

from __future__ import annotations

import argparse
import importlib
import json
import statistics
import subprocess
import sys
import time
from types import ModuleType

import numpy as np


def make_inputs(steps: int, bodies: int, seed: int = 7) -> dict[str, np.ndarray]:
    """Invented (steps, bodies) weather plus (1, bodies) body data and (steps, 1) days."""
    rng = np.random.default_rng(seed)
    shape = (steps, bodies)
    return {
        "air_temperature": rng.uniform(-5.0, 32.0, shape),
        "relative_humidity": rng.uniform(25.0, 98.0, shape),
        "wind_speed": rng.uniform(0.2, 9.0, shape),
        "surface_downwelling_shortwave_flux_in_air": rng.uniform(5.0, 330.0, shape),
        "pan_evaporation": rng.uniform(0.0, 12.0, shape),
        "latitude": rng.uniform(-45.0, 45.0, (1, bodies)),
        "area_m2": rng.uniform(1.0e3, 1.0e7, (1, bodies)),
        "elevation": rng.uniform(0.0, 1500.0, (1, bodies)),
        "day_of_year": np.arange(150, 150 + steps, dtype=float)[:, np.newaxis],
    }


def load_registry(lakeloss_path: str | None) -> ModuleType:
    """``lakeloss.physics.registry``, from the directory holding a ``lakeloss`` package when
    given (the editable install's import hook is bypassed for that), else the installed one."""
    if lakeloss_path is not None:
        # setuptools' editable hook (a finder class on sys.meta_path) would win over sys.path.
        sys.meta_path[:] = [
            finder
            for finder in sys.meta_path
            if "__editable__" not in getattr(finder, "__module__", "")
        ]
        sys.path.insert(0, lakeloss_path)
    return importlib.import_module("lakeloss.physics.registry")


def evaporate_in_columns(
    registry: ModuleType, name: str, inputs: dict[str, np.ndarray], columns: int
) -> np.ndarray:
    """``registry.evaporate(name, inputs)``, in slices of ``columns`` bodies when > 0."""
    bodies = inputs["latitude"].shape[1]
    if columns <= 0:
        return registry.evaporate(name, inputs)
    rate = np.empty((inputs["day_of_year"].shape[0], bodies))
    for start in range(0, bodies, columns):
        part = slice(start, start + columns)
        sliced = {k: v[:, part] if v.shape[1] == bodies else v for k, v in inputs.items()}
        rate[:, part] = registry.evaporate(name, sliced)
    return rate


def time_method(
    registry: ModuleType, name: str, inputs: dict[str, np.ndarray], repeat: int, columns: int = 0
) -> tuple[float, float]:
    """Best wall and best CPU time of ``repeat`` evaluations of method ``name``. [s]"""
    best_wall = best_cpu = float("inf")
    for _ in range(repeat):
        wall, cpu = time.perf_counter(), time.process_time()
        evaporate_in_columns(registry, name, inputs, columns)
        best_cpu = min(best_cpu, time.process_time() - cpu)
        best_wall = min(best_wall, time.perf_counter() - wall)
    return best_wall, best_cpu


def run_here(args: argparse.Namespace) -> dict[str, tuple[float, float]]:
    """Time every method in this process (wall, CPU); print the table unless ``--json``."""
    registry = load_registry(args.lakeloss_path)
    inputs = make_inputs(args.steps, args.bodies)
    cells = args.steps * args.bodies
    if not args.json:
        print(f"lakeloss from {registry.__file__}")
        print(f"shape ({args.steps}, {args.bodies}), best of {args.repeat}")
        print(f"{'method':<28} {'wall s':>8} {'CPU s':>8} {'CPU ns/body-step':>17}")
    times = {}
    for name in registry.method_names():
        times[name] = time_method(registry, name, inputs, args.repeat, args.columns)
        wall, cpu = times[name]
        if not args.json:
            print(f"{name:<28} {wall:8.3f} {cpu:8.3f} {cpu / cells * 1e9:17.1f}")
    return times


def _subprocess_times(
    args: argparse.Namespace, lakeloss_path: str | None
) -> dict[str, tuple[float, float]]:
    command = [sys.executable, __file__, "--json", "--steps", str(args.steps)]
    command += ["--bodies", str(args.bodies), "--repeat", str(args.repeat)]
    command += ["--columns", str(args.columns)]
    if lakeloss_path is not None:
        command += ["--lakeloss-path", lakeloss_path]
    result = subprocess.run(command, check=True, capture_output=True, text=True)
    return json.loads(result.stdout)


def compare(args: argparse.Namespace) -> None:
    """Before (``--before`` tree) and after (current code): per method the median over
    alternating rounds of each round's best CPU time, and the median best wall time."""
    rounds: dict[str, dict[str, list[tuple[float, float]]]] = {"before": {}, "after": {}}
    for _ in range(args.rounds):
        for label, path in (("before", args.before), ("after", None)):
            for name, (wall, cpu) in _subprocess_times(args, path).items():
                rounds[label].setdefault(name, []).append((wall, cpu))

    def median(label: str, name: str, which: int) -> float:
        return statistics.median(pair[which] for pair in rounds[label][name])

    print(f"shape ({args.steps}, {args.bodies}), columns per call {args.columns or 'all'}, "
          f"median over {args.rounds} rounds of the best of "
          f"{args.repeat}; CPU = user + system seconds")  # fmt: skip
    print(f"{'method':<28} {'CPU before':>10} {'CPU after':>9} {'ratio':>6} "
          f"{'wall before':>11} {'wall after':>10}")  # fmt: skip
    rows = []
    for name in rounds["before"]:
        old, new = median("before", name, 1), median("after", name, 1)
        old_wall, new_wall = median("before", name, 0), median("after", name, 0)
        rows.append((name, old, new, old_wall, new_wall))
        print(f"{name:<28} {old:10.3f} {new:9.3f} {old / new:6.2f} {old_wall:11.3f} "
              f"{new_wall:10.3f}")  # fmt: skip
    print("\n| method | CPU s before | CPU s after | before/after | wall s before | wall s after |")
    print("|---|---|---|---|---|---|")
    for name, old, new, old_wall, new_wall in rows:
        print(f"| {name} | {old:.3g} | {new:.3g} | {old / new:.2f} | {old_wall:.3g} | "
              f"{new_wall:.3g} |")  # fmt: skip


def main() -> None:
    """Print one line per method, or the before/after comparison with ``--before``."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--steps", type=int, default=16)
    parser.add_argument("--bodies", type=int, default=1_000_000)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--columns", type=int, default=0, help="bodies per call; 0: all")
    parser.add_argument("--lakeloss-path", default=None, help="directory holding lakeloss/")
    parser.add_argument("--before", default=None, help="older tree to compare against")
    parser.add_argument("--rounds", type=int, default=2)
    parser.add_argument("--json", action="store_true", help="print the times as JSON only")
    args = parser.parse_args()
    if args.before is not None:
        compare(args)
        return
    times = run_here(args)
    if args.json:
        print(json.dumps(times))


if __name__ == "__main__":
    main()
