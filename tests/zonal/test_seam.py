"""Global grids wrap at their longitude seam; regional and projected grids do not.

A grid spanning all 360 degrees of longitude has no east or west edge. Each test lays an
invented lake over the storage seam (at -0.5/359.5 for a 1-degree grid stored 0..359, at
179.5/-180.5 for one stored -180..179) and compares its weights with the same field stored
the other way round, where the lake sits in the interior, or with a regional crop of the grid
that holds the lake whole. The field values are random, so a cell mapped to the wrong stored
column changes the mean.
"""

from __future__ import annotations

import hashlib

import geopandas as gpd
import numpy as np
import pytest
import shapely
from affine import Affine
from pyproj import Geod

from lakeloss.zonal import GridSpec, build_weights, layer_key, reproject_to_grid

LAT_NORTH_UP = np.arange(89.5, -90.0, -1.0)
LON_0_359 = np.arange(360.0)  # cell edges -0.5 .. 359.5
LON_180 = np.arange(-180.0, 180.0)  # cell edges -180.5 .. 179.5


def _lakes(centres, radius=0.3) -> gpd.GeoDataFrame:
    """Round lakes (64-gons) of ``radius`` degrees around (lon, lat) centres, in WGS84."""
    points = shapely.points(np.asarray(centres, dtype=float))
    return gpd.GeoDataFrame(
        {"name": [f"lake {i}" for i in range(len(centres))]},
        geometry=shapely.buffer(points, radius, quad_segs=16),
        crs="EPSG:4326",
    )


# Lakes over both seams, with their centres just west and just east of each seam line.
SEAM_LAKES = [
    (-0.62, 10.2),
    (-0.41, -35.3),
    (359.45, 47.7),  # stored in 0..360 longitudes itself
    (179.38, -20.3),
    (179.63, 61.4),
    (-180.3, 5.5),  # west of -180: the same water as 179.7
    (180.0, -16.8),  # on the antimeridian
    (12.3, 41.2),  # an ordinary lake far from both seams
]


@pytest.fixture
def field(rng) -> np.ndarray:
    """Random values on the 1-degree globe, stored with longitudes 0..359, north up."""
    return rng.random((3, LAT_NORTH_UP.size, LON_0_359.size))


def _roll_to_180(values: np.ndarray) -> np.ndarray:
    """The same field stored with longitudes -180..179."""
    return np.roll(values, 180, axis=-1)


def _assert_same_weights(a, b, values_a, values_b):
    np.testing.assert_allclose(a.apply(values_a)[0], b.apply(values_b)[0], rtol=1e-9)
    np.testing.assert_allclose(a.grid_area_m2, b.grid_area_m2, rtol=1e-9)
    np.testing.assert_allclose(a.grid_coverage, b.grid_coverage, rtol=1e-9)
    assert list(a.flags) == list(b.flags)


@pytest.mark.parametrize(
    ("lon", "wraps"),
    [
        (LON_0_359, True),
        (LON_180, True),
        (np.arange(0.0, 360.0, 0.25), True),  # ERA5-like, edges -0.125 .. 359.875
        (np.arange(0.5, 360.0, 1.0), True),  # CMIP-like, edges 0 .. 360
        (np.arange(192, dtype=np.float32) * np.float32(1.875), True),  # float32 rounding
        (LON_0_359[::-1], True),  # stored east to west
        (np.arange(0.0, 359.0), False),  # one column short: a gap of a whole cell
        (np.arange(0.0, 361.0), True),  # 0 and 360 both stored: the last column repeats
        (np.arange(-180.0, 180.1, 0.25), True),  # ERA5 cut at -180..180 inclusive
        (np.arange(0.0, 362.0), False),  # two columns more than a turn
        (np.arange(0.0, 361.0, 1.1), False),  # 1.1-degree cells: 328 make 360.8 degrees
        (np.arange(-20.0, 60.0), False),  # regional
    ],
)
def test_wrap_is_detected_for_global_grids_only(lon, wraps):
    assert GridSpec.from_centres(lon, LAT_NORTH_UP, "EPSG:4326").wraps_longitude is wraps


