"""Weights built a partition at a time equal the whole layer's, to the last bit.

A run in partitions reads rows ``[start, stop)`` of the layer and builds their weights on
their own. Given the layer's bounds (``survey_waterbodies(...).bounds``), every equal-area
projection of a build is centred on the whole layer, so a body's weights, true area, area
before repair, centroid, coverage and flags do not depend on which rows are built with it.

The layers are written to real files and read back the way a run reads them: a UTM pond
layer with invalid polygons, points with a stated area, ponds over the grid's edge, one off
the grid and an empty row; and a lon/lat layer of lakes on both sides of 180 degrees (one
stored with its ring jumping across 180, one split at 180 into two parts).
"""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pytest
import shapely
from builders import LAT, LON, pond_layer
from pyproj import CRS, Transformer

from lakeloss.errors import GeometryError
from lakeloss.io.vector import read_waterbodies, read_waterbody_rows, survey_waterbodies
from lakeloss.zonal import GridSpec, WeightsCache, ZonalWeights, build_weights, layer_key
from lakeloss.zonal.geometry import to_equal_area
from lakeloss.zonal.partition import build_weights_in_blocks
from lakeloss.zonal.weights import concat_rows

# The repairs and empty rows are flagged with a warning, as they should be; here expected.
pytestmark = pytest.mark.filterwarnings("ignore::lakeloss.errors.GeometryRepairedWarning")

POND_GRID = GridSpec.from_centres(LON, LAT, "EPSG:4326")
# Lakes around 180 degrees: a regional grid stored in 0..360 whose west edge (171) cuts the
# westernmost lakes, and a global one stored in -180..180 whose seam runs through them.
REGIONAL_180 = GridSpec.from_centres(
    np.arange(171.25, 189.0, 0.5), np.arange(-10.25, -26.0, -0.5), "EPSG:4326"
)
GLOBAL = GridSpec.from_centres(np.arange(-179.5, 180.0), np.arange(89.5, -90.0, -1.0), "EPSG:4326")

ROW_FIELDS = (
    "polygon_area_m2",
    "grid_area_m2",
    "grid_coverage",
    "area_before_repair_m2",
    "flags",
    "centroid_lon",
    "centroid_lat",
)


def assert_identical(a: ZonalWeights, b: ZonalWeights) -> None:
    """Every array of the two weights equal, bit for bit (NaN equal to NaN)."""
    assert a.matrix.shape == b.matrix.shape
    np.testing.assert_array_equal(a.matrix.indptr, b.matrix.indptr)
    np.testing.assert_array_equal(a.matrix.indices, b.matrix.indices)
    np.testing.assert_array_equal(a.matrix.data, b.matrix.data)
    for name in ROW_FIELDS:
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name), err_msg=name)
    assert a.grid_key == b.grid_key


def _bowtie(x: float, y: float, size: float) -> shapely.Polygon:
    """A self-crossing ring (digitised in the wrong vertex order): invalid, repaired."""
    return shapely.Polygon([(x, y), (x + size, y + size), (x + size, y), (x, y + size), (x, y)])


def _pond_file(tmp_path):
    """The mixed UTM pond layer (GeoPackage), rows shuffled so every split mixes kinds."""
    ponds = pond_layer(n_ponds=50, seed=17)
    crs = ponds.crs
    to_utm = Transformer.from_crs("EPSG:4326", crs, always_xy=True)
    extra = []
    for lon, lat in [(146.12, -30.06), (146.31, -30.22), (146.27, -30.13)]:
        extra.append(_bowtie(*to_utm.transform(lon, lat), 150.0))
    # over the grid's west, south and north edges and its south-east corner
    for lon, lat, radius in [(146.0, -30.11, 400.0), (146.21, -30.3, 900.0),
                             (146.33, -30.0, 2500.0), (146.4, -30.3, 300.0)]:  # fmt: skip
        extra.append(shapely.Point(to_utm.transform(lon, lat)).buffer(radius, quad_segs=12))
    extra.append(_bowtie(*to_utm.transform(146.0, -30.2), 700.0))  # invalid and over the edge
    extra.append(shapely.Point(to_utm.transform(147.5, -31.0)).buffer(200.0))  # off the grid
    points = [
        shapely.Point(to_utm.transform(146.05 + 0.07 * i, -30.04 - 0.05 * i)) for i in range(4)
    ]
    geometry = [*ponds.geometry, *extra, *points, None]
    area_ha = [np.nan] * (len(ponds) + len(extra)) + [0.4, 1.5, 2.0, 0.9] + [np.nan]
    frame = gpd.GeoDataFrame(
        {"pond_id": np.arange(1, len(geometry) + 1), "area_ha": area_ha},
        geometry=geometry,
        crs=crs,
    )
    order = np.random.default_rng(5).permutation(len(frame))
    path = tmp_path / "ponds.gpkg"
    frame.iloc[order].to_file(path, layer="ponds", driver="GPKG")
    return path


