"""Identifiers and geometries of the water-body layer: refused where nothing sensible can be
computed (duplicate or null ids, points, lines), repaired and flagged where that is safe
(empty geometry, bow-ties, self-touching rings, collections with polygon parts), and
polygons that cross the antimeridian on a grid that spans it.

The layer is ``builders.pond_layer(3)``: ids 101..103 are ponds, 104 a reservoir; row 1
(id 102) is the one each test breaks. Ponds are in UTM zone 55 south (EPSG:32755), where
the point scale factor is within 0.1 % of 1, so planar areas there match true areas to 0.2 %.
"""

from __future__ import annotations

import json
import warnings

import numpy as np
import pandas as pd
import pyogrio
import pytest
import shapely
from bad_inputs.corpus import TIMES, refused_everywhere
from builders import climate_dataset, pond_layer
from pyproj import Geod

# Repaired-and-flagged runs warn (GeometryRepairedWarning); the suite makes our warnings
# errors, so these runs let them through to the command line's printer.
shows_warnings = pytest.mark.filterwarnings("always::lakeloss.errors.LakelossWarning")

BROKEN_ROW = 1
_KEEP = object()  # leave the geometry of the broken row as it is


def _layer_with(case, geometry=_KEEP, **columns) -> None:
    layer = pond_layer(n_ponds=3)
    if geometry is not _KEEP:
        geometries = layer.geometry.to_numpy().copy()
        geometries[BROKEN_ROW] = geometry
        layer = layer.set_geometry(list(geometries), crs=layer.crs)
    for name, values in columns.items():
        layer[name] = values
    with warnings.catch_warnings():
        # pyogrio notes mixed geometry types when it writes them, which is the point here
        warnings.simplefilter("ignore", UserWarning)
        case.write_layer(layer)


def _pond_origin() -> tuple[float, float]:
    """Lower-left corner of a 200 m box near pond 102 (inside the grid) [m, EPSG:32755]."""
    centre = pond_layer(n_ponds=3).geometry.iloc[BROKEN_ROW].centroid
    return centre.x - 100.0, centre.y - 100.0


def _completed_layer(case):
    outcome = case.invoke("run")
    assert outcome.code == 0, outcome.stderr
    assert "Traceback" not in outcome.stderr
    layer = pyogrio.read_dataframe(case.out / "waterbodies.gpkg", layer="waterbodies")
    run = json.loads((case.out / "run.json").read_text())
    return layer.set_index("pond_id"), run, outcome


def _tokens(layer, pond_id: int) -> set[str]:
    return set(filter(None, str(layer.loc[pond_id, "qa_flags"]).split(";")))


# --------------------------------------------------------------------------- identifiers


def test_duplicate_ids(case):
    _layer_with(case, pond_id=[101, 101, 103, 104])
    refused_everywhere(case, "'pond_id'", "duplicated", "101")


def test_null_ids(case):
    _layer_with(case, pond_id=[101.0, np.nan, 103.0, 104.0])
    refused_everywhere(case, "'pond_id'", "empty in 1 features")


# --------------------------------------------------------------------------- refused geometry


@pytest.mark.parametrize(
    ("geometry", "words"),
    [
        # a point is a water body only with its area (tests/test_points.py)
        (shapely.Point(0, 0), ("Point", "expected polygons", "area_field")),
        (shapely.LineString([(0, 0), (100, 100)]), ("LineString", "expected polygons")),
        (shapely.MultiPoint([(0, 0), (5, 5)]), ("MultiPoint", "several locations")),
    ],
)
def test_points_and_lines_are_refused(case, geometry, words):
    x, y = _pond_origin()
    _layer_with(case, shapely.affinity.translate(geometry, x, y))
    refused_everywhere(case, "102", *words)


def test_collection_without_polygons_is_refused(case):
    x, y = _pond_origin()
    collection = shapely.GeometryCollection(
        [shapely.Point(x, y), shapely.LineString([(x, y), (x + 50, y + 50)])]
    )
    _layer_with(case, collection)
    refused_everywhere(case, "geometry collections have no polygon part", "102")


def test_layer_of_only_empty_geometries_is_refused(case):
    layer = pond_layer(n_ponds=3)
    layer = layer.set_geometry([shapely.Polygon()] * len(layer), crs=layer.crs)
    case.write_layer(layer)
    refused_everywhere(case, "empty")


