"""Time ``registry.evaporate`` per method on pipeline-shaped inputs.

Climate fields are (steps, n) float64, per-body inputs (latitude, area_m2, elevation) are
(1, n) and day_of_year is (steps, 1), as ``lakeloss.pipeline.evaporate_block`` passes them.
The scenario is invented: uniform random weather over a 90° latitude band.

    python benchmarks/physics.py                    # (16, 10^6)
    python benchmarks/physics.py --bodies 100000 --repeat 5
    git archive <commit> lakeloss | tar -x -C /tmp/before   # the code before a change
    python benchmarks/physics.py --lakeloss-path /tmp/before  # time that tree alone
    python benchmarks/physics.py --before /tmp/before --rounds 2

Each method is timed ``--repeat`` times and the best time is printed, with the cost per
body-step. ``--before`` runs the exported tree and the current code in alternating
subprocesses (``--rounds`` times each, best kept, so that load from other processes hits
both alike) and prints before, after and their ratio, then the same as markdown rows for
benchmarks/README.md.
"""

from __future__ import annotations

import argparse
import importlib
import json
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


def time_method(
    registry: ModuleType, name: str, inputs: dict[str, np.ndarray], repeat: int
) -> float:
    """Best wall time of ``repeat`` calls of ``registry.evaporate(name, inputs)`` [s]."""
    best = float("inf")
    for _ in range(repeat):
        start = time.perf_counter()
        registry.evaporate(name, inputs)
        best = min(best, time.perf_counter() - start)
    return best


def run_here(args: argparse.Namespace) -> dict[str, float]:
    """Time every method in this process; print the table unless ``--json``."""
    registry = load_registry(args.lakeloss_path)
    inputs = make_inputs(args.steps, args.bodies)
    cells = args.steps * args.bodies
    if not args.json:
        print(f"lakeloss from {registry.__file__}")
        print(f"shape ({args.steps}, {args.bodies}), best of {args.repeat}")
        print(f"{'method':<28} {'s/call':>8} {'ns/body-step':>13}")
    times = {}
    for name in registry.method_names():
        times[name] = time_method(registry, name, inputs, args.repeat)
        if not args.json:
            print(f"{name:<28} {times[name]:8.3f} {times[name] / cells * 1e9:13.1f}")
    return times


def _subprocess_times(args: argparse.Namespace, lakeloss_path: str | None) -> dict[str, float]:
    command = [sys.executable, __file__, "--json", "--steps", str(args.steps)]
    command += ["--bodies", str(args.bodies), "--repeat", str(args.repeat)]
    if lakeloss_path is not None:
        command += ["--lakeloss-path", lakeloss_path]
    result = subprocess.run(command, check=True, capture_output=True, text=True)
    return json.loads(result.stdout)


def compare(args: argparse.Namespace) -> None:
    """Before (``--before`` tree) and after (current code), best over alternating rounds."""
    before: dict[str, float] = {}
    after: dict[str, float] = {}
    for _ in range(args.rounds):
        for best, path in ((before, args.before), (after, None)):
            for name, seconds in _subprocess_times(args, path).items():
                best[name] = min(best.get(name, float("inf")), seconds)
    cells = args.steps * args.bodies
    print(f"shape ({args.steps}, {args.bodies}), best of {args.repeat} x {args.rounds} rounds")
    print(f"{'method':<28} {'before s':>9} {'after s':>8} {'ratio':>6} {'after ns/b-s':>13}")
    for name, old in before.items():
        new = after[name]
        print(f"{name:<28} {old:9.3f} {new:8.3f} {old / new:6.2f} {new / cells * 1e9:13.1f}")
    print("\n| method | before s | after s | before/after | after ns per body-step |")
    print("|---|---|---|---|---|")
    for name, old in before.items():
        new = after[name]
        print(f"| {name} | {old:.3g} | {new:.3g} | {old / new:.2f} | {new / cells * 1e9:.3g} |")


def main() -> None:
    """Print one line per method, or the before/after comparison with ``--before``."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--steps", type=int, default=16)
    parser.add_argument("--bodies", type=int, default=1_000_000)
    parser.add_argument("--repeat", type=int, default=3)
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
