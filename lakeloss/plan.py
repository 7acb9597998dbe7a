"""``lakeloss check``: validate every input and describe the run without computing it.

Everything that can be known before the heavy stages is checked here, with the same errors
a run would raise: the layer (CRS, geometry types, ids), every climate field (units, CRS,
time axis, values against their units), that the layer overlaps each grid, and that the
methods have their inputs. The memory and time figures are rough, order-of-magnitude
estimates from this project's own benchmarks (benchmarks/README.md), not promises.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import dask
import numpy as np
import pyproj
import shapely

from lakeloss.checks import check_overlap, check_values
from lakeloss.config import RunConfig
from lakeloss.gaps import date_ranges, fill_short_gaps, steps_text
from lakeloss.grouping import inputs_used
from lakeloss.inputs import Inputs
from lakeloss.io.climate import crs_label
from lakeloss.partitions import partition_size
from lakeloss.pipeline import gap_limit, load_inputs
from lakeloss.sizing import block_steps

# Wall seconds per unit of work, fitted to the end-to-end benchmark so that the estimate
# lands within its measured range (benchmarks/README.md, "End to end", figures behind the
# code). A "column" is one group of bodies the blocks compute (estimate_columns).
_SECONDS_PER_POLYGON = 20e-6  # layer read, reprojection and weights build (cold cache)
_SECONDS_PER_VALUE_APPLY = 1e-8  # one column x one step x one variable (read + zonal)
_SECONDS_PER_VALUE_METHOD = 1.2e-7  # one column x one step x one method (physics, sums)
_SECONDS_PER_TABLE_ROW = 2.8e-6  # one row of evaporation_by_period assembled and written


@dataclass
class Plan:
    """What a run would do, with rough costs."""

    config: RunConfig
    inputs: Inputs
    steps_per_block: int
    columns: int
    memory_bytes: float
    seconds: float
    value_warnings: list[str] = field(default_factory=list)
    gap_lines: list[str] = field(default_factory=list)
    """What the whole-grid gaps of the climate will become (filled, or left missing)."""

    def describe(self) -> str:
        inputs, config = self.inputs, self.config
        lines = [
            f"water bodies : {inputs.n_waterbodies} from {config.waterbodies.path} "
            f"(id field '{inputs.bodies.id_field}', CRS {crs_label(inputs.bodies.frame.crs)})",
            f"time axis    : {inputs.axis.describe()}",
            f"periods      : {len(inputs.periods.rows)} x {config.output.period}",
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
            f"computed     : about {self.columns} distinct water bodies"
            " (bodies inside one climate cell with equal inputs are computed once)",
            f"blocks       : {self.steps_per_block} time steps per block"
            " (set [compute] chunk_steps or --chunk-steps to change)",
            f"memory       : about {self.memory_bytes / 2**30:.2f} GiB peak (rough estimate)",
            f"time         : about {self.seconds:.0f} s on a 2-core machine (rough estimate)",
        ]
        lines += self.gap_lines
        lines += [f"warning      : {w}" for w in [*inputs.warnings, *self.value_warnings]]
        warned = any(line.startswith("warning") for line in lines)
        lines.append(
            "all inputs checked: ready to run" + (", with the warnings above" if warned else "")
        )
        return "\n".join(lines)


def _memory(config: RunConfig, inputs: Inputs, steps: int, columns: int) -> float:
    # One partition is in memory at a time (two partitions' tables while one is written),
    # plus the ids and one number per body of the whole layer.
    total = inputs.n_waterbodies
    n = min(total, partition_size(config.compute.partition_bodies, total))
    columns = min(columns, n)
    n_periods = len(inputs.periods.starts)
    cells = sum(int(np.prod(g.shape)) for g in inputs.grids.values())
    layer = n * 1500.0 + total * 40.0  # the partition's geometries and attributes; ids
    weights = n * 1.5 * 12.0 * 3  # nnz ~ 1.5 per body; build overhead x3
    sums = n_periods * n * 8.0 * (len(config.method.all) + 2)
    block = steps * 8.0 * (columns * 24 + cells * len(inputs.fields))
    tables = 2 * n_periods * n * 120.0  # evaporation_by_period in pandas
    # Interpreter, numpy/GDAL/PROJ and open climate files: a fixed base read off the
    # end-to-end benchmark's peaks (benchmarks/README.md, "End to end", figures behind the code).
    base = 0.7 * 2**30
    return base + layer + weights + sums + block + tables


def _seconds(config: RunConfig, inputs: Inputs, columns: int) -> float:
    n = inputs.n_waterbodies
    steps = len(inputs.axis.days)
    return (
        n * _SECONDS_PER_POLYGON
        + columns * steps * len(inputs.fields) * _SECONDS_PER_VALUE_APPLY
        + columns * steps * len(config.method.all) * _SECONDS_PER_VALUE_METHOD
        + n * len(inputs.periods.starts) * _SECONDS_PER_TABLE_ROW
    )


def estimate_columns(config: RunConfig, inputs: Inputs) -> int:
    """About how many distinct bodies the blocks will compute (:mod:`lakeloss.grouping`).

    Without building the weights: a body whose bounding box, its corners moved to the
    first climate grid, falls inside one cell is counted with the others of that cell;
    every other body counts alone. A per-body input that splits groups (an elevation
    attribute, or the area for a method that reads it) makes every body count.
    """
    frame = inputs.bodies.frame
    used = inputs_used(config.method.all)
    splitting = bool(config.waterbodies.elevation_field) and "elevation" in used
    if splitting or "area_m2" in used:
        return len(frame)
    grid = inputs.grids[next(iter(inputs.field_grid.values()))]
    bounds = shapely.bounds(np.asarray(frame.geometry.array))
    to_grid = pyproj.Transformer.from_crs(frame.crs, grid.crs, always_xy=True)
    x0, y0 = to_grid.transform(bounds[:, 0], bounds[:, 1], errcheck=False)
    x1, y1 = to_grid.transform(bounds[:, 2], bounds[:, 3], errcheck=False)
    col0, col1 = _cell_index(grid.x_edges, x0), _cell_index(grid.x_edges, x1)
    row0, row1 = _cell_index(grid.y_edges, y0), _cell_index(grid.y_edges, y1)
    inside = (col0 == col1) & (row0 == row1) & (col0 >= 0) & (row0 >= 0)
    cells = np.unique(row0[inside] * grid.shape[1] + col0[inside]).size
    return int(cells + (~inside).sum())


def _cell_index(edges: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Cell of each value along one axis (edges ascending or descending); -1 outside."""
    ascending = edges[-1] > edges[0]
    ordered = edges if ascending else edges[::-1]
    index = np.searchsorted(ordered, values, side="right") - 1
    index = np.where((index >= 0) & (index < edges.size - 1), index, -1)
    if not ascending:
        index = np.where(index >= 0, edges.size - 2 - index, -1)
    return index


