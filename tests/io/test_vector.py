"""Reading the water-body layer: formats, layers, CRS, ids and geometry types."""

from __future__ import annotations

import geopandas
import numpy as np
import pytest
from shapely.geometry import GeometryCollection, LineString, Point, Polygon, box

from lakeloss.errors import ConfigError, CRSError, GeometryError, InputDataError
from lakeloss.io.vector import list_layers, read_waterbodies


def _write(frame: geopandas.GeoDataFrame, path, **kwargs):
    frame.to_file(path, engine="pyogrio", **kwargs)
    return path


@pytest.mark.parametrize("suffix", [".gpkg", ".shp", ".geojson"])
def test_reads_gdal_formats_with_default_ids(tmp_path, build, suffix):
    path = _write(build.ponds(), tmp_path / f"ponds{suffix}")
    layer = read_waterbodies(path)
    assert layer.id_field == "waterbody_id"
    assert layer.frame["waterbody_id"].tolist() == [1, 2, 3]
    assert layer.frame["pond_code"].tolist() == ["P01", "P02", "P03"]
    assert layer.frame.geometry.name == "geometry"
    assert layer.frame.crs.to_epsg() == 32755
    assert not layer.crs_assumed
    assert list(layer.flags) == ["", "", ""]
    assert layer.frame.index.equals(geopandas.pd.RangeIndex(3))


def _has_pyarrow() -> bool:
    try:
        import pyarrow.parquet  # noqa: F401
    except ImportError:
        return False
    return True


def test_geoparquet_is_read_or_needs_pyarrow(tmp_path, build):
    # GeoParquet support rides on pyarrow, an optional dependency; without it the reader
    # must say so in one line rather than leak an ImportError.
    path = tmp_path / "ponds.parquet"
    if not _has_pyarrow():
        path.write_bytes(b"PAR1 not really parquet PAR1")
        with pytest.raises(InputDataError, match="needs the optional package pyarrow"):
            read_waterbodies(path)
        return
    build.ponds().rename_geometry("outline").to_parquet(path)
    layer = read_waterbodies(path, id_field="pond_code")
    assert layer.frame.geometry.name == "geometry"
    assert layer.id_field == "pond_code"
    assert layer.layer is None
    assert list_layers(path) == ["ponds"]


def test_missing_file_is_input_data_error(tmp_path):
    with pytest.raises(InputDataError, match="does not exist"):
        read_waterbodies(tmp_path / "nowhere.gpkg")


def test_directory_gdal_cannot_open_is_input_data_error(tmp_path):
    folder = tmp_path / "empty_folder"
    folder.mkdir()
    with pytest.raises(InputDataError, match="directory"):
        read_waterbodies(folder)


def test_garbage_bytes_are_input_data_error(tmp_path):
    path = tmp_path / "ponds.gpkg"
    path.write_bytes(b"\x00\x01 this is not a geopackage \xff" * 40)
    with pytest.raises(InputDataError, match="corrupt"):
        read_waterbodies(path)


