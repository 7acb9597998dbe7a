"""Sparse (water body x grid cell) area weights: applied to every variable and step, saved, loaded."""

from __future__ import annotations

import dataclasses
import os
import tempfile
import zipfile
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import scipy.sparse as sp
from pyproj import CRS

from lakeloss.errors import InputDataError
from lakeloss.zonal.grid import GridSpec

SAVE_FORMAT_VERSION = 1

# Stated and measured areas of a polygon that differ by more than this factor flag it: a
# register's area rounded or of the full-supply level differs by far less, a wrong unit
# (ha read as m2) or a wrong feature by far more. Our own choice, no source.
_AREA_RATIO_LIMIT = 2.0


@dataclass
class ZonalWeights:
    """Area weights between water bodies (rows) and grid cells (columns).

    Attributes
    ----------
    matrix : scipy.sparse.csr_matrix
        ``n_waterbodies x ny*nx``; column ``row * nx + col`` indexes ``values[t, row, col]``
        as stored; entry = true area of (water body ∩ cell). [m2]
    polygon_area_m2 : numpy.ndarray
        True area of each (repaired) polygon; 0 for empty geometry and for points. After
        :meth:`with_stated_areas`, the area the run uses. [m2]
    grid_area_m2 : numpy.ndarray
        True area of each polygon inside the grid (= row sum of ``matrix``); for a point,
        1 inside the grid (its nominal weight) and 0 outside. [m2, or 1 for points]
    grid_coverage : numpy.ndarray
        Share of the polygon inside the grid (1 or 0 for a point); NaN for empty
        geometry. [1]
    area_before_repair_m2 : numpy.ndarray
        True area of the invalid input polygon; NaN where no repair was needed. [m2]
    flags : numpy.ndarray of str
        ``;``-joined tokens, ``""`` when clean: ``geometry_repaired``, ``geometry_empty``,
        ``outside_grid``, ``partly_outside_grid`` (and ``area_field_disagrees`` after
        :meth:`with_stated_areas`).
    centroid_lon, centroid_lat : numpy.ndarray
        Centroid of each polygon in WGS84; NaN for empty geometry. [degrees]
    grid_key : str
        :meth:`GridSpec.key` of the grid the weights were built for.
    grid : GridSpec or None
        That grid (kept so a saved file is self-describing).
    """

    matrix: sp.csr_matrix
    polygon_area_m2: np.ndarray
    grid_area_m2: np.ndarray
    grid_coverage: np.ndarray
    area_before_repair_m2: np.ndarray
    flags: np.ndarray
    centroid_lon: np.ndarray
    centroid_lat: np.ndarray
    grid_key: str
    grid: GridSpec | None = None

    @property
    def n_waterbodies(self) -> int:
        """Number of water bodies (rows)."""
        return int(self.matrix.shape[0])

    def row_groups(self) -> np.ndarray:
        """A key per water body; bodies with equal keys get identical means from :meth:`apply`.

        A body whose area lies in one cell takes that cell's value whatever the mask of
        missing cells, so all such bodies in one cell share the key ``cell``; bodies with no
        cell share ``-1``; every other body has a key of its own (``ncell + row``). Most
        ponds are far smaller than a climate cell, so a layer of 10^6 ponds on a 0.05° grid
        has about a quarter as many groups as bodies.

        Returns
        -------
        numpy.ndarray
            int64, shape ``(n_waterbodies,)``.
        """
        matrix = self.matrix
        cells_per_row = np.diff(matrix.indptr)
        keys = np.arange(matrix.shape[1], matrix.shape[1] + matrix.shape[0], dtype=np.int64)
        single = cells_per_row == 1
        keys[single] = matrix.indices[matrix.indptr[:-1][single]]
        keys[cells_per_row == 0] = -1
        return keys

    def take_rows(self, rows: np.ndarray) -> ZonalWeights:
        """The weights of the water bodies ``rows`` only, in that order (a new object)."""
        rows = np.asarray(rows, dtype=np.intp)
        return ZonalWeights(
            matrix=sp.csr_matrix(self.matrix[rows]),
            polygon_area_m2=self.polygon_area_m2[rows],
            grid_area_m2=self.grid_area_m2[rows],
            grid_coverage=self.grid_coverage[rows],
            area_before_repair_m2=self.area_before_repair_m2[rows],
            flags=self.flags[rows],
            centroid_lon=self.centroid_lon[rows],
            centroid_lat=self.centroid_lat[rows],
            grid_key=self.grid_key,
            grid=self.grid,
        )

    def with_stated_areas(self, stated_m2: np.ndarray, field_m2: np.ndarray) -> ZonalWeights:
        """The same weights with the areas a layer states for its bodies (a new object).

        Parameters
        ----------
        stated_m2 : numpy.ndarray
            Per body, the area to use instead of the polygon's; NaN keeps the polygon's
            true area. [m2]
        field_m2 : numpy.ndarray
            Per body, the area the layer states, used or not (NaN where none). [m2]

        Returns
        -------
        ZonalWeights
            ``polygon_area_m2`` is the area the run uses (volumes and area-dependent
            physics); the flag ``area_field_disagrees`` marks polygons whose stated area
            and true area differ by more than a factor of 2. The matrix, and so every
            mean, is unchanged: a polygon's climate still comes from the cells under it.
        """
        polygon = self.polygon_area_m2
        area = np.where(np.isnan(stated_m2), polygon, stated_m2)
        with np.errstate(invalid="ignore", divide="ignore"):
            ratio = field_m2 / polygon
            disagree = (polygon > 0) & (
                (ratio > _AREA_RATIO_LIMIT) | (ratio < 1 / _AREA_RATIO_LIMIT)
            )
        flags = np.asarray(self.flags, dtype=object).copy()
        token = "area_field_disagrees"
        flags[disagree] = np.where(flags[disagree] == "", token, flags[disagree] + ";" + token)
        return dataclasses.replace(self, polygon_area_m2=area, flags=flags)

    def apply(self, values, out: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Area-weighted mean of gridded values over each water body, per time step.

        Parameters
        ----------
        values : array_like
            ``(time, ny, nx)`` or ``(ny, nx)`` grid values as stored (numpy or one dask
            chunk); NaN marks missing cells. [any unit]
        out : numpy.ndarray, optional
            A C-ordered float64 ``(n_waterbodies, time)`` buffer to write the means into
            (they are returned as its transpose). Reusing one buffer across calls saves the
            fresh-memory cost that dominates at 10^6 water bodies. Ignored when the
            missing cells change with time.

        Returns
        -------
        means : numpy.ndarray
            ``(time, n_waterbodies)`` float64 means over the valid cells; NaN where a water
            body has no valid cell. [unit of ``values``]
        valid_fraction : numpy.ndarray
            ``(time, n_waterbodies)`` share of ``grid_area_m2`` that had valid data; 0 where
            the mean is NaN. When the missing-cell mask does not change with time this is a
            read-only broadcast view of one row. [1]

        Notes
        -----
        mean = (W @ where(valid, v, 0)) / (W @ valid) (xarray's weighted mean with weights
        renormalised over valid cells), done as one sparse-dense product over the cells any
        water body touches, accumulated in float64. When the missing cells are the same at
        every step (a land or sea mask), the renormalisation is folded into the weights
        once, so the product writes the means directly.
        """
        values = np.asarray(values)
        if values.ndim == 2:
            values = values[np.newaxis]
        ncell = self.matrix.shape[1]
        if values.ndim != 3 or values.shape[1] * values.shape[2] != ncell:
            raise InputDataError(
                f"values of shape {values.shape} do not fit weights built for {ncell} grid "
                "cells; expected (time, ny, nx) on the same grid; rebuild the weights"
            )
        if values.shape[0] == 0:
            return np.empty((0, self.n_waterbodies)), np.empty((0, self.n_waterbodies))
        weights, used = self._touched_cells()
        # (cells, time) in C order so the sparse product reads each cell's series contiguously
        series = _cell_series(values.reshape(values.shape[0], ncell), used)
        valid = np.isfinite(series)
        steady = bool(np.array_equal(valid.all(axis=1), valid.any(axis=1)))
        series[~valid] = 0.0
        if steady:
            return self._apply_steady(weights, series, valid[:, 0], out)
        total = weights @ series
        valid_area = weights @ valid.astype(np.float64)
        total /= np.where(valid_area > 0, valid_area, np.nan)
        return total.T, self._valid_fraction(valid_area.T)

    def _touched_cells(self) -> tuple[sp.csr_matrix, np.ndarray]:
        """The matrix restricted to the cells some water body touches, and those cells.

        Computed once per weights object: the pipeline applies the same weights to every
        block of every variable.
        """
        cached = self.__dict__.get("_touched")
        if cached is None:
            cached = self.__dict__["_touched"] = self._restrict_to_touched_cells()
        return cached

    def _restrict_to_touched_cells(self) -> tuple[sp.csr_matrix, np.ndarray]:
        ncell = self.matrix.shape[1]
        used = np.flatnonzero(np.bincount(self.matrix.indices, minlength=ncell))
        renumber = np.zeros(ncell, dtype=self.matrix.indices.dtype)
        renumber[used] = np.arange(used.size, dtype=renumber.dtype)
        weights = sp.csr_matrix(
            (self.matrix.data, renumber[self.matrix.indices], self.matrix.indptr),
            shape=(self.matrix.shape[0], used.size),
        )
        return weights, used

    def _apply_steady(
        self,
        weights: sp.csr_matrix,
        series: np.ndarray,
        valid: np.ndarray,
        out: np.ndarray | None = None,
    ):
        """Same missing cells at every step: renormalise the weights once, not every mean.

        A water body whose valid part lies in one cell takes that cell's series as it is
        (most ponds); only the others go through the sparse product.
        """
        plan = self._steady_plan(weights, valid)
        # np.empty, not zeros: every row is written below, and the kernel's fresh pages are
        # the dominant cost of a 10^6-pond year
        shape = (plan.n_rows, series.shape[1])
        usable = (
            out is not None
            and out.shape == shape
            and out.dtype == np.float64
            and out.flags.c_contiguous
        )
        means = out if out is not None and usable else np.empty(shape)
        # One gather pass without temporaries: each row takes its first cell's series; the
        # rows of several cells are overwritten by the product below.
        # mode="clip": with the default mode="raise" numpy buffers `out` (a full copy).
        np.take(series, plan.first_cell, axis=0, out=means, mode="clip")
        if plan.several.size:
            means[plan.several] = plan.several_weights @ series
        means[plan.no_cell] = np.nan
        fraction = np.broadcast_to(plan.fraction, (series.shape[1], plan.n_rows))
        return means.T, fraction

    def _steady_plan(self, weights: sp.csr_matrix, valid: np.ndarray) -> _SteadyPlan:
        """Renormalised weights for one missing-cell mask, kept for the next block.

        Most climate grids have the same mask at every step of every block, so this is
        built once per run instead of once per block.
        """
        key = np.packbits(valid).tobytes()
        cached = self.__dict__.get("_steady")
        if cached is not None and cached[0] == key:
            return cached[1]
        valid_area = weights @ valid.astype(np.float64)
        masked = weights.multiply(valid[np.newaxis, :].astype(np.float64)).tocsr()
        masked.eliminate_zeros()
        with np.errstate(divide="ignore"):
            row_scale = np.where(valid_area > 0, 1.0 / valid_area, 0.0)
        normalised = (sp.diags_array(row_scale) @ masked).tocsr()
        cells_per_row = np.diff(normalised.indptr)
        single = np.flatnonzero(cells_per_row == 1)
        several = np.flatnonzero(cells_per_row > 1)
        first_cell = np.zeros(normalised.shape[0], dtype=np.intp)
        first_cell[single] = normalised.indices[normalised.indptr[single]]
        plan = _SteadyPlan(
            n_rows=normalised.shape[0],
            first_cell=first_cell,
            several=several,
            several_weights=normalised[several],
            no_cell=cells_per_row == 0,
            fraction=self._valid_fraction(valid_area),
        )
        self.__dict__["_steady"] = (key, plan)
        return plan

    def _valid_fraction(self, valid_area: np.ndarray) -> np.ndarray:
        with np.errstate(invalid="ignore", divide="ignore"):
            fraction = valid_area / self.grid_area_m2
        return np.where(self.grid_area_m2 > 0, fraction, 0.0)

    def save(self, path) -> None:
        """Write the weights to one ``.npz`` file atomically (temp file + rename).

        The matrix is stored under the keys of :func:`scipy.sparse.save_npz`, so
        ``scipy.sparse.load_npz(path)`` reads it too.
        """
        path = Path(path)
        path.parent.mkdir(parents=True, exist_ok=True)
        arrays = _to_arrays(self)
        handle, temp = tempfile.mkstemp(dir=path.parent, prefix=path.name, suffix=".part")
        try:
            with os.fdopen(handle, "wb") as stream:
                np.savez(stream, **arrays)  # type: ignore[arg-type]
                stream.flush()
                os.fsync(stream.fileno())
            os.replace(temp, path)
        except BaseException:
            Path(temp).unlink(missing_ok=True)
            raise

    @classmethod
    def load(cls, path) -> ZonalWeights:
        """Read weights written by :meth:`save`; InputDataError when the file is not one."""
        try:
            matrix = sp.load_npz(path)
            with np.load(path, allow_pickle=False) as stored:
                version = int(stored["format_version"])
                if version != SAVE_FORMAT_VERSION:
                    raise InputDataError(
                        f"weights file {path} has format version {version}; expected "
                        f"{SAVE_FORMAT_VERSION}; delete it so it is rebuilt"
                    )
                return _from_arrays(sp.csr_matrix(matrix), stored)
        except InputDataError:
            raise
        except (OSError, ValueError, KeyError, EOFError, zipfile.BadZipFile) as exc:
            raise InputDataError(
                f"weights file {path} is unreadable ({type(exc).__name__}); expected a file "
                "written by ZonalWeights.save; delete it so it is rebuilt"
            ) from exc


_ROW_FIELDS = (
    "polygon_area_m2",
    "grid_area_m2",
    "grid_coverage",
    "area_before_repair_m2",
    "flags",
    "centroid_lon",
    "centroid_lat",
)


def concat_rows(parts: Sequence[ZonalWeights]) -> ZonalWeights:
    """The weights of several runs of water bodies, stacked in the order given.

    The inverse of :meth:`ZonalWeights.take_rows` over consecutive row ranges: the weights
    of a layer's partitions, each built with the layer's bounds, concatenate to the whole
    layer's weights bit for bit.

    Parameters
    ----------
    parts : sequence of ZonalWeights
        At least one; all built for the same grid.

    Returns
    -------
    ZonalWeights
        ``sum(part.n_waterbodies)`` rows: the first part's, then the second's, and so on.
    """
    if not parts:
        raise ValueError("concat_rows needs at least one ZonalWeights")
    first = parts[0]
    for part in parts[1:]:
        if part.grid_key != first.grid_key or part.matrix.shape[1] != first.matrix.shape[1]:
            raise ValueError(
                f"weights built for grid {part.grid_key!r} cannot be stacked under weights "
                f"built for grid {first.grid_key!r}; expected one grid for every part"
            )
    rows = {name: np.concatenate([getattr(p, name) for p in parts]) for name in _ROW_FIELDS}
    rows["flags"] = rows["flags"].astype(object)
    matrix = sp.csr_matrix(sp.vstack([p.matrix for p in parts], format="csr"))
    return ZonalWeights(matrix=matrix, grid_key=first.grid_key, grid=first.grid, **rows)


@dataclass(frozen=True)
class _SteadyPlan:
    """How to average one block when the missing cells do not change with time."""

    n_rows: int
    first_cell: np.ndarray
    several: np.ndarray
    several_weights: sp.csr_matrix
    no_cell: np.ndarray
    fraction: np.ndarray


def _cell_series(flat_values: np.ndarray, used: np.ndarray) -> np.ndarray:
    """float64 (cells, time) copy of the used columns of (time, cells) values.

    Done in blocks of cells so the transposing copy stays in cache.
    """
    steps = flat_values.shape[0]
    series = np.empty((used.size, steps), dtype=np.float64)
    block = 4096
    for start in range(0, used.size, block):
        cells = used[start : start + block]
        series[start : start + block] = flat_values[:, cells].T
    return series


def _to_arrays(weights: ZonalWeights) -> dict[str, np.ndarray]:
    matrix = weights.matrix
    arrays = {
        "format": np.array(matrix.format.encode("ascii")),
        "shape": np.array(matrix.shape),
        "data": matrix.data,
        "indices": matrix.indices,
        "indptr": matrix.indptr,
        "format_version": np.array(SAVE_FORMAT_VERSION),
        "polygon_area_m2": weights.polygon_area_m2,
        "grid_area_m2": weights.grid_area_m2,
        "grid_coverage": weights.grid_coverage,
        "area_before_repair_m2": weights.area_before_repair_m2,
        "flags": np.asarray(weights.flags, dtype=str),
        "centroid_lon": weights.centroid_lon,
        "centroid_lat": weights.centroid_lat,
        "grid_key": np.array(weights.grid_key),
    }
    if weights.grid is not None:
        arrays["grid_crs_wkt"] = np.array(weights.grid.crs.to_wkt())
        arrays["grid_x_edges"] = weights.grid.x_edges
        arrays["grid_y_edges"] = weights.grid.y_edges
    return arrays


def _from_arrays(matrix: sp.csr_matrix, stored) -> ZonalWeights:
    grid = None
    if "grid_crs_wkt" in stored:
        grid = GridSpec(
            CRS.from_wkt(str(stored["grid_crs_wkt"])),
            stored["grid_x_edges"],
            stored["grid_y_edges"],
        )
    return ZonalWeights(
        matrix=matrix,
        polygon_area_m2=stored["polygon_area_m2"],
        grid_area_m2=stored["grid_area_m2"],
        grid_coverage=stored["grid_coverage"],
        area_before_repair_m2=stored["area_before_repair_m2"],
        flags=stored["flags"].astype(object),
        centroid_lon=stored["centroid_lon"],
        centroid_lat=stored["centroid_lat"],
        grid_key=str(stored["grid_key"]),
        grid=grid,
    )
