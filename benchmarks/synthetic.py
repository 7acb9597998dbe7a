"""Synthetic pond layers for benchmarks: an invented landscape of farm dams and reservoirs.

Ponds are irregular star-shaped polygons with log-uniform areas (0.1 to 50 ha by default),
scattered uniformly over a lat/lon box (slightly wider than the benchmark grid, so a few hang
over its edge). A few 10 to 100 km2 reservoirs with islands are mixed in. Everything is laid
out in an Albers equal-area CRS centred on the box; nothing refers to a real place.

Layers are cached under ``benchmarks/_cache/`` as shapely ragged arrays in ``.npz`` files, so
the end-to-end benchmark can reuse them without regenerating.

Usage: ``python benchmarks/synthetic.py 100000`` writes (or reuses) the 10^5-pond layer;
``python benchmarks/synthetic.py 10000000 --geoparquet`` writes (or reuses) a 10^7-pond layer
as GeoParquet, generated in chunks of 10^6 ponds (:func:`layer_chunks`).
"""

from __future__ import annotations

import argparse
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path

import geopandas as gpd
import numpy as np
import shapely
from pyproj import CRS, Transformer

CACHE = Path(__file__).resolve().parent / "_cache"

#: The lat/lon box the ponds are scattered over (west, south, east, north). [degrees]
REGION = (20.0, -35.0, 40.0, -15.0)

#: Albers equal-area CRS of the layers, centred on REGION.
LAYER_CRS = CRS.from_proj4(
    "+proj=aea +lat_0=-25 +lon_0=30 +lat_1=-20 +lat_2=-30 +ellps=WGS84 +units=m +no_defs"
)

_POND_VERTICES = 16
_RESERVOIR_VERTICES = 360


def _pond_rings(centres: np.ndarray, area_m2: np.ndarray, rng: np.random.Generator):
    """Closed star-shaped rings (n, vertices + 1, 2) of roughly the given areas. [m]"""
    n = centres.shape[0]
    base = np.linspace(0.0, 2 * np.pi, _POND_VERTICES, endpoint=False)
    angle = base + rng.uniform(0, 2 * np.pi / _POND_VERTICES, (n, _POND_VERTICES)) * 0.8
    wobble = rng.uniform(0.7, 1.0, (n, _POND_VERTICES))
    # a regular 16-gon of radius r has area 0.5 * 16 * r² sin(2π/16); scale for the wobble
    radius = np.sqrt(area_m2 / (8 * np.sin(2 * np.pi / _POND_VERTICES) * 0.72))
    r = radius[:, None] * wobble
    ring = np.stack(
        [centres[:, :1] + r * np.cos(angle), centres[:, 1:] + r * np.sin(angle)], axis=-1
    )
    return np.concatenate([ring, ring[:, :1]], axis=1)


def _reservoir(centre: np.ndarray, area_m2: float, rng: np.random.Generator):
    """A lobed reservoir with two or three islands. [m]"""
    angle = np.linspace(0, 2 * np.pi, _RESERVOIR_VERTICES, endpoint=False)
    lobes = rng.integers(3, 7)
    shape = 1 + 0.3 * np.sin(lobes * angle + rng.uniform(0, 6)) + 0.08 * np.sin(11 * angle)
    radius = np.sqrt(area_m2 / np.pi / np.mean(shape**2))
    outer = centre + np.column_stack([np.cos(angle), np.sin(angle)]) * (radius * shape)[:, None]
    islands = []
    for k in range(rng.integers(2, 4)):
        offset = 0.4 * radius * np.array([np.cos(2.1 * k + 0.3), np.sin(2.1 * k + 0.3)])
        island = shapely.Point(centre + offset).buffer(0.08 * radius, quad_segs=6)
        islands.append(np.asarray(island.exterior.coords))
    return shapely.Polygon(outer, islands)


