"""Opening gridded climate inputs (CF NetCDF, GeoTIFF band stacks) as lazy fields.

The entry the pipeline calls. Each reader returns a :class:`ClimateField`: one glossary
quantity on a (time, y, x) grid, dask-backed and already converted to the glossary unit (the
conversion is part of the lazy graph, so nothing is read until the pipeline asks for a block of
time steps). Coordinates are cell centres in stored order: a south-up grid stays south-up,
0..360 longitudes stay 0..360; the zonal engine handles both.

This module only chooses the reader: one file is read by :mod:`lakeloss.io.gridfile`, a list
of files or glob patterns by :mod:`lakeloss.io.multifile` (which builds on gridfile); the
plausibility scan of an opened field is here too.
"""

from __future__ import annotations

import dask
import numpy as np

from lakeloss.errors import ConfigError, ImplausibleValuesError, InputDataError
from lakeloss.io import gridfile, multifile
from lakeloss.io import units as units_io
from lakeloss.io.gridfile import DIMS, ClimateField, crs_label

__all__ = [
    "DIMS",
    "ClimateField",
    "check_values",
    "crs_label",
    "open_geotiff_stack",
    "open_netcdf",
]


def open_netcdf(
    path,
    variable: str,
    quantity: str,
    *,
    units: str | None = None,
    crs: str | None = None,
    chunk_steps: int = 64,
) -> ClimateField:
    """Open one variable of a CF NetCDF file as a lazy field in glossary units.

    Parameters
    ----------
    path : str, os.PathLike or sequence of them
        NetCDF file or Zarr store; or several, or glob patterns, joined along time
        (:func:`lakeloss.io.multifile.open_netcdf_files`).
    variable : str
        Variable to read.
    quantity : str
        Glossary name or alias (``precipitation_amount``, ``precipitation_flux`` ...).
    units : str, optional
        Unit to use instead of the variable's ``units`` attribute.
    crs : str, optional
        CRS to use instead of the file's: it wins over a missing, broken or different CRS
        in the file (a different or broken one is warned about).
    chunk_steps : int
        Time steps per dask chunk.

    Returns
    -------
    ClimateField

    Raises
    ------
    InputDataError
        Missing, truncated, corrupt or non-NetCDF file, or a directory.
    ConfigError
        Variable not in the file (the message lists the variables), unknown quantity.
    GridError
        Dimensions not recognisable as time, y and x; coordinates missing or not monotonic.
    CRSError
        No CRS, no lat/lon coordinates and no override; or, without an override, a
        grid_mapping naming an absent variable or a CRS that cannot be read.
    UnitsError
        No units, or units that cannot express the quantity.
    TimeAxisError
        Time stamps undecodable or irregular.

    Warns
    -----
    AssumedCRSWarning
        EPSG:4326 was assumed for lat/lon coordinates without a grid mapping, or the
        ``crs`` override replaced a broken or different CRS in the file.
    """
    if multifile.several(path):
        return multifile.open_netcdf_files(
            path, variable, quantity, units=units, crs=crs, chunk_steps=chunk_steps
        )
    return gridfile.open_netcdf_file(
        path, variable, quantity, units=units, crs=crs, chunk_steps=chunk_steps
    )


def open_geotiff_stack(
    path,
    quantity: str,
    *,
    start: str | None,
    step: str | None,
    units: str | None,
    calendar: str = "standard",
    crs: str | None = None,
    end: str | None = None,
    chunk_steps: int = 64,
    date_pattern: str | None = None,
) -> ClimateField:
    """Open a GeoTIFF with one band per time step as a lazy field in glossary units.

    Parameters
    ----------
    path : str or os.PathLike
        GeoTIFF (or any single-file raster GDAL reads) with bands in time order.
    quantity : str
        Glossary name or alias.
    start : str or None
        ISO date of the first band (None only with ``date_pattern`` or several files).
    step : str or None
        ``"day"`` or ``"month"``; the band count gives the number of steps.
    units : str or None
        Unit of the values; None reads the ``units`` tag of the file or first band.
    calendar : str
        CF calendar of the band dates.
    crs : str, optional
        CRS to use instead of the file's: it wins over a missing, broken or different CRS
        in the file (a different or broken one is warned about).
    end : str, optional
        ISO date of the last band, checked against the band count.
    chunk_steps : int
        Bands per dask chunk.
    date_pattern : str, optional
        How file names give dates (:mod:`lakeloss.filedates`): ``path`` is then one or more
        files or glob patterns, each file's first band on the date its name gives
        (:func:`lakeloss.io.multifile.open_geotiff_files`); ``start`` and ``end`` unused.

    Returns
    -------
    ClimateField

    Raises
    ------
    InputDataError
        Missing, unreadable or corrupt file, or a directory.
    TimeAxisError
        ``end`` inconsistent with the band count, or an invalid start.
    CRSError
        No CRS in the file and none configured.
    UnitsError
        No units anywhere, or units that cannot express the quantity.
    GridError
        Rotated geotransform.
    """
    if date_pattern is not None or multifile.several(path):
        return multifile.open_geotiff_files(
            path, quantity, date_pattern=date_pattern, step=step, units=units,
            calendar=calendar, crs=crs, chunk_steps=chunk_steps,
        )  # fmt: skip
    if start is None or step is None:
        raise ConfigError(
            f"{quantity}: a GeoTIFF stack in one file needs start and step (the dates of its "
            "bands), or date_pattern for files named by date"
        )
    return gridfile.open_geotiff_file(
        path, quantity, start=start, step=step, units=units, calendar=calendar, crs=crs,
        end=end, chunk_steps=chunk_steps,
    )  # fmt: skip


# ----------------------------------------------------------------------------- checks


def check_values(field: ClimateField, *, strict: bool) -> str | None:
    """Scan a whole field for values that contradict their declared unit.

    Parameters
    ----------
    field : ClimateField
        An opened field (values already in glossary units).
    strict : bool
        Raise instead of returning the reason.

    Returns
    -------
    str or None
        One-line reason naming the file and variable, or None when plausible.

    Raises
    ------
    ImplausibleValuesError
        When ``strict`` and the values are implausible.
    InputDataError
        When every value is missing (strict or not).
    """
    # One pass over the chunks for both extremes; NaN (nodata) is ignored.
    low, high = dask.compute(field.data.min(skipna=True), field.data.max(skipna=True))
    low, high = float(low), float(high)
    if not (np.isfinite(low) and np.isfinite(high)):
        # Nothing could be computed from it, strict or not: every body would get NaN.
        raise InputDataError(
            f"{field.describe()}: every value is missing (NaN or nodata); expected data; "
            "check the variable name, its _FillValue or nodata value, and the file's contents"
        )
    reason = units_io.diagnose_range(field.quantity, low, high, field.source_units)
    if reason is None:
        return None
    message = (
        f"{field.describe()}: {reason}; expected values in the declared unit; "
        "fix the units in the file or set units for this input in [climate]"
    )
    if strict:
        raise ImplausibleValuesError(message)
    return message
