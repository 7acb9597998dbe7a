"""One climate file (a CF NetCDF file or Zarr store, or a GeoTIFF band stack) as a lazy field.

The one-file layer of the climate readers: the :class:`ClimateField` record, opening one
dataset, reading its dimensions, coordinates, CRS and units, and reading one NetCDF variable
or one GeoTIFF stack. :mod:`lakeloss.io.multifile` joins several files with these pieces, and
:mod:`lakeloss.io.climate` (the entry the pipeline calls) chooses between the two; this module
imports neither.

Each reader returns a :class:`ClimateField`: one glossary quantity on a (time, y, x) grid,
dask-backed and already converted to the glossary unit (the conversion is part of the lazy
graph, so nothing is read until the pipeline asks for a block of time steps). Coordinates are
cell centres in stored order: a south-up grid stays south-up, 0..360 longitudes stay 0..360;
the zonal engine handles both.
"""

from __future__ import annotations

import functools
import json
import os
import warnings
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import TypeVar

import affine
import cftime
import dask
import dask.array as da
import numpy as np
import pyproj
import rasterio
import rasterio.errors
import xarray as xr

from lakeloss import timeaxis
from lakeloss.errors import (
    AssumedCRSWarning,
    ConfigError,
    CRSError,
    GridError,
    InputDataError,
    TimeAxisError,
    UnitsError,
)
from lakeloss.glossary import ALIASES, QUANTITIES
from lakeloss.io import units as units_io
from lakeloss.io import zarr_store

DIMS = ("time", "y", "x")

# How CF files name or mark each role; matched case-insensitively on names, exactly on attrs.
_ROLE_NAMES = {
    "time": ("time", "t", "valid_time", "date"),
    "y": ("y", "lat", "latitude", "rlat", "northing", "south_north"),
    "x": ("x", "lon", "longitude", "rlon", "easting", "west_east"),
}
_ROLE_STANDARD_NAMES = {
    "time": ("time",),
    "y": ("latitude", "projection_y_coordinate", "grid_latitude"),
    "x": ("longitude", "projection_x_coordinate", "grid_longitude"),
}
_ROLE_AXIS = {"time": "T", "y": "Y", "x": "X"}
_GEOGRAPHIC_UNITS = {
    "y": ("degrees_north", "degree_north", "degree_N", "degrees_N", "degreeN", "degreesN"),
    "x": ("degrees_east", "degree_east", "degree_E", "degrees_E", "degreeE", "degreesE"),
}

_T = TypeVar("_T")

# What netCDF4/HDF5 and xarray raise on missing, truncated or foreign files.
_OPEN_ERRORS = (OSError, ValueError, RuntimeError, KeyError, IndexError, TypeError)


@dataclass
class ClimateField:
    """One climate quantity on a grid, lazily loaded, in glossary units.

    Attributes
    ----------
    quantity : str
        Glossary name (aliases resolved: ``precipitation_flux`` -> ``precipitation``).
    data : xarray.DataArray
        Dims exactly ``("time", "y", "x")``, dask-backed, chunked along time, values in
        ``QUANTITIES[quantity].unit``.
    times : numpy.ndarray
        cftime datetimes of the steps.
    calendar : str
        CF calendar of ``times`` (aliases resolved).
    x, y : numpy.ndarray
        Cell-centre coordinates in stored order [CRS units].
    crs : pyproj.CRS
        Coordinate reference system of ``x`` and ``y``.
    transform : affine.Affine or None
        Pixel-to-CRS transform (GeoTIFF inputs), None for NetCDF.
    source_path : str
        File the field was read from.
    variable : str
        Variable name in the file (file stem for GeoTIFF stacks).
    source_units : str
        Unit the values were declared in before conversion.
    crs_assumed : bool
        True when the CRS did not come from the file (lat/lon default or config override).
    """

    quantity: str
    data: xr.DataArray
    times: np.ndarray
    calendar: str
    x: np.ndarray
    y: np.ndarray
    crs: pyproj.CRS
    transform: affine.Affine | None
    source_path: str
    variable: str
    source_units: str
    crs_assumed: bool

    @property
    def time_axis(self) -> timeaxis.TimeAxis:
        """The field's time axis (steps, lengths, day of year)."""
        return timeaxis.from_times(self.times, self.calendar)

    def describe(self) -> str:
        """Short name for messages: file and variable."""
        return f"{self.source_path!r} variable {self.variable!r}"


