"""Opening a local Zarr store (format 2 or 3) as a dataset that reads like a CF NetCDF file.

The store is opened lazily: nothing but metadata is read until a block of time steps is asked
for, and each read decompresses only the store chunks it overlaps. Consolidated metadata is
used when the store has it (one read instead of one per array) and not asked for when it does
not, so neither kind of store is refused or warned about.
"""

from __future__ import annotations

import json
import os
import warnings
from pathlib import Path

import xarray as xr

from lakeloss.errors import InputDataError

# Files that mark a directory as a Zarr store: format 2 (group, array, attributes,
# consolidated metadata) and format 3 (one zarr.json per node).
_MARKERS = (".zgroup", ".zarray", ".zattrs", ".zmetadata", "zarr.json")

_OPEN_ERRORS = (OSError, ValueError, RuntimeError, KeyError, IndexError, TypeError)


def is_store(path) -> bool:
    """True when ``path`` is a Zarr store (a directory with Zarr metadata) or ends in .zarr."""
    source = Path(path)
    if source.suffix.lower() == ".zarr":
        return True
    return source.is_dir() and any((source / marker).is_file() for marker in _MARKERS)


def has_consolidated_metadata(path) -> bool:
    """True when the store holds consolidated metadata (``.zmetadata`` or in ``zarr.json``)."""
    source = Path(path)
    if (source / ".zmetadata").is_file():
        return True
    root = source / "zarr.json"
    if not root.is_file():
        return False
    try:
        return json.loads(root.read_text(encoding="utf-8")).get("consolidated_metadata") is not None
    except (OSError, ValueError, AttributeError):
        return False


def open_store(path) -> xr.Dataset:
    """Open a Zarr store lazily, times left encoded (as :func:`xarray.open_dataset` on NetCDF).

    Raises
    ------
    InputDataError
        The path does not exist, is not a Zarr store, or cannot be read.
    """
    source = Path(path)
    where = f"Zarr store {os.fspath(source)!r}"
    if not source.exists():
        raise InputDataError(
            f"{where} does not exist; expected a Zarr store (a folder); check the path in [climate]"
        )
    if not source.is_dir() or not any((source / marker).is_file() for marker in _MARKERS):
        raise InputDataError(
            f"{where} is not a Zarr store (no {', '.join(_MARKERS)} in it); expected a folder "
            'written as Zarr; check the path, or set format = "netcdf" for a NetCDF file'
        )
    try:
        with warnings.catch_warnings():
            # zarr notes that consolidated metadata is not yet part of the format 3 spec.
            warnings.filterwarnings("ignore", message=".*[Cc]onsolidated metadata.*")
            return xr.open_dataset(
                source,
                engine="zarr",
                consolidated=has_consolidated_metadata(source),
                decode_times=False,
                chunks=None,
            )
    except _OPEN_ERRORS as err:
        reason = " ".join(str(err).split()) or type(err).__name__
        raise InputDataError(
            f"{where} cannot be read ({reason}); expected a readable Zarr store; re-write it"
        ) from err
