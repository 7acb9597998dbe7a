"""Exact area weights between water-body polygons and climate grid cells.

Build once with :func:`build_weights` (or through :class:`WeightsCache`), then apply the
sparse weights to every variable and time step with :meth:`ZonalWeights.apply`.
"""

from lakeloss.zonal.build import build_weights
from lakeloss.zonal.cache import WeightsCache, layer_key
from lakeloss.zonal.geometry import reproject_to_grid
from lakeloss.zonal.grid import GridSpec
from lakeloss.zonal.weights import ZonalWeights

__all__ = [
    "GridSpec",
    "WeightsCache",
    "ZonalWeights",
    "build_weights",
    "layer_key",
    "reproject_to_grid",
]
