"""What run.json records about a run: the settings as written and as used, every input with
its digest, the versions of the libraries, and the run's counts, warnings and timings.

The counts and the warnings come from the pipeline; this module only shapes them into the
record, so that the record's layout has one home. It reads files (the digests) but knows
nothing of the pipeline.
"""

from __future__ import annotations

import hashlib
import importlib.metadata
import platform
from collections.abc import Mapping
from datetime import UTC, datetime
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from lakeloss import __version__
from lakeloss.config import RunConfig
from lakeloss.io import multifile
from lakeloss.physics import registry

if TYPE_CHECKING:
    from lakeloss.gaps import GapReport

CAUTION = (
    "Estimates for screening and water accounting only; not for design, licensing, "
    "allocation or dam-safety decisions. Defer to local codes, the regulator and licensed "
    "professional practice."
)


def run_record(
    config: RunConfig,
    *,
    time_axis: str,
    counts: Mapping[str, Any],
    gaps: GapReport | None,
    weights_cached: bool,
    run_warnings: list[str],
    timings: Mapping[str, float],
    inputs_record: list[dict[str, Any]] | None = None,
) -> dict[str, Any]:
    """run.json's content (also the GeoPackage's metadata), in its documented key order.

    ``inputs_record`` is :func:`inputs_provenance`'s result when the caller already has it
    (the pipeline hashes the inputs in a background thread while it computes); ``gaps`` the
    :class:`lakeloss.gaps.GapReport` of the run, or None.
    """
    return {
        "lakeloss_version": __version__,
        "created": datetime.now(UTC).isoformat(timespec="seconds"),
        "caution": CAUTION,
        "config": _jsonable(config.source),
        "inputs": inputs_provenance(config) if inputs_record is None else inputs_record,
        "versions": _versions(),
        "method": {
            "primary": config.method.name,
            "compare": list(config.method.compare),
            "parameters": _jsonable(_parameters_as_written(config)),
            "effective_parameters": _jsonable(effective_parameters(config)),
        },
        "notes": run_notes(config),
        "time_axis": time_axis,
        "counts": dict(counts),
        "climate_gaps": _gaps_record(gaps),
        "weights_from_cache": bool(weights_cached),
        "warnings": list(run_warnings),
        "timings_s": {k: round(v, 3) for k, v in timings.items()},
    }


def inputs_provenance(config: RunConfig) -> list[dict[str, Any]]:
    """Every input file with its sha256 (for run.json); each file is read once."""
    digests: dict[Path, str | None] = {}  # one read per file: variables often share one

    def sha256(path: Path) -> str | None:
        if path not in digests:
            digests[path] = sha256_of(path)
        return digests[path]

    items = [
        {
            "role": "waterbodies",
            "path": str(config.waterbodies.path),
            "sha256": sha256(config.waterbodies.path),
        }
    ]
    for item in config.climate:
        entry: dict[str, Any] = {
            "role": item.key,
            "path": [str(p) for p in item.path] if isinstance(item.path, tuple) else str(item.path),
            "variable": item.variable,
        }
        if isinstance(item.path, tuple) or multifile.several(item.path):
            # A list or glob: every file it named when the run read it, each with its digest.
            entry["sha256"] = None
            entry["files"] = [
                {"path": str(f), "sha256": sha256(f)} for f in multifile.expand(item.path)
            ]
        else:
            entry["sha256"] = sha256(item.path)
        items.append(entry)
    return items


def _per_body_sources(config: RunConfig) -> dict[str, str]:
    # As the pipeline reads them: a raster elevation replaces an attribute's.
    sources = {}
    if config.waterbodies.elevation_field:
        sources["elevation"] = "field"
    if any(item.quantity == "elevation" for item in config.climate):
        sources["elevation"] = "raster"
    return sources


def effective_parameters(config: RunConfig) -> dict[str, dict[str, Any]]:
    """Every parameter the run used, with its value, unit, source and methods (run.json)."""

    used = registry.effective_parameters(
        config.method.all, config.parameters, _per_body_sources(config)
    )
    written = config.source.get("parameters", {})
    used["clip_negative"] = {
        "value": config.clip_negative,
        "unit": "1",
        "source": "config" if "clip_negative" in written else "default",
        "methods": list(config.method.all),
    }
    return used


def _parameters_as_written(config: RunConfig) -> dict[str, object]:
    """``[parameters]`` with its defaults filled in: the pipeline's switches, then physics."""
    return {"clip_negative": config.clip_negative, **config.parameters}


def run_notes(config: RunConfig) -> list[str]:
    """Assumptions the run made from defaults, one sentence each (run.json and stderr)."""

    available = [*config.quantities, *_per_body_sources(config)]
    return registry.assumption_notes(config.method.all, config.parameters, available)


def sha256_of(path: Path) -> str | None:
    """sha256 hex digest of a file, or of a store (Zarr) folder: its files' relative names and
    contents in name order; None when it cannot be read."""
    path = Path(path)
    members = sorted(p for p in path.rglob("*") if p.is_file()) if path.is_dir() else []
    try:
        if not members:
            with open(path, "rb") as handle:
                return hashlib.file_digest(handle, "sha256").hexdigest()
        digest = hashlib.sha256()
        for member in members:
            digest.update(member.relative_to(path).as_posix().encode() + b"\0")
            with open(member, "rb") as handle:
                digest.update(hashlib.file_digest(handle, "sha256").digest())
        return digest.hexdigest()
    except OSError:
        return None


def _versions() -> dict[str, str]:
    names = [
        "lakeloss",
        "numpy",
        "scipy",
        "pandas",
        "geopandas",
        "shapely",
        "pyogrio",
        "pyproj",
        "rasterio",
        "xarray",
        "netCDF4",
        "pint",
        "dask",
    ]
    out = {}
    for name in names:
        try:
            out[name] = importlib.metadata.version(name)
        except importlib.metadata.PackageNotFoundError:
            out[name] = "not installed"
    out["python"] = platform.python_version()
    return out


def _gaps_record(gaps: GapReport | None) -> dict[str, Any] | None:
    """run.json's ``climate_gaps``: per variable, the steps filled and the steps left out."""
    if gaps is None:
        return {"filled": {}, "not_filled": {}}
    return {
        "max_gap_steps": gaps.limit,
        "filled": _jsonable(gaps.filled),
        "not_filled": _jsonable(gaps.long),
    }


def _jsonable(value: Any) -> Any:
    if isinstance(value, Mapping):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_jsonable(v) for v in value]
    if isinstance(value, Path):
        return str(value)
    if isinstance(value, np.generic):
        return value.item()
    return value
