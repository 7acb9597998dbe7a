"""Per-step series of every water body as a CF NetCDF file, written block by block.

The pipeline computes time blocks of ``(time_block, n_waterbodies)`` values and hands them to
:class:`SeriesWriter` one at a time, so the full ``(time, n)`` array is never in memory.

The file follows the CF conventions (1.8) for discrete sampling geometries as a collection
of time series in the orthogonal multidimensional layout (CF 1.8, section 9 and appendix H.2.1):
global ``featureType = "timeSeries"``; dimensions ``waterbody`` (the features) and ``time``;
``waterbody_id`` with ``cf_role = "timeseries_id"``; ``lat`` and ``lon`` of a point inside
each water body; every data variable ``(waterbody, time)`` names ``lat lon waterbody_id`` as
its coordinates. xarray with cf_xarray and CF checkers read it as one time series per body.

On disk each variable is ``float32 (waterbody, time)``, zlib level 1, chunked along the water
body axis (a chunk holds a run of steps for a group of water bodies, so one body's series
reads from few chunks). Blocks seldom line up with chunk boundaries; writing a compressed
chunk piecemeal would make HDF5 decompress and recompress it for every block. The writer
therefore collects each row of chunks (one chunk length of steps for all water bodies) in
memory and writes it once it is complete, holding at most a couple of such rows per variable.
"""

from __future__ import annotations

import datetime
import os
from collections.abc import Mapping
from pathlib import Path
from types import TracebackType
from typing import Literal

import cftime
import geopandas
import netCDF4
import numpy as np
import pandas as pd
import pyproj
import shapely
from xarray.backends.netCDF4_ import NETCDF4_PYTHON_LOCK

# HDF5 is not thread-safe: while a run streams its series, other threads read climate
# NetCDF files through xarray, which serialises netCDF4/HDF5 calls with this lock. Every
# netCDF4 call here takes the same lock, or the two collide (a segmentation fault, seen).
HDF5_LOCK = NETCDF4_PYTHON_LOCK

_CHUNK_VALUES = 1 << 18  # values per chunk: 1 MiB of float32, a common HDF5 sweet spot
_DEFAULT_CHUNK_TIMES = 366  # one year of daily steps per chunk row
_MAX_CHUNK_BODIES = 4096  # water bodies per chunk at most (see series_chunks)
_REQUIRED_ATTRS = ("units", "long_name")
_COORDINATES = frozenset({"time", "waterbody_id", "lat", "lon"})
_INT32 = np.iinfo(np.int32)


