"""Bodies with identical inputs are computed once (lakeloss.grouping) and get their own results."""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely
from builders import LAT, LAYER_CRS, LON, case_config, climate_dataset, write_netcdf
from pyproj import Transformer

import lakeloss
from lakeloss.grouping import group_bodies, inputs_used
from lakeloss.zonal import GridSpec, build_weights

GRID = GridSpec.from_centres(LON, LAT, "EPSG:4326")
_TO_UTM = Transformer.from_crs("EPSG:4326", LAYER_CRS, always_xy=True)


def _pond(lon: float, lat: float, radius_m: float) -> shapely.Polygon:
    x, y = _TO_UTM.transform(lon, lat)
    return shapely.Point(x, y).buffer(radius_m, quad_segs=8)


def _layer() -> gpd.GeoDataFrame:
    # Cell (row 1, col 2) spans 146.10-146.15 E, 30.05-30.10 S; cell (row 3, col 5) spans
    # 146.25-146.30 E, 30.15-30.20 S.
    geoms = [
        _pond(146.11, -30.06, 40.0),  # 0: cell (1, 2)
        _pond(146.13, -30.08, 90.0),  # 1: cell (1, 2), elevation as 0
        _pond(146.14, -30.09, 60.0),  # 2: cell (1, 2), another elevation
        _pond(146.27, -30.17, 50.0),  # 3: cell (3, 5)
        _pond(146.15, -30.12, 300.0),  # 4: across the edge at 146.15 E
        _pond(146.12, -30.07, 25.0),  # 5: cell (1, 2), elevation as 0 and 1
        _pond(150.00, -30.10, 50.0),  # 6: far outside the grid
    ]
    return gpd.GeoDataFrame(
        {
            "pond_id": np.arange(201, 201 + len(geoms)),
            "elev": [120.0, 120.0, 480.0, 120.0, 120.0, 120.0, 120.0],
            "zone": ["a"] * len(geoms),
        },
        geometry=geoms,
        crs=LAYER_CRS,
    )


def _weights(layer: gpd.GeoDataFrame):
    return build_weights(layer, GRID)  # pond 6 is outside the grid: flagged


def test_row_groups_join_bodies_inside_one_cell_only():
    keys = _weights(_layer()).row_groups()
    ncell = LON.size * LAT.size
    cell = 1 * LON.size + 2
    assert keys[[0, 1, 2, 5]].tolist() == [cell] * 4
    assert keys[3] == 3 * LON.size + 5
    assert keys[4] == ncell + 4  # crosses cells: a group of its own
    assert keys[6] == -1  # no cell


def test_used_static_inputs_split_groups_and_unused_ones_do_not():
    layer = _layer()
    weights = {"grid": _weights(layer)}
    static = {
        "elevation": layer["elev"].to_numpy()[np.newaxis, :],
        "area_m2": weights["grid"].polygon_area_m2[np.newaxis, :],
    }
    used = inputs_used(["penman_open_water"])
    assert "elevation" in used and "latitude" in used and "area_m2" not in used
    assert "area_m2" in inputs_used(["penman_small_water_body"])

    groups = group_bodies(weights, static, used)
    # {0, 1, 5} share cell and elevation; 2 differs in elevation; 3, 4, 6 stand alone.
    assert groups.n_groups == 5 and groups.n_bodies == 7
    assert groups.representative.tolist() == [0, 2, 3, 4, 6]
    assert groups.member_of.tolist() == [0, 0, 1, 2, 3, 0, 4]
    assert groups.count.tolist() == [3, 1, 1, 1, 1]

    # The area splits the same-cell ponds only for a method that reads it.
    by_area = group_bodies(weights, static, inputs_used(["penman_small_water_body"]))
    assert by_area.n_groups == 7
    assert (by_area.representative[by_area.member_of] == np.arange(7)).all()


_FIELDS_CLIMATE = {
    "air_temperature": "tas",
    "relative_humidity": "hurs",
    "wind_speed": "wind",
    "surface_downwelling_shortwave_flux_in_air": "rsds",
    "precipitation_flux": "pr",
}


def _climate(times: pd.DatetimeIndex) -> dict:
    rng = np.random.default_rng(7)
    shape = (len(times), LAT.size, LON.size)
    return {
        "tas": (rng.uniform(280.0, 305.0, shape), "K", "air_temperature"),
        "hurs": (rng.uniform(20.0, 90.0, shape), "%", "relative_humidity"),
        "wind": (rng.uniform(0.5, 8.0, shape), "m s-1", "wind_speed"),
        "rsds": (rng.uniform(50.0, 330.0, shape), "W m-2", "surface_downwelling_shortwave_flux_in_air"),
        "pr": (rng.uniform(0.0, 4e-5, shape), "kg m-2 s-1", "precipitation_flux"),
    }  # fmt: skip


