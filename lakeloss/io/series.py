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
from collections.abc import Mapping, Sequence
from pathlib import Path
from types import TracebackType
from typing import Any, Literal

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
_HDF5_LOCK = NETCDF4_PYTHON_LOCK

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
        with _HDF5_LOCK:
            self._dataset = netCDF4.Dataset(Path(path), mode="w", format="NETCDF4")
            stat = os.stat(path)
            self._file_identity = (stat.st_dev, stat.st_ino)
            try:
                self._define(ids, times, calendar, variables, global_attrs)
                if locations is not None:
                    self._define_locations(*locations)
            except BaseException:
                self._close_dataset(quiet=True)
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
        with _HDF5_LOCK:
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
        with _HDF5_LOCK:
            self._close()

    def _close(self) -> None:
        if not self._dataset.isopen():
            return
        try:
            for key in sorted(self._rows):
                self._flush(*key)
        except BaseException:
            self._close_dataset(quiet=True)
            raise
        self._close_dataset(quiet=False)

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
            with _HDF5_LOCK:
                self._close_dataset(quiet=True)
        return False

    def _close_dataset(self, *, quiet: bool) -> None:
        """Close the file; if HDF5 cannot (e.g. disk full), still give back its descriptor.

        A failed close leaves HDF5 holding the descriptor, which keeps the deleted staging
        file's space allocated until the process ends.
        """
        _close_dataset(self._dataset, self._file_identity, quiet=quiet)

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
            id_var[:] = _id_texts(ids)
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


def _close_dataset(dataset: netCDF4.Dataset, identity: tuple[int, int], *, quiet: bool) -> None:
    """Close a file being written; if HDF5 cannot (e.g. disk full), still give back its
    descriptor (see :func:`_release_descriptors`)."""
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


def join_series(
    part_files: Sequence[Path], target: Path, *, chunk_waterbodies: int | None = None
) -> int:
    """Join the series files of partitions of water bodies into one file.

    Each partition writes its own series file with :class:`SeriesWriter` (its bodies, every
    step, the same variables, times and global attributes as the others). The joined file
    has the bodies of the parts in the order given and is the file one :class:`SeriesWriter`
    over all bodies would have written: same dimensions, variables, attributes (those of the
    first part), chunk shape (:func:`series_chunks` for all bodies, with the parts' chunk
    length in time), compression and values. Identifiers are text throughout when any part
    had to store them as text (as the whole file would).

    Memory does not grow with the number of bodies. Where a part's chunks are chunks of the
    joined file (same shape and compression, the part starting on a chunk boundary: the
    default chunk shape of :func:`series_chunks` and partitions of a multiple of 4096
    bodies), they are copied as stored, without decompressing them (through h5py, one chunk
    at a time). Other parts are copied in tiles of whole chunks of the joined file of at most
    about 16 MiB, each chunk compressed once.

    Parameters
    ----------
    part_files : sequence of Path
        The partitions' series files in body order.
    target : Path
        File to create (replaced if it exists).
    chunk_waterbodies : int, optional
        Chunk length along the water-body axis, as for :class:`SeriesWriter`.

    Returns
    -------
    int
        How many parts had their chunks copied as stored.

    Raises
    ------
    ValueError
        If there is no part, or the parts differ in their variables, attributes of their
        variables, dimensions other than ``waterbody`` or time steps.
    """
    if not part_files:
        raise ValueError("no series parts given; expected at least one")
    with _HDF5_LOCK:
        layout = _PartsLayout.read([Path(p) for p in part_files])
        out = netCDF4.Dataset(Path(target), mode="w", format="NETCDF4")
        stat = os.stat(target)
    identity = (stat.st_dev, stat.st_ino)
    try:
        with _HDF5_LOCK:
            layout.define(out, chunk_waterbodies)
        layout.copy_values(out)
    except BaseException:
        with _HDF5_LOCK:
            _close_dataset(out, identity, quiet=True)
        raise
    with _HDF5_LOCK:
        _close_dataset(out, identity, quiet=False)
    return layout.copy_chunks(Path(target))


_BODY_DIM = "waterbody"
_ID_VARIABLE = "waterbody_id"
_COPY_VALUES = 1 << 22  # values per copied tile: 16 MiB of float32


