"""Time-free rasters (an elevation model) read through GDAL.

GeoTIFF is read directly; a 2-D NetCDF variable goes through GDAL's NetCDF driver
(``NETCDF:"file.nc":variable``), which reads CF georeferencing. The raster's cells are
averaged over each water body with the same zonal engine as the climate.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import affine
import numpy as np
import pyproj
import rasterio
import rasterio.errors

from lakeloss.errors import CRSError, InputDataError, UnitsError
from lakeloss.io import units as units_io


@dataclass(frozen=True)
class StaticField:
    """One band of a raster, in glossary units, NaN where nodata."""

    quantity: str
    values: np.ndarray
    transform: affine.Affine
    crs: pyproj.CRS
    source_path: str

    @property
    def shape(self) -> tuple[int, int]:
        return self.values.shape


def read_static_raster(
    path: str | Path,
    quantity: str,
    *,
    variable: str | None = None,
    units: str | None = None,
    crs: str | None = None,
) -> StaticField:
    """Read band 1 of a GeoTIFF, or a 2-D NetCDF variable, converted to ``quantity``'s unit.

    Raises
    ------
    InputDataError
        Missing, unreadable or not a single-band raster.
    CRSError
        The raster has no CRS and none is configured.
    UnitsError
        No unit in the file's metadata and none configured.
    """
    path = Path(path)
    where = f"[climate].{quantity} ({path})"
    if not path.is_file():
        raise InputDataError(f"{where}: file not found or not a file; check the path")
    source = f'NETCDF:"{path}":{variable}' if variable else str(path)
    try:
        with rasterio.open(source) as src:
            if src.count != 1:
                raise InputDataError(
                    f"{where}: has {src.count} bands; a static raster needs exactly one"
                )
            values = src.read(1, masked=True).astype(np.float64).filled(np.nan)
            found_crs, transform = src.crs, src.transform
            declared = (
                units
                or src.tags(1).get("units")
                or src.tags().get("units")
                or (src.units[0] if src.units and src.units[0] else None)
            )
    except rasterio.errors.RasterioIOError as err:
        raise InputDataError(f"{where}: GDAL cannot read it ({err}); check the file") from err
    if found_crs is None and crs is None:
        raise CRSError(f'{where}: the raster has no CRS; add crs = "EPSG:...." to its entry')
    if declared is None:
        raise UnitsError(f'{where}: no units in the file; add units = "m" to its entry')
    return StaticField(
        quantity=quantity,
        values=np.asarray(units_io.convert(values, declared, quantity)),
        transform=transform,
        crs=pyproj.CRS.from_user_input(crs or found_crs),
        source_path=str(path),
    )
