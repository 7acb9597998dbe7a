"""The per-step series of a run (series.nc), streamed to a temporary file block by block."""

from __future__ import annotations

import atexit
import shutil
import tempfile
from collections.abc import Mapping
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from lakeloss import __version__
from lakeloss.config import RunConfig
from lakeloss.inputs import Inputs
from lakeloss.io.run_record import CAUTION
from lakeloss.sizing import block_steps

if TYPE_CHECKING:
    import xarray as xr

SERIES_VARIABLES: dict[str, dict[str, str]] = {
    # CF's lwe_water_evaporation_rate (canonical m s-1) is evaporation as a depth of liquid
    # water per time; CF accepts any units convertible to the canonical ones, so mm day-1.
    "evaporation_rate": {
        "units": "mm day-1",
        "long_name": "open-water evaporation rate from the water surface, primary method",
        "standard_name": "lwe_water_evaporation_rate",
    },
    "precipitation_rate": {
        "units": "mm day-1",
        "long_name": "precipitation rate on the water surface",
        "standard_name": "lwe_precipitation_rate",
    },
}
"""Per-step series variables (series.nc) and their CF attributes."""


def series_history(config: RunConfig) -> str:
    """CF ``history`` line of series.nc: when and by what the file was made."""
    stamp = datetime.now(UTC).isoformat(timespec="seconds")
    return f"{stamp} lakeloss {__version__}, method {config.method.name}"


@dataclass(frozen=True)
class SeriesSettings:
    """What every partition's series file of one run shares, so the files join into one."""

    history: str
    chunk_times: int

    @classmethod
    def of(cls, config: RunConfig, inputs: Inputs) -> SeriesSettings:
        return cls(series_history(config), block_steps(config, inputs))


class SeriesStream:
    """Streams one partition's per-step rates into a CF NetCDF file, block by block.

    The whole (time, water body) array is never held: each block goes to disk as it is
    merged. The files of a run's partitions are joined into series.nc by
    :func:`lakeloss.io.series_join.join_series`.
    """

    def __init__(
        self, config: RunConfig, inputs: Inputs, path: Path, settings: SeriesSettings
    ) -> None:
        from lakeloss.io.series import SeriesWriter, body_locations

        self.path = path
        names = ["evaporation_rate"] + (
            ["precipitation_rate"] if "precipitation" in inputs.fields else []
        )
        longitude, latitude = body_locations(inputs.bodies.frame.geometry)
        self.writer = SeriesWriter(
            self.path,
            waterbody_ids=inputs.bodies.frame[inputs.bodies.id_field].to_numpy(),
            times=inputs.axis.times,
            calendar=inputs.axis.calendar,
            variables={name: SERIES_VARIABLES[name] for name in names},
            global_attrs={
                "title": "lakeloss per-step evaporation series",
                "source": f"lakeloss, method {config.method.name}",
                "comment": CAUTION,
                "history": settings.history,
            },
            chunk_times=settings.chunk_times,
            longitude=longitude,
            latitude=latitude,
        )

    def add(self, block: slice, values: Mapping[str, np.ndarray]) -> None:
        for name, value in values.items():
            self.writer.write(name, block, np.asarray(value, dtype=np.float32))

    def close(self) -> Path:
        """Finish the file; its path."""
        self.writer.close()
        return self.path


def temporary_directory() -> Path:
    """A directory for series files, removed when the process exits."""
    directory = Path(tempfile.mkdtemp(prefix="lakeloss-series-"))
    atexit.register(shutil.rmtree, directory, ignore_errors=True)
    return directory


def open_series(path: Path) -> xr.Dataset:
    """series.nc opened lazily, with the run's calendar dates."""
    import xarray as xr

    coder = xr.coders.CFDatetimeCoder(use_cftime=True)
    return xr.open_dataset(path, engine="netcdf4", chunks={}, decode_times=coder)
