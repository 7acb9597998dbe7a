"""The layer a partition at a time: a survey, then rows ``[start, stop)``.

Every layer here is written to a real file the way GIS software and geopandas write them
(GeoPackage with fids from 1, from 101, or with gaps; Shapefile; GeoJSON; FlatGeobuf;
GeoParquet in several row groups, with and without a bbox covering column), and the rows
read partition by partition (1 row, 7 rows, the whole layer) must concatenate to exactly
what ``read_waterbodies`` gives for the whole layer: every column with its dtype, every
geometry to the bit, every flag and stated area. The survey's chunk size and the GeoParquet
batch size are made small so that the chunk-by-chunk folding (ids, dtypes, geometry types)
and the batches within a row group cross boundaries.
"""

from __future__ import annotations

import pickle
import warnings

import geopandas
import numpy as np
import pandas as pd
import pytest
import shapely
from shapely.geometry import (
    GeometryCollection,
    LineString,
    MultiPoint,
    MultiPolygon,
    Point,
    Polygon,
    box,
)

from lakeloss.errors import ConfigError, CRSError, GeometryError, InputDataError
from lakeloss.io import vector
from lakeloss.io.vector import read_waterbodies, read_waterbody_rows, survey_waterbodies

UTM = "EPSG:32755"
SIZES = (1, 7, None)  # None: the whole layer in one range


@pytest.fixture(autouse=True)
def small_survey_chunks(monkeypatch):
    monkeypatch.setattr(vector, "SURVEY_CHUNK_ROWS", 4)
    monkeypatch.setattr(vector, "_PARQUET_BATCH_ROWS", 2)  # row groups read in several batches


def _square(i: int, size: float = 200.0) -> Polygon:
    x = 500_000 + 1000 * i
    return box(x, 6_000_000, x + size, 6_000_000 + size)


def _ponds(count: int = 20) -> geopandas.GeoDataFrame:
    """Polygons of every awkward kind, with text, integer and real attributes.

    Row 5 is a MultiPolygon, 8 an invalid bow-tie, 11 empty, 13 null; ``depth_class`` is an
    integer with one empty value at row 15 (so the whole layer's column is real, while
    most partitions hold none), ``owner`` text with an empty value at row 2.
    """
    shapes: list = [_square(i) for i in range(count)]
    shapes[5] = MultiPolygon([_square(5, 80), shapely.affinity.translate(_square(5, 80), 300)])
    x = 500_000 + 8000
    shapes[8] = Polygon([(x, 6e6), (x + 200, 6e6 + 200), (x + 200, 6e6), (x, 6e6 + 200)])
    shapes[11] = Polygon()
    shapes[13] = None
    depth = pd.array(np.arange(count) % 4, dtype="Int64")
    depth[15] = pd.NA
    owner = [f"farm {i % 3}" for i in range(count)]
    owner[2] = None
    return geopandas.GeoDataFrame(
        {
            "dam_code": [f"D{i:03d}" for i in range(count)],
            "dam_no": np.arange(900, 900 - 7 * count, -7, dtype=np.int32),
            "depth_class": depth,
            "capacity_ml": np.linspace(0.5, 12.0, count),
            "owner": owner,
        },
        geometry=shapes,
        crs=UTM,
    )


