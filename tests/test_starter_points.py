"""``lakeloss draft-config`` on point registers: farm dams given as points with their area.

The registers are written the way a register keeper exports them (invented dams): a
GeoPackage of points with a dam number, an owner and the surface area in hectares; a
GeoParquet of points whose area field does not say its units; a layer mixing points and
polygons; and a point layer with text fields only, which cannot give the points an area.
"""

from __future__ import annotations

import tomllib

import geopandas as gpd
import numpy as np
import pyogrio
import pytest
import shapely
from builders import LAT, LON, pond_layer
from test_starter import _draft_and_check, _invoke, write_cmip_folder

from lakeloss.starter import area_units_of

# The CMIP-style files have latitude/longitude but no grid mapping: EPSG:4326 is assumed.
pytestmark = pytest.mark.filterwarnings("ignore::lakeloss.errors.AssumedCRSWarning")


def _dam_points(count: int = 6, seed: int = 5) -> gpd.GeoDataFrame:
    rng = np.random.default_rng(seed)
    lon = rng.uniform(LON[1], LON[-2], count)
    lat = rng.uniform(LAT[-2], LAT[1], count)
    return gpd.GeoDataFrame(
        {
            "dam_no": np.arange(101, 101 + count),
            "owner": ["north farm", "river farm"] * (count // 2),
            "area_ha": np.round(rng.uniform(0.2, 4.0, count), 3),
            "depth_m": np.round(rng.uniform(1.0, 5.0, count), 1),
        },
        geometry=shapely.points(lon, lat),
        crs="EPSG:4326",
    )


def _run(config_path):
    code, output = _invoke("run", config_path.name, "-q")
    assert code == 0, output
    return pyogrio.read_dataframe(
        config_path.parent / "lakeloss-output" / "waterbodies.gpkg", layer="waterbodies"
    )


def test_point_register_with_area_in_hectares_drafts_checks_and_runs(tmp_path, monkeypatch):
    dams = _dam_points()
    layer = tmp_path / "dams.gpkg"
    dams.to_file(layer, layer="register", driver="GPKG")
    climate = write_cmip_folder(tmp_path / "cmip")
    config_path = tmp_path / "dams.toml"
    text, config = _draft_and_check(monkeypatch, config_path, layer, climate)

    raw = tomllib.loads(text)["waterbodies"]
    assert raw["area_field"] == "area_ha" and raw["area_units"] == "ha"
    assert raw["id_field"] == "dam_no"
    assert "other area_field candidates (numeric fields): depth_m" in text
    assert "area_units 'ha' read from the field's name" in text
    assert "6 features (6 points)" in text
    table = _run(config_path)
    # Each dam's area is the attribute in m2 (1 ha = 10 000 m2).
    by_id = table.set_index("dam_no")["area_m2"].sort_index()
    np.testing.assert_allclose(by_id.to_numpy(), dams["area_ha"].to_numpy() * 1.0e4, rtol=1e-9)


def test_geoparquet_points_with_unstated_units_get_m2_and_a_check_note(tmp_path, monkeypatch):
    dams = _dam_points().rename(columns={"area_ha": "SurfaceArea"})
    dams["SurfaceArea"] = np.round(dams["SurfaceArea"] * 1.0e4)  # whole square metres
    layer = tmp_path / "register.parquet"
    dams.to_parquet(layer)
    climate = write_cmip_folder(tmp_path / "cmip")
    config_path = tmp_path / "register.toml"
    text, config = _draft_and_check(monkeypatch, config_path, layer, climate)

    assert config.waterbodies.area_field == "SurfaceArea"
    assert config.waterbodies.area_units == "m2"
    assert config.waterbodies.id_field == "dam_no"
    assert "CHECK area_units: the name 'SurfaceArea' does not say its units" in text
    table = _run(config_path)
    np.testing.assert_allclose(
        np.sort(table["area_m2"].to_numpy()), np.sort(dams["SurfaceArea"].to_numpy())
    )


def test_points_and_polygons_together_draft_an_area_field_for_the_points(tmp_path, monkeypatch):
    ponds = pond_layer().to_crs("EPSG:4326")[["pond_id", "geometry"]].iloc[:4]
    dams = _dam_points(4).rename(columns={"dam_no": "pond_id"})
    mixed = gpd.GeoDataFrame(
        {
            "pond_id": [*ponds["pond_id"], *(dams["pond_id"] + 1000)],
            "size_acres": [np.nan] * 4 + list(dams["area_ha"] / 0.40468564224),
        },
        geometry=[*ponds.geometry, *dams.geometry],
        crs="EPSG:4326",
    )
    layer = tmp_path / "mixed.geojson"
    mixed.to_file(layer, driver="GeoJSON")
    climate = write_cmip_folder(tmp_path / "cmip")
    config_path = tmp_path / "mixed.toml"
    text, config = _draft_and_check(monkeypatch, config_path, layer, climate)

    assert config.waterbodies.area_field == "size_acres"
    assert config.waterbodies.area_units == "acre"
    assert "8 features (4 points)" in text
    assert 'area_source = \\"field\\"' not in text and 'area_source = "field" makes them' in text
    table = _run(config_path)
    points = table[table["pond_id"] > 1000].sort_values("pond_id")
    np.testing.assert_allclose(points["area_m2"], dams["area_ha"] * 1.0e4, rtol=1e-9)


def test_polygons_with_an_area_field_mention_it_as_optional(tmp_path, monkeypatch):
    ponds = pond_layer()
    ponds["area_m2"] = ponds.geometry.area.round(1)
    layer = tmp_path / "ponds.gpkg"
    ponds.to_file(layer, layer="ponds", driver="GPKG")
    climate = write_cmip_folder(tmp_path / "cmip")
    text, config = _draft_and_check(monkeypatch, tmp_path / "p.toml", layer, climate)
    assert config.waterbodies.area_field is None
    assert "# area_field candidates: area_m2; optional for polygons" in text
    assert "area_source" in text


def test_point_register_without_a_numeric_field_is_refused(tmp_path):
    dams = _dam_points()[["owner", "geometry"]]
    dams["name"] = [f"dam {k}" for k in range(len(dams))]
    layer = tmp_path / "names.gpkg"
    dams.to_file(layer, layer="register", driver="GPKG")
    climate = write_cmip_folder(tmp_path / "cmip")
    config_path = tmp_path / "names.toml"
    code, output = _invoke("draft-config", layer, climate, "-o", config_path)
    assert code != 0
    lines = output.strip().splitlines()
    assert len(lines) == 1, output
    assert "6 points but no numeric field" in lines[0]
    assert "area attribute" in lines[0]
    assert not config_path.exists()


def test_a_line_layer_is_refused(tmp_path):
    lines = gpd.GeoDataFrame(
        {"n": [1, 2]},
        geometry=[shapely.LineString([(146.1, -30.1), (146.2, -30.2)])] * 2,
        crs=4326,
    )
    lines.to_file(tmp_path / "canals.gpkg", layer="canals", driver="GPKG")
    climate = write_cmip_folder(tmp_path / "cmip")
    code, output = _invoke("draft-config", tmp_path / "canals.gpkg", climate, "-o",
                           tmp_path / "c.toml")  # fmt: skip
    assert code != 0 and "no polygon or point layer" in output


@pytest.mark.parametrize(
    ("name", "units"),
    [
        ("area_ha", "ha"),
        ("AreaHa", "ha"),
        ("surface_hectares", "ha"),
        ("area_m2", "m2"),
        ("Area (m²)", "m2"),
        ("SURF_KM2", "km2"),
        ("size_acres", "acre"),
        ("area", None),
        ("shape_area", None),
        ("harea", None),  # "ha" only as a word of its own
    ],
)
def test_area_units_are_read_from_the_field_name_only_where_it_says(name, units):
    assert area_units_of(name) == units


def test_points_with_heights_in_a_shapefile_are_a_point_register(tmp_path, monkeypatch):
    # GPS surveys give points with a height (layer type "Point Z").
    dams = _dam_points()
    dams["Area_m2"] = np.round(dams["area_ha"] * 1.0e4)
    xyz = shapely.points(dams.geometry.x, dams.geometry.y, np.full(len(dams), 250.0))
    dams = dams.drop(columns="area_ha").set_geometry(xyz)
    layer = tmp_path / "dams.shp"
    dams.to_file(layer)
    assert pyogrio.list_layers(layer)[0][1] == "Point Z"
    climate = write_cmip_folder(tmp_path / "cmip")
    text, config = _draft_and_check(monkeypatch, tmp_path / "z.toml", layer, climate)
    assert (config.waterbodies.area_field, config.waterbodies.area_units) == ("Area_m2", "m2")
