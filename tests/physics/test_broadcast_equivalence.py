"""evaporate() on pipeline-shaped inputs equals the same computation on expanded arrays.

The pipeline passes climate fields as (steps, n), per-body inputs as (1, n) and the day of
year as (steps, 1); the physics computes latitude- and day-only terms at those small shapes
and overwrites its own temporaries in place. Neither may change a value: the same inputs
broadcast to full (steps, n) copies, as plain Python scalars one cell at a time, and as
xarray objects must give the same rates to rounding (rtol 1e-12). Invented inputs.
"""

import numpy as np
import pytest
import xarray as xr

from lakeloss import blocks
from lakeloss.physics import registry

STEPS, BODIES = 5, 7


def _pipeline_inputs(variant):
    rng = np.random.default_rng(11)
    shape = (STEPS, BODIES)
    temperature = rng.uniform(-8.0, 34.0, shape)
    inputs = {
        "air_temperature": temperature,
        "relative_humidity": rng.uniform(20.0, 99.0, shape),
        "wind_speed": rng.uniform(0.0, 9.0, shape),
        "surface_downwelling_shortwave_flux_in_air": rng.uniform(0.0, 340.0, shape),
        "pan_evaporation": rng.uniform(0.0, 12.0, shape),
        # Polar day and night rows included: the clipped sunset angle and Rso = 0 branch.
        "latitude": np.array([[-89.0, -66.0, -20.0, 0.0, 35.0, 72.0, 89.5]]),
        "area_m2": rng.uniform(1.0e2, 1.0e8, (1, BODIES)),
        "elevation": rng.uniform(-50.0, 3000.0, (1, BODIES)),
        "day_of_year": np.array([[1.0], [80.0], [172.0], [266.0], [355.0]]),
    }
    if variant == "extremes":
        del inputs["air_temperature"], inputs["relative_humidity"]
        inputs["air_temperature_max"] = temperature + rng.uniform(2.0, 9.0, shape)
        inputs["air_temperature_min"] = temperature - rng.uniform(2.0, 9.0, shape)
        inputs["relative_humidity_max"] = rng.uniform(70.0, 100.0, shape)
        inputs["relative_humidity_min"] = rng.uniform(20.0, 70.0, shape)
    if variant == "dew_point_pressure":
        del inputs["relative_humidity"], inputs["elevation"]
        inputs["dew_point_temperature"] = temperature - rng.uniform(0.0, 12.0, shape)
        inputs["surface_air_pressure"] = rng.uniform(70_000.0, 103_000.0, shape)
        inputs["heat_storage_flux"] = rng.uniform(-40.0, 40.0, shape)
        inputs["water_surface_temperature"] = temperature + 1.5
    return inputs


VARIANTS = ("mean_rh", "extremes", "dew_point_pressure")


@pytest.mark.parametrize("variant", VARIANTS)
@pytest.mark.parametrize("name", registry.method_names())
def test_broadcast_inputs_equal_expanded_inputs(name, variant):
    inputs = _pipeline_inputs(variant)
    expanded = {
        key: np.array(np.broadcast_to(value, (STEPS, BODIES))) for key, value in inputs.items()
    }
    rate = registry.evaporate(name, inputs)
    reference = registry.evaporate(name, expanded)
    assert rate.shape == reference.shape == (STEPS, BODIES)
    np.testing.assert_allclose(rate, reference, rtol=1e-12, atol=0.0)
    assert np.isfinite(rate).any()


@pytest.mark.parametrize("name", registry.method_names())
def test_array_rates_equal_scalar_and_xarray_rates(name):
    inputs = _pipeline_inputs("mean_rh")
    rate = registry.evaporate(name, inputs)
    for step, body in ((0, 0), (2, 3), (4, 6), (1, 5)):
        cell = {
            key: float(np.broadcast_to(v, (STEPS, BODIES))[step, body]) for key, v in inputs.items()
        }
        np.testing.assert_allclose(registry.evaporate(name, cell), rate[step, body], rtol=1e-12)
    as_xarray = {
        key: xr.DataArray(np.broadcast_to(v, (STEPS, BODIES)), dims=("time", "body"))
        for key, v in inputs.items()
    }
    np.testing.assert_allclose(registry.evaporate(name, as_xarray), rate, rtol=1e-12)


def test_inputs_are_not_modified():
    inputs = _pipeline_inputs("extremes")
    before = {key: value.copy() for key, value in inputs.items()}
    for name in registry.method_names():
        registry.evaporate(name, inputs)
    for key, value in inputs.items():
        np.testing.assert_array_equal(value, before[key], err_msg=key)


@pytest.mark.parametrize("variant", VARIANTS)
def test_rates_of_column_slices_equal_rates_of_all_columns(variant):
    # The block code evaluates the bodies in slices of columns (lakeloss.blocks.PHYSICS_COLUMNS):
    # each body's rate must depend on its own column only, bit for bit.
    inputs = _pipeline_inputs(variant)
    for name in registry.method_names():
        whole = registry.evaporate(name, inputs)
        for columns in (slice(0, 3), slice(3, 4), slice(4, BODIES)):
            part = {key: value[:, columns] if value.shape[1] == BODIES else value
                    for key, value in inputs.items()}  # fmt: skip
            np.testing.assert_array_equal(registry.evaporate(name, part), whole[:, columns])


def test_block_rates_in_column_slices_equal_one_call(monkeypatch):
    # lakeloss.blocks.evaporate_block with slices of 3 bodies (7 bodies: slices 3, 3, 1) gives
    # the bits of one registry.evaporate call over all bodies.
    inputs = _pipeline_inputs("dew_point_pressure")
    day_of_year = inputs.pop("day_of_year")[:, 0]
    static = {key: inputs.pop(key) for key in ("latitude", "area_m2")}
    names = registry.method_names()
    context = blocks.BlockContext(
        fields={}, field_grid={}, methods=names, primary=names[0], parameters={},
        day_of_year=day_of_year, days=np.ones(STEPS), period_index=np.zeros(STEPS, int),
    )  # fmt: skip
    monkeypatch.setattr(blocks, "PHYSICS_COLUMNS", 3)
    rates = blocks.evaporate_block(context, inputs, static, day_of_year)
    whole = {**inputs, **static, "day_of_year": day_of_year[:, np.newaxis]}
    for name in names:
        np.testing.assert_array_equal(rates[name], registry.evaporate(name, whole), err_msg=name)