def glossary_name(quantity: str) -> str:
    """The glossary name of a quantity or alias; an unknown name is a ConfigError."""
    name = ALIASES.get(quantity, quantity)
    if name not in QUANTITIES:
        known = ", ".join(sorted(set(QUANTITIES) | set(ALIASES)))
        raise ConfigError(f"climate quantity {quantity!r} is not known; expected one of {known}")
    return name


def check_file(path: Path, kind: str) -> None:
    """Refuse a missing path or a directory where a ``kind`` file is expected."""
    if not path.exists():
        raise InputDataError(
            f"climate file {str(path)!r} does not exist; expected a {kind} file; "
            "check the path in [climate]"
        )
    if path.is_dir():
        raise InputDataError(
            f"climate path {str(path)!r} is a directory; expected a {kind} file; "
            "name the file itself in [climate]"
        )


def unreadable(path: Path, kind: str, err: Exception) -> InputDataError:
    """The one-line error for a file that cannot be read as ``kind``."""
    reason = " ".join(str(err).split()) or type(err).__name__
    return InputDataError(
        f"climate file {str(path)!r} is unreadable, truncated or not {kind} ({reason}); "
        f"expected a readable {kind} file; re-download or re-export it"
    )


# ----------------------------------------------------------------------------- NetCDF


def open_dataset(path: Path) -> xr.Dataset:
    """Open one NetCDF file or Zarr store, times left undecoded."""
    if zarr_store.is_store(path):
        return zarr_store.open_store(path)
    check_file(path, "NetCDF")
    try:
        # Times are decoded here with cftime so that every calendar works the same way.
        return xr.open_dataset(path, engine="netcdf4", decode_times=False, cache=False)
    except _OPEN_ERRORS as err:
        raise unreadable(path, "NetCDF", err) from err


def _has_role(dataset: xr.Dataset, dim: str, role: str) -> bool:
    if dim.lower() in _ROLE_NAMES[role]:
        return True
    if dim not in dataset.variables:
        return False
    attrs = dataset[dim].attrs
    if attrs.get("standard_name") in _ROLE_STANDARD_NAMES[role]:
        return True
    if str(attrs.get("axis", "")).upper() == _ROLE_AXIS[role]:
        return True
    if role == "time":
        return " since " in str(attrs.get("units", ""))
    return attrs.get("units") in _GEOGRAPHIC_UNITS[role]


def _dim_roles(dataset: xr.Dataset, data: xr.DataArray, variable: str) -> dict[str, str]:
    """Map role (time, y, x) -> dimension name of ``data``."""
    roles: dict[str, str] = {}
    for dim in data.dims:
        matches = [role for role in DIMS if _has_role(dataset, str(dim), role)]
        if len(matches) == 1 and matches[0] not in roles:
            roles[matches[0]] = str(dim)
        elif data.sizes[dim] != 1:
            raise GridError(
                f"variable {variable!r} has dimensions {tuple(data.dims)}; expected time, y (lat) "
                f"and x (lon) only, but {dim!r} is not recognisable as one of them; "
                "name the dimensions time/lat/lon or time/y/x"
            )
    missing = [role for role in DIMS if role not in roles]
    if missing:
        raise GridError(
            f"variable {variable!r} has dimensions {tuple(data.dims)}; expected a time, a y "
            f"(lat) and an x (lon) dimension but found no {'/'.join(missing)}; "
            "give the variable (time, y, x) dimensions with CF names or attributes"
        )
    return roles


