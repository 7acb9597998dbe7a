"""Write a run's result as the documented set of output files, all or nothing.

Files (the names are a contract other tools rely on; see README, "Outputs"):
``waterbodies.gpkg`` (layer ``waterbodies`` and table ``evaporation_by_period``),
``summary_by_waterbody.csv``, ``summary_by_period.csv``, ``summary_by_group.csv`` (with
``group_by``), ``series.nc`` (with ``[output] series = true``) and ``run.json``.
"""

from __future__ import annotations

import shutil
from collections.abc import Callable, Collection
from pathlib import Path
from typing import TYPE_CHECKING, Any, Protocol

from lakeloss.io.atomic import OutputDirectory
from lakeloss.io.gpkg import FieldInfo, write_geopackage
from lakeloss.io.tables import write_csv, write_json
from lakeloss.progress import ProgressFactory

if TYPE_CHECKING:
    import geopandas as gpd
    import pandas as pd
    import xarray as xr


class RunTables(Protocol):
    """What the writer reads of a run's result (:class:`lakeloss.results.RunResult`).

    A protocol rather than the class itself: ``io/`` never imports the run.
    """

    waterbodies: gpd.GeoDataFrame
    by_period: pd.DataFrame
    summary_by_period: pd.DataFrame
    summary_by_group: pd.DataFrame | None
    series: xr.Dataset | None
    provenance: dict[str, Any]
    id_field: str
    field_info: dict[str, dict[str, FieldInfo]]


_DECIMALS = {
    "area_m2": 1,
    "area_before_repair_m2": 1,
    "evap_mm": 3,
    "evap_m3": 3,
    "evap_mm_per_year": 2,
    "precip_mm": 3,
    "net_mm": 3,
    "net_m3": 3,
    "climate_coverage": 4,
    "precip_m3": 3,
}


def _decimals(columns: Collection[str]) -> dict[str, int]:
    out = {c: d for c, d in _DECIMALS.items() if c in columns}
    for column in columns:
        if column.startswith(("evap_mm_", "evap_m3_")):  # compare methods, as evap_mm / m3
            out[column] = 3
        elif column.startswith(("evap_", "net_")) and column not in out:
            out[column] = 6
    return out


def _body_csv(result: RunTables) -> pd.DataFrame:
    table = result.waterbodies.drop(columns=result.waterbodies.geometry.name)
    columns = [result.id_field] + [c for c in table.columns if c != result.id_field]
    return table[columns].sort_values(["loss_rank"], kind="stable")


def _write_series(series: xr.Dataset, target: Path) -> None:
    """Copy the streamed series file when there is one, else write the Dataset."""
    source = series.encoding.get("source")
    if source and Path(source).is_file():
        shutil.copyfile(source, target)
    else:
        series.to_netcdf(target, engine="netcdf4")


def _files_to_write(result: RunTables) -> int:
    return 4 + (result.summary_by_group is not None) + (result.series is not None)


def write_result(
    result: RunTables, target: Path, *, overwrite: bool, progress: ProgressFactory | None = None
) -> Path:
    """Write ``result`` (a :class:`lakeloss.results.RunResult`) into ``target``.

    The CSVs and the series are written while the GeoPackage's attribute table is (by a child
    process when large, see :func:`~lakeloss.io.gpkg.write_geopackage`), after GDAL has
    written the feature layer: CSV formatting in a thread beside GDAL slowed both down by
    holding the GIL. Everything finishes (or fails) before the staging directory is
    committed or removed.
    ``progress(total, label)``, when given, returns a tqdm-like bar advanced per file.
    """
    bar = progress(_files_to_write(result), "writing") if progress else None

    def tick() -> None:
        if bar is not None:
            bar.update(1)

    with OutputDirectory(target, overwrite=overwrite) as staging:
        write_geopackage(
            staging / "waterbodies.gpkg",
            [("waterbodies", result.waterbodies), ("evaporation_by_period", result.by_period)],
            fields=result.field_info,
            metadata=result.provenance,
            alongside=lambda: _write_tables(result, staging, tick),
        )
        tick()
        write_json(staging / "run.json", result.provenance)
        tick()
    if bar is not None:
        bar.close()
    return Path(target)


def _write_tables(result: RunTables, staging: Path, tick: Callable[[], None]) -> None:
    """The CSVs and the optional series file; ``tick()`` after each file."""
    body = _body_csv(result)
    write_csv(staging / "summary_by_waterbody.csv", body, decimals=_decimals(body.columns))
    tick()
    write_csv(
        staging / "summary_by_period.csv",
        result.summary_by_period,
        decimals=_decimals(result.summary_by_period.columns),
    )
    tick()
    if result.summary_by_group is not None:
        write_csv(
            staging / "summary_by_group.csv",
            result.summary_by_group,
            decimals=_decimals(result.summary_by_group.columns),
        )
        tick()
    if result.series is not None:
        _write_series(result.series, staging / "series.nc")
        tick()
