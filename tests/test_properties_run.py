"""Property tests of whole runs: random polygons and random but valid climate.

Polygons are tiny, huge, holed, or snapped to cell edges; climate values are drawn from
physically valid ranges. Every run must finish, give no NaN where every input is valid,
conserve area in the weights, and give finite depths within the sanity ranges of docs/methods.md#plausible-ranges
(daily rates 0-10 mm/day typical, above 12-15 suspicious outside extreme arid advection;
with clipping on, rates are >= 0; the upper bound here, 25 mm/day, is generous because the
climate is random, not a real season).
"""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely
from builders import LAT, LON, climate_dataset, write_netcdf
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from pyproj import Transformer

import lakeloss

TO_UTM = Transformer.from_crs("EPSG:4326", "EPSG:32755", always_xy=True)
CELL = 0.05
LON_EDGES = np.r_[LON - CELL / 2, LON[-1] + CELL / 2]
LAT_EDGES = np.r_[LAT + CELL / 2, LAT[-1] - CELL / 2]


@st.composite
def polygon(draw):
    """One water body in UTM metres, inside the grid's inner cells."""
    kind = draw(st.sampled_from(["tiny", "pond", "huge", "holed", "edge"]))
    lon = draw(st.floats(LON_EDGES[2], LON_EDGES[-3]))
    lat = draw(st.floats(LAT_EDGES[-3], LAT_EDGES[2]))
    if kind == "edge":  # snap the centre to a cell corner and make it a square
        lon = LON_EDGES[np.argmin(abs(LON_EDGES - lon))]
        lat = LAT_EDGES[np.argmin(abs(LAT_EDGES - lat))]
    x, y = TO_UTM.transform(lon, lat)
    radius = {
        "tiny": draw(st.floats(0.5, 5.0)),
        "pond": draw(st.floats(10.0, 300.0)),
        "huge": draw(st.floats(2000.0, 6000.0)),
        "holed": draw(st.floats(800.0, 3000.0)),
        "edge": draw(st.floats(20.0, 2000.0)),
    }[kind]
    shape = shapely.Point(x, y).buffer(radius, quad_segs=6)
    if kind == "edge":
        shape = shapely.box(x - radius, y - radius, x + radius, y + radius)
    if kind == "holed":
        hole = shapely.Point(x + radius * 0.3, y).buffer(radius * 0.4, quad_segs=6)
        shape = shape.difference(hole)
    return shape


BOUNDS = {
    "tas": (273.15, 313.15),
    "hurs": (10.0, 100.0),
    "wind": (0.0, 15.0),
    "rsds": (0.0, 400.0),
    "pr": (0.0, 50.0 / 86400.0),
}
climate_values = st.fixed_dictionaries({k: st.floats(*b) for k, b in BOUNDS.items()})


# Random climate includes dark, humid days whose negative rates are clipped and warned about.
@pytest.mark.filterwarnings("ignore::lakeloss.errors.ValuesAdjustedWarning")
@settings(
    max_examples=12,
    deadline=None,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
)
@given(
    shapes=st.lists(polygon(), min_size=1, max_size=6),
    values=climate_values,
    seed=st.integers(0, 2**16),
    method=st.sampled_from(["penman_open_water", "priestley_taylor", "penman_small_water_body"]),
)
def test_random_layers_and_valid_climate_give_sane_results(
    tmp_path_factory, shapes, values, seed, method
):
    tmp = tmp_path_factory.mktemp("prop")
    layer = gpd.GeoDataFrame(
        {"pond_id": np.arange(1, len(shapes) + 1)}, geometry=shapes, crs="EPSG:32755"
    )
    layer.to_file(tmp / "ponds.gpkg", layer="ponds", driver="GPKG")
    rng = np.random.default_rng(seed)
    times = pd.date_range("2031-06-01", periods=20, freq="D")
    shape = (len(times), len(LAT), len(LON))
    # Fields vary around the drawn value by up to 10 %, staying in their valid ranges.
    jitter = {k: np.clip(v * rng.uniform(0.9, 1.1, shape), *BOUNDS[k]) for k, v in values.items()}
    units = {
        "tas": ("K", "air_temperature"),
        "hurs": ("%", "relative_humidity"),
        "wind": ("m s-1", "wind_speed"),
        "rsds": ("W m-2", "surface_downwelling_shortwave_flux_in_air"),
        "pr": ("kg m-2 s-1", "precipitation_flux"),
    }
    fields = {k: (jitter[k], *units[k]) for k in units}
    write_netcdf(climate_dataset(times, fields), tmp / "climate.nc")
    config = {
        "waterbodies": {"path": str(tmp / "ponds.gpkg"), "id_field": "pond_id"},
        "climate": {
            std: {"path": str(tmp / "climate.nc"), "variable": var}
            for var, (_, std) in units.items()
        },
        "method": {"name": method},
        "output": {"dir": str(tmp / "out"), "period": "month"},
        "compute": {"cache_dir": str(tmp / "cache")},
    }
    config["climate"]["precipitation_flux"] = config["climate"].pop("precipitation_flux")
    result = lakeloss.run(config)
    bodies = result.waterbodies

    area = layer.to_crs("EPSG:6933").area.to_numpy()  # an equal-area projection
    np.testing.assert_allclose(bodies["area_m2"], area, rtol=2e-3)
    for column in ("evap_mm", "evap_m3", "precip_mm", "net_mm", "climate_coverage"):
        assert np.isfinite(bodies[column]).all(), column
    rate = bodies["evap_mm"] / len(times)
    assert (rate >= 0).all() and (rate <= 25.0).all(), rate
    np.testing.assert_allclose(bodies["climate_coverage"], 1.0, rtol=1e-9)
    # Valid inputs inside the grid: the only flag allowed is the clipping of negative rates.
    assert bodies["qa_flags"].isin(["", "negative_rates_clipped"]).all(), bodies["qa_flags"]
    np.testing.assert_allclose(
        result.by_period.groupby("pond_id")["evap_mm"].sum().to_numpy(),
        bodies["evap_mm"].to_numpy(),
        rtol=1e-12,
    )