def to_time_y_x(dataset: xr.Dataset, variable: str) -> tuple[xr.DataArray, dict[str, str]]:
    """The variable as dims (time, y, x), and the file's dimension name of each role."""
    data = dataset[variable]
    roles = _dim_roles(dataset, data, variable)
    extra = [d for d in data.dims if d not in roles.values()]
    data = data.isel({d: 0 for d in extra}, drop=True)
    data = data.transpose(*(roles[r] for r in DIMS))
    for role in ("y", "x"):
        if roles[role] not in dataset.coords:
            raise GridError(
                f"variable {variable!r}: dimension {roles[role]!r} has no coordinate values; "
                "expected 1-D cell-centre coordinates; add the coordinate variable to the file"
            )
    renamed = data.rename({roles[r]: r for r in DIMS if roles[r] != r})
    return renamed.reset_coords(drop=True), roles


def _decode_times(dataset: xr.Dataset, time_dim: str, path: Path) -> tuple[np.ndarray, str]:
    if time_dim not in dataset.variables:
        raise TimeAxisError(
            f"climate file {str(path)!r}: time dimension {time_dim!r} has no coordinate "
            "values; expected CF time stamps ('days since ...'); add the time variable"
        )
    attrs = dataset[time_dim].attrs
    calendar = str(attrs.get("calendar", "standard"))
    try:
        stamps = cftime.num2date(
            np.asarray(dataset[time_dim].values),
            str(attrs["units"]),
            calendar=calendar,
            only_use_cftime_datetimes=True,
        )
    except (KeyError, ValueError, TypeError) as err:
        raise TimeAxisError(
            f"climate file {str(path)!r}: time units {attrs.get('units')!r} with calendar "
            f"{calendar!r} cannot be decoded; expected e.g. 'days since 2000-01-01' and a CF "
            "calendar; fix the time variable's attributes"
        ) from err
    return np.asarray(stamps, dtype=object).reshape(-1), calendar


def _probe(data: xr.DataArray, path: Path) -> None:
    # Reading the very last value finds most truncated files now rather than mid-run.
    try:
        data[-1, -1, -1].values  # noqa: B018
    except _OPEN_ERRORS as err:
        raise unreadable(path, "NetCDF", err) from err


def _crs_from_attrs(attrs: dict) -> pyproj.CRS:
    for key in ("crs_wkt", "spatial_ref"):
        if attrs.get(key):
            return pyproj.CRS.from_wkt(str(attrs[key]))
    # Attribute values may be numpy scalars or arrays: a JSON text of them is the cache key.
    return _crs_from_cf(json.dumps(dict(attrs), sort_keys=True, default=_plain))


def _plain(value):
    return value.tolist() if hasattr(value, "tolist") else str(value)


@functools.lru_cache(maxsize=64)
def _crs_from_cf(attrs_json: str) -> pyproj.CRS:
    # pyproj needs most of a second to build a datum from bare ellipsoid parameters, and
    # every variable of a file names the same grid mapping: parse each mapping once.
    return pyproj.CRS.from_cf(json.loads(attrs_json))


def _file_crs(dataset: xr.Dataset, variable: str, path: Path) -> pyproj.CRS | None:
    data_attrs = dataset[variable].attrs
    mapping = data_attrs.get("grid_mapping") or dataset[variable].encoding.get("grid_mapping")
    if mapping:
        name = str(mapping).split(":")[0].strip()
        if name not in dataset.variables:
            raise CRSError(
                f"{str(path)!r} variable {variable!r} names grid_mapping {name!r}, which is not "
                "in the file; expected a grid-mapping variable of that name; add it to the file "
                'or set crs = "EPSG:...." for this input in [climate]'
            )
        try:
            return _crs_from_attrs(dataset[name].attrs)
        except pyproj.exceptions.CRSError as err:
            raise CRSError(
                f"{str(path)!r} grid mapping {name!r} cannot be read as a CRS ({err}); expected "
                'CF grid-mapping attributes or crs_wkt; set crs = "EPSG:...." for this input '
                "in [climate]"
            ) from err
    for attrs in (data_attrs, dataset.attrs):
        if attrs.get("crs_wkt") or attrs.get("spatial_ref"):
            try:
                return _crs_from_attrs(attrs)
            except pyproj.exceptions.CRSError as err:
                raise CRSError(
                    f"{str(path)!r}: crs_wkt/spatial_ref attribute is not a CRS ({err}); "
                    'set crs = "EPSG:...." for this input in [climate]'
                ) from err
    return None