class SeriesWriter:
    """Stream ``(time, waterbody)`` blocks of named variables into one CF-1.8 NetCDF file.

    Parameters
    ----------
    path : str or Path
        File to create (replaced if it exists).
    waterbody_ids : numpy.ndarray
        Identifier of each water body, integers or strings, in column order of the blocks.
    times : numpy.ndarray
        Time stamp of each step: cftime dates, ``datetime`` objects or ``datetime64``.
    calendar : str
        CF calendar of ``times``, e.g. ``"standard"`` or ``"noleap"``.
    variables : mapping of str to mapping of str to str
        Variable name to its CF attributes; ``units`` and ``long_name`` are required,
        ``standard_name`` where one applies.
    global_attrs : mapping of str to str
        Global attributes such as ``title``, ``source``, ``history`` and a caution in
        ``comment``; ``Conventions`` is set to ``"CF-1.8"`` and ``featureType`` to
        ``"timeSeries"``.
    longitude, latitude : numpy.ndarray, optional
        A point inside each water body [degrees east, degrees north] (see
        :func:`body_locations`); NaN where a body has no geometry.
    chunk_waterbodies, chunk_times : int, optional
        Chunk shape along the water-body and time axes; by default about 1 MiB per chunk
        with up to a year of daily steps.

    Examples
    --------
    >>> with SeriesWriter(path, waterbody_ids=ids, times=times, calendar="noleap",
    ...                   variables={"evap_mm": {"units": "mm", "long_name": "evaporation"}},
    ...                   global_attrs={"title": "demo"}) as series:  # doctest: +SKIP
    ...     series.write("evap_mm", slice(0, 31), january)  # shape (31, n)
    """

    def __init__(
        self,
        path: str | Path,
        *,
        waterbody_ids: np.ndarray,
        times: np.ndarray,
        calendar: str,
        variables: Mapping[str, Mapping[str, str]],
        global_attrs: Mapping[str, str],
        chunk_waterbodies: int | None = None,
        chunk_times: int | None = None,
        longitude: np.ndarray | None = None,
        latitude: np.ndarray | None = None,
    ) -> None:
        ids = np.asarray(waterbody_ids)
        if ids.ndim != 1:
            raise ValueError(f"waterbody_ids has shape {ids.shape}; expected one dimension")
        _check_variables(variables)
        locations = _check_locations(len(ids), longitude, latitude)
        self.n_waterbodies = len(ids)
        self.n_times = len(times)
        self.chunk_waterbodies, self.chunk_times = series_chunks(
            self.n_waterbodies,
            self.n_times,
            chunk_waterbodies=chunk_waterbodies,
            chunk_times=chunk_times,
        )
        self._rows: dict[tuple[str, int], _ChunkRow] = {}
        self._flushed: set[tuple[str, int]] = set()
        with HDF5_LOCK:
            self._dataset = netCDF4.Dataset(Path(path), mode="w", format="NETCDF4")
            stat = os.stat(path)
            self._file_identity = (stat.st_dev, stat.st_ino)
            try:
                self._define(ids, times, calendar, variables, global_attrs)
                if locations is not None:
                    self._define_locations(*locations)
            except BaseException:
                self.close_file(quiet=True)
                raise

    def write(self, name: str, time_slice: slice, values: np.ndarray) -> None:
        """Store one block of a variable.

        Parameters
        ----------
        name : str
            Variable name, one of ``variables``.
        time_slice : slice
            Steps the block covers, e.g. ``slice(31, 59)``; step 1 only.
        values : numpy.ndarray
            Block of shape ``(len(time_slice), n_waterbodies)`` in the variable's units.

        Raises
        ------
        ValueError
            If the name is unknown or the slice or shape do not fit the file.
        """
        with HDF5_LOCK:
            self._write(name, time_slice, values)

    def _write(self, name: str, time_slice: slice, values: np.ndarray) -> None:
        start, stop = self._check_block(name, time_slice, values)
        block = np.asarray(values, dtype=np.float32)
        first_row, last_row = start // self.chunk_times, (stop - 1) // self.chunk_times
        for row_index in range(first_row, last_row + 1):
            row_start = row_index * self.chunk_times
            row_stop = min(row_start + self.chunk_times, self.n_times)
            lo, hi = max(start, row_start), min(stop, row_stop)
            row = self._row(name, row_index, row_start, row_stop)
            row.put(lo - row_start, block[lo - start : hi - start])
            if row.complete:
                self._flush(name, row_index)

    def close(self) -> None:
        """Write what is still collected and close the file."""
        with HDF5_LOCK:
            self._close()

    def _close(self) -> None:
        if not self._dataset.isopen():
            return
        try:
            for key in sorted(self._rows):
                self._flush(*key)
        except BaseException:
            self.close_file(quiet=True)
            raise
        self.close_file(quiet=False)

    def __enter__(self) -> SeriesWriter:
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        traceback: TracebackType | None,
    ) -> Literal[False]:
        if exc is None:
            self.close()
        else:
            # A failed run's file is discarded with its staging directory; just release it.
            self._rows.clear()
            with HDF5_LOCK:
                self.close_file(quiet=True)
        return False

    def close_file(self, *, quiet: bool) -> None:
        """Close the file; if HDF5 cannot (e.g. disk full), still give back its descriptor.

        A failed close leaves HDF5 holding the descriptor, which keeps the deleted staging
        file's space allocated until the process ends.
        """
        close_file(self._dataset, self._file_identity, quiet=quiet)

    def _define(
        self,
        ids: np.ndarray,
        times: np.ndarray,
        calendar: str,
        variables: Mapping[str, Mapping[str, str]],
        global_attrs: Mapping[str, str],
    ) -> None:
        ds = self._dataset
        ds.setncatts(
            {
                "history": "written by lakeloss",
                **dict(global_attrs),
                "Conventions": "CF-1.8",
                "featureType": "timeSeries",
            }
        )
        ds.createDimension("waterbody", self.n_waterbodies)
        ds.createDimension("time", self.n_times)
        if _fits_int32(ids):
            id_var = ds.createVariable("waterbody_id", "i4", ("waterbody",))
            id_var[:] = ids.astype(np.int32)
        else:  # CF 1.8 has no 64-bit integers: larger (or non-integer) ids as text
            id_var = ds.createVariable("waterbody_id", str, ("waterbody",))
            id_var[:] = id_texts(ids)
        id_var.setncatts({"long_name": "water body identifier", "cf_role": "timeseries_id"})
        dates = _as_dates(times)
        units = _time_units(dates)
        time_var = ds.createVariable("time", "f8", ("time",))
        time_var.setncatts(
            {
                "standard_name": "time",
                "long_name": "time",
                "units": units,
                "calendar": calendar,
                "axis": "T",
            }
        )
        if self.n_times:
            time_var[:] = cftime.date2num(dates, units, calendar=calendar)
        for name, attrs in variables.items():
            var = ds.createVariable(
                name,
                "f4",
                ("waterbody", "time"),
                zlib=True,
                complevel=1,
                chunksizes=(self.chunk_waterbodies, self.chunk_times),
                fill_value=np.float32(np.nan),
            )
            var.setncatts({**dict(attrs), "coordinates": "waterbody_id"})

    def _define_locations(self, longitude: np.ndarray, latitude: np.ndarray) -> None:
        """Per-body ``lat`` and ``lon``, named as coordinates of every data variable."""
        ds = self._dataset
        axes = (
            ("lat", latitude, "latitude", "degrees_north", "Y"),
            ("lon", longitude, "longitude", "degrees_east", "X"),
        )
        for name, values, standard_name, units, axis in axes:
            var = ds.createVariable(name, "f8", ("waterbody",), fill_value=np.nan)
            var.setncatts(
                {
                    "standard_name": standard_name,
                    "long_name": f"{standard_name} of a point inside the water body",
                    "units": units,
                    "axis": axis,
                }
            )
            var[:] = values
        for name in self._data_names():
            ds.variables[name].coordinates = "lat lon waterbody_id"

    def _data_names(self) -> list[str]:
        return sorted(set(self._dataset.variables) - _COORDINATES)

    def _check_block(self, name: str, time_slice: slice, values: np.ndarray) -> tuple[int, int]:
        if name not in self._dataset.variables or name in _COORDINATES:
            known = self._data_names()
            raise ValueError(f"unknown series variable {name!r}; expected one of {known}")
        start, stop, step = time_slice.indices(self.n_times)
        if step != 1 or stop <= start:
            raise ValueError(f"time slice {time_slice} is empty or strided; expected a step of 1")
        expected = (stop - start, self.n_waterbodies)
        if np.shape(values) != expected:
            raise ValueError(
                f"block for {name!r} has shape {np.shape(values)}; expected {expected} "
                "(steps of the slice, water bodies)"
            )
        return start, stop

    def _row(self, name: str, index: int, row_start: int, row_stop: int) -> _ChunkRow:
        key = (name, index)
        row = self._rows.get(key)
        if row is None:
            # A row written before is read back, so rewriting part of it keeps the rest.
            initial = None
            if key in self._flushed:
                initial = self._dataset.variables[name][:, row_start:row_stop].T
            row = _ChunkRow(row_start, row_stop - row_start, self.n_waterbodies, initial)
            self._rows[key] = row
        return row

    def _flush(self, name: str, index: int) -> None:
        row = self._rows.pop((name, index))
        variable = self._dataset.variables[name]
        variable[:, row.start : row.start + row.length] = row.values.T
        self._flushed.add((name, index))


