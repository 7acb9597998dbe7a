"""The per-step series of a run (series.nc), streamed to a temporary file block by block."""

from __future__ import annotations

import atexit
import shutil
import tempfile
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np

from lakeloss.config import RunConfig
from lakeloss.inputs import Inputs
from lakeloss.sizing import block_steps


class SeriesStream:
    """Streams per-step rates into a temporary CF NetCDF file, block by block.

    The whole (time, water body) array is never held: each block goes to disk as it is
    merged, and the result's ``series`` is the file opened lazily. ``RunResult.write`` copies
    it into the outputs; the temporary directory is removed when the process exits.
    """

    def __init__(self, config: RunConfig, inputs: Inputs) -> None:
        from lakeloss.io.series import SeriesWriter, body_locations
        from lakeloss.results import CAUTION, SERIES_VARIABLES, series_history

        self.directory = Path(tempfile.mkdtemp(prefix="lakeloss-series-"))
        atexit.register(shutil.rmtree, self.directory, ignore_errors=True)
        self.path = self.directory / "series.nc"
        names = ["evaporation_rate"] + (
            ["precipitation_rate"] if "precipitation" in inputs.fields else []
        )
        longitude, latitude = body_locations(inputs.layer.frame.geometry)
        self.writer = SeriesWriter(
            self.path,
            waterbody_ids=inputs.layer.frame[inputs.layer.id_field].to_numpy(),
            times=inputs.axis.times,
            calendar=inputs.axis.calendar,
            variables={name: SERIES_VARIABLES[name] for name in names},
            global_attrs={
                "title": "lakeloss per-step evaporation series",
                "source": f"lakeloss, method {config.method.name}",
                "comment": CAUTION,
                "history": series_history(config),
            },
            chunk_times=block_steps(config, inputs),
            longitude=longitude,
            latitude=latitude,
        )

    def add(self, block: slice, values: Mapping[str, np.ndarray]) -> None:
        for name, value in values.items():
            self.writer.write(name, block, np.asarray(value, dtype=np.float32))

    def dataset(self) -> Any:
        import xarray as xr

        self.writer.close()
        coder = xr.coders.CFDatetimeCoder(use_cftime=True)
        return xr.open_dataset(self.path, engine="netcdf4", chunks={}, decode_times=coder)