def _file_crs_unless_overridden(
    read: Callable[[], pyproj.CRS | None], crs: str | None, where: str
) -> pyproj.CRS | None:
    """The file's CRS; with a ``crs`` override, a broken one is set aside (and noted)."""
    if crs is None:
        return read()
    try:
        return read()
    except CRSError as err:
        warnings.warn(
            f"{where}: the file's CRS is unusable ({_first_clause(err)}); used the configured "
            f"crs {crs!r} instead",
            AssumedCRSWarning,
            stacklevel=4,
        )
        return None


def _first_clause(err: Exception) -> str:
    return str(err).split("; ")[0]


def _is_geographic(dataset: xr.Dataset, roles: dict[str, str]) -> bool:
    return all(
        roles[role].lower() in _ROLE_NAMES[role][1:3]
        or dataset[roles[role]].attrs.get("standard_name") in _ROLE_STANDARD_NAMES[role][:1]
        or dataset[roles[role]].attrs.get("units") in _GEOGRAPHIC_UNITS[role]
        for role in ("y", "x")
    )


def _parse_override(crs: str) -> pyproj.CRS:
    try:
        return pyproj.CRS.from_user_input(crs)
    except pyproj.exceptions.CRSError as err:
        raise CRSError(
            f'climate crs {crs!r} is not a CRS pyproj understands; expected e.g. "EPSG:4326"; '
            "fix the crs setting in [climate]"
        ) from err


def crs_label(crs) -> str:
    """A short name for a CRS, for one-line messages: its authority code, or its kind and
    ellipsoid.

    ``to_string()`` of a CRS without an authority code (common for CF grid mappings) is a
    whole PROJJSON document.

    Parameters
    ----------
    crs : pyproj.CRS or anything pyproj.CRS.from_user_input takes

    Returns
    -------
    str
        E.g. ``"EPSG:32755"`` or ``"unnamed geographic CRS, ellipsoid a = 6378137 m, 1/f =
        298.257"``.
    """
    crs = pyproj.CRS.from_user_input(crs)
    text = crs.to_string()
    if not text.lstrip().startswith("{"):
        return text
    kind = "geographic" if crs.is_geographic else "projected" if crs.is_projected else ""
    name = crs.name if crs.name not in ("undefined", "unknown") else f"unnamed {kind} CRS"
    ellipsoid = crs.ellipsoid
    if ellipsoid is None:
        return name
    return (
        f"{name}, ellipsoid a = {ellipsoid.semi_major_metre:.0f} m, "
        f"1/f = {ellipsoid.inverse_flattening:.6g}"
    )


