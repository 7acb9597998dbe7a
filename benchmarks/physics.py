"""Time ``registry.evaporate`` per method on pipeline-shaped inputs.

Climate fields are (steps, n) float64, per-body inputs (latitude, area_m2, elevation) are
(1, n) and day_of_year is (steps, 1), as ``lakeloss.pipeline.evaporate_block`` passes them.
The scenario is invented: uniform random weather over a 90° latitude band.

    python benchmarks/physics.py                    # (16, 10^6)
    python benchmarks/physics.py --bodies 100000 --repeat 5

Each method is timed ``--repeat`` times single-threaded and the best time is printed, with
the cost per body-step. Run it on the code before and after a change to get the ratio.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from lakeloss.physics import registry


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


def time_method(name: str, inputs: dict[str, np.ndarray], repeat: int) -> float:
    """Best wall time of ``repeat`` calls of ``registry.evaporate(name, inputs)`` [s]."""
    best = float("inf")
    for _ in range(repeat):
        start = time.perf_counter()
        registry.evaporate(name, inputs)
        best = min(best, time.perf_counter() - start)
    return best


def main() -> None:
    """Print one line per method: seconds per call and nanoseconds per body-step."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--steps", type=int, default=16)
    parser.add_argument("--bodies", type=int, default=1_000_000)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    inputs = make_inputs(args.steps, args.bodies)
    cells = args.steps * args.bodies
    print(f"shape ({args.steps}, {args.bodies}), best of {args.repeat}")
    print(f"{'method':<28} {'s/call':>8} {'ns/body-step':>13}")
    for name in registry.method_names():
        seconds = time_method(name, inputs, args.repeat)
        print(f"{name:<28} {seconds:8.3f} {seconds / cells * 1e9:13.1f}")


if __name__ == "__main__":
    main()