def _star(lon: float, lat: float, radius: float, rng: np.random.Generator) -> np.ndarray:
    angle = np.sort(rng.uniform(0, 2 * np.pi, 9))
    r = radius * rng.uniform(0.6, 1.0, 9)
    return np.column_stack([lon + r * np.cos(angle), lat + r * np.sin(angle)])


def _lakes_across_180_file(tmp_path):
    """Lakes in lon/lat (-180..180) on both sides of 180 degrees (GeoPackage)."""
    rng = np.random.default_rng(29)
    geometry = []
    for _ in range(25):
        lon = rng.uniform(170.5, 189.5)
        lon = lon - 360.0 if lon > 180.0 else lon
        lat = rng.uniform(-24.5, -11.0)
        geometry.append(shapely.Polygon(_star(lon, lat, rng.uniform(0.02, 0.4), rng)))
    # a ring that jumps from 179.9 to -179.9 and one lake split into parts at 180
    geometry.append(shapely.Polygon([(179.8, -16.0), (-179.7, -16.1), (-179.75, -16.4),
                                     (179.85, -16.35), (179.8, -16.0)]))  # fmt: skip
    geometry.append(shapely.MultiPolygon([shapely.box(179.6, -20.3, 180.0, -20.0),
                                          shapely.box(-180.0, -20.3, -179.5, -20.0)]))  # fmt: skip
    geometry.append(_bowtie(-178.3, -13.0, 0.2))
    geometry.append(_bowtie(176.4, -22.0, 0.15))
    geometry.append(shapely.Point(-177.25, -18.75))
    geometry.append(shapely.Point(172.1, -14.3))
    area_ha = [np.nan] * (len(geometry) - 2) + [12.0, 3.5]
    frame = gpd.GeoDataFrame(
        {"lake_id": np.arange(1, len(geometry) + 1), "area_ha": area_ha},
        geometry=geometry,
        crs="EPSG:4326",
    )
    order = np.random.default_rng(3).permutation(len(frame))
    path = tmp_path / "lakes.gpkg"
    frame.iloc[order].to_file(path, layer="lakes", driver="GPKG")
    return path


def _read(path, layer: str, id_field: str):
    settings = {"layer": layer, "id_field": id_field, "area_field": "area_ha", "area_units": "ha"}
    return survey_waterbodies(path, **settings), read_waterbodies(path, **settings).frame


@pytest.fixture
def ponds(tmp_path):
    return _read(_pond_file(tmp_path), "ponds", "pond_id")


@pytest.fixture
def lakes_180(tmp_path):
    return _read(_lakes_across_180_file(tmp_path), "lakes", "lake_id")


def _in_partitions(survey, grid: GridSpec, rows: int, bounds) -> ZonalWeights:
    """Each run of ``rows`` layer rows read and built on its own, then stacked."""
    parts = []
    for start in range(0, survey.n_rows, rows):
        stop = min(start + rows, survey.n_rows)
        frame = read_waterbody_rows(survey, start, stop).frame
        parts.append(build_weights(frame, grid, bounds=bounds, require_overlap=False))
    return concat_rows(parts)