def resolve_crs(
    found: pyproj.CRS | None,
    geographic: bool,
    crs: str | None,
    where: str,
    looked_for: str = "no grid_mapping, crs_wkt or lat/lon coordinates",
):
    """Return (CRS, assumed) from the override, the file's CRS and the lat/lon default.

    A configured ``crs`` wins over whatever the file says; when the file declares another
    CRS, the override is used and a warning names both.
    """
    if crs is not None:
        override = _parse_override(crs)
        if found is not None and found.equals(override, ignore_axis_order=True):
            return found, False
        if found is not None:
            warnings.warn(
                f"{where} declares CRS '{crs_label(found)}' but [climate] crs is {crs!r}; "
                "used the configured crs",
                AssumedCRSWarning,
                stacklevel=3,
            )
        return override, True
    if found is not None:
        return found, False
    if geographic:
        warnings.warn(
            f"{where} has latitude/longitude coordinates but no grid_mapping; assumed EPSG:4326",
            AssumedCRSWarning,
            stacklevel=3,
        )
        return pyproj.CRS.from_epsg(4326), True
    raise CRSError(
        f"{where} has no CRS ({looked_for}); expected one; "
        'set crs = "EPSG:...." for this input in [climate]'
    )


def source_units(declared, override: str | None, where: str, quantity: str) -> str:
    """The unit of the stored values: the configured one, else the declared one, else an error."""
    if override is not None:
        return override
    if declared is None:
        raise UnitsError(
            f"{where} has no units attribute; expected units convertible to "
            f"{QUANTITIES[quantity].unit}; set units for this input in [climate]"
        )
    return str(declared)


def _check_coordinates(values: np.ndarray, name: str, where: str) -> np.ndarray:
    values = np.asarray(values, dtype=float)
    steps = np.diff(values)
    if values.ndim != 1 or values.size == 0 or not (np.all(steps > 0) or np.all(steps < 0)):
        # One jump of about a whole turn: longitudes wrapped at 180 in a grid that spans it.
        wrapped = name == "x" and values.ndim == 1 and int(np.sum(np.abs(steps) > 180.0)) == 1
        fix = (
            "store the longitudes in 0..360 (roll the grid) so that they increase across 180"
            if wrapped
            else "regrid the file"
        )
        raise GridError(
            f"{where}: {name} coordinates are not strictly monotonic 1-D values; expected a "
            f"regular grid of cell centres; {fix}"
        )
    return values


def open_netcdf_file(
    path,
    variable: str,
    quantity: str,
    *,
    units: str | None = None,
    crs: str | None = None,
    chunk_steps: int = 64,
) -> ClimateField:
    """Open one variable of one CF NetCDF file (or Zarr store) as a lazy field in glossary units.

    Parameters, return value, errors and warnings are those of
    :func:`lakeloss.io.climate.open_netcdf` for a single ``path``.
    """
    source = Path(path)
    name = glossary_name(quantity)
    dataset = open_dataset(source)
    try:
        return netcdf_field(dataset, source, variable, name, units, crs, chunk_steps)
    except BaseException:
        dataset.close()  # the lazy field keeps the file open only when it is returned
        raise


def _refuse_curvilinear(dataset: xr.Dataset, variable: str, where: str) -> None:
    """Refuse a grid located only by 2-D latitude and longitude, with no grid mapping.

    Such a grid (ocean-model and swath grids, or a projected grid whose file lost its
    mapping) has cells that are not bounded by lines of a CRS: its x and y are indices, and
    taking them for degrees or metres would put the climate in the wrong place.
    """
    data = dataset[variable]
    if data.attrs.get("grid_mapping") or data.encoding.get("grid_mapping"):
        return
    if any(dataset.attrs.get(key) or data.attrs.get(key) for key in ("crs_wkt", "spatial_ref")):
        return
    for dim in data.dims:
        axis = dataset.variables.get(dim)
        if (
            axis is not None
            and axis.ndim == 1
            and (
                axis.attrs.get("standard_name") in ("latitude", "longitude")
                or axis.attrs.get("units") in (*_GEOGRAPHIC_UNITS["y"], *_GEOGRAPHIC_UNITS["x"])
            )
        ):
            return  # a regular lat/lon grid that also carries 2-D copies of its coordinates
    found: dict[str, str] = {}
    for name, candidate in dataset.variables.items():
        role = candidate.attrs.get("standard_name")
        if role in ("latitude", "longitude") and candidate.ndim == 2:
            if set(candidate.dims) <= set(data.dims):
                found.setdefault(role, str(name))
    if len(found) == 2:
        raise GridError(
            f"{where} is on a curvilinear grid, located only by 2-D {found['latitude']!r}/"
            f"{found['longitude']!r} arrays with no grid_mapping; expected 1-D x/y cell "
            "centres in a CRS; add the CF grid_mapping of its projection (e.g. "
            "rotated_latitude_longitude), set crs for this input in [climate] if its x/y are "
            "coordinates in that CRS, or regrid it to a regular grid"
        )