def test_a_global_geotiff_transform_wraps():
    # GeoTIFFs give the grid as an affine transform: 0.5-degree cells from -180 or from 0
    for west in (-180.0, 0.0, -0.25):
        grid = GridSpec.from_transform(Affine(0.5, 0, west, 0, -0.5, 90.0), 720, 360, "EPSG:4326")
        assert grid.wraps_longitude
    regional = GridSpec.from_transform(Affine(0.5, 0, -180.0, 0, -0.5, 90.0), 719, 360,
                                       "EPSG:4326")  # fmt: skip
    assert not regional.wraps_longitude


def test_a_projected_grid_360_units_wide_does_not_wrap():
    grid = GridSpec.from_transform(Affine(10.0, 0, 4_000_000.0, 0, -10.0, 3_000_000.0), 36, 20,
                                   "EPSG:3035")  # fmt: skip
    assert grid.bounds[2] - grid.bounds[0] == 360.0
    assert grid.full_turn is None and not grid.wraps_longitude
    x0, y0 = grid.x_edges[-1], grid.y_edges[0] - 100.0
    lake = gpd.GeoDataFrame(geometry=[shapely.box(x0 - 30, y0 - 30, x0 + 30, y0 + 30)],
                            crs="EPSG:3035")  # fmt: skip
    weights = build_weights(lake, grid)
    np.testing.assert_allclose(weights.grid_coverage, 0.5, rtol=1e-6)
    assert list(weights.flags) == ["partly_outside_grid"]


def test_a_geographic_grid_in_grads_wraps_at_400():
    # EPSG:4807 (NTF Paris) counts longitude in grads from the Paris meridian: 400 per turn
    grid = GridSpec.from_centres(np.arange(0.5, 400.0), np.arange(99.5, -100.0, -1.0), "EPSG:4807")
    assert grid.full_turn == pytest.approx(400.0)
    assert grid.wraps_longitude
    assert not GridSpec.from_centres(np.arange(0.5, 360.0), [1.5, 0.5], "EPSG:4807").wraps_longitude


def test_grid_stored_0_359_wraps_like_the_same_field_stored_minus_180(field):
    # Before the fix the lakes over -0.5/359.5 had coverage ~0.5 and partly_outside_grid.
    lakes = _lakes(SEAM_LAKES)
    grid_0_359 = GridSpec.from_centres(LON_0_359, LAT_NORTH_UP, "EPSG:4326")
    grid_180 = GridSpec.from_centres(LON_180, LAT_NORTH_UP, "EPSG:4326")
    seam = build_weights(lakes, grid_0_359)
    reference = build_weights(lakes, grid_180)
    _assert_same_weights(seam, reference, field, _roll_to_180(field))
    np.testing.assert_array_equal(seam.grid_coverage, 1.0)
    assert set(seam.flags) == {""}


def test_grid_stored_minus_180_wraps_like_the_same_field_stored_0_359(field):
    # The lakes over 180 degrees are the seam cases here; in 0..359 they are interior.
    lakes = _lakes(SEAM_LAKES, radius=0.45)
    grid_180 = GridSpec.from_centres(LON_180, LAT_NORTH_UP, "EPSG:4326")
    grid_0_359 = GridSpec.from_centres(LON_0_359, LAT_NORTH_UP, "EPSG:4326")
    seam = build_weights(lakes, grid_180)
    reference = build_weights(lakes, grid_0_359)
    _assert_same_weights(seam, reference, _roll_to_180(field), field)
    np.testing.assert_array_equal(seam.grid_coverage, 1.0)
    assert set(seam.flags) == {""}


@pytest.mark.parametrize("descending", [False, True])
def test_a_repeated_last_column_is_left_out_and_the_grid_wraps(field, descending):
    # Files cut at -180..180 inclusive store the column at ±180 twice.
    lakes = _lakes(SEAM_LAKES, radius=0.45)
    lon = np.arange(-180.0, 181.0)
    values = np.concatenate([_roll_to_180(field), _roll_to_180(field)[:, :, :1]], axis=2)
    if descending:
        lon, values = lon[::-1], values[:, :, ::-1]
    repeated = GridSpec.from_centres(lon, LAT_NORTH_UP, "EPSG:4326")
    assert repeated.turn_columns == 360
    weights = build_weights(lakes, repeated)
    reference = build_weights(lakes, GridSpec.from_centres(LON_0_359, LAT_NORTH_UP, "EPSG:4326"))
    _assert_same_weights(weights, reference, values, field)
    np.testing.assert_array_equal(weights.grid_coverage, 1.0)
    # only one of the two copies of the ±180 column is ever used
    used = np.unique(weights.matrix.indices % 361)
    assert not ({0, 360} <= set(used))