# --------------------------------------------------------------------------- repaired and flagged


@shows_warnings
def test_collection_with_a_polygon_keeps_the_polygon(case):
    x, y = _pond_origin()
    square = shapely.box(x, y, x + 200, y + 200)
    _layer_with(case, shapely.GeometryCollection([square, shapely.Point(x, y)]))
    layer, run, _ = _completed_layer(case)
    assert _tokens(layer, 102) == {"collection_polygons_kept"}
    np.testing.assert_allclose(layer.loc[102, "area_m2"], 40_000.0, rtol=2e-3)
    assert np.isfinite(layer.loc[102, "evap_mm"])
    assert run["counts"]["flagged"] == 1


@shows_warnings
@pytest.mark.parametrize("kind", ["empty", "null"])
def test_empty_geometry_is_flagged_with_nan_results(case, kind):
    _layer_with(case, shapely.Polygon() if kind == "empty" else None)
    layer, run, outcome = _completed_layer(case)
    expected = {"geometry_empty"} | ({"geometry_null"} if kind == "null" else set())
    assert expected <= _tokens(layer, 102)
    for column in ("evap_mm", "evap_m3"):
        assert np.isnan(layer.loc[102, column]), column
    assert layer.loc[102, "area_m2"] == 0.0
    others = layer.drop(index=102)
    assert np.isfinite(others["evap_mm"]).all()
    assert (others["qa_flags"] == "").all()
    assert any("empty" in w for w in run["warnings"]), run["warnings"]
    assert "warning:" in outcome.stderr
    by_period = pd.read_csv(case.out / "summary_by_period.csv")
    assert (by_period["n_waterbodies"] == 3).all()


def _bow_tie(x: float, y: float) -> shapely.Polygon:
    # Two 200 m x 100 m triangles meeting at one point: the lobes wind in opposite
    # directions, so the shoelace area of the invalid ring is 0.
    return shapely.Polygon([(x, y), (x + 200, y + 200), (x + 200, y), (x, y + 200)])


def _self_touching(x: float, y: float) -> shapely.Polygon:
    # A 200 m square whose ring runs in to touch itself at its top edge's midpoint,
    # cutting off a 100 m x 100 m triangle (an "inverted hole"): 40 000 - 5 000 m2.
    return shapely.Polygon(
        [
            (x, y),
            (x + 200, y),
            (x + 200, y + 200),
            (x + 100, y + 200),
            (x + 150, y + 100),
            (x + 50, y + 100),
            (x + 100, y + 200),
            (x, y + 200),
        ]
    )


@shows_warnings
@pytest.mark.parametrize(
    ("shape", "area_before", "area_after"),
    [
        pytest.param(_bow_tie, 0.0, 20_000.0, id="bow-tie"),
        pytest.param(_self_touching, 35_000.0, 35_000.0, id="self-touching-ring"),
    ],
)
def test_invalid_polygon_is_repaired_and_flagged(case, shape, area_before, area_after):
    polygon = shape(*_pond_origin())
    assert not polygon.is_valid
    _layer_with(case, polygon)
    layer, run, outcome = _completed_layer(case)
    assert _tokens(layer, 102) == {"geometry_repaired"}
    np.testing.assert_allclose(layer.loc[102, "area_m2"], area_after, rtol=2e-3)
    assert "area_before_repair_m2" in layer.columns, "the run does not expose the area before"
    np.testing.assert_allclose(
        layer.loc[102, "area_before_repair_m2"], area_before, rtol=2e-3, atol=1.0
    )
    assert layer.drop(index=102)["area_before_repair_m2"].isna().all()
    assert np.isfinite(layer.loc[102, "evap_mm"])
    assert any("repaired" in w for w in run["warnings"]), run["warnings"]
    assert "repaired" in outcome.stderr


# --------------------------------------------------------------------------- antimeridian

# A grid of 10 x 8 cells of 0.05 degrees stored in 0..360 longitudes, centred on 180 E.
DATELINE_LON = 179.775 + 0.05 * np.arange(10)
DATELINE_LAT = -15.825 - 0.05 * np.arange(8)


