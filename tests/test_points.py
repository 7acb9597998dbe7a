"""Point registers: water bodies given as points with an area attribute.

A point takes the climate of the grid cell it falls in; a point on the edge between two
cells goes to the cell east (x) or north (y) of it, whichever way the file stores its rows,
and across the storage seam of a global grid; its volume is depth x the stated area.

The grids here have 1-degree cells whose centres sit on half degrees, so every cell edge is
a whole degree, exactly representable, and a point "on an edge" really is on it. The air
temperature differs in every cell (285 K + 1 K per column + 2 K per row), so a body in the
wrong cell gets a different depth. Everything is invented test data.
"""

from __future__ import annotations

import warnings

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pytest
import shapely
from bad_inputs.corpus import Case, refused_everywhere
from builders import CHOW_CLIMATE, CHOW_FIELDS, case_config, climate_dataset, write_netcdf
from pyproj import Geod

import lakeloss
from lakeloss.io.vector import read_waterbodies
from lakeloss.zonal import GridSpec, build_weights
from lakeloss.zonal.partition import build_weights_in_blocks

# International acre: 66 x 660 international feet of 0.3048 m (NIST Handbook 44, App. C).
SQUARE_METRES = {"m2": 1.0, "ha": 10_000.0, "km2": 1.0e6, "acre": (66 * 660) * 0.3048**2}

LON = 10.5 + np.arange(6)  # cells 10..16 degrees east
LAT = 49.5 - np.arange(5)  # cells 50..45 degrees north, stored north-up
TIMES = pd.date_range("2031-01-01", periods=31, freq="D")


def _cell_centre(weights, row: int) -> tuple[float, float]:
    """Centre (lon, lat) of the one cell water body ``row`` takes."""
    grid = weights.grid
    ny, nx = grid.shape
    cells = weights.matrix[row].indices
    assert cells.size == 1, cells
    r, c = divmod(int(cells[0]), nx)
    return (
        0.5 * (grid.x_edges[c] + grid.x_edges[c + 1]),
        0.5 * (grid.y_edges[r] + grid.y_edges[r + 1]),
    )


def _points(*xy) -> gpd.GeoDataFrame:
    return gpd.GeoDataFrame(geometry=[shapely.Point(x, y) for x, y in xy], crs="EPSG:4326")


# --------------------------------------------------------------------------- which cell


@pytest.mark.parametrize("lat", [LAT, LAT[::-1]], ids=["north-up", "south-up"])
def test_point_on_a_cell_edge_goes_east_and_north(lat):
    grid = GridSpec.from_centres(LON, lat, "EPSG:4326")
    layer = _points((12.0, 47.3), (11.5, 47.0), (12.0, 47.0), (11.5, 47.5))
    weights = build_weights(layer, grid)
    assert _cell_centre(weights, 0) == (12.5, 47.5)  # on the meridian 12: east
    assert _cell_centre(weights, 1) == (11.5, 47.5)  # on the parallel 47: north
    assert _cell_centre(weights, 2) == (12.5, 47.5)  # on the corner: east and north
    assert _cell_centre(weights, 3) == (11.5, 47.5)  # inside
    np.testing.assert_array_equal(weights.grid_coverage, 1.0)
    assert list(weights.flags) == [""] * 4


def test_point_on_the_grid_outline_is_inside_and_beyond_it_outside():
    grid = GridSpec.from_centres(LON, LAT, "EPSG:4326")
    layer = _points((16.0, 47.5), (11.5, 50.0), (10.0, 45.0), (16.001, 47.5), (11.5, 44.99))
    weights = build_weights(layer, grid)
    assert _cell_centre(weights, 0) == (15.5, 47.5)
    assert _cell_centre(weights, 1) == (11.5, 49.5)
    assert _cell_centre(weights, 2) == (10.5, 45.5)
    assert list(weights.flags) == ["", "", "", "outside_grid", "outside_grid"]
    assert weights.matrix[3:].nnz == 0
    np.testing.assert_array_equal(weights.grid_coverage, [1, 1, 1, 0, 0])


@pytest.mark.parametrize(
    "lon",
    [15.0 + 30.0 * np.arange(12), -165.0 + 30.0 * np.arange(12)],
    ids=["0..360", "-180..180"],
)
def test_point_on_the_seam_of_a_global_grid_goes_east(lon):
    grid = GridSpec.from_centres(lon, 75.0 - 30.0 * np.arange(6), "EPSG:4326")
    assert grid.wraps_longitude
    layer = _points((0.0, 10.0), (360.0, 10.0), (180.0, 10.0), (-180.0, 10.0), (30.0, 30.0))
    weights = build_weights(layer, grid)
    centres = [_cell_centre(weights, row) for row in range(5)]
    east_of = [(x % 360.0, y) for x, y in centres]
    # 0 and 360 are one meridian: the cell 0..30 east of it; 180 = -180: the cell 180..210
    assert east_of == [(15.0, 15.0), (15.0, 15.0), (195.0, 15.0), (195.0, 15.0), (45.0, 45.0)]


