"""Water-body layers in the formats GIS users hand over give the results a GeoPackage gives.

Each test writes the same layer (``builders.pond_layer``: ponds in UTM zone 55 south, one on
a cell corner, and a reservoir with an island; or a register of points with an area in
hectares) as a GeoPackage and in one other format through pyogrio, the way a desktop GIS
exports it, runs both on the same climate, and compares the bodies' results. FlatGeobuf
stores the coordinates as doubles, so the results are equal to the last bit; GeoJSON writes
15 significant digits (GDAL's default), so areas and depths agree to about 1e-12. A File
Geodatabase (OpenFileGDB, writable from GDAL 3.6) stores coordinates on its XY resolution
grid (GDAL's default for a projected CRS: 0.1 mm), which moves the areas of 1-5 ha ponds by
up to 5e-7 (measured); the area-dependent method passes that on to the depths.
"""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely
from builders import (
    CHOW_CLIMATE,
    CHOW_FIELDS,
    case_config,
    climate_dataset,
    pond_layer,
    write_netcdf,
)

import lakeloss

FORMATS = {
    "FlatGeobuf": ("ponds.fgb", 0.0),
    "GeoJSON": ("ponds.geojson", 1e-11),
    "OpenFileGDB": ("ponds.gdb", 1e-6),
}
COLUMNS = ["area_m2", "evap_mm", "evap_m3", "precip_mm", "net_m3", "climate_coverage"]


def _point_register() -> gpd.GeoDataFrame:
    ponds = pond_layer(n_ponds=6)
    points = ponds.set_geometry(ponds.geometry.representative_point())
    points["area_ha"] = np.linspace(0.2, 3.0, len(points))
    return points


def _results(tmp_path, layer, driver: str, name: str, **waterbodies) -> pd.DataFrame:
    climate = tmp_path / "climate.nc"
    if not climate.exists():
        times = pd.date_range("2031-01-01", periods=40, freq="D")
        write_netcdf(climate_dataset(times, CHOW_FIELDS), climate)
    path = tmp_path / name
    layer = layer.astype({"pond_id": "int32"})  # Integer in every format, as GIS writes ids
    layer.to_file(path, layer="ponds", driver=driver, engine="pyogrio")
    config = case_config(
        path, climate, tmp_path / f"out-{driver}", "penman_small_water_body", CHOW_CLIMATE
    )
    config["waterbodies"].update(waterbodies)
    if driver == "GeoJSON":
        del config["waterbodies"]["layer"]  # one layer, named after the file
    bodies = lakeloss.run(config).waterbodies.set_index("pond_id").sort_index()
    return bodies[[*COLUMNS, "qa_flags", "zone"]]


def _compare(other: pd.DataFrame, reference: pd.DataFrame, rtol: float) -> None:
    assert list(other.index) == list(reference.index)
    assert list(other["qa_flags"]) == list(reference["qa_flags"])
    assert list(other["zone"]) == list(reference["zone"])
    for column in COLUMNS:
        np.testing.assert_allclose(other[column], reference[column], rtol=rtol, err_msg=column)
    assert np.isfinite(reference["evap_mm"]).all()


@pytest.mark.parametrize("driver", list(FORMATS))
def test_polygon_layer_gives_the_geopackage_results(tmp_path, driver):
    name, rtol = FORMATS[driver]
    layer = pond_layer(n_ponds=6)
    reference = _results(tmp_path, layer, "GPKG", "ponds.gpkg")
    _compare(_results(tmp_path, layer, driver, name), reference, rtol)


@pytest.mark.parametrize("driver", list(FORMATS))
def test_point_register_gives_the_geopackage_results(tmp_path, driver):
    name, rtol = FORMATS[driver]
    layer = _point_register()
    options = {"area_field": "area_ha", "area_units": "ha"}
    reference = _results(tmp_path, layer, "GPKG", "ponds.gpkg", **options)
    np.testing.assert_allclose(reference["area_m2"], layer["area_ha"] * 10_000.0, rtol=1e-15)
    _compare(_results(tmp_path, layer, driver, name, **options), reference, rtol)


def test_file_geodatabase_polygons_come_back_within_its_resolution(tmp_path):
    """OpenFileGDB writes polygons as MultiPolygon on a 0.1 mm grid; the reader takes them."""
    layer = pond_layer(n_ponds=2).astype({"pond_id": "int32"})
    layer.to_file(tmp_path / "p.gdb", layer="ponds", driver="OpenFileGDB", engine="pyogrio")
    read = gpd.read_file(tmp_path / "p.gdb", layer="ponds")
    moved = shapely.hausdorff_distance(read.geometry.to_numpy(), layer.geometry.to_numpy())
    assert (moved < 1e-3).all() and set(read.geom_type) == {"MultiPolygon"}
