"""On-disk cache of zonal weights keyed by layer geometry, layer CRS and grid."""

from __future__ import annotations

import hashlib
import logging
from pathlib import Path

import geopandas as gpd
import numpy as np
import shapely

from lakeloss.errors import InputDataError
from lakeloss.zonal import build as _build
from lakeloss.zonal import weights as _weights
from lakeloss.zonal.geometry import check_layer
from lakeloss.zonal.grid import GridSpec

logger = logging.getLogger(__name__)

# Geometries are hashed in slices so the WKB of a million polygons never sits in memory at once.
_HASH_SLICE = 100_000


def geometry_digest(polygons: gpd.GeoDataFrame) -> str:
    """sha256 of the layer's geometries as little-endian WKB, in order.

    The part of :func:`layer_key` that reads every vertex; compute it once per layer when
    several grids need keys. A missing geometry counts by its position (length -1).
    """
    digest = hashlib.sha256()
    geometry = np.asarray(polygons.geometry.array, dtype=object)
    for start in range(0, geometry.size, _HASH_SLICE):
        chunk = shapely.to_wkb(geometry[start : start + _HASH_SLICE], byte_order=1)
        missing = shapely.is_missing(chunk)
        chunk[missing] = b""
        lengths = np.fromiter(map(len, chunk), dtype="<i8", count=chunk.size)
        lengths[missing] = -1
        digest.update(lengths.tobytes())
        digest.update(b"".join(chunk))
    return digest.hexdigest()


def layer_key(
    polygons: gpd.GeoDataFrame,
    grid: GridSpec,
    *,
    geometry: str | None = None,
    bounds: tuple[float, float, float, float] | None = None,
) -> str:
    """sha256 of the layer's geometries (WKB, in order), its CRS, the grid key and bounds.

    Parameters
    ----------
    polygons : geopandas.GeoDataFrame
        Water bodies.
    grid : GridSpec
        Climate grid.
    geometry : str, optional
        :func:`geometry_digest` of ``polygons``, when the caller already has it.
    bounds : tuple of float, optional
        The whole layer's bounds the weights are built with (see
        :func:`lakeloss.zonal.build_weights`); they enter the key as float64 bytes, since
        the same rows built with other bounds may differ in the last bits.

    Returns
    -------
    str
        Hex digest; equal for the same geometries, CRS, grid, bounds and save format.
    """
    crs = check_layer(polygons)
    digest = hashlib.sha256()
    digest.update(f"lakeloss-weights-v{_weights.SAVE_FORMAT_VERSION}|".encode())
    digest.update(crs.to_wkt().encode())
    digest.update(grid.key().encode())
    digest.update((geometry or geometry_digest(polygons)).encode())
    if bounds is not None:
        digest.update(b"|bounds|" + np.asarray(bounds, dtype="<f8").tobytes())
    return digest.hexdigest()


class WeightsCache:
    """A directory of saved :class:`ZonalWeights`, one ``.npz`` file per layer and grid.

    Parameters
    ----------
    directory : pathlib.Path
        Where entries live; created on first write.
    """

    def __init__(self, directory: Path) -> None:
        self.directory = Path(directory)

    def path_for(self, key: str) -> Path:
        """File of the entry with this key."""
        return self.directory / f"weights-{key}.npz"

    def get_or_build(
        self,
        polygons: gpd.GeoDataFrame,
        grid: GridSpec,
        *,
        reprojected=None,
        builder=None,
        key: str | None = None,
        bounds: tuple[float, float, float, float] | None = None,
    ) -> tuple[_weights.ZonalWeights, bool]:
        """Load the weights of this layer and grid, or build and store them.

        Parameters
        ----------
        polygons : geopandas.GeoDataFrame
            Water bodies.
        grid : GridSpec
            Climate grid.
        reprojected : geopandas.GeoSeries, optional
            Passed on to :func:`lakeloss.zonal.build_weights` when building.
        builder : callable, optional
            ``builder(polygons, grid)`` returning ZonalWeights, used instead of
            :func:`lakeloss.zonal.build_weights` (e.g. the partitioned build of
            :mod:`lakeloss.zonal.partition` for very large layers).
        key : str, optional
            :func:`layer_key` of ``polygons``, ``grid`` and ``bounds``, when the caller
            already has it.
        bounds : tuple of float, optional
            The whole layer's bounds when ``polygons`` are some of its rows: part of the
            key, and passed on to the build (to ``builder`` as ``bounds=`` when given).

        Returns
        -------
        weights : ZonalWeights
            The weights.
        loaded : bool
            True when they came from the cache. An unreadable or mismatching entry is
            rebuilt and overwritten, never trusted.
        """
        path = self.path_for(key or layer_key(polygons, grid, bounds=bounds))
        if path.exists():
            cached = self._read(path, grid, len(polygons))
            if cached is not None:
                return cached, True
        if builder is not None:
            built = builder(polygons, grid, **({} if bounds is None else {"bounds": bounds}))
        else:
            built = _build.build_weights(polygons, grid, reprojected=reprojected, bounds=bounds)
        built.save(path)
        return built, False

    @staticmethod
    def _read(path: Path, grid: GridSpec, n_waterbodies: int) -> _weights.ZonalWeights | None:
        try:
            cached = _weights.ZonalWeights.load(path)
        except InputDataError as exc:
            logger.warning("rebuilding weights: %s", exc)
            return None
        if cached.grid_key != grid.key() or cached.n_waterbodies != n_waterbodies:
            logger.warning("rebuilding weights: cache entry %s does not match the layer", path)
            return None
        return cached
