"""What a run refuses: inputs that cannot give a result, checked before anything is computed,
and a run that gave no result at all, refused before anything is written.

``lakeloss check`` (:mod:`lakeloss.plan`) and the run call the same checks, so both refuse
with the same one-line errors.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd
import pyproj

from lakeloss.config import RunConfig
from lakeloss.errors import ConfigError, GeometryError, GridError, MissingInputError, NoResultError
from lakeloss.inputs import Inputs
from lakeloss.io import climate as climate_io
from lakeloss.physics import registry


def check_methods(config: RunConfig) -> None:
    """Refuse a method whose required inputs the configuration does not give."""
    available = set(config.quantities) | {"latitude", "day_of_year", "area_m2", "elevation"}
    if {"eastward_wind", "northward_wind"} <= available:
        available.add("wind_speed")
    for name in config.method.all:
        missing = registry.missing_inputs(name, available)
        if missing:
            given = ", ".join(sorted(config.quantities)) or "nothing"
            raise MissingInputError(
                f"method '{name}' needs {'; '.join(missing)} in [climate], but the "
                f"configuration gives only: {given}"
            )


def check_attributes(config: RunConfig, columns: Sequence[str]) -> None:
    """Refuse attributes the configuration names (group_by, elevation) that the layer lacks."""
    columns = list(columns)
    wanted = list(config.waterbodies.group_by)
    if config.waterbodies.elevation_field:
        wanted.append(config.waterbodies.elevation_field)
    for name in wanted:
        if name not in columns:
            raise ConfigError(
                f"[waterbodies] names attribute '{name}', which the layer does not have "
                f"(attributes: {', '.join(c for c in columns if c != 'geometry')})"
            )


def elevations(frame: pd.DataFrame, field_name: str) -> np.ndarray:
    """The elevation attribute as numbers [m]; empty or non-numeric values are refused."""
    values = pd.to_numeric(frame[field_name], errors="coerce").to_numpy(dtype=float)
    if not np.isfinite(values).all():
        raise ConfigError(
            f"elevation attribute '{field_name}' has {int((~np.isfinite(values)).sum())} "
            "empty or non-numeric values; fill them or use [parameters] elevation_m"
        )
    return values


def check_wind_grids(
    fields: Mapping[str, climate_io.ClimateField], field_grid: Mapping[str, str]
) -> None:
    """Refuse wind components on two grids: the speed is computed cell by cell."""
    if "wind_speed" not in fields and {"eastward_wind", "northward_wind"} <= set(fields):
        if field_grid["eastward_wind"] != field_grid["northward_wind"]:
            raise GridError("eastward_wind and northward_wind must be on the same grid")


def check_overlap(inputs: Inputs) -> None:
    """Refuse a layer whose bounding box misses a climate grid entirely, or has no area.

    Run by ``check`` and by the run itself, before the weights are built, so both refuse
    with the same message.
    """
    survey = inputs.survey
    assert survey is not None  # load_inputs surveys the layer
    bounds = survey.bounds
    if not np.isfinite(bounds).all():
        raise GeometryError(
            f"all {survey.n_rows} water-body geometries are empty; expected at least one "
            "polygon with area; check the layer"
        )
    for grid in inputs.grids.values():
        transformer = pyproj.Transformer.from_crs(survey.crs, grid.crs, always_xy=True)
        left, bottom, right, top = (float(v) for v in bounds)
        x0, y0, x1, y1 = transformer.transform_bounds(left, bottom, right, top, densify_pts=21)
        gx0, gx1 = float(np.min(grid.x_edges)), float(np.max(grid.x_edges))
        gy0, gy1 = float(np.min(grid.y_edges)), float(np.max(grid.y_edges))
        if grid.wraps_longitude:
            x0, x1 = gx0, gx1  # a grid all the way round has every longitude
        elif grid.is_geographic and gx1 > 180.0 and x1 < 0.0:
            x0, x1 = x0 + 360.0, x1 + 360.0
        elif grid.is_geographic and gx0 < 0.0 and x0 > 180.0:
            x0, x1 = x0 - 360.0, x1 - 360.0
        if x1 < gx0 or x0 > gx1 or y1 < gy0 or y0 > gy1:
            raise GridError(
                f"the water-body layer (bounds {x0:.4f}, {y0:.4f}, {x1:.4f}, {y1:.4f} in the "
                f"grid CRS) does not overlap the climate grid ({gx0:.4f}, {gy0:.4f}, "
                f"{gx1:.4f}, {gy1:.4f}); check both CRSs and the file paths"
            )


def check_values(config: RunConfig, inputs: Inputs) -> list[str]:
    """Scan every climate field for values that contradict their units.

    Strict runs raise :class:`ImplausibleValuesError`; lenient runs return the reasons,
    which become warnings in run.json.
    """
    reasons = []
    for item in inputs.fields.values():
        reason = climate_io.check_values(item, strict=config.strict)
        if reason:
            reasons.append(reason)
    return reasons


def refuse_empty(counts: Mapping[str, Any]) -> None:
    """Raise :class:`NoResultError` when no water body has a result for any period.

    ``counts`` is run.json's ``counts`` (``RunResult.provenance["counts"]``).
    """
    bodies = counts["waterbodies"]
    if counts["without_any_result"] < bodies:
        return
    flags = counts["qa_flags"]
    reasons = ", ".join(f"{count} {flag}" for flag, count in flags.items()) or "no flag"
    raise NoResultError(
        f"none of the {bodies} water bodies has an evaporation result for any period "
        f"({reasons}); "
        "nothing was written; check that the climate covers the layer and has values over "
        "the whole run (see the warnings above)"
    )
