"""``lakeloss check``: validate every input and describe the run without computing it.

Everything that can be known before the heavy stages is checked here, with the same errors
a run would raise: the layer (CRS, geometry types, ids), every climate field (units, CRS,
time axis, values against their units), that the layer overlaps each grid, and that the
methods have their inputs. The memory and time figures are rough, order-of-magnitude
estimates from this project's own benchmarks (benchmarks/README.md), not promises.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from lakeloss.config import RunConfig
from lakeloss.io.climate import crs_label
from lakeloss.pipeline import Inputs, block_steps, check_overlap, check_values, load_inputs

# Wall seconds per unit of work, from the end-to-end benchmark of 10^6 ponds on the 2-core
# reference machine, two threads (benchmarks/README.md, "End to end"); 10^5 runs faster.
_SECONDS_PER_POLYGON = 20e-6  # layer read, reprojection and weights build (cold cache)
_SECONDS_PER_VALUE_APPLY = 3e-8  # one water body x one step x one variable (read + zonal)
_SECONDS_PER_VALUE_METHOD = 1.3e-7  # one water body x one step x one method (physics)
_SECONDS_PER_TABLE_ROW = 4e-6  # one row of evaporation_by_period assembled and written


@dataclass
class Plan:
    """What a run would do, with rough costs."""

    config: RunConfig
    inputs: Inputs
    steps_per_block: int
    memory_bytes: float
    seconds: float
    value_warnings: list[str] = field(default_factory=list)

    def describe(self) -> str:
        inputs, config = self.inputs, self.config
        lines = [
            f"water bodies : {inputs.n_waterbodies} from {config.waterbodies.path} "
            f"(id field '{inputs.layer.id_field}', CRS {crs_label(inputs.layer.frame.crs)})",
            f"time axis    : {inputs.axis.describe()}",
            f"periods      : {len(inputs.periods.starts)} x {config.output.period}",
            f"method       : {config.method.name}"
            + (
                f" (compared with {', '.join(config.method.compare)})"
                if config.method.compare
                else ""
            ),
        ]
        for quantity, item in inputs.fields.items():
            grid = inputs.grids[inputs.field_grid[quantity]]
            lines.append(
                f"climate      : {quantity} <- {item.source_path}:{item.variable} "
                f"[{item.source_units}] grid {grid.shape[1]} x {grid.shape[0]} "
                f"({crs_label(grid.crs)})"
            )
        lines += [
            f"blocks       : {self.steps_per_block} time steps per block"
            " (set [compute] chunk_steps or --chunk-steps to change)",
            f"memory       : about {self.memory_bytes / 2**30:.2f} GiB peak (rough estimate)",
            f"time         : about {self.seconds:.0f} s on a 2-core machine (rough estimate)",
        ]
        lines += [f"warning      : {w}" for w in [*inputs.warnings, *self.value_warnings]]
        lines.append("all inputs checked: ready to run")
        return "\n".join(lines)


def _memory(config: RunConfig, inputs: Inputs, steps: int) -> float:
    n = inputs.n_waterbodies
    n_periods = len(inputs.periods.starts)
    cells = sum(int(np.prod(g.shape)) for g in inputs.grids.values())
    layer = n * 1500.0  # geometries and attributes
    weights = n * 1.5 * 12.0 * 3  # nnz ~ 1.5 per body; build overhead x3
    sums = n_periods * n * 8.0 * (len(config.method.all) + 2)
    block = steps * 8.0 * (n * 24 + cells * len(inputs.fields))
    tables = n_periods * n * 120.0  # evaporation_by_period in pandas
    # Interpreter, numpy/GDAL/PROJ and open climate files: about 0.7 GiB at any size in the
    # end-to-end benchmark (1.4 GiB peak at 10^5 bodies, 4.6 GiB at 10^6).
    base = 0.7 * 2**30
    return base + layer + weights + sums + block + tables


def _seconds(config: RunConfig, inputs: Inputs) -> float:
    n = inputs.n_waterbodies
    steps = len(inputs.axis.days)
    return (
        n * _SECONDS_PER_POLYGON
        + n * steps * len(inputs.fields) * _SECONDS_PER_VALUE_APPLY
        + n * steps * len(config.method.all) * _SECONDS_PER_VALUE_METHOD
        + n * len(inputs.periods.starts) * _SECONDS_PER_TABLE_ROW
    )


def make_plan(config: RunConfig) -> Plan:
    """Check every input of ``config`` and return the plan (raises the run's errors)."""
    inputs = load_inputs(config)
    check_overlap(inputs)
    value_warnings = check_values(config, inputs)
    steps = block_steps(config, inputs)
    return Plan(
        config=config,
        inputs=inputs,
        steps_per_block=steps,
        memory_bytes=_memory(config, inputs, steps),
        seconds=_seconds(config, inputs),
        value_warnings=value_warnings,
    )