def series_chunks(
    n_waterbodies: int,
    n_times: int,
    *,
    chunk_waterbodies: int | None = None,
    chunk_times: int | None = None,
) -> tuple[int, int]:
    """Chunk shape ``(water bodies, steps)`` of the series variables of a file.

    By default up to a year of daily steps and, along the water bodies, the largest power of
    two (at most 4096) that keeps a chunk within 1 MiB of float32; a given length is kept
    within the file's dimensions.
    """
    times = max(1, min(n_times, chunk_times or _DEFAULT_CHUNK_TIMES))
    if chunk_waterbodies is None:
        # A power of two up to 4096: it divides every partition length (a multiple of 4096),
        # so the chunks of partition files are chunks of the joined file (see join_series).
        per_chunk = max(1, _CHUNK_VALUES // times)
        chunk_waterbodies = min(_MAX_CHUNK_BODIES, 1 << (per_chunk.bit_length() - 1))
    return max(1, min(n_waterbodies, chunk_waterbodies)), times


class _ChunkRow:
    """One chunk length of steps for all water bodies, collected before it is written."""

    def __init__(self, start: int, length: int, n: int, initial: np.ndarray | None) -> None:
        self.start = start
        self.length = length
        if initial is None:
            self.values = np.full((length, n), np.nan, dtype=np.float32)
        else:
            self.values = np.ma.filled(initial, np.nan).astype(np.float32)
        self.filled = np.zeros(length, dtype=bool)  # steps given since the row was opened

    def put(self, offset: int, block: np.ndarray) -> None:
        self.values[offset : offset + len(block)] = block
        self.filled[offset : offset + len(block)] = True

    @property
    def complete(self) -> bool:
        return bool(self.filled.all())


def close_file(dataset: netCDF4.Dataset, identity: tuple[int, int], *, quiet: bool) -> None:
    """Close a netCDF4 file being written; if HDF5 cannot (e.g. disk full), still give back
    its descriptor (see :func:`_release_descriptors`).

    Parameters
    ----------
    dataset : netCDF4.Dataset
        The file, open for writing (closed already: nothing happens).
    identity : tuple of int
        ``(st_dev, st_ino)`` of the file, taken when it was created.
    quiet : bool
        Swallow a failed close (when an error is already on its way).
    """
    if not dataset.isopen():
        return
    try:
        dataset.close()
    except RuntimeError:
        _release_descriptors(identity)
        if not quiet:
            raise


def _release_descriptors(identity: tuple[int, int]) -> None:
    """Point every descriptor of this process that refers to the given file at /dev/null.

    ``dup2`` keeps each descriptor number occupied, so the library that still owns it can
    never write into an unrelated file that would otherwise reuse the number. Only where the
    process's descriptors are listed (``/proc/self/fd`` or ``/dev/fd``); a no-op elsewhere.
    """
    listing = next((d for d in ("/proc/self/fd", "/dev/fd") if os.path.isdir(d)), None)
    if listing is None:
        return
    null = os.open(os.devnull, os.O_RDWR)
    try:
        for name in os.listdir(listing):
            fd = int(name)
            try:
                stat = os.fstat(fd)
            except OSError:
                continue
            if fd != null and (stat.st_dev, stat.st_ino) == identity:
                os.dup2(null, fd)
    finally:
        os.close(null)


def _check_variables(variables: Mapping[str, Mapping[str, str]]) -> None:
    if not variables:
        raise ValueError("no series variables given; expected at least one")
    for name, attrs in variables.items():
        missing = [key for key in _REQUIRED_ATTRS if not attrs.get(key)]
        if missing:
            raise ValueError(f"series variable {name!r} lacks CF attributes {missing}")
        if name in _COORDINATES | {"waterbody"}:
            raise ValueError(f"series variable name {name!r} is reserved for a coordinate")


def body_locations(geometry: geopandas.GeoSeries) -> tuple[np.ndarray, np.ndarray]:
    """Longitude and latitude of a point inside each polygon [degrees east, degrees north].

    The point is shapely's point on the surface (inside even a crescent-shaped reservoir,
    unlike the centroid), found in the layer's own CRS and then transformed to WGS 84.
    Invalid polygons are made valid first; empty or missing geometries give NaN.

    Parameters
    ----------
    geometry : geopandas.GeoSeries
        The water-body polygons, with their CRS (a layer without one gives NaN throughout).
    """
    n = len(geometry)
    lon, lat = np.full(n, np.nan), np.full(n, np.nan)
    shapes = geometry.to_numpy()
    present = ~(shapely.is_missing(shapes) | shapely.is_empty(shapes))
    if geometry.crs is None or not present.any():
        return lon, lat
    shapes = shapes[present]
    invalid = ~shapely.is_valid(shapes)
    shapes[invalid] = shapely.make_valid(shapes[invalid])
    points = shapely.point_on_surface(shapes)
    to_lonlat = pyproj.Transformer.from_crs(geometry.crs, "EPSG:4326", always_xy=True)
    lon[present], lat[present] = to_lonlat.transform(shapely.get_x(points), shapely.get_y(points))
    return lon, lat


def _check_locations(
    n: int, longitude: np.ndarray | None, latitude: np.ndarray | None
) -> tuple[np.ndarray, np.ndarray] | None:
    if longitude is None and latitude is None:
        return None
    if longitude is None or latitude is None:
        raise ValueError("longitude and latitude go together; got only one of them")
    lon, lat = np.asarray(longitude, dtype=float), np.asarray(latitude, dtype=float)
    if lon.shape != (n,) or lat.shape != (n,):
        raise ValueError(
            f"longitude {lon.shape} and latitude {lat.shape} do not match {n} water bodies"
        )
    return lon, lat


def _fits_int32(ids: np.ndarray) -> bool:
    if ids.dtype.kind not in "iu" or ids.size == 0:
        return ids.dtype.kind in "iu"
    return bool(ids.min() >= _INT32.min and ids.max() <= _INT32.max)


def id_texts(ids: np.ndarray) -> np.ndarray:
    """Identifiers as text, the way series files store ids that are not 32-bit integers."""
    return np.asarray([str(v) for v in ids.tolist()], dtype=object)


def _as_dates(times: np.ndarray) -> list:
    """Times as objects cftime can encode (cftime or ``datetime``)."""
    values = np.asarray(times)
    if values.dtype.kind == "M":
        return list(pd.DatetimeIndex(values).to_pydatetime())
    return list(values.tolist() if values.dtype.kind != "O" else values)


def _time_units(dates: list) -> str:
    """CF time units counted in days from the first step's midnight."""
    if not dates:
        return "days since 1970-01-01 00:00:00"
    first = dates[0]
    if isinstance(first, datetime.datetime | cftime.datetime):
        return f"days since {first.year:04d}-{first.month:02d}-{first.day:02d} 00:00:00"
    raise ValueError(
        f"times hold {type(first).__name__} values; expected cftime dates, datetime or datetime64"
    )