def test_seam_lake_weights_sum_to_its_area_and_sit_in_the_stored_columns(field):
    lakes = _lakes([(-0.5, 10.5), (179.5, -20.5)], radius=0.2)
    weights = build_weights(lakes, GridSpec.from_centres(LON_0_359, LAT_NORTH_UP, "EPSG:4326"))
    rows = weights.matrix.toarray()
    np.testing.assert_allclose(rows.sum(axis=1), weights.polygon_area_m2, rtol=1e-12)
    # the lake over the seam of the 0..359 grid straddles columns 359 and 0 of row 79
    # (10..11 N), half its area in each; the other one straddles columns 179 and 180
    columns = [sorted(np.flatnonzero(row) % 360) for row in rows]
    assert columns == [[0, 359], [179, 180]]
    assert set(np.flatnonzero(rows[0]) // 360) == {79}
    halves = rows[0][np.flatnonzero(rows[0])]
    np.testing.assert_allclose(halves, 0.5 * weights.polygon_area_m2[0], rtol=1e-3)


def test_seam_lake_equals_a_regional_crop_that_holds_it_whole(field):
    # an independent reference: a 20 x 20 degree regional grid (no wrap) around the seam
    lakes = _lakes([(-0.55, 10.3), (-0.42, 3.1)], radius=0.35)
    whole = build_weights(lakes, GridSpec.from_centres(LON_0_359, LAT_NORTH_UP, "EPSG:4326"))
    crop_lon = np.arange(-10.0, 10.0)
    crop = GridSpec.from_centres(crop_lon, LAT_NORTH_UP[70:90], "EPSG:4326")
    assert not crop.wraps_longitude
    crop_values = field[:, 70:90, :][:, :, crop_lon.astype(int) % 360]
    _assert_same_weights(whole, build_weights(lakes, crop), field, crop_values)


def test_south_up_and_east_to_west_global_grids_wrap_too(field):
    lakes = _lakes(SEAM_LAKES)
    reference = build_weights(lakes, GridSpec.from_centres(LON_180, LAT_NORTH_UP, "EPSG:4326"))
    flipped = GridSpec.from_centres(LON_0_359[::-1], LAT_NORTH_UP[::-1], "EPSG:4326")
    _assert_same_weights(
        build_weights(lakes, flipped), reference, field[:, ::-1, ::-1], _roll_to_180(field)
    )


def test_global_band_cuts_at_its_north_and_south_edges_only(field):
    # A latitude band of a global grid (as cut from a reanalysis): a lake over the seam and
    # the band's south edge is flagged for the southern overhang alone.
    band = slice(30, 120)  # 59.5 N .. 29.5 S centres, edges 60 N .. 30 S
    lakes = _lakes([(-0.5, -30.0), (179.5, 60.0), (-0.5, 10.0)], radius=0.4)
    seam = build_weights(lakes, GridSpec.from_centres(LON_0_359, LAT_NORTH_UP[band], "EPSG:4326"))
    reference = build_weights(lakes, GridSpec.from_centres(LON_180, LAT_NORTH_UP[band],
                                                           "EPSG:4326"))  # fmt: skip
    _assert_same_weights(seam, reference, field[:, band], _roll_to_180(field)[:, band])
    np.testing.assert_allclose(seam.grid_coverage[:2], 0.5, rtol=2e-2)
    assert list(seam.flags) == ["partly_outside_grid", "partly_outside_grid", ""]


def test_regional_grid_keeps_its_edges(field):
    # 359 columns: the last degree is missing, so the seam is a real edge of the data
    lon = np.arange(0.0, 359.0)
    grid = GridSpec.from_centres(lon, LAT_NORTH_UP, "EPSG:4326")
    weights = build_weights(_lakes([(-0.5, 10.0), (358.5, 20.0)], radius=0.3), grid)
    np.testing.assert_allclose(weights.grid_coverage, 0.5, rtol=2e-2)
    assert list(weights.flags) == ["partly_outside_grid", "partly_outside_grid"]


def test_projected_layer_over_the_antimeridian_is_made_contiguous(field):
    # A lake drawn in UTM zone 60S (metres) across 180 degrees: reprojected, its ring jumps
    # from +180 to -180 unless it is unwrapped.
    utm = "EPSG:32760"
    centre = gpd.GeoSeries.from_xy([180.0], [-17.0], crs=4326).to_crs(utm).iloc[0]
    lake = gpd.GeoDataFrame(geometry=[centre.buffer(20_000.0, quad_segs=16)], crs=utm)
    in_grid = reproject_to_grid(lake, GridSpec.from_centres(LON_180, LAT_NORTH_UP, "EPSG:4326"))
    xmin, _, xmax, _ = in_grid.total_bounds
    assert xmax - xmin < 1.0
    grid_180 = GridSpec.from_centres(LON_180, LAT_NORTH_UP, "EPSG:4326")
    grid_0_359 = GridSpec.from_centres(LON_0_359, LAT_NORTH_UP, "EPSG:4326")
    seam, reference = build_weights(lake, grid_180), build_weights(lake, grid_0_359)
    _assert_same_weights(seam, reference, _roll_to_180(field), field)
    np.testing.assert_allclose(seam.grid_coverage, 1.0)


def test_cache_key_tells_a_wrapping_grid_from_the_same_edges_cut_at_the_seam():
    # Weights cached before grids wrapped were cut at the seam; the key must not match them.
    def key_without_wrap(grid):
        digest = hashlib.sha256()
        digest.update(grid.crs.to_wkt().encode())
        digest.update(np.ascontiguousarray(grid.x_edges, dtype="<f8").tobytes())
        digest.update(b"|")
        digest.update(np.ascontiguousarray(grid.y_edges, dtype="<f8").tobytes())
        return digest.hexdigest()

    wrapping = GridSpec.from_centres(LON_0_359, LAT_NORTH_UP, "EPSG:4326")
    regional = GridSpec.from_centres(np.arange(0.0, 359.0), LAT_NORTH_UP, "EPSG:4326")
    assert wrapping.key() != key_without_wrap(wrapping)
    assert regional.key() == key_without_wrap(regional)
    lakes = _lakes(SEAM_LAKES)
    assert layer_key(lakes, wrapping) != layer_key(lakes, regional)


@pytest.mark.parametrize(
    "centres",
    [
        [(-179.9, 0.2), (179.9, -0.2)],  # the layer's middle (0, 0) is the lakes' antipode
        [(-179.5, 1.0), (179.5, -1.0), (12.3, 41.2)],
        [(178.5, -17.5), (-170.0, 64.0), (10.0, 50.0), (145.0, -35.0), (-100.0, 60.0)],
    ],
)
def test_true_area_of_lakes_on_both_sides_of_180(centres):
    # Areas used to come from one azimuthal projection centred on the layer's bounding box,
    # which puts lakes either side of 180 degrees near its antipode: 15 times too large for
    # the first layer. Reference: pyproj's geodesic polygon area (Karney 2013) on WGS84.
    lakes = _lakes(centres, radius=0.05)
    weights = build_weights(lakes, GridSpec.from_centres(LON_180, LAT_NORTH_UP, "EPSG:4326"))
    geod = Geod(ellps="WGS84")
    geodesic = [abs(geod.geometry_area_perimeter(g)[0]) for g in lakes.geometry]
    np.testing.assert_allclose(weights.polygon_area_m2, geodesic, rtol=1e-7)
    np.testing.assert_allclose(weights.centroid_lon % 360, np.array(centres)[:, 0] % 360,
                               atol=1e-4)  # fmt: skip
    np.testing.assert_allclose(weights.grid_coverage, 1.0, rtol=1e-9)
