"""Climate inputs spread over many files: a list of files or glob patterns, joined along time.

The files of one input must agree on grid, CRS, variable, units and calendar; they are put in
time order (by their first stamp, whatever their names or their order in the list) and joined
lazily, each file read by the same reader as a single file, so that a run over the pieces
gives the same numbers as a run over one file holding the same data. Between two files a
gap is an error, and so is an overlap, unless the overlapping steps have the same stamps and
bit-identical values in both files: those steps are then read from the earlier file only, and
a warning says so.

NetCDF files (and Zarr stores) carry their own time stamps. GeoTIFFs carry none: their first
band's date comes from the file name (``date_pattern``, :mod:`lakeloss.filedates`) and further
bands follow at ``step``.

The dask chunks of the joined field break at the same multiples of ``chunk_steps`` as those
of a single file (and at file ends), so a block reads nothing it does not use.
"""

from __future__ import annotations

import datetime
import glob
import os
import re
import threading
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

import affine
import dask
import dask.array as da
import numpy as np
import pyproj
import rasterio
import rasterio.errors
import xarray as xr

from lakeloss import filedates, timeaxis
from lakeloss.errors import (
    ConfigError,
    CRSError,
    GridError,
    InputDataError,
    OverlappingStepsWarning,
    TimeAlignedWarning,
    TimeAxisError,
    UnitsError,
)
from lakeloss.io import gridfile
from lakeloss.io import units as units_io

_GLOB_CHARACTERS = re.compile(r"[*?\[]")

# Coordinates of two files' grids may differ by float noise (float32 vs float64 storage);
# more than this fraction of a cell is a different grid.
_GRID_TOLERANCE = 1e-3


# ----------------------------------------------------------------------------- file lists


def is_pattern(path) -> bool:
    """True when ``path`` holds glob characters and names no existing file."""
    text = os.fspath(path)
    return bool(_GLOB_CHARACTERS.search(text)) and not os.path.exists(text)


def several(path) -> bool:
    """True when ``path`` is a list of paths or a glob pattern rather than one file or store."""
    return isinstance(path, list | tuple) or is_pattern(path)


def expand(path) -> list[Path]:
    """The files a ``path`` setting names: each entry a file, or a glob pattern's matches.

    Matches of one pattern come in name order (the join re-orders by time anyway); a file
    named twice is read once. Patterns are expanded as written: relative ones against the
    working directory, so the configuration resolves them first (see ``config.py``).

    Raises
    ------
    InputDataError
        A pattern matches nothing.
    """
    entries = list(path) if isinstance(path, list | tuple) else [path]
    files: list[Path] = []
    seen: set[str] = set()
    for entry in entries:
        text = os.fspath(entry)
        matches = sorted(glob.glob(text, recursive=True)) if is_pattern(text) else [text]
        if not matches:
            raise InputDataError(
                f"climate path pattern {text!r} matches no file; expected at least one; check "
                "the folder and the pattern (wildcards * ? [..] and **, no {placeholders})"
            )
        for match in matches:
            key = os.path.realpath(match)
            if key not in seen:
                seen.add(key)
                files.append(Path(match))
    return files


def _label(files: Sequence[Path], segments: Sequence[Segment] = ()) -> str:
    """``first .. last (N files)``, in time order once the files are joined."""
    ends = (segments[0].piece.path, segments[-1].piece.path) if segments else (files[0], files[-1])
    return f"{os.fspath(ends[0])} .. {os.fspath(ends[1])} ({len(files)} files)"


def _stamp(value) -> str:
    text = f"{value.year:04d}-{value.month:02d}-{value.day:02d}"
    if (value.hour, value.minute, value.second) != (0, 0, 0):
        text += f" {value.hour:02d}:{value.minute:02d}"
    return text


# ----------------------------------------------------------------------------- joining


