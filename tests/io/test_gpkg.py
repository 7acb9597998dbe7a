"""GeoPackage writer, checked by reading the file back with GDAL (pyogrio) and with sqlite3.

Fixture: three invented rectangular ponds in a projected CRS with two original attributes and
two result columns, plus a six-row per-period attribute table. No mocks: GDAL writes and
reads real files.
"""

from __future__ import annotations

import json
import shutil
import sqlite3
from contextlib import closing

import cftime
import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pyproj
import pytest
from shapely.geometry import box

from lakeloss.errors import CRSError, InputDataError
from lakeloss.io.gpkg import FieldInfo, read_field_descriptions, read_metadata, write_geopackage

# An Albers equal-area CRS with made-up parameters: not an EPSG code, so the round trip
# shows the layer's own definition is kept rather than a look-up.
OWN_CRS = pyproj.CRS.from_proj4(
    "+proj=aea +lat_0=40 +lon_0=12 +lat_1=38 +lat_2=46 +x_0=500000 +y_0=0 "
    "+ellps=GRS80 +units=m +no_defs"
)


@pytest.fixture(scope="module")
def ponds() -> gpd.GeoDataFrame:
    return gpd.GeoDataFrame(
        {
            "id": [10, 11, 12],
            "name": ["Heron pond", "Mill pool", "Öd lake"],
            "evap_mm": [512.25, 498.0, np.nan],
            "evap_m3": [5122.5, 99600.0, np.nan],
        },
        geometry=[box(0, 0, 100, 100), box(500, 0, 1000, 400), box(0, 2000, 50, 2050)],
        crs=OWN_CRS,
    )


@pytest.fixture(scope="module")
def by_period() -> pd.DataFrame:
    return pd.DataFrame(
        {
            "id": [10, 10, 11, 11, 12, 12],
            "period_start": pd.to_datetime(["2001-01-01", "2001-02-01"] * 3),
            "days": [31, 28] * 3,
            "evap_mm": [20.5, 25.0, 19.0, 24.5, np.nan, np.nan],
        }
    )


FIELDS = {
    "waterbodies": {
        "evap_mm": FieldInfo(
            "Evaporation depth", "Open-water evaporation summed over the run.", "mm"
        ),
        "evap_m3": FieldInfo("Evaporation volume", "Depth times the ellipsoidal area.", "m3"),
        "name": FieldInfo("Name", "Name from the input layer."),
    },
    "evaporation_by_period": {
        "evap_mm": FieldInfo("Evaporation depth", "Evaporation in the period.", "mm"),
        "days": FieldInfo("Days", "Days in the period.", "d"),
    },
}

PROVENANCE = {
    "lakeloss_version": "0.1.0",
    "method": "penman_open_water",
    "inputs": {"climate": "demo_climate.nc", "layer": "demo_ponds.gpkg"},
    "albedo": 0.08,
    "missing_share": float("nan"),
}


@pytest.fixture(scope="module")
def written(tmp_path_factory, ponds, by_period):
    """The GeoPackage written once for the read-only tests of this module."""
    path = tmp_path_factory.mktemp("gpkg") / "waterbodies.gpkg"
    write_geopackage(
        path,
        [("waterbodies", ponds), ("evaporation_by_period", by_period)],
        fields=FIELDS,
        metadata=PROVENANCE,
    )
    return path


def test_layers_crs_and_values_round_trip(written, ponds):
    layers = pyogrio.list_layers(written)
    assert layers.tolist() == [["waterbodies", "Polygon"], ["evaporation_by_period", None]]
    back = gpd.read_file(written, layer="waterbodies")
    assert pyproj.CRS(back.crs).equals(OWN_CRS)
    pd.testing.assert_frame_equal(
        pd.DataFrame(back.drop(columns="geometry")), pd.DataFrame(ponds.drop(columns="geometry"))
    )
    assert back.geometry.geom_equals(ponds.geometry).all()