def test_multipoint_of_one_location_is_that_point(tmp_path):
    layer = gpd.GeoDataFrame(
        {"area_ha": [1.0]},
        geometry=[shapely.MultiPoint([(11.5, 47.5), (11.5, 47.5)])],
        crs="EPSG:4326",
    )
    layer.to_file(tmp_path / "one.gpkg", layer="dams")
    read = read_waterbodies(tmp_path / "one.gpkg", area_field="area_ha", area_units="ha")
    assert read.frame.geometry.iloc[0].equals(shapely.Point(11.5, 47.5))
    np.testing.assert_array_equal(read.stated_area_m2, [10_000.0])


def test_points_built_in_spatial_blocks_match_one_build():
    """Big registers are built in blocks; an all-point block has no area and is not empty."""
    grid = GridSpec.from_centres(LON, LAT, "EPSG:4326")
    layer = _points((12.0, 47.3), (11.5, 47.0), (15.2, 45.1), (10.1, 49.9), (40.0, 40.0))
    whole = build_weights(layer, grid)
    blocks = build_weights_in_blocks(layer, grid, block_size=2)
    assert (whole.matrix != blocks.matrix).nnz == 0
    assert list(blocks.flags) == ["", "", "", "", "outside_grid"]


# --------------------------------------------------------------------------- whole runs


def _run(tmp_path, layer, method="penman_open_water", lat=LAT, **waterbodies):
    """Run ``layer`` (EPSG:4326, column ``dam``) on the varying-temperature grid."""
    tmp_path.mkdir(parents=True, exist_ok=True)
    tas = 285.0 + np.arange(LON.size)[None, None, :] + 2.0 * np.arange(LAT.size)[None, :, None]
    if lat is not LAT:
        tas = tas[:, ::-1, :]  # the same climate per place, rows stored the other way
    fields = {**CHOW_FIELDS, "tas": (tas, "K", "air_temperature")}
    climate = write_netcdf(climate_dataset(TIMES, fields, lat=lat, lon=LON), tmp_path / "c.nc")
    path = tmp_path / "dams.gpkg"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)  # pyogrio on mixed geometry types
        layer.to_file(path, layer="ponds", driver="GPKG")
    config = case_config(path, climate, tmp_path / "out", method, CHOW_CLIMATE)
    config["waterbodies"].update(id_field="dam", group_by=[], **waterbodies)
    result = lakeloss.run(config)
    return result, result.waterbodies.set_index("dam")


def _square(lon, lat, half=0.01):
    return shapely.box(lon - half, lat - half, lon + half, lat + half)


@pytest.mark.parametrize("lat", [LAT, LAT[::-1]], ids=["north-up", "south-up"])
def test_point_has_its_cells_depth_exactly(tmp_path, lat):
    layer = gpd.GeoDataFrame(
        {"dam": [1, 2, 3, 4], "area_ha": [2.0, None, 2.0, 2.0]},
        geometry=[
            shapely.Point(12.0, 47.0),  # on the corner: the cell 12..13 E, 47..48 N
            _square(12.5, 47.5),  # a polygon wholly inside that cell
            shapely.Point(11.9, 46.9),  # the cell south-west of it
            shapely.Point(40.0, 47.0),  # east of the grid
        ],
        crs="EPSG:4326",
    )
    _, bodies = _run(tmp_path, layer, lat=lat, area_field="area_ha", area_units="ha")
    assert bodies.loc[1, "evap_mm"] == bodies.loc[2, "evap_mm"]
    assert abs(bodies.loc[3, "evap_mm"] - bodies.loc[1, "evap_mm"]) > 1.0
    assert np.isnan(bodies.loc[4, "evap_mm"]) and np.isnan(bodies.loc[4, "evap_m3"])
    assert bodies.loc[4, "qa_flags"] == "outside_grid"
    assert bodies.loc[1, "area_m2"] == 20_000.0
    assert bodies.loc[1, "evap_m3"] == bodies.loc[1, "evap_mm"] * 20_000.0 / 1000.0