@pytest.mark.parametrize("rows", [1, 7, 64])
def test_pond_partitions_equal_the_whole_layer_bit_for_bit(ponds, rows):
    survey, frame = ponds
    whole = build_weights(frame, POND_GRID, bounds=survey.bounds)
    # the layer has what makes the projections differ from subset to subset
    flags = ";".join(whole.flags)
    for token in ("geometry_repaired", "geometry_empty", "outside_grid", "partly_outside_grid"):
        assert token in flags
    assert np.isfinite(whole.area_before_repair_m2).sum() == 4
    assert_identical(_in_partitions(survey, POND_GRID, rows, survey.bounds), whole)


@pytest.mark.parametrize("grid", [REGIONAL_180, GLOBAL], ids=["regional-0-360", "global"])
@pytest.mark.parametrize("rows", [1, 7, 64])
def test_lakes_across_180_partitions_equal_the_whole_layer_bit_for_bit(lakes_180, grid, rows):
    survey, frame = lakes_180
    # the lake across 180 is made contiguous: the layer's extent passes 180
    assert survey.bounds[2] > 180.0
    whole = build_weights(frame, grid, bounds=survey.bounds)
    assert np.isfinite(whole.area_before_repair_m2).sum() == 2
    assert_identical(_in_partitions(survey, grid, rows, survey.bounds), whole)


@pytest.mark.parametrize("block_size", [4, 16])
def test_spatial_blocks_with_the_layer_bounds_equal_the_whole_build(ponds, lakes_180, block_size):
    for (survey, frame), grid in ((ponds, POND_GRID), (lakes_180, REGIONAL_180)):
        whole = build_weights(frame, grid, bounds=survey.bounds)
        blocked = build_weights_in_blocks(frame, grid, block_size=block_size, bounds=survey.bounds)
        assert_identical(blocked, whole)


def _same(a: np.ndarray, b: np.ndarray) -> bool:
    try:
        np.testing.assert_array_equal(a, b)
    except AssertionError:
        return False
    return True


def _differing(a: ZonalWeights, b: ZonalWeights) -> list[str]:
    names = [n for n in ROW_FIELDS if not _same(getattr(a, n), getattr(b, n))]
    return names + ([] if np.array_equal(a.matrix.data, b.matrix.data) else ["matrix"])


@pytest.mark.parametrize("layer, grid, rtol", [("ponds", POND_GRID, 1e-6),
                                               ("lakes_180", REGIONAL_180, 1e-3)])  # fmt: skip
def test_without_the_bounds_partitions_differ_from_the_whole_layer(request, layer, grid, rtol):
    # The issue: each build centres its projections on the bodies it is given. Small UTM
    # ponds then differ in the last bits (areas ~1e-12, the weights of ponds over the grid's
    # edge ~1e-7); lakes some 40 km across, whose straight lon/lat edges are projected
    # vertex by vertex, by up to ~2e-4 in area and 4e-4 degrees in centroid when a
    # partition's centre is far from the layer's (measured on these layers).
    survey, frame = request.getfixturevalue(layer)
    whole = build_weights(frame, grid)
    split = _in_partitions(survey, grid, 7, None)
    assert {"polygon_area_m2", "centroid_lat", "matrix"} <= set(_differing(split, whole))
    np.testing.assert_allclose(split.polygon_area_m2, whole.polygon_area_m2, rtol=rtol)
    # Centred on the layer rather than on the few bodies over the grid's edge, the area of
    # their part inside moves by ~2e-7 (chords of the cut edge densified to a quarter cell,
    # projected about another centre): the bounds change no figure that matters.
    with_bounds = build_weights(frame, grid, bounds=survey.bounds)
    np.testing.assert_allclose(with_bounds.matrix.data, whole.matrix.data, rtol=1e-6)
    np.testing.assert_allclose(with_bounds.polygon_area_m2, whole.polygon_area_m2, rtol=1e-12)
    assert list(with_bounds.flags) == list(whole.flags)