def grid_gaps(config: RunConfig, inputs: Inputs) -> list[str]:
    """The steps at which a variable is missing on its whole grid, and what the run will do.

    These are the gaps visible without computing (a day the product did not deliver);
    gaps in only some cells show in the run, per water body. One pass over every field.
    """
    fields = list(inputs.fields.values())
    empty = dask.compute(*[f.data.isnull().all(dim=("y", "x")) for f in fields])
    limit = gap_limit(config, inputs.axis)
    starts = inputs.axis.starts
    lines = []
    for item, missing in zip(fields, empty, strict=True):
        mask = np.asarray(missing, dtype=bool)
        if not mask.any():
            continue
        filled, _ = fill_short_gaps(np.where(mask, np.nan, 0.0)[:, np.newaxis], limit)
        short = mask & np.isfinite(filled[:, 0])
        if short.any():
            lines.append(
                f"gap          : {item.quantity} missing on the whole grid at "
                f"{steps_text(int(short.sum()))} ({date_ranges(starts, short)}): filled by linear "
                f"interpolation in time ([checks] max_gap_steps = {limit}), flagged "
                "climate_gaps_filled"
            )
        if (mask & ~short).any():
            lines.append(
                f"warning      : {item.quantity} missing on the whole grid at "
                f"{steps_text(int((mask & ~short).sum()))} ({date_ranges(starts, mask & ~short)}), "
                f"longer than [checks] max_gap_steps = {limit} or at the start or end of the "
                "data: no result for the periods holding them nor for the whole run"
            )
    return lines


def make_plan(config: RunConfig) -> Plan:
    """Check every input of ``config`` and return the plan (raises the run's errors)."""
    inputs = load_inputs(config, whole_layer=True)
    check_overlap(inputs)
    value_warnings = check_values(config, inputs)
    columns = estimate_columns(config, inputs)
    steps = block_steps(config, inputs, columns)
    return Plan(
        config=config,
        inputs=inputs,
        steps_per_block=steps,
        columns=columns,
        memory_bytes=_memory(config, inputs, steps, columns),
        seconds=_seconds(config, inputs, columns),
        value_warnings=value_warnings,
        gap_lines=grid_gaps(config, inputs),
    )