class _PartsLayout:
    """What the series parts hold: the first part's header, each part's length and ids."""

    def __init__(
        self,
        paths: list[Path],
        first: netCDF4.Dataset,
        sizes: list[int],
        text: bool,
        storage: list[tuple],
    ):
        self.paths = paths
        self.sizes = sizes
        self.storage = storage  # per part: chunking and filters of its series variables
        self.chunks: tuple[int, int] = (1, 1)  # of the joined file, set by define()
        self.offsets = np.concatenate([[0], np.cumsum(sizes)]).astype(int).tolist()
        self.text_ids = text
        self.global_attrs = {k: first.getncattr(k) for k in first.ncattrs()}
        self.dimensions = {name: len(dim) for name, dim in first.dimensions.items()}
        self.dimensions[_BODY_DIM] = self.offsets[-1]
        self.variables = [_VariableHeader(var) for var in first.variables.values()]

    @classmethod
    def read(cls, paths: list[Path]) -> _PartsLayout:
        sizes, text, storage = [], False, []
        first = netCDF4.Dataset(paths[0])
        try:
            reference = _part_signature(first)
            for path in paths:
                with netCDF4.Dataset(path) as part:
                    if _part_signature(part) != reference:
                        raise ValueError(
                            f"series part {path} differs from {paths[0]} in its variables, "
                            "their attributes, its dimensions or its time steps; expected "
                            "parts of one run"
                        )
                    sizes.append(len(part.dimensions[_BODY_DIM]))
                    text = text or part.variables[_ID_VARIABLE].dtype is str
                    storage.append(_series_storage(part))
            return cls(paths, first, sizes, text, storage)
        finally:
            first.close()

    def define(self, out: netCDF4.Dataset, chunk_waterbodies: int | None) -> None:
        out.setncatts(self.global_attrs)
        for name, size in self.dimensions.items():
            out.createDimension(name, size)
        n_times = self.dimensions.get("time", 0)
        chunks = series_chunks(
            self.dimensions[_BODY_DIM],
            n_times,
            chunk_waterbodies=chunk_waterbodies,
            chunk_times=next(
                (v.chunks[1] for v in self.variables if v.is_series and v.chunks), None
            ),
        )
        for header in self.variables:
            header.define(out, chunks, text_ids=self.text_ids)
        self.chunks = chunks
        self.storage_of_file = _series_storage(out)

    def stored_as_chunks(self) -> list[bool]:
        """Which parts' series chunks are chunks of the joined file (copied as stored).

        Only when every boundary between parts is a chunk boundary, so no chunk of the
        joined file holds bodies of two parts.
        """
        if any(offset % self.chunks[0] for offset in self.offsets[1:-1]):
            return [False] * len(self.paths)
        return [storage == self.storage_of_file for storage in self.storage]

    def copy_values(self, out: netCDF4.Dataset) -> None:
        """Everything along ``waterbody`` part by part, the rest from the first part."""
        out.set_auto_maskandscale(False)
        with _HDF5_LOCK, netCDF4.Dataset(self.paths[0]) as first:
            first.set_auto_maskandscale(False)
            for header in self.variables:
                if _BODY_DIM not in header.dimensions:
                    out.variables[header.name][...] = first.variables[header.name][...]
        for index, path in enumerate(self.paths):
            with _HDF5_LOCK, netCDF4.Dataset(path) as part:
                part.set_auto_maskandscale(False)
                rows = slice(self.offsets[index], self.offsets[index + 1])
                for header in self.variables:
                    if header.dimensions == (_BODY_DIM,):
                        values = part.variables[header.name][:]
                        if header.name == _ID_VARIABLE and self.text_ids:
                            values = _id_texts(np.asarray(values))
                        out.variables[header.name][rows] = values
        as_stored = self.stored_as_chunks()
        if not any(as_stored):
            ranges = [(0, self.offsets[-1])]
        else:
            ranges = [
                (self.offsets[k], self.offsets[k + 1])
                for k, stored in enumerate(as_stored)
                if not stored
            ]
        for header in self.variables:
            if header.is_series:
                for start, stop in ranges:
                    self._copy_series(out, header, start, stop)

    def copy_chunks(self, target: Path) -> int:
        """Copy the series chunks of the parts that allow it as stored (after ``define``);
        return how many parts were copied so."""
        import h5py

        names = [header.name for header in self.variables if header.is_series]
        as_stored = self.stored_as_chunks()
        for index, stored in enumerate(as_stored):
            if not stored:
                continue
            with _HDF5_LOCK, h5py.File(target, "r+") as out, h5py.File(self.paths[index]) as part:
                for name in names:
                    source, destination = part[name].id, out[name].id
                    for chunk in range(source.get_num_chunks()):
                        where = source.get_chunk_info(chunk).chunk_offset
                        mask, data = source.read_direct_chunk(where)
                        moved = (where[0] + self.offsets[index], *where[1:])
                        destination.write_direct_chunk(moved, data, filter_mask=mask)
        return sum(as_stored)

    def _copy_series(
        self, out: netCDF4.Dataset, header: _VariableHeader, first: int, last: int
    ) -> None:
        """Copy rows ``first:last`` of a ``(waterbody, time)`` variable in tiles of whole
        chunks of ``out`` (``first`` is a chunk boundary)."""
        target = out.variables[header.name]
        n_times = target.shape[1]
        band, span = _tile_shape(n_times, self.chunks)
        opened: dict[int, netCDF4.Dataset] = {}
        try:
            for start in range(first, last, band):
                stop = min(start + band, last)
                for first_step in range(0, n_times, span):
                    steps = slice(first_step, min(first_step + span, n_times))
                    with _HDF5_LOCK:
                        tile = self._gather(header.name, start, stop, steps, opened)
                        target[start:stop, steps] = tile
        finally:
            with _HDF5_LOCK:
                for part in opened.values():
                    part.close()

    def _gather(
        self,
        name: str,
        start: int,
        stop: int,
        steps: slice,
        opened: dict[int, netCDF4.Dataset],
    ) -> np.ndarray:
        """Rows ``start:stop`` of a series variable at ``steps``, from the parts holding them."""
        pieces = []
        for index in range(len(self.paths)):
            lo, hi = max(start, self.offsets[index]), min(stop, self.offsets[index + 1])
            if lo >= hi:
                if index in opened and self.offsets[index + 1] <= start:
                    opened.pop(index).close()  # passed: no later tile needs it
                continue
            if index not in opened:
                opened[index] = netCDF4.Dataset(self.paths[index])
                opened[index].set_auto_maskandscale(False)
            offset = self.offsets[index]
            pieces.append(opened[index].variables[name][lo - offset : hi - offset, steps])
        return np.concatenate(pieces, axis=0)