def test_to_equal_area_with_the_bounds_projects_a_geometry_alike_in_any_subset(lakes_180):
    survey, frame = lakes_180
    geometry = np.asarray(frame.geometry.array, dtype=object)
    crs = CRS.from_user_input(frame.crs)
    whole = to_equal_area(geometry, crs, survey.bounds)
    # centred near 0 degrees for a layer spread over both sides of 180: every lake is far
    assert whole.far[~shapely.is_empty(geometry)].all()
    east = np.flatnonzero(shapely.bounds(geometry)[:, 0] < 0.0)  # the lakes at -180..-170
    alone = to_equal_area(geometry[east], crs, survey.bounds)
    np.testing.assert_array_equal(alone.far, whole.far[east])
    np.testing.assert_array_equal(
        shapely.get_coordinates(alone.geometry), shapely.get_coordinates(whole.geometry[east])
    )
    # without the bounds those lakes form a compact layer of their own: no antipode
    assert not to_equal_area(geometry[east], crs).far.any()


@pytest.mark.parametrize(
    "bounds", [(np.nan, np.nan, np.nan, np.nan), (1.0, 2.0, 0.0, 3.0), (0.0, 1.0)]
)
def test_bounds_that_are_not_an_extent_are_refused(lakes_180, bounds):
    _, frame = lakes_180
    with pytest.raises(GeometryError, match="not an extent"):
        build_weights(frame, REGIONAL_180, bounds=bounds)


def test_cache_key_holds_the_bounds(ponds):
    survey, frame = ponds
    plain = layer_key(frame, POND_GRID)
    keyed = layer_key(frame, POND_GRID, bounds=survey.bounds)
    assert keyed != plain
    assert layer_key(frame, POND_GRID, bounds=np.array(survey.bounds)) == keyed
    nudged = (survey.bounds[0], survey.bounds[1], np.nextafter(survey.bounds[2], np.inf),
              survey.bounds[3])  # fmt: skip
    assert layer_key(frame, POND_GRID, bounds=nudged) not in (plain, keyed)


def test_cache_builds_with_the_bounds_and_loads_them_back(tmp_path, ponds):
    survey, frame = ponds
    part = read_waterbody_rows(survey, 7, 30).frame
    cache = WeightsCache(tmp_path / "weights")
    expected = build_weights(part, POND_GRID, bounds=survey.bounds, require_overlap=False)
    built, loaded = cache.get_or_build(
        part,
        POND_GRID,
        bounds=survey.bounds,
        builder=lambda p, g, **kw: build_weights(p, g, require_overlap=False, **kw),
    )
    assert not loaded
    assert_identical(built, expected)
    again, loaded = cache.get_or_build(part, POND_GRID, bounds=survey.bounds)
    assert loaded
    assert_identical(again, expected)
    key = layer_key(part, POND_GRID, bounds=survey.bounds)
    assert [p.name for p in cache.directory.iterdir()] == [f"weights-{key}.npz"]


def test_concat_rows_undoes_take_rows(ponds):
    survey, frame = ponds
    whole = build_weights(frame, POND_GRID, bounds=survey.bounds)
    cuts = [0, 1, 2, 40, 40, 57, whole.n_waterbodies]
    parts = [whole.take_rows(np.arange(a, b)) for a, b in zip(cuts[:-1], cuts[1:], strict=True)]
    stacked = concat_rows(parts)
    assert_identical(stacked, whole)
    assert stacked.grid is whole.grid and stacked.flags.dtype == object
    # the stacked weights average like the whole
    values = np.random.default_rng(1).uniform(size=(3, *POND_GRID.shape))
    np.testing.assert_array_equal(stacked.apply(values)[0], whole.apply(values)[0])


def test_concat_rows_refuses_weights_of_other_grids(ponds):
    survey, frame = ponds
    other = GridSpec.from_centres(LON[:-1], LAT, "EPSG:4326")
    first = build_weights(frame.iloc[:20], POND_GRID, bounds=survey.bounds)
    second = build_weights(frame.iloc[20:], other, bounds=survey.bounds, require_overlap=False)
    with pytest.raises(ValueError, match="one grid"):
        concat_rows([first, second])
    with pytest.raises(ValueError, match="at least one"):
        concat_rows([])
