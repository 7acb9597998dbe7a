"""What a run knows of each water body besides its climate, gathered once in the weights stage.

The zonal weights carry the facts of geometry (area, coverage of the grid, repairs) once per
grid; the layer carries its own flags and attributes; a raster or an attribute gives the
elevation. :class:`BodyFacts` puts the ones the later stages read side by side, one entry per
body in layer order, so that the evaporation stage and the result tables read them by name.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from lakeloss.checks import elevations
from lakeloss.config import RunConfig
from lakeloss.inputs import Inputs
from lakeloss.zonal import ZonalWeights

_SHORTWAVE = "surface_downwelling_shortwave_flux_in_air"


@dataclass(frozen=True)
class BodyFacts:
    """The facts of every water body, each an ``(n,)`` array in layer order.

    Geometry facts are those of the first grid of the run (the first climate variable's):
    a body's area does not depend on the grid, its coverage and flags can.

    Attributes
    ----------
    area_m2 : numpy.ndarray
        The area the run uses: the true (ellipsoidal) area of the polygon, or the area the
        layer states (``[waterbodies] area_field``) for points and with
        ``area_source = "field"``. [m2]
    area_before_repair_m2 : numpy.ndarray
        True area of an invalid polygon before repair; NaN where none was needed. [m2]
    grid_coverage : numpy.ndarray
        Share of the body inside the climate grid; NaN for empty geometry. [1]
    geometry_flags : numpy.ndarray of str
        ``;``-joined flags of the zonal engine (``geometry_repaired``, ``outside_grid``,
        ``area_field_disagrees``, ...), ``""`` when clean.
    layer_flags : numpy.ndarray of str
        ``;``-joined flags set when the layer was read, ``""`` when clean.
    latitude : numpy.ndarray
        Latitude of the climate the body gets: the area-weighted mean latitude of the centres
        of the cells it covers on the shortwave grid (the first grid without one). [degrees]
    elevation : numpy.ndarray or None
        Elevation from the layer's attribute or the elevation raster; None when the run
        takes the ``[parameters] elevation_m`` constant. [m]
    """

    area_m2: np.ndarray
    area_before_repair_m2: np.ndarray
    grid_coverage: np.ndarray
    geometry_flags: np.ndarray
    layer_flags: np.ndarray
    latitude: np.ndarray
    elevation: np.ndarray | None = None

    @classmethod
    def gather(
        cls, config: RunConfig, inputs: Inputs, weights: Mapping[str, ZonalWeights]
    ) -> BodyFacts:
        """The facts of the bodies of ``inputs`` from the run's weights and static inputs.

        The latitude is the climate's rather than the body's own: for a pond inside one
        0.05° cell it is that cell's centre, at most 0.025° from the pond's centroid. Over
        that distance Ra (FAO-56 eq. 21) changes by at most 0.08 % at 30°, 0.15 % at 45° and
        0.5 % at 60° latitude (worst day of the year; computed with
        :func:`lakeloss.physics.radiation.extraterrestrial_radiation`); Ra enters the
        methods only through the clear-sky ratio of the longwave term. Bodies inside one
        cell then share every input and are computed once (:mod:`lakeloss.grouping`).
        """
        grid_key = inputs.field_grid.get(_SHORTWAVE) or next(iter(inputs.field_grid.values()))
        sun_weights = weights[grid_key]
        assert sun_weights.grid is not None  # weights built in this run carry their grid
        latitude, _ = sun_weights.apply(sun_weights.grid.centre_latitudes()[np.newaxis])
        first = next(iter(weights.values()))
        return cls(
            area_m2=first.polygon_area_m2,
            area_before_repair_m2=first.area_before_repair_m2,
            grid_coverage=first.grid_coverage,
            geometry_flags=first.flags,
            layer_flags=inputs.bodies.flags,
            latitude=latitude[0],
            elevation=_elevation(config, inputs, weights),
        )

    def physics_inputs(self) -> dict[str, np.ndarray]:
        """The per-body inputs of the physics by glossary name, shaped ``(1, n)``."""
        static = {
            "latitude": self.latitude[np.newaxis, :],
            "area_m2": self.area_m2[np.newaxis, :],
        }
        if self.elevation is not None:
            static["elevation"] = self.elevation[np.newaxis, :]
        return static


def _elevation(
    config: RunConfig, inputs: Inputs, weights: Mapping[str, ZonalWeights]
) -> np.ndarray | None:
    """Per-body elevation: the raster's area-weighted mean, else the attribute. [m]"""
    if "elevation" in inputs.static_fields:
        raster, key = inputs.static_fields["elevation"]
        mean, _ = weights[key].apply(raster.values[np.newaxis])
        # Bodies off the elevation raster fall back to the configured constant.
        fallback = float(config.parameters.get("elevation_m", 0.0))  # type: ignore[arg-type]
        return np.where(np.isfinite(mean[0]), mean[0], fallback)
    field_name = config.waterbodies.elevation_field
    if field_name:
        return elevations(inputs.bodies.frame, field_name)
    return None