def netcdf_field(
    dataset: xr.Dataset,
    source: Path,
    variable: str,
    name: str,
    units: str | None,
    crs: str | None,
    chunk_steps: int | None,
) -> ClimateField:
    """The field of one file; ``chunk_steps`` None leaves the values as stored (not chunked,
    not converted) for :mod:`lakeloss.io.multifile` to join files first."""
    where = f"{str(source)!r} variable {variable!r}"
    if variable not in dataset.data_vars:
        listing = ", ".join(repr(v) for v in dataset.data_vars) or "none"
        raise ConfigError(
            f"variable {variable!r} is not in {str(source)!r}; the variables are {listing}; "
            "set variable for this input in [climate]"
        )
    if crs is None:
        _refuse_curvilinear(dataset, variable, where)
    data, roles = to_time_y_x(dataset, variable)
    times, calendar = _decode_times(dataset, roles["time"], source)
    axis = _named_axis(lambda: timeaxis.from_times(times, calendar), where)
    found = _file_crs_unless_overridden(lambda: _file_crs(dataset, variable, source), crs, where)
    field_crs, assumed = resolve_crs(found, _is_geographic(dataset, roles), crs, where)
    declared = source_units(data.attrs.get("units"), units, where, name)
    _probe(data, source)
    if chunk_steps is None:
        converted = data
    else:
        lazy = data.chunk({"time": max(1, int(chunk_steps)), "y": -1, "x": -1})
        converted = units_io.convert(lazy, declared, name, step_days=axis.days, variable=variable)
    return ClimateField(
        quantity=name,
        data=converted.rename(name),
        times=axis.times,
        calendar=axis.calendar,
        x=_check_coordinates(dataset[roles["x"]].values, "x", where),
        y=_check_coordinates(dataset[roles["y"]].values, "y", where),
        crs=field_crs,
        transform=None,
        source_path=os.fspath(source),
        variable=variable,
        source_units=declared,
        crs_assumed=assumed,
    )


# ----------------------------------------------------------------------------- GeoTIFF


def read_bands(path: str, first: int, last: int, nodata, dtype: str) -> np.ndarray:
    """Bands ``first`` to ``last`` (1-based, inclusive) of a raster, nodata as NaN."""
    # One task of the dask graph.
    with rasterio.open(path) as src:
        block = src.read(list(range(first, last + 1)))
    # Compare in the stored type: a float32 nodata such as 1e20 is not 1e20 in float64.
    missing = None if nodata is None else block == np.asarray(nodata).astype(block.dtype)
    block = block.astype(dtype)
    if missing is not None:
        block[missing] = np.nan
    return block


def _lazy_stack(
    path: str, count: int, shape: tuple[int, int], nodata, dtype: str, chunk_steps: int
):
    chunks = []
    for first in range(1, count + 1, chunk_steps):
        last = min(count, first + chunk_steps - 1)
        task = dask.delayed(read_bands, pure=True)(path, first, last, nodata, dtype)
        chunks.append(da.from_delayed(task, shape=(last - first + 1, *shape), dtype=dtype))
    return da.concatenate(chunks, axis=0)


def declared_units(src) -> str | None:
    """The units tag of an open raster (dataset tags, then first band), or None."""
    band_units = src.units[0] if src.units else None
    return src.tags().get("units") or src.tags(1).get("units") or band_units or None


