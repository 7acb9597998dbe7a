"""Rectilinear climate grid definitions and the true (ellipsoidal) area of their cells."""

from __future__ import annotations

import hashlib
from dataclasses import dataclass

import numpy as np
from pyproj import CRS, Proj, Transformer
from pyproj.exceptions import CRSError as PyprojCRSError

from lakeloss.errors import CRSError, GridError

# Adjacent cell widths may differ by up to this factor before edges inferred from centres
# stop being trustworthy (common practice, no source: Gaussian and stretched grids stay far
# below it, a gap in the coordinate vector goes far above it).
_MAX_SPACING_RATIO = 2.0


def _as_crs(crs) -> CRS:
    """Turn anything pyproj understands into a CRS, refusing a missing one."""
    if crs is None:
        raise GridError(
            "the climate grid has no CRS; expected one (e.g. EPSG:4326 for lat/lon); "
            "set grid_mapping in the file or pass the CRS explicitly"
        )
    try:
        return CRS.from_user_input(crs)
    except PyprojCRSError as exc:
        raise CRSError(
            f"cannot interpret grid CRS {crs!r}; expected an EPSG code, WKT or PROJ string; "
            "fix the CRS definition"
        ) from exc


def _check_edges(edges: np.ndarray, axis: str) -> np.ndarray:
    edges = np.asarray(edges, dtype=np.float64)
    if edges.ndim != 1 or edges.size < 2 or not np.all(np.isfinite(edges)):
        raise GridError(
            f"grid {axis} edges must be a finite 1-D vector of at least 2 values, got shape "
            f"{edges.shape}; check the {axis} coordinate of the climate file"
        )
    steps = np.diff(edges)
    if not (np.all(steps > 0) or np.all(steps < 0)):
        raise GridError(
            f"grid {axis} coordinates are not strictly monotonic; expected sorted cell "
            f"coordinates; check the {axis} coordinate of the climate file"
        )
    return edges


def _edges_from_centres(centres: np.ndarray, axis: str) -> np.ndarray:
    """Cell edges at the midpoints between centres, the end cells mirrored outwards."""
    centres = _check_edges(centres, axis)
    steps = np.abs(np.diff(centres))
    if steps.size > 1:
        ratio = np.maximum(steps[1:] / steps[:-1], steps[:-1] / steps[1:])
        if ratio.max() > _MAX_SPACING_RATIO:
            worst = int(np.argmax(ratio))
            raise GridError(
                f"grid {axis} centres jump in spacing by a factor {ratio.max():.3g} near index "
                f"{worst + 1}; expected a regular or mildly irregular grid (factor <= "
                f"{_MAX_SPACING_RATIO}); pass the cell edges via from_transform instead"
            )
    mid = 0.5 * (centres[1:] + centres[:-1])
    first = centres[0] - (mid[0] - centres[0])
    last = centres[-1] + (centres[-1] - mid[-1])
    return np.concatenate([[first], mid, [last]])