def test_truncated_geopackage_is_input_data_error(tmp_path, pond_gpkg):
    content = pond_gpkg.read_bytes()
    truncated = tmp_path / "truncated.gpkg"
    truncated.write_bytes(content[: len(content) // 3])
    with pytest.raises(InputDataError):
        read_waterbodies(truncated)


def test_several_layers_need_a_choice(tmp_path, build):
    path = tmp_path / "two.gpkg"
    _write(build.ponds(), path, layer="dams")
    _write(build.ponds(2), path, layer="tailings", mode="a")
    assert list_layers(path) == ["dams", "tailings"]
    with pytest.raises(ConfigError, match=r"2 layers \('dams', 'tailings'\)"):
        read_waterbodies(path)
    chosen = read_waterbodies(path, layer="tailings")
    assert len(chosen) == 2 and chosen.layer == "tailings"
    with pytest.raises(ConfigError, match="'dams', 'tailings'"):
        read_waterbodies(path, layer="lagoons")


def test_no_crs_needs_override(tmp_path, build):
    with pytest.warns(UserWarning, match="'crs' was not provided"):
        path = _write(build.ponds(crs=None), tmp_path / "ponds.gpkg")
    with pytest.raises(CRSError, match=r'\[waterbodies\] crs = "EPSG'):
        read_waterbodies(path)
    layer = read_waterbodies(path, crs="EPSG:32755")
    assert layer.crs_assumed
    assert layer.frame.crs.to_epsg() == 32755


def test_crs_override_contradicting_file_is_refused(pond_gpkg):
    with pytest.raises(ConfigError, match="agree"):
        read_waterbodies(pond_gpkg, crs="EPSG:4326")
    assert not read_waterbodies(pond_gpkg, crs="EPSG:32755").crs_assumed


def test_unparseable_crs_override_is_crs_error(pond_gpkg):
    with pytest.raises(CRSError, match="not a CRS"):
        read_waterbodies(pond_gpkg, crs="EPSG:not-a-code")


def test_missing_id_field_suggests_nearest(pond_gpkg):
    with pytest.raises(ConfigError, match="did you mean 'pond_code'.*'depth_m'"):
        read_waterbodies(pond_gpkg, id_field="pondcode")


def test_existing_default_id_column_is_not_overwritten(tmp_path, build):
    frame = build.ponds()
    frame["waterbody_id"] = [7, 8, 9]
    path = _write(frame, tmp_path / "ponds.gpkg")
    with pytest.raises(ConfigError, match="already has a 'waterbody_id'"):
        read_waterbodies(path)
    assert read_waterbodies(path, id_field="waterbody_id").frame["waterbody_id"].tolist() == [
        7,
        8,
        9,
    ]


def test_duplicate_ids_report_count_and_examples(tmp_path, build):
    frame = build.ponds(4)
    frame["pond_code"] = ["A", "B", "A", "B"]
    path = _write(frame, tmp_path / "ponds.gpkg")
    with pytest.raises(GeometryError, match=r"2 duplicated values \('A', 'B'\) on 4 features"):
        read_waterbodies(path, id_field="pond_code")


def test_null_ids_report_count(tmp_path, build):
    frame = build.ponds(3)
    frame["pond_code"] = ["A", None, "C"]
    path = _write(frame, tmp_path / "ponds.gpkg")
    with pytest.raises(GeometryError, match=r"empty in 1 features \(rows 1\)"):
        read_waterbodies(path, id_field="pond_code")


def test_lines_are_refused_with_counts(tmp_path, build):
    frame = build.ponds(4)
    frame.loc[1, "geometry"] = LineString([(5, 5), (6, 6)])
    frame.loc[3, "geometry"] = LineString([(0, 0), (1, 1)])
    path = _write(frame, tmp_path / "mixed.geojson")
    with pytest.raises(GeometryError, match=r"2 LineString") as info:
        read_waterbodies(path, id_field="pond_code")
    assert "'P02'" in str(info.value) and "'P04'" in str(info.value)


def test_points_without_an_area_field_are_refused_with_counts(tmp_path, build):
    frame = build.ponds(4)
    frame.loc[1, "geometry"] = Point(500_000, 6_000_000)
    path = _write(frame, tmp_path / "mixed.geojson")
    with pytest.raises(GeometryError, match=r"1 Point features \(ids 'P02'\).*area_field"):
        read_waterbodies(path, id_field="pond_code")


def test_collections_keep_polygonal_parts(tmp_path, build):
    frame = build.ponds(3)
    square = box(0, 0, 10, 10)
    frame.loc[1, "geometry"] = GeometryCollection([square, Point(50, 50), box(20, 0, 30, 10)])
    frame.loc[2, "geometry"] = GeometryCollection([square, LineString([(0, 0), (5, 5)])])
    path = _write(frame, tmp_path / "collections.geojson")
    layer = read_waterbodies(path)
    assert list(layer.flags) == ["", "collection_polygons_kept", "collection_polygons_kept"]
    assert layer.frame.geometry.iloc[1].geom_type == "MultiPolygon"
    assert layer.frame.geometry.iloc[1].area == pytest.approx(200.0)
    assert layer.frame.geometry.iloc[2].equals(square)


def test_collection_without_polygon_is_refused(tmp_path, build):
    frame = build.ponds(2)
    frame.loc[0, "geometry"] = GeometryCollection([Point(0, 0), LineString([(0, 0), (1, 0)])])
    path = _write(frame, tmp_path / "collections.geojson")
    with pytest.raises(GeometryError, match="1 geometry collections have no polygon part"):
        read_waterbodies(path)


def test_empty_and_invalid_geometries_are_kept(tmp_path, build):
    frame = build.ponds(3)
    frame.loc[0, "geometry"] = Polygon()
    bowtie = Polygon([(0, 0), (10, 10), (10, 0), (0, 10)])
    frame.loc[1, "geometry"] = bowtie
    frame.loc[2, "geometry"] = None
    path = _write(frame, tmp_path / "odd.gpkg")
    layer = read_waterbodies(path)
    geometries = layer.frame.geometry
    assert len(layer) == 3
    assert geometries.iloc[0].is_empty and geometries.iloc[2].is_empty
    assert not geometries.iloc[1].is_valid
    assert list(layer.flags) == ["", "", "geometry_null"]


def test_zero_features_is_input_data_error(tmp_path, build):
    path = _write(build.ponds().iloc[:0], tmp_path / "none.gpkg")
    with pytest.raises(InputDataError, match="no features"):
        read_waterbodies(path)


def test_flags_are_strings(pond_gpkg):
    flags = read_waterbodies(pond_gpkg).flags
    assert isinstance(flags, np.ndarray)
    assert all(isinstance(flag, str) for flag in flags)