@pytest.mark.parametrize("units", list(SQUARE_METRES))
def test_volume_is_depth_times_the_stated_area(tmp_path, units):
    stated = [3.5, 0.25]
    layer = gpd.GeoDataFrame(
        {"dam": [1, 2], "size": stated},
        geometry=[shapely.Point(11.5, 47.5), shapely.Point(13.2, 46.2)],
        crs="EPSG:4326",
    )
    result, bodies = _run(tmp_path, layer, area_field="size", area_units=units)
    area = np.array(stated) * SQUARE_METRES[units]
    np.testing.assert_allclose(bodies["area_m2"], area, rtol=1e-15)
    np.testing.assert_allclose(bodies["evap_m3"], bodies["evap_mm"] * area / 1000.0, rtol=1e-12)
    periods = result.by_period.reset_index()
    np.testing.assert_allclose(
        periods["evap_m3"], periods["evap_mm"] * area[periods["dam"] - 1] / 1000.0, rtol=1e-12
    )


def test_area_dependent_method_uses_the_stated_area(tmp_path):
    """penman_small_water_body's wind function depends on the area: a point and a polygon
    stating the same area in one cell get the same depth, a point of another area does not."""
    polygon = _square(12.5, 47.5)
    layer = gpd.GeoDataFrame(
        {"dam": [1, 2, 3], "area_ha": [5.0, 5.0, 5000.0]},
        geometry=[shapely.Point(12.4, 47.6), polygon, shapely.Point(12.6, 47.4)],
        crs="EPSG:4326",
    )
    _, bodies = _run(
        tmp_path,
        layer,
        method="penman_small_water_body",
        area_field="area_ha",
        area_units="ha",
        area_source="field",
    )
    assert bodies.loc[1, "evap_mm"] == bodies.loc[2, "evap_mm"]
    assert abs(bodies.loc[3, "evap_mm"] - bodies.loc[1, "evap_mm"]) > 0.5
    np.testing.assert_array_equal(bodies["area_m2"], [50_000.0, 50_000.0, 5.0e7])
    # the polygon (about 1.6 km2) states 5 ha: more than a factor 2 apart
    assert bodies.loc[2, "qa_flags"] == "area_field_disagrees"


def test_points_group_with_bodies_of_identical_inputs_only(tmp_path):
    """Bodies in one cell are computed once when their inputs are equal (lakeloss.grouping):
    a grouped run must give each body the bits it gets when run alone."""
    layer = gpd.GeoDataFrame(
        {"dam": [1, 2, 3, 4], "area_ha": [5.0, 5.0, 5000.0, 5.0]},
        geometry=[
            shapely.Point(12.4, 47.6),
            _square(12.5, 47.5),
            shapely.Point(12.6, 47.4),
            shapely.Point(13.5, 47.5),
        ],
        crs="EPSG:4326",
    )
    options = {"area_field": "area_ha", "area_units": "ha", "area_source": "field"}
    _, together = _run(tmp_path / "all", layer, "penman_small_water_body", **options)
    for row in range(len(layer)):
        alone_dir = tmp_path / f"alone{row}"
        _, alone = _run(alone_dir, layer.iloc[[row]], "penman_small_water_body", **options)
        dam = int(layer["dam"].iloc[row])
        assert alone.loc[dam, "evap_mm"] == together.loc[dam, "evap_mm"]


@pytest.mark.filterwarnings("ignore::lakeloss.errors.GeometryRepairedWarning")
@pytest.mark.parametrize("source", ["geometry", "field"])
def test_polygon_area_source_and_disagreement_flag(tmp_path, source):
    """Squares stating 1.25, 2.5 and 0.45 times their true area, and one stating none."""
    squares = [_square(11.5, 47.5), _square(13.5, 46.5), _square(14.5, 48.5), _square(10.5, 45.5)]
    true_area = np.array([abs(Geod(ellps="WGS84").geometry_area_perimeter(g)[0]) for g in squares])
    stated = np.array([1.25, 2.5, 0.45, np.nan]) * true_area
    layer = gpd.GeoDataFrame(
        {"dam": [1, 2, 3, 4], "km2": stated / 1.0e6}, geometry=squares, crs="EPSG:4326"
    )
    if source == "field":
        layer.loc[3, "geometry"] = shapely.Polygon()  # the body without a stated area
    _, bodies = _run(tmp_path, layer, area_field="km2", area_units="km2", area_source=source)
    flags = ["", "area_field_disagrees", "area_field_disagrees"]
    assert list(bodies.loc[[1, 2, 3], "qa_flags"]) == flags
    if source == "field":
        np.testing.assert_allclose(bodies.loc[[1, 2, 3], "area_m2"], stated[:3], rtol=1e-12)
        assert bodies.loc[4, "qa_flags"] == "geometry_empty"
    else:
        # geodesic edges (pyproj.Geod) against straight ones in lon/lat: 1e-8 apart
        np.testing.assert_allclose(bodies["area_m2"], true_area, rtol=1e-7)
        assert bodies.loc[4, "qa_flags"] == ""
    np.testing.assert_allclose(
        bodies["evap_m3"], bodies["evap_mm"] * bodies["area_m2"] / 1000.0, rtol=1e-12
    )


