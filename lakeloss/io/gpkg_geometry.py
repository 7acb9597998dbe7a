"""SQL functions of GeoPackage geometry blobs, for plain SQLite connections.

GDAL's R-tree triggers on a feature table call ``ST_IsEmpty`` and ``ST_MinX`` ... ``ST_MaxY``
(GeoPackage 1.2, Annex F.3), which only GDAL's own connections define. SQLite refuses an
UPDATE of any column of such a table when a trigger that may fire names a function it does
not know, so a plain connection that updates features registers these first.
"""

from __future__ import annotations

import sqlite3
import struct
from collections.abc import Callable

import shapely

# GeoPackage geometry header (GeoPackage 1.2, clause 2.1.3): envelope size by indicator.
_ENVELOPE_BYTES = {0: 0, 1: 32, 2: 48, 3: 48, 4: 64}


def add_geometry_functions(con: sqlite3.Connection) -> None:
    """Define the functions the R-tree triggers call on ``con``.

    They read the GeoPackage geometry blob: the empty flag and envelope of its header, else
    the bounds of its WKB body.
    """
    con.create_function("ST_IsEmpty", 1, _is_empty, deterministic=True)
    for name, position in (("ST_MinX", 0), ("ST_MaxX", 2), ("ST_MinY", 1), ("ST_MaxY", 3)):
        con.create_function(name, 1, _bound(position), deterministic=True)


def _is_empty(blob: bytes | None) -> int | None:
    if blob is None:
        return None
    return 1 if blob[3] & 0b10000 else 0


def _bound(position: int) -> Callable[[bytes | None], float | None]:
    """One of the bounds (xmin, ymin, xmax, ymax) of a GeoPackage geometry blob."""

    def bound(blob: bytes | None) -> float | None:
        if blob is None or _is_empty(blob):
            return None
        flags = blob[3]
        indicator = (flags >> 1) & 0b111
        if indicator:
            order = "<" if flags & 1 else ">"
            xmin, xmax, ymin, ymax = struct.unpack_from(order + "4d", blob, 8)
            return (xmin, ymin, xmax, ymax)[position]
        bounds = shapely.from_wkb(bytes(blob[8 + _ENVELOPE_BYTES[indicator] :])).bounds
        return float(bounds[position])

    return bound
