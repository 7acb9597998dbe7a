"""Errors and warnings raised by lakeloss.

Every error a user can cause derives from :class:`LakelossError` and also from the
built-in exception of the same kind, so callers may catch either. Messages say what was
found, what was expected, and how to fix it, in one line: the CLI prints them as
``error: <message>``.

Warnings derive from :class:`LakelossWarning`; they mark input that was repaired or an
assumption that was made, and the run records them in ``run.json``.
"""

from __future__ import annotations


class LakelossError(Exception):
    """Root of every error lakeloss raises on purpose."""


class ConfigError(LakelossError, ValueError):
    """The run configuration is malformed: unknown key, wrong type, bad value."""


class ParameterRangeError(ConfigError):
    """A physics parameter lies outside its documented valid range."""


class UnknownMethodError(ConfigError, KeyError):
    """An evaporation method name is not in the registry."""

    def __str__(self) -> str:  # KeyError would quote the message
        return str(self.args[0]) if self.args else ""


class MissingInputError(ConfigError):
    """A method needs climate inputs that the configuration does not provide."""


class InputDataError(LakelossError, OSError):
    """An input file is missing, unreadable, corrupt or inconsistent."""


class UnitsError(InputDataError):
    """A unit is missing, cannot be parsed, or cannot be converted to the quantity's unit."""


class ImplausibleValuesError(InputDataError):
    """Values contradict their declared units or physical limits (e.g. 290 declared as °C)."""


class TimeAxisError(InputDataError):
    """Time axes disagree between variables, or cannot be decoded."""


class GeometryError(LakelossError, ValueError):
    """The water-body layer has unusable geometry or identifiers."""


class CRSError(LakelossError, ValueError):
    """A coordinate reference system is missing or cannot be interpreted."""


class GridError(LakelossError, ValueError):
    """A climate grid definition is unusable (no CRS, irregular cells, no overlap)."""


class OutputError(LakelossError, OSError):
    """Outputs cannot be written (directory exists, not writable, disk full)."""


class LakelossWarning(UserWarning):
    """Root of lakeloss warnings: input repaired or an assumption made."""


class GeometryRepairedWarning(LakelossWarning):
    """Invalid or empty geometries were repaired or flagged."""


class AssumedCRSWarning(LakelossWarning):
    """A CRS was assumed (e.g. EPSG:4326 for lat/lon coordinates without grid_mapping)."""


class ValuesAdjustedWarning(LakelossWarning):
    """Values were adjusted, e.g. negative evaporation clipped to zero."""


class ClusterError(LakelossError, RuntimeError):
    """A dask.distributed cluster could not be reached, or lost part of the run."""


class ImplausibleValuesWarning(LakelossWarning):
    """Values contradict their declared units, and a lenient run kept them as they are."""


class TimeAlignedWarning(LakelossWarning):
    """Variables stamped at different times of the same day (or days of the same month) were
    aligned by calendar date (or month)."""


class ClimateGapsWarning(LakelossWarning):
    """Climate missing over gaps too long to fill: some periods have no result."""


class NoResultError(InputDataError):
    """No water body got a result (all outside the grid, or without valid climate)."""


class OverlappingStepsWarning(LakelossWarning):
    """Two files of one climate input held the same steps with identical values (read once)."""