def test_point_layer_is_written_as_points(tmp_path):
    layer = gpd.GeoDataFrame(
        {"dam": [7, 8], "area_ha": [1.0, 2.0]},
        geometry=[shapely.Point(11.25, 47.75), shapely.Point(14.5, 45.5)],
        crs="EPSG:4326",
    )
    result, _ = _run(tmp_path, layer, area_field="area_ha", area_units="ha")
    result.write(tmp_path / "written", overwrite=True)
    written = pyogrio.read_dataframe(tmp_path / "written" / "waterbodies.gpkg", layer="waterbodies")
    assert (
        pyogrio.read_info(tmp_path / "written" / "waterbodies.gpkg", layer="waterbodies")[
            "geometry_type"
        ]
        == "Point"
    )
    assert list(written.geometry) == list(layer.geometry)
    assert list(written["area_m2"]) == [10_000.0, 20_000.0]


# --------------------------------------------------------------------------- refused


def _point_case(tmp_path, areas, **waterbodies) -> Case:
    """The bad-input corpus's clean case with its ponds replaced by points inside its grid."""
    case = Case(tmp_path)
    ponds = gpd.read_file(tmp_path / "ponds.gpkg", layer="ponds")
    points = ponds.set_geometry(ponds.geometry.representative_point())
    points["area_ha"] = areas
    case.write_layer(points)
    case.config["waterbodies"].update(waterbodies)
    return case


def test_points_without_area_field_are_refused(tmp_path):
    case = _point_case(tmp_path, [1.0, 2.0, 3.0, 4.0])
    refused_everywhere(case, "4 Point features", "101", "area_field")


def test_area_field_missing_from_the_layer_is_refused(tmp_path):
    case = _point_case(tmp_path, [1.0, 2.0, 3.0, 4.0], area_field="area_hectares")
    refused_everywhere(case, "'area_hectares'", "did you mean 'area_ha'", "area_field")


@pytest.mark.parametrize(
    ("areas", "words"),
    [
        (["1.5", "big", "2", "n/a"], ("non-numeric", "2 water bodies", "102, 104")),
        ([1.0, np.nan, 3.0, 4.0], ("empty", "102")),
        ([1.0, 2.0, 0.0, 4.0], ("zero", "103")),
        ([-1.0, 2.0, 3.0, -4.0], ("negative", "101, 104")),
    ],
    ids=["text", "nan", "zero", "negative"],
)
def test_bad_area_values_are_refused(tmp_path, areas, words):
    case = _point_case(tmp_path, areas, area_field="area_ha", area_units="ha")
    refused_everywhere(case, "'area_ha'", *words)


def test_polygon_area_values_are_checked_only_when_used(tmp_path):
    case = Case(tmp_path)
    case.config["waterbodies"].update(area_field="area_ha", area_source="field")
    ponds = gpd.read_file(tmp_path / "ponds.gpkg", layer="ponds")
    ponds["area_ha"] = [1.0, -2.0, 3.0, 4.0]
    case.write_layer(ponds)
    refused_everywhere(case, "'area_ha'", "negative", "102")


def test_multipoint_of_several_locations_is_refused(tmp_path):
    case = _point_case(tmp_path, [1.0, 2.0, 3.0, 4.0], area_field="area_ha")
    points = gpd.read_file(tmp_path / "ponds.gpkg", layer="ponds")
    geometries = list(points.geometry)
    x, y = geometries[1].x, geometries[1].y
    geometries[1] = shapely.MultiPoint([(x, y), (x + 50.0, y)])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)
        case.write_layer(points.set_geometry(geometries, crs=points.crs))
    refused_everywhere(case, "MultiPoint", "several locations", "102")


def test_unknown_area_units_are_refused(tmp_path):
    case = _point_case(tmp_path, [1.0, 2.0, 3.0, 4.0], area_field="area_ha", area_units="hectare")
    refused_everywhere(case, "area_units", "'hectare'", "'ha'")
