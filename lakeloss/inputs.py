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

    layer: vector_io.WaterBodyLayer | None
    """The water bodies read (a partition's, or the whole layer's for ``lakeloss check``);
    None for a run, whose partitions read their own rows from ``survey``."""
    fields: dict[str, climate_io.ClimateField]
    axis: timeaxis.TimeAxis
    periods: timeaxis.Periods
    grids: dict[str, GridSpec]
    field_grid: dict[str, str]
    warnings: list[str] = field(default_factory=list)
    static_fields: dict[str, tuple[static_io.StaticField, str]] = field(default_factory=dict)
    # Typed Any: inside this class `warnings` names the field above, not the module.
    recorded: list[Any] = field(default_factory=list)
    survey: vector_io.LayerSurvey | None = None
    """The whole layer, surveyed without its geometry (count, CRS, bounds, ids)."""
    """The lakeloss ``warnings.WarningMessage`` objects behind ``warnings``, kept to re-issue
    with their categories."""

    @property
    def n_waterbodies(self) -> int:
        if self.layer is not None:
            return len(self.layer.frame)
        assert self.survey is not None  # load_inputs sets one or the other
        return self.survey.n_rows

    @property
    def bodies(self) -> vector_io.WaterBodyLayer:
        """The water bodies read (``layer``), which stages past the load need."""
        if self.layer is None:
            raise ValueError("these inputs hold no water bodies; read a partition's rows first")
        return self.layer