@dataclass(frozen=True, eq=False)
class GridSpec:
    """A rectilinear grid: CRS plus cell edges along x and y in the order data are stored.

    Attributes
    ----------
    crs : pyproj.CRS
        Coordinate reference system of the cell edges.
    x_edges : numpy.ndarray
        ``nx + 1`` cell edges along x, in stored column order (usually ascending). [CRS units]
    y_edges : numpy.ndarray
        ``ny + 1`` cell edges along y, in stored row order: descending for north-up data,
        ascending for south-up data. [CRS units]
    """

    crs: CRS
    x_edges: np.ndarray
    y_edges: np.ndarray

    def __post_init__(self) -> None:
        object.__setattr__(self, "crs", _as_crs(self.crs))
        x_edges = _check_edges(self.x_edges, "x")
        y_edges = _check_edges(self.y_edges, "y")
        x_edges.setflags(write=False)
        y_edges.setflags(write=False)
        object.__setattr__(self, "x_edges", x_edges)
        object.__setattr__(self, "y_edges", y_edges)

    @classmethod
    def from_transform(cls, transform, width: int, height: int, crs) -> GridSpec:
        """Grid of a raster from its affine transform (rasterio convention).

        Parameters
        ----------
        transform : affine.Affine
            Maps (col, row) to (x, y) of the cell's upper-left corner; must not rotate.
        width, height : int
            Number of columns and rows. [cells]
        crs : pyproj.CRS or str
            Coordinate reference system of the raster.
        """
        if transform.b != 0 or transform.d != 0:
            raise GridError(
                f"grid transform is rotated or sheared (b={transform.b}, d={transform.d}); "
                "expected a north-up or south-up rectilinear grid; warp the raster first"
            )
        if width < 1 or height < 1:
            raise GridError(f"grid size {width} x {height} is empty; expected >= 1 x 1 cells")
        x_edges = transform.c + transform.a * np.arange(width + 1, dtype=np.float64)
        y_edges = transform.f + transform.e * np.arange(height + 1, dtype=np.float64)
        return cls(crs, x_edges, y_edges)

    @classmethod
    def from_centres(cls, x, y, crs) -> GridSpec:
        """Grid from coordinate vectors of cell centres, as stored in NetCDF files.

        Edges are put halfway between neighbouring centres and the outer edges half a cell
        beyond the outer centres; on a geographic grid latitude edges are clipped to the
        poles (±90°, or ±100 in grads).

        Parameters
        ----------
        x, y : array_like
            1-D cell-centre coordinates, in stored order (any direction). [CRS units]
        crs : pyproj.CRS or str
            Coordinate reference system of the coordinates.
        """
        crs = _as_crs(crs)
        x_edges = _edges_from_centres(x, "x")
        y_edges = _edges_from_centres(y, "y")
        grid = cls(crs, x_edges, y_edges)
        if grid.full_turn is not None:
            pole = 0.25 * grid.full_turn
            grid = cls(crs, x_edges, np.clip(y_edges, -pole, pole))
        return grid

    @property
    def shape(self) -> tuple[int, int]:
        """Number of (rows, columns) of the stored data. [cells]"""
        return (self.y_edges.size - 1, self.x_edges.size - 1)

    @property
    def is_geographic(self) -> bool:
        """True when the grid is in longitude/latitude degrees."""
        return bool(self.crs.is_geographic)

    @property
    def full_turn(self) -> float | None:
        """One turn of longitude in the CRS's angular unit (360 for degrees); None if projected."""
        if not self.is_geographic:
            return None
        axis = self.crs.axis_info
        radians_per_unit = axis[0].unit_conversion_factor if axis else np.pi / 180.0
        return float(2.0 * np.pi / radians_per_unit)

    @property
    def wraps_longitude(self) -> bool:
        """True for a geographic grid whose columns go once all the way round the globe.

        Such a grid has no east or west edge: its first and last columns are neighbours
        across the storage seam (at 0°/360°, ±180° or wherever the file starts). See
        :attr:`turn_columns`.
        """
        return self.turn_columns is not None

    @property
    def turn_columns(self) -> int | None:
        """How many stored columns make one turn of longitude; None when the grid does not wrap.

        All the columns when the x edges span one turn within half a mean cell width (which
        absorbs float32 rounding of the coordinates); all but the last when the last column
        repeats the first one turn later (files cut at -180..180 or 0..360 inclusive). A
        projected grid never wraps.
        """
        turn = self.full_turn
        if turn is None:
            return None
        edges = self.x_edges
        n_columns = edges.size - 1
        half_cell = 0.5 * abs(float(edges[-1] - edges[0])) / n_columns
        for count in (n_columns, n_columns - 1):
            if count >= 1 and abs(abs(float(edges[count] - edges[0])) - turn) <= half_cell:
                return count
        return None

    @property
    def bounds(self) -> tuple[float, float, float, float]:
        """(xmin, ymin, xmax, ymax) of the grid. [CRS units]"""
        return (
            float(self.x_edges.min()),
            float(self.y_edges.min()),
            float(self.x_edges.max()),
            float(self.y_edges.max()),
        )

    def centre_latitudes(self) -> np.ndarray:
        """Latitude of every cell centre on the WGS84 ellipsoid; NaN where PROJ has none.

        Returns
        -------
        numpy.ndarray
            float64, shape :attr:`shape`, in stored order. [degrees north]
        """
        x = 0.5 * (self.x_edges[:-1] + self.x_edges[1:])
        y = 0.5 * (self.y_edges[:-1] + self.y_edges[1:])
        xx, yy = np.meshgrid(x, y)
        to_lonlat = Transformer.from_crs(self.crs, CRS.from_epsg(4326), always_xy=True)
        _, lat = to_lonlat.transform(xx, yy, errcheck=False)
        lat = np.asarray(lat, dtype=np.float64)
        return np.where(np.isfinite(lat) & (np.abs(lat) <= 90.0), lat, np.nan)

    def key(self) -> str:
        """Stable sha256 hex digest of the CRS, the cell edges and whether x wraps.

        The wrap is part of the key so that weights cached before global grids wrapped
        (cut at the seam) are never taken for weights of a wrapping grid.
        """
        digest = hashlib.sha256()
        digest.update(self.crs.to_wkt().encode())
        digest.update(np.ascontiguousarray(self.x_edges, dtype="<f8").tobytes())
        digest.update(b"|")
        digest.update(np.ascontiguousarray(self.y_edges, dtype="<f8").tobytes())
        if self.wraps_longitude:
            digest.update(b"|wraps-longitude")
        return digest.hexdigest()


