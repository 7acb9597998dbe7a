"""Shared fixtures; the file builders themselves live in builders.py."""

from __future__ import annotations

import pandas as pd
import pytest
from builders import (
    CHOW_CLIMATE,
    CHOW_FIELDS,
    case_config,
    climate_dataset,
    pond_layer,
    write_netcdf,
)


@pytest.fixture
def make_case(tmp_path):
    """Factory: write layer + climate into tmp_path and return the config mapping."""

    def make(
        method: str = "energy_balance",
        fields: dict | None = None,
        climate: dict[str, str] | None = None,
        times=None,
        layer=None,
        **sections,
    ):
        layer = pond_layer() if layer is None else layer
        layer_path = tmp_path / "ponds.gpkg"
        layer.to_file(layer_path, layer="ponds", driver="GPKG")
        times = pd.date_range("2031-01-01", periods=59, freq="D") if times is None else times
        ds = climate_dataset(times, CHOW_FIELDS if fields is None else fields)
        climate_path = write_netcdf(ds, tmp_path / "climate.nc")
        return case_config(
            layer_path,
            climate_path,
            tmp_path / "out",
            method,
            CHOW_CLIMATE if climate is None else climate,
            **sections,
        )

    return make