def test_attribute_table_readable(written, by_period):
    info = pyogrio.read_info(written, layer="evaporation_by_period")
    assert info["geometry_type"] is None and info["features"] == 6
    back = pyogrio.read_dataframe(written, layer="evaporation_by_period")
    assert not isinstance(back, gpd.GeoDataFrame) or "geometry" not in back
    assert back["id"].tolist() == by_period["id"].tolist()
    np.testing.assert_array_equal(back["evap_mm"].to_numpy(), by_period["evap_mm"].to_numpy())
    assert back["period_start"].dt.strftime("%Y-%m-%d").tolist() == ["2001-01-01", "2001-02-01"] * 3
    with sqlite3.connect(written) as con:
        kind = con.execute(
            "SELECT data_type FROM gpkg_contents WHERE table_name = 'evaporation_by_period'"
        ).fetchone()
    con.close()
    assert kind == ("attributes",)


def test_data_columns_and_extensions_in_sqlite(written):
    with sqlite3.connect(written) as con:
        columns = con.execute(
            "SELECT table_name, column_name, name, title, description FROM gpkg_data_columns "
            "ORDER BY table_name, column_name"
        ).fetchall()
        extensions = set(
            con.execute("SELECT table_name, extension_name, scope FROM gpkg_extensions").fetchall()
        )
    con.close()
    assert (
        "waterbodies",
        "evap_mm",
        "Evaporation depth [mm]",
        "Evaporation depth [mm]",
        "Open-water evaporation summed over the run.",
    ) in columns
    assert (
        "evaporation_by_period",
        "days",
        "Days [d]",
        "Days [d]",
        "Days in the period.",
    ) in columns
    assert ("waterbodies", "name", "Name", "Name", "Name from the input layer.") in columns
    assert len(columns) == 5
    assert {
        ("gpkg_data_columns", "gpkg_schema", "read-write"),
        ("gpkg_data_column_constraints", "gpkg_schema", "read-write"),
        ("gpkg_metadata", "gpkg_metadata", "read-write"),
        ("gpkg_metadata_reference", "gpkg_metadata", "read-write"),
    } <= extensions


def test_field_descriptions_round_trip(written):
    assert read_field_descriptions(written, "waterbodies") == FIELDS["waterbodies"]
    assert (
        read_field_descriptions(written, "evaporation_by_period") == FIELDS["evaporation_by_period"]
    )
    assert read_field_descriptions(written, "no_such_table") == {}


def test_provenance_in_gpkg_metadata_and_gdal_metadata(written):
    expected = {**PROVENANCE, "missing_share": None}
    assert read_metadata(written) == expected
    info = pyogrio.read_info(written, layer="waterbodies")
    [gdal_item] = info["dataset_metadata"].values()  # GDAL's view of our gpkg_metadata row
    assert json.loads(gdal_item)["inputs"] == PROVENANCE["inputs"]
    assert info["layer_metadata"]["evap_mm"].startswith("Evaporation depth [mm]")
    with sqlite3.connect(written) as con:
        refs = con.execute(
            "SELECT r.reference_scope, m.mime_type FROM gpkg_metadata_reference r "
            "JOIN gpkg_metadata m ON m.id = r.md_file_id WHERE m.mime_type = 'application/json'"
        ).fetchall()
    con.close()
    assert refs == [("geopackage", "application/json")]
    # The whole document, as GDAL (through pyogrio) hands it to any GDAL-based reader; not
    # through the ogrinfo program, whose text layout differs between GDAL versions.
    assert json.loads(gdal_item) == expected


def test_existing_file_replaced(tmp_path, written, ponds):
    path = tmp_path / "again.gpkg"
    shutil.copyfile(written, path)
    write_geopackage(path, [("waterbodies", ponds.iloc[:1])], fields={}, metadata={"run": 2})
    assert pyogrio.list_layers(path).tolist() == [["waterbodies", "Polygon"]]
    assert read_metadata(path) == {"run": 2}
    assert read_field_descriptions(path, "waterbodies") == {}


