"""What the load stage hands to the later stages: the layer, the lazy climate and the time axis."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from lakeloss import timeaxis
from lakeloss.io import climate as climate_io
from lakeloss.io import static as static_io
from lakeloss.io import vector as vector_io
from lakeloss.zonal import GridSpec


@dataclass
class Inputs:
    """What the load stage found: the layer, the lazy climate fields and the time axis."""

    layer: vector_io.WaterBodyLayer
    fields: dict[str, climate_io.ClimateField]
    axis: timeaxis.TimeAxis
    periods: timeaxis.Periods
    grids: dict[str, GridSpec]
    field_grid: dict[str, str]
    warnings: list[str] = field(default_factory=list)
    static_fields: dict[str, tuple[static_io.StaticField, str]] = field(default_factory=dict)
    # Typed Any: inside this class `warnings` names the field above, not the module.
    recorded: list[Any] = field(default_factory=list)
    """The lakeloss ``warnings.WarningMessage`` objects behind ``warnings``, kept to re-issue
    with their categories."""

    @property
    def n_waterbodies(self) -> int:
        return len(self.layer.frame)