@dataclass(frozen=True, eq=False)
class Piece:
    """One file of a series: its stamps and a reader of its raw (unconverted) values."""

    path: Path
    times: np.ndarray
    read: Callable[[int, int], np.ndarray]

    @property
    def name(self) -> str:
        return repr(os.fspath(self.path))


@dataclass(frozen=True)
class Segment:
    """Steps ``first``..``stop - 1`` of a piece, as used in the joined series."""

    piece: Piece
    first: int
    stop: int


def join(pieces: Sequence[Piece], calendar: str, step: str | None) -> list[Segment]:
    """Order the pieces by time, drop identical overlaps, refuse gaps and other overlaps.

    Parameters
    ----------
    pieces : sequence of Piece
        The files, in any order, sharing one calendar.
    calendar : str
        Their CF calendar.
    step : str or None
        ``"day"`` or ``"month"`` when known (GeoTIFFs); None infers it from the stamps.

    Returns
    -------
    list of Segment
        In time order; their stamps, one after another, make a regular axis.

    Raises
    ------
    TimeAxisError
        A gap, an overlap with other stamps or other values, or files of different steps;
        the message names the two files and the dates.

    Warns
    -----
    OverlappingStepsWarning
        Overlapping steps held identical values and were read from the earlier file.
    """
    ordered = sorted(pieces, key=lambda p: p.times[0])  # stable: equal starts keep name order
    kind = step or _step_kind(ordered, calendar)
    segments = [Segment(ordered[0], 0, len(ordered[0].times))]
    holder = ordered[0]  # the piece holding the latest step so far
    for piece in ordered[1:]:
        overlap = int(np.sum(_step_keys(piece.times, kind) <= _step_key(holder.times[-1], kind)))
        if overlap:
            _check_identical(holder, piece, overlap, kind)
        if overlap == len(piece.times):
            continue
        if not overlap:
            _check_junction(holder, piece, kind)
        segments.append(Segment(piece, overlap, len(piece.times)))
        holder = piece
    return segments


def _step_key(stamp, kind: str) -> int:
    """The step a stamp belongs to: its calendar date (daily) or calendar month (monthly)."""
    if kind == "day":
        return int(stamp.toordinal())
    return stamp.year * 12 + stamp.month - 1


def _step_keys(times: np.ndarray, kind: str) -> np.ndarray:
    return np.array([_step_key(t, kind) for t in times], dtype=np.int64)


def _step_kind(ordered: Sequence[Piece], calendar: str) -> str:
    kinds = {}
    for piece in ordered:
        if len(piece.times) > 1:
            kinds[piece.name] = timeaxis.from_times(piece.times, calendar).step
    if len(set(kinds.values())) > 1:
        (one, first), (other, second) = _first_two_different(kinds)
        raise TimeAxisError(
            f"climate files {one} and {other} have different steps ({first} and {second}); "
            "expected one step for all files of an input; use files of one step"
        )
    if kinds:
        return next(iter(kinds.values()))
    # Files of one step each: the shortest step between them tells daily from monthly (a
    # month has at least 28 days), so a missing day is reported as a gap of daily steps.
    gaps = [b.times[0] - a.times[-1] for a, b in zip(ordered[:-1], ordered[1:], strict=True)]
    positive = [gap for gap in gaps if gap > datetime.timedelta(0)]
    return "month" if positive and min(positive) >= datetime.timedelta(days=28) else "day"


def _first_two_different(kinds: dict[str, str]):
    items = list(kinds.items())
    other = next(item for item in items if item[1] != items[0][1])
    return items[0], other


def _next_expected(last, kind: str) -> str:
    if kind == "day":
        return _stamp(last + datetime.timedelta(days=1))
    months = last.month  # 0-based index of the following month
    return f"{last.year + months // 12:04d}-{months % 12 + 1:02d}"