def _dateline_case(case, crossing) -> None:
    fields = {
        "rnet": (200.0, "W m-2", "surface_net_downward_radiative_flux"),
        "tas": (298.15, "K", "air_temperature"),
    }
    ds = climate_dataset(TIMES, fields, lat=DATELINE_LAT, lon=DATELINE_LON)
    case.write_climate(ds, "dateline.nc")
    case.config["climate"] = {
        "surface_net_downward_radiative_flux": {
            "path": str(case.tmp / "dateline.nc"),
            "variable": "rnet",
        },
        "air_temperature": {"path": str(case.tmp / "dateline.nc"), "variable": "tas"},
    }
    import geopandas as gpd

    layer = gpd.GeoDataFrame(
        {"pond_id": [1, 2], "zone": ["west", "across"]},
        geometry=[shapely.box(179.84, -16.03, 179.86, -16.01), crossing],
        crs="EPSG:4326",
    )
    case.write_layer(layer)


CROSSING = {
    "split-at-180": shapely.MultiPolygon(
        [shapely.box(179.97, -16.0, 180.0, -15.97), shapely.box(-180.0, -16.0, -179.97, -15.97)]
    ),
    "beyond-180": shapely.box(179.97, -16.0, 180.03, -15.97),
    "ring-jumping-180": shapely.Polygon(
        [(179.97, -16.0), (-179.97, -16.0), (-179.97, -15.97), (179.97, -15.97)]
    ),
}


@shows_warnings
@pytest.mark.parametrize("form", CROSSING)
def test_polygon_crossing_the_antimeridian(case, form):
    _dateline_case(case, CROSSING[form])
    layer, run, _ = _completed_layer(case)
    geod = Geod(ellps="WGS84")
    box_area = abs(geod.geometry_area_perimeter(shapely.box(179.97, -16.0, 180.03, -15.97))[0])
    np.testing.assert_allclose(layer.loc[2, "area_m2"], box_area, rtol=1e-4)
    np.testing.assert_allclose(layer.loc[2, "climate_coverage"], 1.0, rtol=1e-6)
    assert _tokens(layer, 2) == set()
    np.testing.assert_allclose(layer.loc[2, "evap_mm"], layer.loc[1, "evap_mm"], rtol=1e-6)


@shows_warnings
def test_rerun_from_cached_weights_still_reports_the_repair(case):
    _layer_with(case, _bow_tie(*_pond_origin()))
    _, first, _ = _completed_layer(case)
    layer, second, outcome = _completed_layer(case)
    assert (first["weights_from_cache"], second["weights_from_cache"]) == (False, True)
    assert second["warnings"] == first["warnings"]
    assert any("repaired" in w for w in second["warnings"])
    assert "repaired" in outcome.stderr
    assert _tokens(layer, 102) == {"geometry_repaired"}


# --------------------------------------------------------------------------- attributes


@pytest.mark.parametrize(
    "values",
    [
        pytest.param([100.0, np.nan, 120.0, 130.0], id="empty-value"),
        pytest.param(["100", "high", "120", "130"], id="not-a-number"),
    ],
)
def test_elevation_attribute_with_unusable_values(case, values):
    _layer_with(case, surface_m=values)
    case.config["waterbodies"]["elevation_field"] = "surface_m"
    refused_everywhere(case, "'surface_m'", "1 empty or non-numeric", "elevation_m")


def test_grid_wrapped_at_180_is_refused_clearly(case):
    # The same grid stored in -180..180: its longitudes jump from 179.975 to -179.975, which
    # is no regular grid; the file must be stored in 0..360 (or rolled) to span 180.
    _dateline_case(case, CROSSING["beyond-180"])
    wrapped = np.where(DATELINE_LON > 180.0, DATELINE_LON - 360.0, DATELINE_LON)
    fields = {
        "rnet": (200.0, "W m-2", "surface_net_downward_radiative_flux"),
        "tas": (298.15, "K", "air_temperature"),
    }
    ds = climate_dataset(TIMES, fields, lat=DATELINE_LAT, lon=wrapped)
    case.write_climate(ds, "dateline.nc")
    refused_everywhere(
        case, "dateline.nc", "x coordinates are not strictly monotonic", "0..360 (roll the grid)"
    )