class _VariableHeader:
    """A variable's definition as read from a part: enough to create it in the joined file."""

    def __init__(self, var: netCDF4.Variable) -> None:
        self.name = var.name
        self.dimensions = tuple(var.dimensions)
        self.dtype = var.dtype
        self.filters = var.filters() or {}
        chunking = var.chunking()
        self.chunks = None if chunking == "contiguous" else tuple(chunking)
        self.fill_value = var.getncattr("_FillValue") if "_FillValue" in var.ncattrs() else None
        self.attrs = {k: var.getncattr(k) for k in var.ncattrs() if k != "_FillValue"}
        self.is_series = self.dimensions == (_BODY_DIM, "time")

    def define(self, out: netCDF4.Dataset, chunks: tuple[int, int], *, text_ids: bool) -> None:
        dtype = str if self.name == _ID_VARIABLE and text_ids else self.dtype
        options: dict[str, Any] = {}
        if self.chunks is not None:  # the parts' chunks across bodies are not the file's
            options["chunksizes"] = chunks if self.is_series else self.chunks
        if self.filters.get("zlib"):
            options.update(zlib=True, complevel=self.filters["complevel"])
        options["shuffle"] = bool(self.filters.get("shuffle"))
        var = out.createVariable(
            self.name, dtype, self.dimensions, fill_value=self.fill_value, **options
        )
        var.setncatts(self.attrs)


def _series_storage(dataset: netCDF4.Dataset) -> tuple:
    """Chunk shape and filters of each ``(waterbody, time)`` variable of a file."""
    return tuple(
        (name, tuple(var.chunking()), repr(var.filters()))
        for name, var in dataset.variables.items()
        if tuple(var.dimensions) == (_BODY_DIM, "time")
    )


def _tile_shape(n_times: int, chunks: tuple[int, int]) -> tuple[int, int]:
    """Bodies and steps of one copied tile: whole chunks, at most about :data:`_COPY_VALUES`
    values (but at least one chunk)."""
    chunk_bodies, chunk_times = chunks
    chunk_band = chunk_bodies * max(1, n_times)  # one chunk of bodies over every step
    if chunk_band <= _COPY_VALUES:
        return chunk_bodies * (_COPY_VALUES // chunk_band), max(1, n_times)
    return chunk_bodies, chunk_times * max(1, _COPY_VALUES // (chunk_bodies * chunk_times))


def _part_signature(part: netCDF4.Dataset) -> tuple:
    """What must agree between the series parts of one run (not the bodies themselves)."""
    variables = [
        (
            name,
            tuple(var.dimensions),
            "id" if name == _ID_VARIABLE else str(var.dtype),
            repr({k: var.getncattr(k) for k in var.ncattrs()}),
        )
        for name, var in part.variables.items()
    ]
    others = {k: len(d) for k, d in part.dimensions.items() if k != _BODY_DIM}
    times = part.variables["time"][:].tolist() if "time" in part.variables else None
    return variables, others, times


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


def _id_texts(ids: np.ndarray) -> np.ndarray:
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