def _authalic_band(sin_lat: np.ndarray, e: float) -> np.ndarray:
    """q(φ)/2 of the authalic latitude: area from the equator per radian of longitude / a²(1-e²)."""
    if e == 0.0:
        return sin_lat
    es = e * sin_lat
    return sin_lat / (1.0 - es * es) + np.log((1.0 - es) / (1.0 + es)) / (-2.0 * e)


def geographic_cell_area(lat_lo, lat_hi, width_deg, crs: CRS) -> np.ndarray:
    """Ellipsoidal area of cells bounded by two parallels and two meridians.

    Parameters
    ----------
    lat_lo, lat_hi : array_like
        Latitudes of the two bounding parallels, either order. [degrees]
    width_deg : array_like
        Cell width in longitude. [degrees]
    crs : pyproj.CRS
        Geographic CRS whose ellipsoid is used.

    Returns
    -------
    numpy.ndarray
        Area of each cell, positive. [m2]

    Notes
    -----
    The area between the equator and latitude φ over Δλ radians of longitude on an ellipsoid
    of semi-major axis a and eccentricity e is a²(1 - e²) Δλ q(φ)/2 with
    q(φ)/2 = sinφ / (2(1 - e² sin²φ)) + ln((1 + e sinφ)/(1 - e sinφ)) / (4e),
    the authalic-latitude integral (Snyder 1987, eq. 3-12; checked against
    pyproj's geodesic area in the tests).
    """
    ellipsoid = crs.ellipsoid
    if ellipsoid is None:
        raise GridError(
            f"grid CRS {crs.name!r} has no ellipsoid; expected a geographic CRS on a datum; "
            "give the grid a full CRS such as EPSG:4326"
        )
    a = ellipsoid.semi_major_metre
    inv_f = ellipsoid.inverse_flattening
    flattening = 0.0 if not np.isfinite(inv_f) or inv_f == 0 else 1.0 / inv_f
    e = float(np.sqrt(flattening * (2.0 - flattening)))
    q_lo = _authalic_band(np.sin(np.radians(lat_lo)), e)
    q_hi = _authalic_band(np.sin(np.radians(lat_hi)), e)
    return 0.5 * np.abs(q_hi - q_lo) * a * a * (1.0 - e * e) * np.radians(np.abs(width_deg))


def cell_true_area(grid: GridSpec, rows: np.ndarray, cols: np.ndarray) -> np.ndarray:
    """True (ellipsoidal) area of the given cells of a grid.

    Parameters
    ----------
    grid : GridSpec
        The grid.
    rows, cols : numpy.ndarray of int
        Stored row and column of each cell.

    Returns
    -------
    numpy.ndarray
        Area of each cell. [m2]

    Notes
    -----
    Geographic grids use the closed-form band area. Projected grids divide the planar cell
    area by the areal scale factor of the projection at the cell centre (PROJ factors), a
    midpoint rule whose error is second order in cell size over earth radius.
    """
    x_edges, y_edges = grid.x_edges, grid.y_edges
    width = x_edges[cols + 1] - x_edges[cols]
    if grid.is_geographic:
        return geographic_cell_area(y_edges[rows], y_edges[rows + 1], width, grid.crs)
    height = y_edges[rows + 1] - y_edges[rows]
    unit = grid.crs.axis_info[0].unit_conversion_factor if grid.crs.axis_info else 1.0
    planar = np.abs(width * height) * unit * unit
    x_mid = 0.5 * (x_edges[cols + 1] + x_edges[cols])
    y_mid = 0.5 * (y_edges[rows + 1] + y_edges[rows])
    to_lonlat = Transformer.from_crs(grid.crs, grid.crs.geodetic_crs, always_xy=True)
    lon, lat = to_lonlat.transform(x_mid, y_mid)
    scale = Proj(grid.crs).get_factors(lon, lat).areal_scale
    return planar / np.asarray(scale, dtype=np.float64)