def _check_junction(earlier: Piece, later: Piece, kind: str) -> None:
    last, first = earlier.times[-1], later.times[0]
    if _step_key(first, kind) - _step_key(last, kind) != 1:
        raise TimeAxisError(
            f"climate files {earlier.name} and {later.name} leave a gap: the first ends "
            f"{_stamp(last)} and the second starts {_stamp(first)}, expected "
            f"{_next_expected(last, kind)} ({'daily' if kind == 'day' else 'monthly'} steps); "
            "add the missing steps or files"
        )


def _check_identical(holder: Piece, piece: Piece, overlap: int, kind: str) -> None:
    held, shared_keys = _step_keys(holder.times, kind), _step_keys(piece.times[:overlap], kind)
    start = np.flatnonzero(held == shared_keys[0])
    shared = piece.times[:overlap]
    span = f"{_stamp(shared[0])}..{_stamp(shared[-1])}"
    where = f"climate files {holder.name} and {piece.name} overlap"
    if start.size == 0 or not np.array_equal(held[start[0] : start[0] + overlap], shared_keys):
        raise TimeAxisError(
            f"{where}: the first holds {_stamp(holder.times[0])}..{_stamp(holder.times[-1])} "
            f"and the second starts {_stamp(piece.times[0])} with other stamps; expected each "
            "step in one file only; remove the overlapping steps from one of them"
        )
    index = int(start[0])
    if not np.array_equal(
        holder.read(index, index + overlap), piece.read(0, overlap), equal_nan=True
    ):
        raise TimeAxisError(
            f"{where}: both hold {span} ({overlap} steps) with different values; expected each "
            "step in one file only; remove the overlapping steps from one of them"
        )
    warnings.warn(
        f"{where}: both hold {span} ({overlap} steps) with identical values; read them from "
        f"{holder.name} only",
        OverlappingStepsWarning,
        stacklevel=4,
    )


def joined_times(segments: Sequence[Segment]) -> np.ndarray:
    """The stamps of the joined series; daily stamps at the first file's time of day.

    Files whose daily stamps sit at another time of day (00:00 in one year's file, 12:00 in
    the next) are aligned by calendar date, as variables are (:mod:`lakeloss.timeaxis`), and
    a :class:`~lakeloss.errors.TimeAlignedWarning` says so. Monthly stamps are kept: a
    monthly axis reads the calendar month of each stamp, whatever its day.
    """
    parts = [s.piece.times[s.first : s.stop] for s in segments]
    times = np.concatenate(parts)
    if len(times) < 2 or not _daily_steps(times):
        return times
    first = times[0]
    clock = (first.hour, first.minute, first.second, first.microsecond)
    moved = [p for p in segments if _clock(p.piece.times[p.first]) != clock]
    if not moved:
        return times
    aligned = np.array(
        [t.replace(hour=clock[0], minute=clock[1], second=clock[2], microsecond=clock[3])
         for t in times],
        dtype=object,
    )  # fmt: skip
    listing = "; ".join(
        f"{s.piece.name} stamped {_stamp_at(s.piece.times[s.first])}"
        for s in _first_of_each_clock(segments)
    )
    warnings.warn(
        "daily steps aligned by calendar date (a value belongs to the day of its stamp): "
        f"{listing}",
        TimeAlignedWarning,
        stacklevel=3,
    )
    return aligned


def _clock(stamp) -> tuple[int, int, int, int]:
    return (stamp.hour, stamp.minute, stamp.second, stamp.microsecond)


def _daily_steps(times: np.ndarray) -> bool:
    keys = _step_keys(times, "day")
    return bool(np.all(np.diff(keys) == 1))


def _first_of_each_clock(segments: Sequence[Segment]) -> list[Segment]:
    firsts: dict[tuple[int, int, int, int], Segment] = {}
    for segment in segments:
        firsts.setdefault(_clock(segment.piece.times[segment.first]), segment)
    return list(firsts.values())


def _stamp_at(stamp) -> str:
    return f"{stamp.year:04d}-{stamp.month:02d}-{stamp.day:02d} {stamp.hour:02d}:{stamp.minute:02d}"