def test_cftime_dates_become_iso_text(tmp_path, ponds):
    table = pd.DataFrame(
        {
            "id": [10, 10],
            "period_end": [cftime.DatetimeNoLeap(2001, 2, 28), cftime.DatetimeNoLeap(2001, 3, 31)],
        }
    )
    path = tmp_path / "w.gpkg"
    write_geopackage(path, [("waterbodies", ponds), ("periods", table)], fields={}, metadata={})
    back = pyogrio.read_dataframe(path, layer="periods")
    assert back["period_end"].tolist() == ["2001-02-28", "2001-03-31"]


def test_inconsistent_arguments_refused(tmp_path, ponds, by_period):
    path = tmp_path / "w.gpkg"
    with pytest.raises(CRSError, match="has no CRS"):
        write_geopackage(
            path,
            [("waterbodies", ponds.set_crs(None, allow_override=True))],
            fields={},
            metadata={},
        )
    with pytest.raises(ValueError, match="has no geometry"):
        write_geopackage(path, [("t", by_period)], fields={}, metadata={})
    with pytest.raises(ValueError, match=r"no columns \['evap_m3'\]"):
        write_geopackage(
            path,
            [("waterbodies", ponds), ("evaporation_by_period", by_period)],
            fields={"evaporation_by_period": {"evap_m3": FieldInfo("V", "v", "m3")}},
            metadata={},
        )
    with pytest.raises(ValueError, match="put the unit in FieldInfo.unit"):
        write_geopackage(
            path,
            [("waterbodies", ponds)],
            fields={"waterbodies": {"evap_mm": FieldInfo("Depth [mm]", "d")}},
            metadata={},
        )
    with pytest.raises(ValueError, match="unknown layers"):
        write_geopackage(path, [("waterbodies", ponds)], fields={"other": {}}, metadata={})
    assert not path.exists()


def test_read_metadata_of_foreign_file(tmp_path, ponds):
    path = tmp_path / "plain.gpkg"
    ponds.to_file(path, layer="waterbodies", driver="GPKG")
    with pytest.raises(InputDataError, match="holds no lakeloss provenance"):
        read_metadata(path)
    with pytest.raises(InputDataError, match="does not exist"):
        read_metadata(tmp_path / "missing.gpkg")


def test_attribute_table_types_and_missing_values(tmp_path, ponds):
    table = pd.DataFrame(
        {
            "id": pd.array([10, None, 12], dtype="Int64"),
            "day": pd.to_datetime(["2001-01-01", None, "2001-01-03"]),
            "stamp": pd.to_datetime(["2001-01-01 06:30", "2001-01-02 00:00", "2001-01-03 00:00"]),
            "ok": [True, False, True],
            "note": ['say "hi"', None, "Öd"],
            "evap_mm": [1.5, np.nan, -0.25],
        }
    )
    path = tmp_path / "w.gpkg"
    write_geopackage(
        path,
        [("waterbodies", ponds), ("checks", table)],
        fields={"checks": {"evap_mm": FieldInfo("Evaporation depth", "e.", "mm")}},
        metadata={},
    )
    info = pyogrio.read_info(path, layer="checks")
    assert info["ogr_types"] == [
        "OFTInteger64",
        "OFTDate",
        "OFTDateTime",
        "OFTInteger",
        "OFTString",
        "OFTReal",
    ]
    assert info["layer_metadata"] == {"evap_mm": "Evaporation depth [mm]: e."}
    back = pyogrio.read_dataframe(path, layer="checks")
    assert back["ok"].tolist() == [True, False, True]
    assert back["note"].isna().tolist() == [False, True, False]
    assert back["note"][[0, 2]].tolist() == ['say "hi"', "Öd"]
    assert back["evap_mm"].isna().tolist() == [False, True, False]
    assert back["day"].isna().tolist() == [False, True, False]
    assert back["stamp"].dt.strftime("%Y-%m-%d %H:%M").tolist() == [
        "2001-01-01 06:30",
        "2001-01-02 00:00",
        "2001-01-03 00:00",
    ]
    with sqlite3.connect(path) as con:
        raw = con.execute("SELECT id, day, stamp, note FROM checks ORDER BY fid").fetchall()
    con.close()
    assert raw[0] == (10, "2001-01-01", "2001-01-01T06:30:00.000Z", 'say "hi"')
    assert raw[1] == (None, None, "2001-01-02T00:00:00.000Z", None)