def _named_axis(make: Callable[[], _T], where: str) -> _T:
    """Build a time axis (or count its steps); a refusal names the file it came from."""
    try:
        return make()
    except TimeAxisError as err:
        raise TimeAxisError(f"{where}: {err}") from err


def _geotiff_axis(start: str, step: str, count: int, calendar: str, end: str | None, where: str):
    axis = _named_axis(lambda: timeaxis.from_start(start, step, count, calendar), where)
    if end is not None:
        implied = _named_axis(lambda: timeaxis.count_steps(start, end, step, calendar), where)
        if implied != count:
            raise TimeAxisError(
                f"{where} has {count} bands but start {start} and end {end} imply {implied} "
                f"{step} steps; expected one band per step; fix start/end or the band count"
            )
    return axis


def _geotiff_crs(wkt: str | None, where: str) -> pyproj.CRS | None:
    if wkt is None:
        return None
    try:
        return pyproj.CRS.from_wkt(wkt)
    except pyproj.exceptions.CRSError as err:
        raise CRSError(
            f"{where} has a coordinate system pyproj cannot read ({err}); expected a valid "
            'CRS; set crs = "EPSG:...." for this input in [climate]'
        ) from err


def cell_centres(transform: affine.Affine, width: int, height: int, where: str):
    """The x and y cell centres of an axis-aligned geotransform; a rotated one is a GridError."""
    if transform.b != 0 or transform.d != 0:
        raise GridError(
            f"{where} has a rotated or sheared geotransform; expected a north-up or south-up "
            "grid; warp it to an axis-aligned grid"
        )
    x = transform.c + transform.a * (np.arange(width) + 0.5)
    y = transform.f + transform.e * (np.arange(height) + 0.5)
    return x, y


def open_geotiff_file(
    path,
    quantity: str,
    *,
    start: str,
    step: str,
    units: str | None,
    calendar: str = "standard",
    crs: str | None = None,
    end: str | None = None,
    chunk_steps: int = 64,
) -> ClimateField:
    """Open one GeoTIFF with one band per time step as a lazy field in glossary units.

    Parameters, return value and errors are those of
    :func:`lakeloss.io.climate.open_geotiff_stack` for a single ``path`` and no
    ``date_pattern``.
    """
    source = Path(path)
    name = glossary_name(quantity)
    check_file(source, "GeoTIFF")
    where = f"GeoTIFF {str(source)!r}"
    try:
        with rasterio.open(source) as src:
            count, height, width = src.count, src.height, src.width
            transform, nodata = src.transform, src.nodata
            dtype = np.result_type(src.dtypes[0], np.float32).name
            file_wkt = None if src.crs is None else src.crs.to_wkt()
            tagged = declared_units(src)
    except (rasterio.errors.RasterioError, OSError, ValueError) as err:
        raise unreadable(source, "GeoTIFF", err) from err
    declared = source_units(tagged, units, where, name)
    axis = _geotiff_axis(start, step, count, calendar, end, where)
    file_crs = _file_crs_unless_overridden(lambda: _geotiff_crs(file_wkt, where), crs, where)
    field_crs, assumed = resolve_crs(
        file_crs, False, crs, where, looked_for="no coordinate system in its georeferencing"
    )
    x, y = cell_centres(transform, width, height, where)
    stack = _lazy_stack(
        os.fspath(source), count, (height, width), nodata, dtype, max(1, chunk_steps)
    )
    data = xr.DataArray(stack, dims=DIMS, coords={"time": axis.times, "y": y, "x": x})
    converted = units_io.convert(
        data, declared, quantity, step_days=axis.days, variable=source.stem
    )
    return ClimateField(
        quantity=name,
        data=converted.rename(name),
        times=axis.times,
        calendar=axis.calendar,
        x=x,
        y=y,
        crs=field_crs,
        transform=transform,
        source_path=os.fspath(path),
        variable=source.stem,
        source_units=declared,
        crs_assumed=assumed,
    )
