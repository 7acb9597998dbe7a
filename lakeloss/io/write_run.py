"""Write a run's result as the documented set of output files, all or nothing.

Files (the names are a contract other tools rely on; see README, "Outputs"):
``waterbodies.gpkg`` (layer ``waterbodies`` and table ``evaporation_by_period``),
``summary_by_waterbody.csv``, ``summary_by_period.csv``, ``summary_by_group.csv`` (with
``group_by``), ``series.nc`` (with ``[output] series = true``) and ``run.json``.
"""

from __future__ import annotations

import shutil
from collections.abc import Callable, Collection, Mapping
from pathlib import Path
from typing import TYPE_CHECKING, Any, Protocol

import pyarrow

from lakeloss.errors import OutputError
from lakeloss.io.atomic import OutputDirectory
from lakeloss.io.geoparquet import finish_dataset
from lakeloss.io.gpkg import FieldInfo, GeoPackageStream, LayerGeometry
from lakeloss.io.parts import PARTS_DIRECTORY, read_part
from lakeloss.io.ranked_csv import RankedCsv
from lakeloss.io.tables import write_csv, write_json
from lakeloss.progress import ProgressFactory

if TYPE_CHECKING:
    import geopandas as gpd
    import pandas as pd
    import xarray as xr

LAYER = "waterbodies"
TABLE = "evaporation_by_period"
RANK = "loss_rank"
_SCRATCH = "_summary_rows"  # the summary's formatted rows until the ranks are known


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

    The whole run goes through :class:`OutputStream` as one part, so the files are those a
    run written partition by partition gives. ``progress(total, label)``, when given,
    returns a tqdm-like bar advanced per file.
    """
    bar = progress(_files_to_write(result), "writing") if progress else None

    def tick() -> None:
        if bar is not None:
            bar.update(1)

    with OutputDirectory(target, overwrite=overwrite) as staging:
        stream = OutputStream(
            staging, id_field=result.id_field, field_info=result.field_info, tick=tick
        )
        stream.add_tables(result.waterbodies, result.by_period)
        stream.finish(
            loss_rank=result.waterbodies[RANK].array,
            summary_by_period=result.summary_by_period,
            summary_by_group=result.summary_by_group,
            series=result.series,
            provenance=result.provenance,
        )
    if bar is not None:
        bar.close()
    return Path(target)


class OutputStream:
    """Write a run's outputs from its partitions' tables, one partition at a time.

    Created on the staging directory of an :class:`~lakeloss.io.atomic.OutputDirectory`;
    :meth:`add_part` (or :meth:`add_tables`) is called once per partition in partition order,
    then :meth:`finish` once with what is known only at the end. Only the current part's
    frames are held in memory: its features and rows are appended to the GeoPackage as it
    comes and its summary rows formatted into a scratch file (see
    :mod:`lakeloss.io.ranked_csv`), which is sorted by rank at the end. The files are those
    the whole tables would give, whatever the number of parts.

    A failure leaves files only in the staging directory, which the output directory removes.

    Parameters
    ----------
    staging : Path
        Directory the output files are written into.
    id_field : str
        Water-body id column (first column of ``summary_by_waterbody.csv``).
    field_info : mapping
        ``field_info[layer][column] -> FieldInfo`` for the GeoPackage.
    layer_geometry : LayerGeometry, optional
        Geometry type of the whole layer, ``LayerGeometry.of(layer.geometry)``: needed with
        more than one partition, since one partition's geometries may not show it (only
        polygons where others have multipolygons).
    tick : callable, optional
        Called after each file is complete (for a progress bar).
    layer_format : str, optional
        ``"geopackage"`` (default): ``waterbodies.gpkg``; ``"geoparquet"``: the
        GeoParquet datasets of :func:`lakeloss.io.geoparquet.finish_dataset` made from the
        part files (every partition must come through :meth:`add_part`).
    """

    def __init__(
        self,
        staging: Path,
        *,
        id_field: str,
        field_info: Mapping[str, Mapping[str, FieldInfo]],
        layer_geometry: LayerGeometry | None = None,
        tick: Callable[[], None] | None = None,
        layer_format: str = "geopackage",
    ) -> None:
        self.staging = Path(staging)
        self.id_field = id_field
        self._tick = tick or (lambda: None)
        self._field_info = field_info
        # GeoParquet: the dataset is made of the partitions' part files, at the end.
        self._parts: list[Path] | None = [] if layer_format == "geoparquet" else None
        self._geopackage = None
        if self._parts is None:
            self._geopackage = GeoPackageStream(
                self.staging / "waterbodies.gpkg",
                layer=LAYER,
                table=TABLE,
                fields=field_info,
                late_column=RANK,
                geometry=layer_geometry,
            )
        self._summary: RankedCsv | None = None

    def add_part(self, directory: Path) -> None:
        """Append the partition whose part files :func:`~lakeloss.io.parts.write_part` wrote.

        Raises
        ------
        OutputError
            If the part files cannot be read or are not laid out like the earlier parts'.
        """
        try:
            waterbodies, by_period = read_part(directory)
        except (OSError, ValueError, pyarrow.ArrowException) as exc:
            raise OutputError(
                f"cannot read the part files in {directory}: {_one_line(exc)}; expected the "
                "files of a finished partition (its computer may have failed while writing)"
            ) from exc
        try:
            self.add_tables(waterbodies, by_period)
        except ValueError as exc:
            raise OutputError(f"part {directory} does not fit the earlier parts: {exc}") from exc
        if self._parts is not None:
            self._parts.append(Path(directory))

    def add_tables(self, waterbodies: gpd.GeoDataFrame, by_period: pd.DataFrame) -> None:
        """Append one partition's tables (``loss_rank`` may be null; see :meth:`finish`)."""
        body = _body_table(waterbodies, self.id_field)
        if self._summary is None:
            self._summary = RankedCsv(
                self.staging / "summary_by_waterbody.csv",
                self.staging / _SCRATCH,
                rank=RANK,
                decimals=_decimals(body.columns),
            )
        summary = self._summary
        if self._geopackage is None:
            summary.add(body)
            return
        self._geopackage.append(waterbodies, by_period, alongside=lambda: summary.add(body))

    def finish(
        self,
        *,
        loss_rank: pd.arrays.IntegerArray,
        summary_by_period: pd.DataFrame,
        summary_by_group: pd.DataFrame | None,
        series: xr.Dataset | None,
        provenance: Mapping[str, Any],
    ) -> None:
        """Fill in the ranks and write the remaining files.

        Parameters
        ----------
        loss_rank : pandas.arrays.IntegerArray
            ``loss_rank`` of every water body in output (layer) order.
        summary_by_period, summary_by_group : pandas.DataFrame
            The totals tables (``summary_by_group`` None without ``group_by``).
        series : xarray.Dataset or None
            Per-step rates, copied from its file when it has one.
        provenance : mapping
            run.json and the GeoPackage's provenance.
        """
        if self._summary is None:
            raise ValueError("no partition was added; expected at least one")
        if self._geopackage is not None:
            self._geopackage.finish(metadata=provenance, late_values=loss_rank)
        else:
            assert self._parts is not None
            finish_dataset(
                self._parts,
                self.staging,
                loss_rank=loss_rank,
                field_info=self._field_info,
                provenance=dict(provenance),
            )
        self._tick()
        self._summary.finish(loss_rank)
        self._tick()
        for name, table in (
            ("summary_by_period.csv", summary_by_period),
            ("summary_by_group.csv", summary_by_group),
        ):
            if table is not None:
                write_csv(self.staging / name, table, decimals=_decimals(table.columns))
                self._tick()
        if series is not None:
            _write_series(series, self.staging / "series.nc")
            self._tick()
        write_json(self.staging / "run.json", provenance)
        self._tick()
        shutil.rmtree(self.staging / PARTS_DIRECTORY, ignore_errors=True)


def _body_table(waterbodies: gpd.GeoDataFrame, id_field: str) -> pd.DataFrame:
    """The rows of ``summary_by_waterbody.csv``: the layer without geometry, the id first."""
    table = waterbodies.drop(columns=waterbodies.geometry.name)
    return table[[id_field] + [c for c in table.columns if c != id_field]]


def _one_line(exc: BaseException) -> str:
    return " ".join(str(exc).split()) or type(exc).__name__