def make_layer(n_ponds: int, seed: int = 0, n_reservoirs: int | None = None) -> gpd.GeoDataFrame:
    """Generate a layer of ``n_ponds`` ponds plus a few reservoirs.

    Parameters
    ----------
    n_ponds : int
        Number of small ponds.
    seed : int
        Random seed.
    n_reservoirs : int, optional
        Number of 10-100 km2 reservoirs with islands; default ``max(3, n_ponds // 20000)``.

    Returns
    -------
    geopandas.GeoDataFrame
        Columns ``pond_id`` (str) and ``geometry`` in :data:`LAYER_CRS`.
    """
    rng = np.random.default_rng(seed)
    west, south, east, north = REGION
    margin = 0.01  # degrees: lets a few ponds hang over the grid's edge
    lon = rng.uniform(west - margin, east + margin, n_ponds)
    lat = rng.uniform(south - margin, north + margin, n_ponds)
    to_layer = Transformer.from_crs(4326, LAYER_CRS, always_xy=True)
    centres = np.column_stack(to_layer.transform(lon, lat))
    area_m2 = 10 ** rng.uniform(3.0, np.log10(5e5), n_ponds)  # 0.1 ha .. 50 ha, log-uniform
    ponds = shapely.polygons(_pond_rings(centres, area_m2, rng))
    n_res = max(3, n_ponds // 20000) if n_reservoirs is None else n_reservoirs
    res_lon = rng.uniform(west + 1, east - 1, n_res)
    res_lat = rng.uniform(south + 1, north - 1, n_res)
    res_centres = np.column_stack(to_layer.transform(res_lon, res_lat))
    res_area = 10 ** rng.uniform(7.0, 8.0, n_res)  # 10 .. 100 km2
    reservoirs = [_reservoir(c, a, rng) for c, a in zip(res_centres, res_area, strict=True)]
    geometry = np.concatenate([ponds, np.array(reservoirs, dtype=object)])
    order = rng.permutation(geometry.size)  # reservoirs anywhere in the layer, not at the end
    ids = np.char.add("P", np.arange(geometry.size).astype(str))
    return gpd.GeoDataFrame({"pond_id": ids}, geometry=geometry[order], crs=LAYER_CRS)


def cached_layer(n_ponds: int, seed: int = 0) -> gpd.GeoDataFrame:
    """The layer of :func:`make_layer`, read from ``benchmarks/_cache`` or generated there."""
    path = CACHE / f"ponds-{n_ponds}-seed{seed}.npz"
    if path.exists():
        with np.load(path, allow_pickle=False) as stored:
            offsets = tuple(stored[f"offsets{i}"] for i in range(int(stored["n_offsets"])))
            geometry = shapely.from_ragged_array(
                shapely.GeometryType.POLYGON, stored["coords"], offsets
            )
            ids = stored["pond_id"]
        return gpd.GeoDataFrame({"pond_id": ids}, geometry=geometry, crs=LAYER_CRS)
    layer = make_layer(n_ponds, seed)
    kind, coords, offsets = shapely.to_ragged_array(layer.geometry.array)
    assert kind == shapely.GeometryType.POLYGON
    CACHE.mkdir(parents=True, exist_ok=True)
    handle, temp = tempfile.mkstemp(dir=CACHE, suffix=".part")
    with os.fdopen(handle, "wb") as stream:
        arrays = {f"offsets{i}": o for i, o in enumerate(offsets)}
        np.savez(
            stream,
            coords=coords,
            n_offsets=len(offsets),
            pond_id=layer["pond_id"].to_numpy(dtype=str),
            **arrays,
        )
    os.replace(temp, path)
    return layer


def layer_chunks(
    n_ponds: int, chunk_ponds: int = 1_000_000, seed: int = 0
) -> Iterator[gpd.GeoDataFrame]:
    """The layer of ``n_ponds`` ponds as :func:`make_layer` frames of ``chunk_ponds`` ponds.

    Each chunk is generated on its own (its own seed, derived from ``seed`` and the chunk's
    index), so memory stays that of one chunk whatever ``n_ponds`` is. The reservoirs
    (``max(3, n_ponds // 20000)`` over the whole layer) are shared out over the chunks, and
    the ids ``P0``, ``P1``, ... run on from chunk to chunk, so they are unique. Every chunk
    covers the whole :data:`REGION` box.
    """
    n_chunks = -(-n_ponds // chunk_ponds)
    n_res = max(3, n_ponds // 20000)
    offset = 0
    for k in range(n_chunks):
        ponds = min(chunk_ponds, n_ponds - k * chunk_ponds)
        reservoirs = n_res // n_chunks + (k < n_res % n_chunks)
        chunk = make_layer(ponds, seed=1_000_003 * (seed + 1) + k, n_reservoirs=reservoirs)
        chunk["pond_id"] = np.char.add("P", np.arange(offset, offset + len(chunk)).astype(str))
        offset += len(chunk)
        yield chunk


def cached_geoparquet(
    n_ponds: int, seed: int = 0, row_group: int = 65_536, chunk_ponds: int = 1_000_000
) -> Path:
    """The layer of :func:`layer_chunks` as one GeoParquet file in ``benchmarks/_cache``.

    Written chunk by chunk (row groups of ``row_group`` rows), so generating 10^7 ponds needs
    the memory of one chunk. The file's GeoParquet metadata is the first chunk's without its
    ``bbox`` (optional in the GeoParquet specification, and a chunk's box is not the file's).
    """
    import json

    import pyarrow as pa
    import pyarrow.parquet as pq
    from geopandas.io.arrow import _geopandas_to_arrow

    path = CACHE / f"ponds-{n_ponds}-seed{seed}-rg{row_group}.parquet"
    if path.exists():
        return path
    CACHE.mkdir(parents=True, exist_ok=True)
    handle, temp = tempfile.mkstemp(dir=CACHE, suffix=".part")
    os.close(handle)
    writer = None
    rest = None  # rows of the last chunk that did not fill a row group
    try:
        for chunk in layer_chunks(n_ponds, chunk_ponds, seed):
            table = _geopandas_to_arrow(chunk, index=False, write_covering_bbox=False)
            del chunk
            if writer is None:
                geo = json.loads(table.schema.metadata[b"geo"])
                for column in geo["columns"].values():
                    column.pop("bbox", None)
                schema = table.schema.with_metadata({b"geo": json.dumps(geo).encode()})
                writer = pq.ParquetWriter(temp, schema)
            table = table.cast(schema)
            if rest is not None:
                table = pa.concat_tables([rest, table])
            full = len(table) // row_group * row_group
            writer.write_table(table.slice(0, full), row_group_size=row_group)
            rest = table.slice(full)
        if writer is not None:
            if rest is not None and len(rest):
                writer.write_table(rest, row_group_size=row_group)
            writer.close()
        os.replace(temp, path)
    finally:
        if os.path.exists(temp):
            os.unlink(temp)
    return path


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("n_ponds", type=int)
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument(
        "--geoparquet",
        action="store_true",
        help="write the layer chunk by chunk as GeoParquet (row groups of 65 536) and stop",
    )
    args = parser.parse_args()
    if args.geoparquet:
        print(cached_geoparquet(args.n_ponds, args.seed))
        return
    layer = cached_layer(args.n_ponds, args.seed)
    area_ha = layer.area.to_numpy() / 1e4
    print(
        f"{len(layer)} water bodies; area min {area_ha.min():.3g} ha, "
        f"median {np.median(area_ha):.3g} ha, max {area_ha.max():.4g} ha"
    )


if __name__ == "__main__":
    main()