def test_attribute_table_in_many_statements_and_blocks(tmp_path, ponds, monkeypatch):
    import lakeloss.io.gpkg as gpkg

    monkeypatch.setattr(gpkg, "_BLOCK_ROWS", 4_000)  # several blocks, each several INSERTs
    n = 10_001
    table = pd.DataFrame({"id": np.arange(n), "evap_mm": np.arange(n) * 0.5})
    path = tmp_path / "w.gpkg"
    write_geopackage(path, [("waterbodies", ponds), ("t", table)], fields={}, metadata={})
    back = pyogrio.read_dataframe(path, layer="t", fid_as_index=True)
    assert back.index.tolist() == list(range(1, n + 1))
    pd.testing.assert_frame_equal(back.reset_index(drop=True), table)


def test_attribute_table_fid_column_refused(tmp_path, ponds):
    with pytest.raises(ValueError, match="column 'fid'"):
        write_geopackage(
            tmp_path / "w.gpkg",
            [("waterbodies", ponds), ("t", pd.DataFrame({"fid": [1]}))],
            fields={},
            metadata={},
        )


@pytest.mark.slow
def test_million_row_attribute_table(tmp_path, ponds):
    n = 1_000_000
    rng = np.random.default_rng(7)
    table = pd.DataFrame(
        {
            "id": np.arange(n) % 1000,
            "period_start": np.repeat(pd.date_range("2001-01-01", periods=1000, freq="D"), 1000),
            "days": np.ones(n, dtype=np.int64),
            "evap_mm": rng.random(n),
        }
    )
    path = tmp_path / "big.gpkg"
    write_geopackage(
        path, [("waterbodies", ponds), ("evaporation_by_period", table)], fields={}, metadata={}
    )
    assert pyogrio.read_info(path, layer="evaporation_by_period")["features"] == n
    tail = pyogrio.read_dataframe(path, layer="evaporation_by_period", skip_features=n - 2)
    np.testing.assert_array_equal(tail["evap_mm"].to_numpy(), table["evap_mm"].to_numpy()[-2:])


def test_reading_leaves_no_sidecar_file(written):
    # GDAL dataset metadata in a GeoPackage makes every later reader write a .aux.xml file
    # beside it; the writer must not leave outputs that grow files when opened.
    before = sorted(p.name for p in written.parent.iterdir())
    pyogrio.read_dataframe(written, layer="waterbodies")
    pyogrio.read_dataframe(written, layer="evaporation_by_period")
    pyogrio.read_info(written, layer="waterbodies")
    assert sorted(p.name for p in written.parent.iterdir()) == before


@pytest.mark.parametrize(
    "extra",
    [
        pytest.param({}, id="numbers-and-text"),  # written through GDAL's Arrow path
        pytest.param({"surveyed": [True, False]}, id="with-booleans"),
        pytest.param({"filled": pd.to_datetime(["2001-01-01", "2001-02-01"])}, id="with-dates"),
    ],
)
def test_layer_field_types_whichever_gdal_path(tmp_path, extra):
    frame = gpd.GeoDataFrame(
        {
            "pond_id": pd.array(["A", "B"], dtype="str"),
            "depth_m": [1.5, np.nan],
            "rank": np.array([2, 1], dtype=np.int64),
            **extra,
        },
        geometry=[box(0, 0, 1, 1), box(2, 0, 3, 1)],
        crs="EPSG:3577",
    )
    path = tmp_path / "t.gpkg"
    write_geopackage(path, [("ponds", frame)], fields={}, metadata={})
    with sqlite3.connect(path) as con:
        types = {row[1]: row[2] for row in con.execute("PRAGMA table_info('ponds')")}
    expected = {"pond_id": "TEXT", "depth_m": "REAL", "rank": "INTEGER"}
    expected.update({k: {"surveyed": "BOOLEAN", "filled": "DATETIME"}[k] for k in extra})
    assert {k: types[k] for k in expected} == expected
    back = pyogrio.read_dataframe(path, layer="ponds")
    assert back["pond_id"].tolist() == ["A", "B"]
    assert back["rank"].tolist() == [2, 1]