def _run(tmp_path, layer: gpd.GeoDataFrame, climate_path, name: str, method="penman_open_water"):
    path = tmp_path / f"{name}.gpkg"
    layer.to_file(path, layer="ponds", driver="GPKG")
    config = case_config(
        path, climate_path, tmp_path / f"out-{name}", method, _FIELDS_CLIMATE,
        waterbodies={"elevation_field": "elev"}, output={"series": True},
        parameters={"relaxation_days": 4.0, "relaxation_start_fraction": 0.3},
    )  # fmt: skip
    return lakeloss.run(config)


@pytest.mark.parametrize("method", ["penman_open_water", "relaxation_check"])
def test_grouped_run_gives_each_body_what_it_gets_alone(tmp_path, method):
    # relaxation_check carries a state from day to day: a group's state is its members'.
    times = pd.date_range("2031-01-01", periods=45, freq="D")
    climate_path = write_netcdf(climate_dataset(times, _climate(times)), tmp_path / "c.nc")
    layer = _layer().iloc[:6]  # the far pond's refusal is tested elsewhere
    grouped = _run(tmp_path, layer, climate_path, "all", method)
    together = grouped.by_period
    numbers = ["evap_mm", "evap_m3", "precip_mm", "net_mm", "net_m3"]
    assert together["evap_mm"].notna().all()
    for i in range(len(layer)):
        alone = _run(tmp_path, layer.iloc[[i]], climate_path, f"p{i}", method)
        mine = together.loc[[layer["pond_id"].iloc[i]]]  # indexed by the id
        np.testing.assert_allclose(
            mine[numbers].to_numpy(), alone.by_period[numbers].to_numpy(), rtol=1e-12, atol=1e-9
        )
        # the per-step series streamed block by block are copied to the members too
        for name in ("evaporation_rate", "precipitation_rate"):
            np.testing.assert_allclose(
                grouped.series[name].isel(waterbody=i).values,
                alone.series[name].isel(waterbody=0).values,
                rtol=1e-6,
            )
    # Same cell and elevation: equal depths, volumes in proportion to each pond's own area.
    first = together.loc[201].reset_index(drop=True)
    second = together.loc[202].reset_index(drop=True)
    assert (first["evap_mm"] == second["evap_mm"]).all()
    assert not np.allclose(first["evap_m3"], second["evap_m3"])


def test_centre_latitudes_of_a_projected_grid_match_pyproj():
    # Cell centres of a 3 x 2 UTM grid, checked point by point against pyproj's inverse.
    grid = GridSpec(
        LAYER_CRS, np.array([4.0e5, 4.1e5, 4.2e5]), np.array([6.7e6, 6.69e6, 6.68e6, 6.67e6])
    )
    to_lonlat = Transformer.from_crs(LAYER_CRS, "EPSG:4326", always_xy=True)
    expected = [
        [to_lonlat.transform(x, y)[1] for x in (4.05e5, 4.15e5)]
        for y in (6.695e6, 6.685e6, 6.675e6)
    ]
    np.testing.assert_allclose(grid.centre_latitudes(), expected, rtol=0, atol=1e-12)
    np.testing.assert_allclose(GRID.centre_latitudes()[:, 0], LAT, rtol=0, atol=1e-12)


def test_check_estimates_the_groups_without_weights(tmp_path):
    from lakeloss.plan import make_plan

    times = pd.date_range("2031-01-01", periods=3, freq="D")
    climate_path = write_netcdf(climate_dataset(times, _climate(times)), tmp_path / "c.nc")
    path = tmp_path / "layer.gpkg"
    _layer().to_file(path, layer="ponds", driver="GPKG")

    def plan(**waterbodies):
        config = case_config(
            path, climate_path, tmp_path / "out", "penman_open_water", _FIELDS_CLIMATE,
            waterbodies=waterbodies,
        )  # fmt: skip
        return make_plan(lakeloss.load_config(config))

    # {0, 1, 2, 5} in one cell, 3 in another, 4 across an edge, 6 off the grid
    assert plan().columns == 4
    assert "about 4 distinct water bodies" in plan().describe()
    assert plan(elevation_field="elev").columns == 7  # an attribute the method reads