def aligned_chunks(offset: int, length: int, chunk_steps: int) -> tuple[int, ...]:
    """Chunk lengths of ``length`` steps starting at step ``offset`` of the joined series,
    breaking at the multiples of ``chunk_steps`` (as the chunks of a single file do)."""
    sizes, position, end = [], offset, offset + length
    while position < end:
        boundary = min(end, (position // chunk_steps + 1) * chunk_steps)
        sizes.append(boundary - position)
        position = boundary
    return tuple(sizes)


def _axis(times: np.ndarray, calendar: str, files: Sequence[Path]) -> timeaxis.TimeAxis:
    try:
        return timeaxis.from_times(times, calendar)
    except TimeAxisError as err:
        raise TimeAxisError(f"climate files {_label(files)}: {err}") from err


# ----------------------------------------------------------------------------- agreement


def _check_grid(first, other, first_name: str, other_name: str) -> None:
    """``first``/``other`` are (x, y) coordinate pairs of cell centres."""
    for axis, a, b in (("x", first[0], other[0]), ("y", first[1], other[1])):
        cell = float(np.min(np.abs(np.diff(a)))) if len(a) > 1 else 1.0
        if len(a) != len(b) or not np.allclose(a, b, rtol=0.0, atol=_GRID_TOLERANCE * cell):
            raise GridError(
                f"climate files {first_name} and {other_name} are on different grids ({axis}: "
                f"{len(a)} cells {a[0]:g}..{a[-1]:g} vs {len(b)} cells {b[0]:g}..{b[-1]:g}); "
                "expected one grid for all files of an input; regrid them to one grid"
            )


def _check_crs(first: pyproj.CRS, other: pyproj.CRS, first_name: str, other_name: str) -> None:
    if not first.equals(other, ignore_axis_order=True):
        raise CRSError(
            f"climate files {first_name} and {other_name} have different CRSs "
            f"('{gridfile.crs_label(first)}' vs '{gridfile.crs_label(other)}'); expected one "
            "CRS for all files of an input; reproject them to one CRS"
        )


def _check_calendar(first: str, other: str, first_name: str, other_name: str) -> None:
    if first != other:
        raise TimeAxisError(
            f"climate files {first_name} and {other_name} use different calendars ({first} "
            f"and {other}); expected one calendar for all files of an input; convert them to "
            "one calendar"
        )


def _check_units(first: str, other: str, quantity: str, first_name: str, other_name: str) -> None:
    if first == other:
        return
    same = units_io.conversion_plan(first, quantity) == units_io.conversion_plan(other, quantity)
    if not same:
        raise UnitsError(
            f"climate files {first_name} and {other_name} declare different units ({first!r} "
            f"and {other!r}); expected one unit for all files of an input; convert them to "
            "one unit, or set units for this input in [climate] if the attribute is wrong"
        )


def _reemit(caught: Sequence[warnings.WarningMessage], files: Sequence[Path]) -> None:
    """Warn once for what several files warned alike (the same message but for the file)."""
    groups: dict[tuple[type, str], list[str]] = {}
    for item in caught:
        message = str(item.message)
        for path in files:
            message = message.replace(os.fspath(path), "{file}")
        groups.setdefault((item.category, message), []).append(str(item.message))
    for (category, _), messages in groups.items():
        more = f" (and alike for {len(messages) - 1} more files)" if len(messages) > 1 else ""
        warnings.warn(messages[0] + more, category, stacklevel=4)


# ----------------------------------------------------------------------------- NetCDF


def open_netcdf_files(
    path, variable: str, quantity: str, *, units: str | None, crs: str | None, chunk_steps: int
) -> gridfile.ClimateField:
    """Open one variable from several NetCDF files (or Zarr stores) joined along time.

    Parameters are those of :func:`lakeloss.io.climate.open_netcdf`; ``path`` is a list of
    files or glob patterns, or one pattern.

    Raises
    ------
    InputDataError
        A pattern matches nothing; a file is missing or unreadable (named).
    GridError, CRSError, UnitsError
        Files disagree on grid, CRS or units (both named).
    TimeAxisError
        Files disagree on calendar, or leave a gap or a differing overlap (files and dates
        named).
    """
    files = expand(path)
    if len(files) == 1:
        return gridfile.open_netcdf_file(
            files[0], variable, quantity, units=units, crs=crs, chunk_steps=chunk_steps
        )
    name = gridfile.glossary_name(quantity)
    datasets: list[xr.Dataset] = []
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            fields = []
            for source in files:
                datasets.append(gridfile.open_dataset(source))
                fields.append(
                    gridfile.netcdf_field(datasets[-1], source, variable, name, units, crs, None)
                )
        _reemit(caught, files)
        return _join_netcdf(fields, datasets, files, max(1, int(chunk_steps)))
    except BaseException:
        for dataset in datasets:
            dataset.close()
        raise


def _agree(fields: Sequence[gridfile.ClimateField]) -> None:
    first = fields[0]
    for other in fields[1:]:
        names = (repr(first.source_path), repr(other.source_path))
        _check_calendar(first.calendar, other.calendar, *names)
        _check_grid((first.x, first.y), (other.x, other.y), *names)
        _check_crs(first.crs, other.crs, *names)
        _check_units(first.source_units, other.source_units, first.quantity, *names)


def _join_netcdf(
    fields: Sequence[gridfile.ClimateField],
    datasets: Sequence[xr.Dataset],
    files: Sequence[Path],
    chunk_steps: int,
) -> gridfile.ClimateField:
    _agree(fields)
    field_of = {Piece(Path(f.source_path), f.times, _netcdf_reader(f.data)): f for f in fields}
    segments = join(list(field_of), fields[0].calendar, None)
    times = joined_times(segments)
    axis = _axis(times, fields[0].calendar, files)
    dataset_of = {id(f): d for f, d in zip(fields, datasets, strict=True)}
    parts: list[_Window] = []
    sizes: list[int] = []
    offset = 0
    for segment in segments:
        parts.append(_Window(offset, segment.piece.path, segment.first, segment.stop))
        sizes.extend(aligned_chunks(offset, segment.stop - segment.first, chunk_steps))
        offset += segment.stop - segment.first
    dtype = np.result_type(*[f.data.dtype for f in fields])
    # The files stay open for their first read; those whose steps were all dropped close now.
    opened = [dataset_of.pop(id(field_of[s.piece])) for s in segments]
    for unused in dataset_of.values():
        unused.close()
    joined = _TimeJoined(parts, fields[0].variable, dtype, fields[0].data.shape[1:], opened)
    # One dask layer, as for a single file: a stack of per-file arrays costs dask several
    # times more per block in graph work than the reads themselves.
    name = "multifile-" + dask.base.tokenize(
        [(f.source_path, os.path.getmtime(f.source_path)) for f in fields],
        fields[0].variable,
        sizes,
    )
    lazy = da.from_array(
        joined, chunks=(tuple(sizes), -1, -1), name=name, meta=np.empty((0, 0, 0), joined.dtype)
    )
    first = fields[0]
    stacked = xr.DataArray(lazy, dims=gridfile.DIMS, coords={"y": first.y, "x": first.x})
    converted = units_io.convert(
        stacked, first.source_units, first.quantity, step_days=axis.days, variable=first.variable
    )
    return gridfile.ClimateField(
        quantity=first.quantity,
        data=converted.rename(first.quantity),
        times=axis.times,
        calendar=axis.calendar,
        x=first.x,
        y=first.y,
        crs=first.crs,
        transform=None,
        source_path=_label(files, segments),
        variable=first.variable,
        source_units=first.source_units,
        crs_assumed=first.crs_assumed,
    )


@dataclass(frozen=True)
class _Window:
    """Steps ``first``..``stop - 1`` of a file, from step ``offset`` of the joined series."""

    offset: int
    path: Path
    first: int
    stop: int


_FILES_LOCK = threading.RLock()
"""Serialises opening, reading and closing the files of joined series across block threads.

NetCDF/HDF5 is not thread-safe: with one lock per file, two threads opening and closing
different files crashed the process (a segmentation fault inside netCDF4, seen on this
project's test suite). HDF5 reads are serialised by xarray's own lock anyway, so one lock
costs no parallelism; the block threads still overlap the zonal means and the physics.
"""


class _TimeJoined:
    """Several files' (time, y, x) variable as one array, joined along time.

    Indexing reads only the files a time range spans; dask calls it once per chunk. A file
    is opened when first read and closed once each of its steps has been read since (in any
    order): a series is read in time order, so only one or two
    files per variable are open at a time (each open NetCDF file keeps a chunk cache of up to
    64 MiB per variable). A file read again is opened again.
    """

    ndim = 3

    def __init__(
        self,
        parts: list[_Window],
        variable: str,
        dtype,
        grid_shape: tuple[int, ...],
        opened: Sequence[xr.Dataset] = (),
    ) -> None:
        self.parts, self.variable = parts, variable
        self.dtype = np.dtype(dtype)
        self.shape = (parts[-1].offset + parts[-1].stop - parts[-1].first, *grid_shape)
        self._start_closed()
        for index, dataset in enumerate(opened):
            self._open[index] = (dataset, gridfile.to_time_y_x(dataset, variable)[0])

    def _start_closed(self) -> None:
        self._open: list[tuple[xr.Dataset, xr.DataArray] | None] = [None] * len(self.parts)
        self._unread = [np.ones(p.stop - p.first, dtype=bool) for p in self.parts]

    def __getstate__(self) -> dict:
        # Pickled for cluster workers: open files stay behind.
        return {k: v for k, v in self.__dict__.items() if k not in ("_open", "_unread")}

    def __setstate__(self, state: dict) -> None:
        self.__dict__.update(state)
        self._start_closed()

    def __getitem__(self, key) -> np.ndarray:
        times, rest = key[0], tuple(key[1:])
        start, stop, _ = times.indices(self.shape[0])
        pieces = []
        for index, part in enumerate(self.parts):
            end = part.offset + part.stop - part.first
            low, high = max(start, part.offset), min(stop, end)
            if low < high:
                local = slice(part.first + low - part.offset, part.first + high - part.offset)
                pieces.append(self._read(index, local, rest))
        if not pieces:
            return np.empty((0, *self.shape[1:]), self.dtype)[(slice(None), *rest)]
        return np.concatenate(pieces) if len(pieces) > 1 else pieces[0]

    def _read(self, index: int, local: slice, rest: tuple) -> np.ndarray:
        part = self.parts[index]
        with _FILES_LOCK:
            if self._open[index] is None:
                dataset = gridfile.open_dataset(part.path)
                self._open[index] = (dataset, gridfile.to_time_y_x(dataset, self.variable)[0])
            dataset, data = self._open[index]  # type: ignore[misc]
            values = np.asarray(data[(local, *rest)].values, dtype=self.dtype)
            unread = self._unread[index]
            unread[local.start - part.first : local.stop - part.first] = False
            if not unread.any():
                dataset.close()
                self._open[index] = None
                unread[:] = True
        return values


def _netcdf_reader(data: xr.DataArray) -> Callable[[int, int], np.ndarray]:
    def read(first: int, stop: int) -> np.ndarray:
        return np.asarray(data.isel(time=slice(first, stop)).values)

    return read


# ----------------------------------------------------------------------------- GeoTIFF


@dataclass(frozen=True)
class _TiffHeader:
    path: Path
    count: int
    width: int
    height: int
    transform: affine.Affine
    nodata: float | None
    dtype: str
    crs: pyproj.CRS | None
    units: str | None


def _tiff_header(source: Path) -> _TiffHeader:
    gridfile.check_file(source, "GeoTIFF")
    try:
        with rasterio.open(source) as src:
            return _TiffHeader(
                path=source,
                count=src.count,
                width=src.width,
                height=src.height,
                transform=src.transform,
                nodata=src.nodata,
                dtype=np.result_type(src.dtypes[0], np.float32).name,
                crs=None if src.crs is None else pyproj.CRS.from_wkt(src.crs.to_wkt()),
                units=gridfile.declared_units(src),
            )
    except (rasterio.errors.RasterioError, OSError, ValueError) as err:
        raise gridfile.unreadable(source, "GeoTIFF", err) from err


def _band_times(header: _TiffHeader, date, step: str | None, calendar: str) -> np.ndarray:
    if header.count == 1:
        return np.array([date], dtype=object)
    if step is None:
        raise ConfigError(
            f"GeoTIFF {str(header.path)!r} has {header.count} bands but no step is set; "
            'expected step = "day" or "month" for files of several bands; set step for this '
            "input in [climate]"
        )
    start = f"{_stamp(date)[:10]}"
    return timeaxis.from_start(start, step, header.count, calendar).times


def open_geotiff_files(
    path,
    quantity: str,
    *,
    date_pattern: str | None,
    step: str | None,
    units: str | None,
    calendar: str = "standard",
    crs: str | None = None,
    chunk_steps: int = 64,
) -> gridfile.ClimateField:
    """Open GeoTIFFs whose names give their dates as one series, joined along time.

    Parameters
    ----------
    path : str, os.PathLike or sequence of them
        Files or glob patterns.
    quantity : str
        Glossary name or alias.
    date_pattern : str or None
        How a file name gives the date of the file's first band (:mod:`lakeloss.filedates`).
        Required for more than one file.
    step : str or None
        ``"day"`` or ``"month"``: the step between bands of a file, and of the series (None:
        inferred from the dates; required when a file has several bands).
    units, calendar, crs, chunk_steps
        As for :func:`lakeloss.io.climate.open_geotiff_stack`.

    Raises
    ------
    ConfigError
        Several files and no ``date_pattern``; several bands and no ``step``.
    TimeAxisError
        A name without a date, a gap, an overlap with other values (files and dates named).
    GridError, CRSError, UnitsError
        Files disagree on grid, CRS or units (both named).
    """
    files = expand(path)
    if date_pattern is None:
        raise ConfigError(
            f"climate path {_label(files)} names several GeoTIFFs but no date_pattern; "
            'expected date_pattern (e.g. "%Y%m%d") so that each file\'s date comes from its '
            "name; set it for this input in [climate]"
        )
    name = gridfile.glossary_name(quantity)
    pattern = filedates.compile_pattern(date_pattern)
    headers = [_tiff_header(source) for source in files]
    dates = [filedates.date_of(pattern, source, calendar) for source in files]
    first = headers[0]
    where = f"GeoTIFF {str(first.path)!r}"
    declared = gridfile.source_units(first.units, units, where, name)
    for other in headers[1:]:
        _tiff_agree(first, other, units, name)
    field_crs, assumed = gridfile.resolve_crs(
        first.crs, False, crs, where, looked_for="no coordinate system in its georeferencing"
    )
    dtype = np.result_type(*[h.dtype for h in headers]).name
    header_of = {
        Piece(h.path, _band_times(h, d, step, calendar), _tiff_reader(h, dtype)): h
        for h, d in zip(headers, dates, strict=True)
    }
    segments = join(list(header_of), calendar, step)
    axis = _axis(joined_times(segments), calendar, files)
    if step is not None and axis.step != step:
        raise TimeAxisError(
            f"climate files {_label(files)}: the dates in their names make {axis.step}ly steps "
            f"but step is {step!r}; expected them to agree; fix step or date_pattern"
        )
    x, y = gridfile.cell_centres(first.transform, first.width, first.height, where)
    stack = _tiff_stack(segments, header_of, (first.height, first.width), dtype, chunk_steps)
    data = xr.DataArray(stack, dims=gridfile.DIMS, coords={"time": axis.times, "y": y, "x": x})
    # What the names share before the date: "tas" of tas_20310101.tif, tas_20310102.tif ...
    shared = os.path.commonprefix([f.stem for f in files]).rstrip("0123456789_-. ")
    variable = shared or files[0].stem
    converted = units_io.convert(data, declared, quantity, step_days=axis.days, variable=variable)
    return gridfile.ClimateField(
        quantity=name,
        data=converted.rename(name),
        times=axis.times,
        calendar=axis.calendar,
        x=x,
        y=y,
        crs=field_crs,
        transform=first.transform,
        source_path=_label(files, segments) if len(files) > 1 else os.fspath(files[0]),
        variable=variable,
        source_units=declared,
        crs_assumed=assumed,
    )


def _tiff_agree(first: _TiffHeader, other: _TiffHeader, units: str | None, name: str) -> None:
    names = (repr(os.fspath(first.path)), repr(os.fspath(other.path)))
    same_transform = first.transform.almost_equals(
        other.transform, precision=_GRID_TOLERANCE * abs(first.transform.a)
    )
    if (first.width, first.height) != (other.width, other.height) or not same_transform:
        raise GridError(
            f"climate files {names[0]} and {names[1]} are on different grids "
            f"({first.width} x {first.height} cells at {tuple(first.transform)[:6]} vs "
            f"{other.width} x {other.height} at {tuple(other.transform)[:6]}); expected one "
            "grid for all files of an input; regrid them to one grid"
        )
    if (first.crs is None) != (other.crs is None):
        raise CRSError(
            f"climate files {names[0]} and {names[1]} disagree: one has a CRS and the other "
            "none; expected one CRS for all files of an input; set it in every file"
        )
    if first.crs is not None and other.crs is not None:
        _check_crs(first.crs, other.crs, *names)
    if units is None and first.units is not None and other.units is not None:
        _check_units(first.units, other.units, name, *names)
    elif units is None and (first.units is None) != (other.units is None):
        raise UnitsError(
            f"climate files {names[0]} and {names[1]} disagree: one has a units tag and the "
            "other none; expected one unit for all files; set units for this input in [climate]"
        )


def _tiff_reader(header: _TiffHeader, dtype: str) -> Callable[[int, int], np.ndarray]:
    def read(first: int, stop: int) -> np.ndarray:
        return _read_pieces(((os.fspath(header.path), first + 1, stop, header.nodata),), dtype)

    return read


def _read_pieces(pieces, dtype: str) -> np.ndarray:
    # One task: bands first..last (1-based, inclusive) of each file, one after another.
    return np.concatenate(
        [
            gridfile.read_bands(path, first, last, nodata, dtype)
            for path, first, last, nodata in pieces
        ]
    )


def _tiff_stack(
    segments: Sequence[Segment],
    headers: dict[Piece, _TiffHeader],
    shape: tuple[int, int],
    dtype: str,
    chunk_steps: int,
):
    """One task per chunk of ``chunk_steps`` steps, reading every file the chunk spans."""
    spans = []  # (global first step, path, first band 1-based, nodata) of each segment
    offset = 0
    for segment in segments:
        header = headers[segment.piece]
        spans.append((offset, segment, header))
        offset += segment.stop - segment.first
    total, step = offset, max(1, int(chunk_steps))
    chunks = []
    for start in range(0, total, step):
        stop = min(total, start + step)
        pieces = []
        for begin, segment, header in spans:
            end = begin + segment.stop - segment.first
            low, high = max(start, begin), min(stop, end)
            if low < high:
                first_band = segment.first + (low - begin) + 1
                pieces.append(
                    (os.fspath(header.path), first_band, first_band + high - low - 1, header.nodata)
                )
        task = dask.delayed(_read_pieces, pure=True)(tuple(pieces), dtype)
        chunks.append(da.from_delayed(task, shape=(stop - start, *shape), dtype=dtype))
    return da.concatenate(chunks, axis=0)