def _write(frame: geopandas.GeoDataFrame, path, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # GDAL's notes on mixed types and null geometries
        frame.to_file(path, engine="pyogrio", **kwargs)
    return path


def _partitions(survey, size):
    size = survey.n_rows if size is None else size
    for start in range(0, survey.n_rows, size):
        yield read_waterbody_rows(survey, start, min(start + size, survey.n_rows))


def _assert_same_rows(path, **settings):
    """Rows read in ranges of each size concatenate to the whole layer's read."""
    whole = read_waterbodies(path, **settings)
    survey = survey_waterbodies(path, **settings)
    expected = whole.frame
    assert survey.n_rows == len(expected)
    present = expected.geometry[~expected.geometry.is_empty]
    assert survey.bounds == pytest.approx(tuple(present.total_bounds), rel=1e-15)
    assert survey.columns == tuple(expected.columns)
    assert survey.fields == dict(expected.drop(columns="geometry").dtypes)
    assert survey.id_field == whole.id_field
    assert survey.crs == expected.crs
    assert survey.crs_assumed == whole.crs_assumed
    for size in SIZES:
        parts = list(_partitions(survey, size))
        frame = pd.concat([part.frame for part in parts])
        pd.testing.assert_frame_equal(
            frame.drop(columns="geometry"), expected.drop(columns="geometry"), check_exact=True
        )
        assert frame.geometry.name == "geometry"
        assert frame.crs == expected.crs
        assert list(frame.geometry.to_wkb()) == list(expected.geometry.to_wkb())
        assert list(np.concatenate([p.flags for p in parts])) == list(whole.flags)
        for name in ("stated_area_m2", "field_area_m2"):
            if getattr(whole, name) is None:
                assert all(getattr(p, name) is None for p in parts)
            else:
                got = np.concatenate([getattr(p, name) for p in parts])
                np.testing.assert_array_equal(got, getattr(whole, name))
        for part in parts:
            assert (part.id_field, part.layer, part.path) == (
                whole.id_field,
                whole.layer,
                whole.path,
            )
            assert part.crs_assumed == whole.crs_assumed
            bounds = part.frame.index
            assert list(survey.body_ids(bounds[0], bounds[-1] + 1)) == list(
                part.frame[whole.id_field]
            )
    return whole, survey


def _with_fids(frame: geopandas.GeoDataFrame, fids) -> geopandas.GeoDataFrame:
    # GDAL takes a GeoPackage's feature ids from a column named like its FID column.
    return frame.assign(fid=np.asarray(fids, dtype=np.int64))


@pytest.mark.parametrize(
    "fids",
    [
        None,
        np.arange(101, 121),
        np.r_[3, 4, 9, 10, 11, 40:54, 90],
        np.random.default_rng(5).permutation(np.arange(7, 27)),
    ],
    ids=["from-1", "from-101", "with-gaps", "written-out-of-order"],
)
def test_geopackage_rows_match_whole_read(tmp_path, fids):
    frame = _ponds()
    if fids is not None:
        frame = _with_fids(frame, fids)
    path = _write(frame, tmp_path / "dams.gpkg", layer="dams")
    whole, survey = _assert_same_rows(path, id_field="dam_code")
    _assert_same_rows(path, id_field="dam_no")  # integer ids, as GIS software writes them
    assert whole.frame["depth_class"].dtype == np.float64  # widened by the one empty value
    consecutive = fids is None or np.ptp(fids) == len(fids) - 1
    assert (survey.access.fid_range is not None) == consecutive
    assert list(whole.flags).count("geometry_null") == 1


def test_geopackage_of_several_layers_with_its_own_fid_name(tmp_path):
    # A desktop GIS export: the ponds beside a second layer, a layer name with a space and
    # a quote, and a FID column of its own name, numbered from 2001.
    path = tmp_path / "catchment.gpkg"
    _write(_ponds().iloc[:3], path, layer="streams")
    ponds = _ponds().assign(dam_fid=np.arange(2001, 2021))
    _write(ponds, path, layer='farm "dams" 2031', layer_options={"FID": "dam_fid"})
    whole, survey = _assert_same_rows(path, layer='farm "dams" 2031', id_field="dam_code")
    assert survey.access.fid_range == ("dam_fid", 2001)
    assert "dam_fid" not in whole.frame.columns


@pytest.mark.parametrize("suffix", [".shp", ".geojson", ".fgb"])
def test_gdal_formats_rows_match_whole_read(tmp_path, suffix):
    # FlatGeobuf keeps null geometries only without its spatial index.
    options = {"SPATIAL_INDEX": "NO"} if suffix == ".fgb" else {}
    path = _write(_ponds(), tmp_path / f"dams{suffix}", layer_options=options)
    _assert_same_rows(path)  # default ids 1..N
    _assert_same_rows(path, id_field="dam_code")


@pytest.mark.parametrize("covering", [False, True])
def test_geoparquet_row_groups_match_whole_read(tmp_path, covering):
    path = tmp_path / "dams.parquet"
    frame = _ponds(23).set_index("dam_code", drop=False).rename_geometry("outline")
    frame.to_parquet(path, row_group_size=5, write_covering_bbox=covering)
    import pyarrow.parquet as pq

    assert pq.ParquetFile(path).metadata.num_row_groups == 5
    whole, survey = _assert_same_rows(path, id_field="dam_code")
    assert survey.bounds == pytest.approx(tuple(frame.total_bounds))
    assert survey.access.group_starts == (0, 5, 10, 15, 20, 23)
    _assert_same_rows(path)


def test_geoparquet_with_a_second_geometry_column(tmp_path):
    path = tmp_path / "dams.parquet"
    frame = _ponds()
    frame["centre"] = geopandas.GeoSeries(frame.geometry.centroid, crs=UTM)
    frame.to_parquet(path, row_group_size=8)
    whole, survey = _assert_same_rows(path, id_field="dam_code")
    assert survey.fields["centre"] == "geometry"


def _register(count: int = 15) -> geopandas.GeoDataFrame:
    """Farm dams as points with an area in hectares, a few drawn as polygons."""
    shapes: list = [Point(500_000 + 1000 * i, 6_000_000) for i in range(count)]
    shapes[3] = _square(3)
    shapes[6] = MultiPoint([(506_000, 6e6), (506_000, 6e6)])  # one location, twice
    shapes[9] = Point()
    shapes[12] = MultiPolygon([_square(12, 50), shapely.affinity.translate(_square(12, 50), 100)])
    return geopandas.GeoDataFrame(
        {"dam_code": [f"R{i}" for i in range(count)], "area_ha": np.linspace(0.2, 3.0, count)},
        geometry=shapes,
        crs=UTM,
    )


@pytest.mark.parametrize("suffix", [".gpkg", ".geojson", ".parquet"])
@pytest.mark.parametrize("area_source", ["geometry", "field"])
def test_points_with_an_area_match_whole_read(tmp_path, suffix, area_source):
    path = tmp_path / f"register{suffix}"
    frame = _register()
    if suffix == ".parquet":
        frame.to_parquet(path, row_group_size=4)
    else:
        _write(frame, path)
    settings = {"area_field": "area_ha", "area_units": "ha", "area_source": area_source}
    whole, survey = _assert_same_rows(path, id_field="dam_code", **settings)
    assert survey.has_points
    assert np.isfinite(whole.stated_area_m2).sum() == (14 if area_source == "field" else 12)


def test_register_of_points_only(tmp_path):
    frame = _register().iloc[[0, 1, 2, 4, 5, 7, 8, 10]]  # points, declared as such
    path = _write(frame, tmp_path / "register.gpkg")
    whole, survey = _assert_same_rows(path, area_field="area_ha", area_units="ha")
    assert survey.has_points and survey.geometry_types == ("Point",)
    assert survey.bounds == pytest.approx(tuple(frame.total_bounds))
    with pytest.raises(GeometryError) as whole_error:
        read_waterbodies(path)
    with pytest.raises(GeometryError) as surveyed:
        survey_waterbodies(path)
    assert str(surveyed.value) == str(whole_error.value)


def test_survey_refuses_points_without_area_as_whole_read(tmp_path):
    path = _write(_register(), tmp_path / "register.gpkg")
    with pytest.raises(GeometryError) as whole:
        read_waterbodies(path, id_field="dam_code")
    with pytest.raises(GeometryError) as surveyed:
        survey_waterbodies(path, id_field="dam_code")
    assert str(surveyed.value) == str(whole.value)
    assert "12 Point features" in str(whole.value)


def test_survey_refuses_lines_as_whole_read(tmp_path):
    frame = _ponds()
    shapes = list(frame.geometry)
    for row in (1, 9, 10):
        shapes[row] = LineString([(5e5, 6e6), (5e5 + 10 * row, 6e6)])
    path = _write(frame.set_geometry(shapes), tmp_path / "dams.gpkg")
    with pytest.raises(GeometryError) as whole:
        read_waterbodies(path)
    with pytest.raises(GeometryError) as surveyed:
        survey_waterbodies(path)
    assert str(surveyed.value) == str(whole.value)


def test_collections_keep_their_polygons_row_by_row(tmp_path):
    frame = _ponds()
    shapes = list(frame.geometry)
    shapes[4] = GeometryCollection([_square(4), Point(504_100, 6e6 + 100)])
    shapes[7] = GeometryCollection()
    path = _write(frame.set_geometry(shapes), tmp_path / "dams.gpkg")
    whole, survey = _assert_same_rows(path, id_field="dam_code")
    assert whole.flags[4] == "collection_polygons_kept"
    assert "GeometryCollection" in survey.geometry_types


def _crossing_180() -> geopandas.GeoDataFrame:
    """Lakes on an island group astride 180 degrees: split at +-180, or a ring jumping over."""
    split = MultiPolygon([box(179.9, -17.2, 180.0, -17.1), box(-180.0, -17.2, -179.95, -17.1)])
    jumping = Polygon([(179.95, -16.5), (-179.9, -16.5), (-179.9, -16.4), (179.95, -16.4)])
    west = box(-179.5, -18.0, -179.4, -17.9)
    east = box(178.5, -18.0, 178.6, -17.9)
    shapes = [east, split, west, jumping, east.buffer(0.01), split]
    return geopandas.GeoDataFrame(
        {"lake": ["L1", "L2", "L3", "L4", "L5", "L6"]}, geometry=shapes, crs="EPSG:4326"
    )


@pytest.mark.parametrize("suffix", [".gpkg", ".parquet"])
def test_crossing_180_degrees_rows_match_whole_read(tmp_path, suffix):
    path = tmp_path / f"lakes{suffix}"
    frame = _crossing_180()
    if suffix == ".parquet":
        frame.to_parquet(path, row_group_size=2)
    else:
        _write(frame, path)
    whole, survey = _assert_same_rows(path, id_field="lake")
    assert whole.frame.geometry.bounds["maxx"].max() > 180.0  # made contiguous east of 180
    assert survey.bounds == tuple(whole.frame.total_bounds)


def test_assumed_crs_reaches_every_row_range(tmp_path):
    path = _write(_ponds().set_crs(None, allow_override=True), tmp_path / "dams.gpkg")
    with pytest.raises(CRSError) as whole:
        read_waterbodies(path)
    with pytest.raises(CRSError) as surveyed:
        survey_waterbodies(path)
    assert str(surveyed.value) == str(whole.value)
    whole_layer, survey = _assert_same_rows(path, crs=UTM)
    assert survey.crs_assumed and survey.crs.to_epsg() == 32755


def test_crs_contradicting_the_file_is_refused_as_whole_read(tmp_path):
    path = _write(_ponds(), tmp_path / "dams.gpkg")
    with pytest.raises(ConfigError) as whole:
        read_waterbodies(path, crs="EPSG:4326")
    with pytest.raises(ConfigError) as surveyed:
        survey_waterbodies(path, crs="EPSG:4326")
    assert str(surveyed.value) == str(whole.value)


@pytest.mark.parametrize("suffix", [".gpkg", ".parquet"])
def test_duplicate_ids_across_chunks_refused_as_whole_read(tmp_path, suffix):
    frame = _ponds()
    frame.loc[[1, 17], "dam_code"] = "D900"  # in different survey chunks
    frame.loc[[6, 9, 12], "dam_code"] = "D901"
    path = tmp_path / f"dams{suffix}"
    if suffix == ".parquet":
        frame.to_parquet(path, row_group_size=3)
    else:
        _write(frame, path)
    with pytest.raises(GeometryError) as whole:
        read_waterbodies(path, id_field="dam_code")
    with pytest.raises(GeometryError) as surveyed:
        survey_waterbodies(path, id_field="dam_code")
    assert str(surveyed.value) == str(whole.value)
    assert "2 duplicated values ('D900', 'D901') on 5 features" in str(whole.value)


def test_duplicate_integer_ids_refused_as_whole_read(tmp_path):
    frame = _ponds()
    frame.loc[[3, 19], "dam_no"] = -5
    path = _write(frame, tmp_path / "dams.gpkg")
    with pytest.raises(GeometryError) as whole:
        read_waterbodies(path, id_field="dam_no")
    with pytest.raises(GeometryError) as surveyed:
        survey_waterbodies(path, id_field="dam_no")
    assert str(surveyed.value) == str(whole.value)
    assert "1 duplicated values (-5) on 2 features" in str(whole.value)


def test_null_ids_refused_as_whole_read(tmp_path):
    path = _write(_ponds(), tmp_path / "dams.gpkg")
    with pytest.raises(GeometryError) as whole:
        read_waterbodies(path, id_field="owner")
    with pytest.raises(GeometryError) as surveyed:
        survey_waterbodies(path, id_field="owner")
    assert str(surveyed.value) == str(whole.value)
    assert "(rows 2)" in str(whole.value)


@pytest.mark.parametrize(
    ("settings", "error"),
    [
        ({"id_field": "dam_cod"}, ConfigError),
        ({"area_field": "area"}, ConfigError),
        ({"layer": "lakes"}, ConfigError),
    ],
)
def test_configuration_refused_as_whole_read(tmp_path, settings, error):
    path = _write(_ponds(), tmp_path / "dams.gpkg", layer="dams")
    with pytest.raises(error) as whole:
        read_waterbodies(path, **settings)
    with pytest.raises(error) as surveyed:
        survey_waterbodies(path, **settings)
    assert str(surveyed.value) == str(whole.value)


def test_default_id_column_already_present_refused_as_whole_read(tmp_path):
    path = _write(_ponds().assign(waterbody_id=1), tmp_path / "dams.gpkg")
    with pytest.raises(ConfigError) as whole:
        read_waterbodies(path)
    with pytest.raises(ConfigError) as surveyed:
        survey_waterbodies(path)
    assert str(surveyed.value) == str(whole.value)


def test_layer_without_features_refused_as_whole_read(tmp_path):
    path = _write(_ponds().iloc[:0], tmp_path / "dams.gpkg")
    with pytest.raises(InputDataError) as whole:
        read_waterbodies(path)
    with pytest.raises(InputDataError) as surveyed:
        survey_waterbodies(path)
    assert str(surveyed.value) == str(whole.value)


def test_survey_holds_ids_and_extent_not_geometry(tmp_path):
    path = _write(_ponds(), tmp_path / "dams.gpkg")
    survey = survey_waterbodies(path, id_field="dam_code")
    assert survey.ids.tolist() == [f"D{i:03d}" for i in range(20)]
    assert survey.geometry_types == ("Unknown",) or set(survey.geometry_types) <= {
        "Polygon",
        "MultiPolygon",
    }
    expected = _ponds().total_bounds
    assert survey.bounds == pytest.approx(tuple(expected))
    assert not survey.has_points


@pytest.mark.parametrize("suffix", [".gpkg", ".parquet"])
def test_survey_without_ids_pickled_reads_the_same_rows(tmp_path, suffix):
    # What a dask worker gets: the survey sent without its ids, through pickle.
    path = tmp_path / f"dams{suffix}"
    frame = _ponds()
    if suffix == ".parquet":
        frame.to_parquet(path, row_group_size=6)
    else:
        _write(frame, path)
    for id_field in ("dam_code", None):
        survey = survey_waterbodies(path, id_field=id_field)
        sent = pickle.loads(pickle.dumps(survey.without_ids()))
        assert sent.ids is None
        here, there = read_waterbody_rows(survey, 5, 14), read_waterbody_rows(sent, 5, 14)
        pd.testing.assert_frame_equal(there.frame, here.frame, check_exact=True)
        assert list(there.flags) == list(here.flags)


@pytest.mark.parametrize("suffix", [".gpkg", ".parquet"])
def test_layer_rewritten_after_the_survey_is_refused(tmp_path, suffix):
    path = tmp_path / f"dams{suffix}"
    write = (lambda f: f.to_parquet(path)) if suffix == ".parquet" else (lambda f: _write(f, path))
    write(_ponds())
    survey = survey_waterbodies(path)
    path.unlink()
    write(_ponds().iloc[:16])  # someone re-exports the layer mid-run
    assert len(read_waterbody_rows(survey, 0, 14)) == 14
    with pytest.raises(InputDataError, match="gave 2 features for rows 14..19, expected 6"):
        read_waterbody_rows(survey, 14, 20)


def test_row_range_outside_the_layer_is_refused(tmp_path):
    survey = survey_waterbodies(_write(_ponds(), tmp_path / "dams.gpkg"))
    with pytest.raises(ValueError, match="not within"):
        read_waterbody_rows(survey, 15, 21)