def test_large_pages_and_the_gdal_option_restored(tmp_path, ponds, written):
    with sqlite3.connect(written) as con:
        assert con.execute("PRAGMA page_size").fetchone() == (65536,)
    con.close()
    assert pyogrio.get_gdal_config_option("OGR_SQLITE_PRAGMA") is None
    # A user's own setting is left as it is and applies.
    pyogrio.set_gdal_config_options({"OGR_SQLITE_PRAGMA": "page_size=8192"})
    try:
        path = tmp_path / "own.gpkg"
        write_geopackage(path, [("waterbodies", ponds)], fields={}, metadata={})
        assert pyogrio.get_gdal_config_option("OGR_SQLITE_PRAGMA") == "page_size=8192"
    finally:
        pyogrio.set_gdal_config_options({"OGR_SQLITE_PRAGMA": None})
    with sqlite3.connect(path) as con:
        assert con.execute("PRAGMA page_size").fetchone() == (8192,)
    con.close()


def test_iso_date_text_declared_date_unless_the_calendar_has_impossible_days(tmp_path, ponds):
    # GeoPackage 1.2 stores a DATE as 'YYYY-MM-DD' text: a pandas string column of such text
    # is declared DATE, so GDAL reads dates; a 360-day calendar's 2031-02-30 keeps it TEXT.
    def written_types(starts: list[str]) -> tuple[list[str], list]:
        table = pd.DataFrame(
            {
                "code": pd.array(["A-1", "B-2"] * (len(starts) // 2), dtype="str"),
                "period_start": pd.array(starts, dtype="str"),
                "evap_mm": np.arange(len(starts), dtype=float),
            }
        )
        path = tmp_path / f"t{len(list(tmp_path.iterdir()))}.gpkg"
        write_geopackage(
            path, [("waterbodies", ponds), ("evaporation_by_period", table)], fields={},
            metadata={},
        )  # fmt: skip
        with sqlite3.connect(path) as con:
            stored = con.execute("SELECT period_start FROM evaporation_by_period").fetchall()
        con.close()
        return pyogrio.read_info(path, layer="evaporation_by_period")["ogr_types"], stored

    types, stored = written_types(["2031-01-01", "2031-02-01", "2031-03-01", "2031-04-01"])
    assert types == ["OFTString", "OFTDate", "OFTReal"]
    assert stored[1] == ("2031-02-01",)
    types, stored = written_types(["2031-01-01", "2031-01-30", "2031-02-01", "2031-02-30"])
    assert types == ["OFTString", "OFTString", "OFTReal"]
    assert stored[3] == ("2031-02-30",)


# --- the GeoPackage of a whole run --------------------------------------------------------
# A real run on the invented ponds of tests/builders.py (12 ponds and a reservoir, constant
# climate over 59 days of 2031, so two monthly periods), with two compare methods.


@pytest.fixture(scope="module")
def run_output(tmp_path_factory):
    from builders import CHOW_CLIMATE, CHOW_FIELDS, case_config, climate_dataset, pond_layer
    from builders import write_netcdf as write_climate

    import lakeloss

    root = tmp_path_factory.mktemp("run")
    pond_layer().to_file(root / "ponds.gpkg", layer="ponds", driver="GPKG")
    times = pd.date_range("2031-01-01", periods=59, freq="D")
    write_climate(climate_dataset(times, CHOW_FIELDS), root / "climate.nc")
    config = case_config(
        root / "ponds.gpkg",
        root / "climate.nc",
        root / "out",
        "energy_balance",
        CHOW_CLIMATE,
    )
    config["method"]["compare"] = ["priestley_taylor", "aerodynamic"]
    result = lakeloss.run(config)
    result.write(root / "out")
    return result, root / "out"


def _columns_of(con: sqlite3.Connection, table: str) -> list[str]:
    return [row[1] for row in con.execute(f"PRAGMA table_info('{table}')")]


def test_run_field_descriptions_fit_their_table(run_output):
    _, out = run_output
    with closing(sqlite3.connect(out / "waterbodies.gpkg")) as con:
        rows = con.execute(
            "SELECT table_name, column_name, description FROM gpkg_data_columns"
        ).fetchall()
        period_columns = _columns_of(con, "evaporation_by_period")
    described = {(table, column): text for table, column, text in rows}
    period = {c: t for (table, c), t in described.items() if table == "evaporation_by_period"}
    # Every column of the period table but the row id is described, and no amount there
    # speaks of the whole run: each row is one period.
    assert set(period) == set(period_columns) - {"fid"}
    for column in ["evap_mm", "evap_m3", "precip_mm", "net_mm", "net_m3"]:
        assert "this period" in period[column] and "whole run" not in period[column]
    assert "priestley_taylor" in period["evap_mm_priestley_taylor"]
    assert "this period" in period["evap_mm_aerodynamic"]
    # Volumes: depth in mm times area in m2 is litres; the description states the /1000.
    for table in ("waterbodies", "evaporation_by_period"):
        for column in ("evap_m3", "net_m3"):
            assert "divided by 1000" in described[(table, column)]
    assert "whole run" in described[("waterbodies", "evap_mm")]
    # GDAL shows the same per-table text (layer metadata) to GDAL-based readers.
    info = pyogrio.read_info(out / "waterbodies.gpkg", layer="evaporation_by_period")
    assert "this period" in info["layer_metadata"]["evap_mm"]


def test_run_extensions_registered_once(run_output):
    _, out = run_output
    with closing(sqlite3.connect(out / "waterbodies.gpkg")) as con:
        rows = con.execute(
            "SELECT table_name, column_name, extension_name, definition FROM gpkg_extensions"
        ).fetchall()
    keys = [row[:3] for row in rows]
    assert len(keys) == len(set(keys)), rows
    assert ("gpkg_metadata", None, "gpkg_metadata") in keys
    # All definitions of the version the file declares (1.2).
    assert all("/spec120/" in row[3] for row in rows), rows


def test_run_geopackage_is_version_1_2_with_its_rtree_triggers(run_output):
    _, out = run_output
    with closing(sqlite3.connect(out / "waterbodies.gpkg")) as con:
        application_id = con.execute("PRAGMA application_id").fetchone()[0]
        user_version = con.execute("PRAGMA user_version").fetchone()[0]
        triggers = {
            row[0]
            for row in con.execute(
                "SELECT name FROM sqlite_master WHERE type = 'trigger' AND tbl_name = 'waterbodies'"
            )
        }
        declared = {
            row[1]: row[2] for row in con.execute("PRAGMA table_info('evaporation_by_period')")
        }
    assert application_id.to_bytes(4, "big") == b"GPKG"
    assert user_version == 10200  # GeoPackage 1.2.0, as GDAL 3.4-3.8 readers expect
    rtree = {t for t in triggers if t.startswith("rtree_waterbodies_geom_")}
    # The six triggers of the 1.2 R-tree extension, none of 1.4's replacements.
    assert rtree == {
        f"rtree_waterbodies_geom_{name}"
        for name in ("insert", "update1", "update2", "update3", "update4", "delete")
    }
    assert declared["period_start"] == declared["period_end"] == "DATE"
    back = pyogrio.read_dataframe(out / "waterbodies.gpkg", layer="evaporation_by_period")
    assert back["period_start"].dt.strftime("%Y-%m-%d").unique().tolist() == [
        "2031-01-01",
        "2031-02-01",
    ]


def test_run_period_table_id_indexed_for_joins(run_output):
    _, out = run_output
    with closing(sqlite3.connect(out / "waterbodies.gpkg")) as con:
        assert _columns_of(con, "evaporation_by_period")[:2] == ["fid", "pond_id"]
        indexed = [
            [row[2] for row in con.execute(f"PRAGMA index_info('{name}')")]
            for _, name, *_ in con.execute("PRAGMA index_list('evaporation_by_period')")
        ]
        plan = con.execute(
            "EXPLAIN QUERY PLAN SELECT * FROM evaporation_by_period WHERE pond_id = 105"
        ).fetchall()
        count = con.execute(
            "SELECT count(*) FROM evaporation_by_period WHERE pond_id = 105"
        ).fetchone()[0]
    assert ["pond_id"] in indexed
    assert any("USING INDEX" in row[-1] for row in plan), plan  # not a scan of the table
    assert count == 2  # two months


def test_run_compare_methods_per_period(run_output):
    result, out = run_output
    table = pyogrio.read_dataframe(out / "waterbodies.gpkg", layer="evaporation_by_period")
    layer = pyogrio.read_dataframe(out / "waterbodies.gpkg", layer="waterbodies")
    area = layer.set_index("pond_id")["area_m2"]
    for method in ("priestley_taylor", "aerodynamic"):
        column = f"evap_mm_{method}"
        # The periods add up to the whole-run column of the layer.
        per_body = table.groupby("pond_id")[column].sum()
        np.testing.assert_allclose(
            per_body.to_numpy(), layer.set_index("pond_id")[column].loc[per_body.index], rtol=1e-9
        )
        assert not np.allclose(table[column], table["evap_mm"])  # another method's figures
        # Summaries: the volume over all bodies per period, and per group and period.
        volume = table[column] * table["pond_id"].map(area) / 1000.0
        summary = pd.read_csv(out / "summary_by_period.csv")
        expected = volume.groupby(table["period_start"].dt.strftime("%Y-%m-%d")).sum()
        np.testing.assert_allclose(
            summary[f"evap_m3_{method}"], expected.loc[summary["period_start"]], rtol=1e-6
        )
        groups = pd.read_csv(out / "summary_by_group.csv")
        zone = table["pond_id"].map(layer.set_index("pond_id")["zone"])
        by_group = volume.groupby([zone, table["period_start"].dt.strftime("%Y-%m-%d")]).sum()
        np.testing.assert_allclose(
            groups[f"evap_m3_{method}"],
            by_group.loc[list(zip(groups["zone"], groups["period_start"], strict=True))],
            rtol=1e-6,
        )


def test_attribute_table_types_for_every_kind_of_column(tmp_path, ponds):
    # The GeoPackage column type and stored value for each kind of pandas column a caller
    # may hand over, as GIS software reads them back (sqlite3: declared type and typeof).
    table = pd.DataFrame(
        {
            "f32": np.array([0.1, 1e-30, np.nan], dtype=np.float32),
            "big": [1e300, 5e-324, float("inf")],
            "n": np.array([1, 2, 3], dtype=np.int32),
            "nb": pd.array([True, None, False], dtype="boolean"),
            "s": pd.array(["x", None, "日本"], dtype="string"),
            "mixed": [1, "two", None],
            "day_text": ["2031-01-01", None, "2031-02-28"],
            "text": ["Öd\nlake", 'q"x', ""],
        }
    )
    path = tmp_path / "w.gpkg"
    write_geopackage(path, [("waterbodies", ponds), ("t", table)], fields={}, metadata={})
    with closing(sqlite3.connect(path)) as con:
        declared = {row[1]: row[2] for row in con.execute('PRAGMA table_info("t")')}
        rows = con.execute(
            "SELECT f32, big, n, nb, s, mixed, day_text, text FROM t ORDER BY fid"
        ).fetchall()
        kinds = con.execute("SELECT typeof(f32), typeof(n), typeof(nb) FROM t").fetchall()
    assert declared == {
        "fid": "INTEGER",
        "f32": "REAL",
        "big": "REAL",
        "n": "INTEGER",
        "nb": "BOOLEAN",
        "s": "TEXT",
        "mixed": "TEXT",
        "day_text": "DATE",
        "text": "TEXT",
    }
    assert rows == [
        (float(np.float32(0.1)), 1e300, 1, 1, "x", "1", "2031-01-01", "Öd\nlake"),
        (float(np.float32(1e-30)), 5e-324, 2, None, None, "two", None, 'q"x'),
        (None, float("inf"), 3, 0, "日本", None, "2031-02-28", ""),
    ]
    assert kinds[0] == ("real", "integer", "integer")
