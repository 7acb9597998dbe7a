"""series.nc from the series files of partitions of water bodies.

Each partition of a run writes its own series file with
:class:`lakeloss.io.series.SeriesWriter` (its bodies, every step); :func:`join_series` joins
them, in body order, into the file one writer over all bodies would have written.
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import netCDF4
import numpy as np

from lakeloss.io.series import HDF5_LOCK, close_file, id_texts, series_chunks


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
    with HDF5_LOCK:
        layout = _PartsLayout.read([Path(p) for p in part_files])
        out = netCDF4.Dataset(Path(target), mode="w", format="NETCDF4")
        stat = os.stat(target)
    identity = (stat.st_dev, stat.st_ino)
    try:
        with HDF5_LOCK:
            layout.define(out, chunk_waterbodies)
        layout.copy_values(out)
    except BaseException:
        with HDF5_LOCK:
            close_file(out, identity, quiet=True)
        raise
    with HDF5_LOCK:
        close_file(out, identity, quiet=False)
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
        with HDF5_LOCK, netCDF4.Dataset(self.paths[0]) as first:
            first.set_auto_maskandscale(False)
            for header in self.variables:
                if _BODY_DIM not in header.dimensions:
                    out.variables[header.name][...] = first.variables[header.name][...]
        for index, path in enumerate(self.paths):
            with HDF5_LOCK, netCDF4.Dataset(path) as part:
                part.set_auto_maskandscale(False)
                rows = slice(self.offsets[index], self.offsets[index + 1])
                for header in self.variables:
                    if header.dimensions == (_BODY_DIM,):
                        values = part.variables[header.name][:]
                        if header.name == _ID_VARIABLE and self.text_ids:
                            values = id_texts(np.asarray(values))
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
        if not any(as_stored):
            return 0
        with h5py.File(target, "r+") as out:
            for index in np.flatnonzero(as_stored).tolist():
                with HDF5_LOCK, h5py.File(self.paths[index]) as part:
                    for name in names:
                        _copy_stored_chunks(part[name].id, out[name].id, self.offsets[index])
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
                    with HDF5_LOCK:
                        tile = self._gather(header.name, start, stop, steps, opened)
                        target[start:stop, steps] = tile
        finally:
            with HDF5_LOCK:
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


def _copy_stored_chunks(source: Any, destination: Any, first_body: int) -> None:
    """Copy every stored chunk of an h5py dataset, compressed as it is, ``first_body`` rows
    down in ``destination`` (same chunk shape and filters)."""
    for chunk in range(source.get_num_chunks()):
        where = source.get_chunk_info(chunk).chunk_offset
        mask, data = source.read_direct_chunk(where)
        destination.write_direct_chunk((where[0] + first_body, *where[1:]), data, filter_mask=mask)


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
