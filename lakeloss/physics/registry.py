"""Registry of evaporation methods: what each needs, its parameters, and how to run it.

Each method is a :class:`MethodSpec` naming its required inputs (groups of alternatives, each
alternative a tuple of glossary names), its optional inputs, its parameters with
defaults and valid ranges, a one-line description and its reference. :func:`evaporate`
prepares the forcing from whatever inputs are given (:mod:`lakeloss.physics.forcing`) and
returns the rate in mm day-1 as a numpy array.
"""

from __future__ import annotations

import difflib
import itertools
import math
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any

import numpy as np

from lakeloss.errors import ConfigError, MissingInputError, ParameterRangeError, UnknownMethodError
from lakeloss.physics import atmosphere as atm
from lakeloss.physics import forcing as frc
from lakeloss.physics import methods as mth
from lakeloss.physics import stateful as stf
from lakeloss.physics import windfunctions as wf
from lakeloss.physics._types import ArrayLike

_Checked = Mapping[str, Any]
"""Parameters after :func:`validate_parameters`: floats and strings, every key present."""


@dataclass(frozen=True)
class ParameterSpec:
    """One tunable parameter shared by the methods that use it.

    Attributes
    ----------
    name : str
        Parameter name as written in the run configuration.
    default : float or str
        Value used when the configuration does not set it.
    minimum, maximum : float or None
        Inclusive valid range for numeric parameters; None for string parameters.
    unit : str
        Unit of the value (pint syntax; "1" for dimensionless).
    description : str
        One line for humans, with the source of the default.
    choices : tuple of str or None
        Allowed values of a string parameter.
    """

    name: str
    default: float | str
    minimum: float | None
    maximum: float | None
    unit: str
    description: str
    choices: tuple[str, ...] | None = None


@dataclass(frozen=True)
class MethodSpec:
    """What an evaporation method needs and how it is parameterised.

    Attributes
    ----------
    name : str
        Registry name.
    description : str
        One line.
    reference : str
        Published source of the method.
    requires : tuple of tuple of tuple of str
        Each entry is one need; its items are alternatives, each a tuple of glossary names
        that together satisfy the need.
    optional : tuple of str
        Inputs used when present.
    parameters : Mapping[str, ParameterSpec]
        Parameters of this method, by name.
    equation : str
        The equation the method evaluates, in words and symbols.
    assumptions : str
        What the method assumes, and when it over- or under-states evaporation.
    state : StateSpec or None
        What a stateful method carries from one step to the next
        (:mod:`lakeloss.physics.stateful`); None for a method of one step's forcing, whose
        ``compute`` gives the rate. A stateful method's ``compute`` is not used.
    listed : bool
        False for a method kept to test the machinery: runnable by name, not offered by
        ``lakeloss methods``, drafts or error messages.
    """

    name: str
    description: str
    reference: str
    requires: tuple[tuple[frc.Alternative, ...], ...]
    optional: tuple[str, ...]
    parameters: Mapping[str, ParameterSpec]
    compute: Callable[[frc.Inputs, _Checked], ArrayLike] = field(repr=False, compare=False)
    equation: str = ""
    assumptions: str = ""
    state: stf.StateSpec | None = field(default=None, repr=False, compare=False)
    listed: bool = True


_PARAMETERS: dict[str, ParameterSpec] = {
    spec.name: spec
    for spec in (
        ParameterSpec("albedo", 0.08, 0.0, 0.3, "1",
                      "shortwave albedo of the water (0.08, Shuttleworth 1993; 0.05-0.08 usual)"),
        ParameterSpec("roughness_length_m", 0.0003, 1.0e-5, 0.01, "m",
                      "roughness length over water (0.03 cm, common practice; 1e-4 to 1e-3 usual)"),
        ParameterSpec("wind_height_m", 10.0, 0.5, 100.0, "m",
                      "height of the wind_speed input above the surface (set by the wind_speed "
                      "entry's height_m)"),
        ParameterSpec("wind_profile", "fao56", None, None, "1",
                      "moving wind to 2 m: fao56 (FAO-56 eq. 47, land wind) or log (log law, z0)",
                      ("fao56", "log")),
        ParameterSpec("von_karman", 0.4, 0.35, 0.43, "1",
                      "von Karman constant (0.4, Chow et al. 1988; FAO-56 uses 0.41)"),
        ParameterSpec("priestley_taylor_alpha", 1.26, 1.0, 1.5, "1",
                      "Priestley-Taylor coefficient (1.26, Priestley & Taylor 1972)"),
        ParameterSpec("pan_coefficient", 0.7, 0.5, 1.0, "1",
                      "pan-to-lake coefficient (0.7 for Class A pans, common practice)"),
        ParameterSpec("elevation_m", 0.0, -450.0, 9000.0, "m",
                      "water-surface elevation for pressure (FAO-56 eq. 7) and clear-sky "
                      "radiation where no elevation input is given; 0 is sea level"),
        ParameterSpec("relaxation_days", 5.0, 0.01, 3650.0, "day",
                      "time constant of relaxation_check, the test of the stateful machinery"),
        ParameterSpec("relaxation_start_fraction", 1.0, 0.0, 10.0, "1",
                      "relaxation_check's starting rate as a fraction of its first target"),
        ParameterSpec("small_water_body_wind_form", "mcjannet_length", None, None, "1",
                      "area-dependent wind function: (2.33+1.65u2)L^-0.1 or (2.36+1.67u2)A^-0.05",
                      tuple(wf.SMALL_WATER_BODY_FORMS)),
    )
}  # fmt: skip


def _params(*names: str) -> Mapping[str, ParameterSpec]:
    return MappingProxyType({name: _PARAMETERS[name] for name in names})


def _cross(*groups: tuple[frc.Alternative, ...]) -> tuple[frc.Alternative, ...]:
    """Every way to satisfy all groups at once, as name tuples without repeats."""
    return tuple(
        tuple(dict.fromkeys(name for part in parts for name in part))
        for parts in itertools.product(*groups)
    )


# Net radiation from shortwave needs humidity for the longwave term; methods that need
# humidity anyway list the two needs separately, the others need the combined alternatives.
_RADIATION_ALONE = (
    frc.RADIATION_ALTERNATIVES[0],
    *_cross((frc.RADIATION_ALTERNATIVES[1],), frc.HUMIDITY_ALTERNATIVES),
)
_TURBULENT_NEEDS = (
    frc.TEMPERATURE_ALTERNATIVES,
    frc.HUMIDITY_ALTERNATIVES,
    frc.WIND_ALTERNATIVES,
)
_PRESSURE_OPTIONAL = ("surface_air_pressure", "elevation")
_RADIATION_OPTIONAL = (
    "air_temperature_max",
    "air_temperature_min",
    "elevation",
    "heat_storage_flux",
)


# ---------------------------------------------------------------------------------------
# Shared preparation of the thermodynamic state
# ---------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _State:
    temperature: ArrayLike  # [°C]
    vapour_pressure: ArrayLike  # [Pa]
    saturation: ArrayLike  # es [Pa]
    pressure: ArrayLike  # [Pa]
    latent_heat: ArrayLike  # [J kg-1]
    slope: ArrayLike  # [Pa K-1]
    gamma: ArrayLike  # [Pa K-1]

    @property
    def deficit(self) -> ArrayLike:
        """es - ea [Pa], computed on use: each method reads it once, some never."""
        return self.saturation - self.vapour_pressure


def _state(inputs: frc.Inputs, params: _Checked, humidity: bool = True) -> _State:
    # Each intermediate once: e°(T) feeds Δ and, without Tmax/Tmin, es (and through it ea
    # from mean RH); ea feeds the deficit, ρa and the longwave term. With Tmax and Tmin, es
    # is FAO-56 eq. 12 even when a mean temperature is configured too (the mean still sets
    # Δ, λ and γ): e°(Tmean) would understate es, and every method must see the same es.
    temperature = frc.mean_temperature(inputs)
    latent_heat = atm.latent_heat_of_vaporisation(temperature)
    pressure = frc.surface_pressure(inputs, float(params.get("elevation_m", 0.0)))
    e_sat_mean = atm.saturation_vapour_pressure(temperature)
    es = (
        frc.saturation_vapour_pressure(inputs)
        if frc.has_temperature_extremes(inputs)
        else e_sat_mean
    )
    ea = frc.vapour_pressure(inputs, es) if humidity else math.nan
    return _State(
        temperature=temperature,
        vapour_pressure=ea,
        saturation=es,
        pressure=pressure,
        latent_heat=latent_heat,
        slope=atm.slope_from_saturation_vapour_pressure(e_sat_mean, temperature),
        gamma=atm.psychrometric_constant(pressure, latent_heat),
    )


def vapour_pressures(inputs: Mapping[str, ArrayLike]) -> tuple[ArrayLike, ArrayLike]:
    """(es, ea) [Pa]: the saturation and actual vapour pressures every method of a run uses.

    es is FAO-56 eq. 12 from ``air_temperature_max`` and ``air_temperature_min`` whenever
    both are given (with or without ``air_temperature``), else e°(``air_temperature``); ea
    comes from the first available humidity input (:func:`forcing.vapour_pressure`).
    """
    state = _state({key: np.asarray(value, dtype=float) for key, value in inputs.items()}, {})
    return state.saturation, state.vapour_pressure


def _net_radiation(
    inputs: frc.Inputs, params: _Checked, vapour_pressure: ArrayLike = None
) -> ArrayLike:
    """Rn [W m-2]; ``vapour_pressure`` is ea when the caller already has it."""
    if "surface_net_downward_radiative_flux" in inputs:
        return inputs["surface_net_downward_radiative_flux"]
    ea = frc.vapour_pressure(inputs) if vapour_pressure is None else vapour_pressure
    return frc.net_radiation(inputs, ea, float(params["albedo"]), float(params["elevation_m"]))


def _wind_2m(inputs: frc.Inputs, params: _Checked) -> ArrayLike:
    return frc.wind_speed_2m(
        inputs,
        float(params["wind_height_m"]),
        str(params["wind_profile"]),
        float(params["roughness_length_m"]),
    )


# ---------------------------------------------------------------------------------------
# One compute function per method: inputs + validated parameters -> mm day-1
# ---------------------------------------------------------------------------------------


def _energy_balance(inputs: frc.Inputs, params: _Checked) -> ArrayLike:
    latent_heat = atm.latent_heat_of_vaporisation(frc.mean_temperature(inputs))
    return mth.energy_balance_evaporation(
        _net_radiation(inputs, params), latent_heat, frc.heat_storage_flux(inputs)
    )


def _aerodynamic_rate(inputs: frc.Inputs, params: _Checked, state: _State) -> ArrayLike:
    deficit = state.deficit
    if "water_surface_temperature" in inputs:
        deficit = (
            atm.saturation_vapour_pressure(inputs["water_surface_temperature"])
            - state.vapour_pressure
        )
    coefficient = wf.mass_transfer_coefficient(
        _wind_2m(inputs, params),
        atm.air_density(state.temperature, state.pressure, state.vapour_pressure),
        state.pressure,
        2.0,
        float(params["roughness_length_m"]),
        float(params["von_karman"]),
    )
    return mth.aerodynamic_evaporation(deficit, coefficient)


def _aerodynamic(inputs: frc.Inputs, params: _Checked) -> ArrayLike:
    return _aerodynamic_rate(inputs, params, _state(inputs, params))


def _combination(inputs: frc.Inputs, params: _Checked) -> ArrayLike:
    state = _state(inputs, params)
    energy = mth.energy_balance_evaporation(
        _net_radiation(inputs, params, state.vapour_pressure),
        state.latent_heat,
        frc.heat_storage_flux(inputs),
    )
    return mth.combination_evaporation(
        energy, _aerodynamic_rate(inputs, params, state), state.slope, state.gamma
    )


def _priestley_taylor(inputs: frc.Inputs, params: _Checked) -> ArrayLike:
    humidity = "surface_net_downward_radiative_flux" not in inputs  # only the longwave needs ea
    state = _state(inputs, params, humidity=humidity)
    return mth.priestley_taylor_evaporation(
        _net_radiation(inputs, params, state.vapour_pressure if humidity else None),
        state.slope,
        state.gamma,
        state.latent_heat,
        frc.heat_storage_flux(inputs),
        float(params["priestley_taylor_alpha"]),
    )


def _penman_with(
    inputs: frc.Inputs, params: _Checked, wind_function: ArrayLike, state: _State
) -> ArrayLike:
    return mth.penman_evaporation(
        _net_radiation(inputs, params, state.vapour_pressure),
        state.deficit,
        wind_function,
        state.slope,
        state.gamma,
        state.latent_heat,
        frc.heat_storage_flux(inputs),
    )


def _penman_open_water(inputs: frc.Inputs, params: _Checked) -> ArrayLike:
    state = _state(inputs, params)
    wind_function = wf.shuttleworth_wind_function(_wind_2m(inputs, params), state.latent_heat)
    return _penman_with(inputs, params, wind_function, state)


def _penman_small_water_body(inputs: frc.Inputs, params: _Checked) -> ArrayLike:
    state = _state(inputs, params)
    wind_function = wf.small_water_body_wind_function(
        _wind_2m(inputs, params), inputs["area_m2"], str(params["small_water_body_wind_form"])
    )
    return _penman_with(inputs, params, wind_function, state)


def _penman_monteith(inputs: frc.Inputs, params: _Checked) -> ArrayLike:
    state = _state(inputs, params)
    resistance = wf.aerodynamic_resistance(
        _wind_2m(inputs, params), 2.0, float(params["roughness_length_m"]),
        float(params["von_karman"]),
    )  # fmt: skip
    return mth.penman_monteith_open_water_evaporation(
        _net_radiation(inputs, params, state.vapour_pressure),
        state.deficit,
        resistance,
        atm.air_density(state.temperature, state.pressure, state.vapour_pressure),
        state.slope,
        state.gamma,
        state.latent_heat,
        frc.heat_storage_flux(inputs),
    )


def _pan(inputs: frc.Inputs, params: _Checked) -> ArrayLike:
    return mth.pan_coefficient_evaporation(
        inputs["pan_evaporation"], float(params["pan_coefficient"])
    )


_WIND_PARAMS = ("wind_height_m", "wind_profile", "roughness_length_m")


def _relaxation_initial(static: frc.Inputs, params: _Checked, n: int) -> stf.State:
    return stf.not_started(("rate",), n)


def _relaxation_step(
    state: stf.State, inputs: frc.Inputs, params: _Checked
) -> tuple[np.ndarray, stf.State]:
    target = np.asarray(_penman_open_water(inputs, params), dtype=float)
    target = np.broadcast_to(target, np.broadcast_shapes(target.shape, state["rate"].shape))
    means, rate = stf.relaxation_step(
        state["rate"],
        target,
        inputs["step_days"],
        float(params["relaxation_days"]),
        float(params["relaxation_start_fraction"]),
    )
    return means, {"rate": rate}


_RELAXATION_STATE = stf.StateSpec(
    names=("rate",),
    units={"rate": "mm day-1"},
    initial=_relaxation_initial,
    step=_relaxation_step,
)

_METHODS: dict[str, MethodSpec] = {
    spec.name: spec
    for spec in (
        MethodSpec(
            "energy_balance",
            "all available energy (Rn - G) evaporates; no sensible heat",
            "Chow, Maidment & Mays (1988) Applied Hydrology, section 3.5",
            (frc.TEMPERATURE_ALTERNATIVES, _RADIATION_ALONE),
            _RADIATION_OPTIONAL,
            _params("albedo", "elevation_m"),
            _energy_balance,
            equation=(
                "E = (Rn - G) / (lambda rho_w): all net radiation not stored as heat (G) "
                "evaporates water"
            ),
            assumptions=(
                "No sensible heat and no advection. Equal to penman_open_water when the air's "
                "drying power matches the radiation (0.98 of it on the demo); over-states in humid "
                "or cool air, under-states where warm dry air brings energy (advection), the usual "
                "case for small dams in dry country."
            ),
        ),
        MethodSpec(
            "aerodynamic",
            "mass transfer B(es - ea), B from the neutral log wind profile",
            "Chow, Maidment & Mays (1988) Applied Hydrology, section 3.5",
            _TURBULENT_NEEDS,
            (*_PRESSURE_OPTIONAL, "water_surface_temperature"),
            _params(*_WIND_PARAMS, "von_karman", "elevation_m"),
            _aerodynamic,
            equation=(
                "E = B (es - ea), B = 0.622 k^2 rho_a u2 / (P rho_w ln^2(2 m / z0)): vapour "
                "carried off by turbulence in a neutral log wind profile; es at the water-surface "
                "temperature when given, else at the air temperature"
            ),
            assumptions=(
                "Ignores radiation; neutral stability; no transfer in still air; very sensitive to "
                "z0. With es at the air temperature it is a potential rate. Usually well under the "
                "combination methods (0.56 of penman_open_water on the demo): the log-law "
                "coefficient over smooth water is small and has no free-convection term."
            ),
        ),
        MethodSpec(
            "combination",
            "energy_balance and aerodynamic weighted; = penman_monteith_open_water",
            "Chow, Maidment & Mays (1988) Applied Hydrology, section 3.5",
            (*_TURBULENT_NEEDS, frc.RADIATION_ALTERNATIVES),
            (*_PRESSURE_OPTIONAL, *_RADIATION_OPTIONAL[:2], "heat_storage_flux",
             "water_surface_temperature"),
            _params("albedo", *_WIND_PARAMS, "von_karman", "elevation_m"),
            _combination,
            equation=(
                "E = Delta/(Delta + gamma) Er + gamma/(Delta + gamma) Ea: the energy_balance rate "
                "Er and the aerodynamic rate Ea weighted by the slope Delta of the saturation "
                "curve and the psychrometric constant gamma. Since gamma Ea = rho_a cp (es - "
                "ea)/(lambda rho_w ra), this is the penman_monteith_open_water equation: the two "
                "give the same numbers unless water_surface_temperature is given, which only this "
                "method reads (for Ea)"
            ),
            assumptions=(
                "As penman_monteith_open_water: the ventilation term of the log law has no "
                "still-air part, so it is lower than the empirical Penman wind functions in light "
                "winds (0.84 of penman_open_water on the demo)."
            ),
        ),
        MethodSpec(
            "priestley_taylor",
            "alpha times the equilibrium (radiation-driven) evaporation",
            "Priestley & Taylor (1972) Mon. Weather Rev. 100, 81-92",
            (frc.TEMPERATURE_ALTERNATIVES, _RADIATION_ALONE),
            (*_PRESSURE_OPTIONAL, *_RADIATION_OPTIONAL),
            _params("albedo", "priestley_taylor_alpha", "elevation_m"),
            _priestley_taylor,
            equation=(
                "E = alpha Delta/(Delta + gamma) (Rn - G)/(lambda rho_w): the equilibrium "
                "evaporation of air saturated by the surface, raised by alpha for the drying power "
                "of the air that the method does not see"
            ),
            assumptions=(
                "alpha = 1.26 fits humid regions with little advection. Under-states in dry, windy "
                "or advective climates (0.84 of penman_open_water on the semi-arid demo); needs no "
                "wind and no humidity when net radiation is given."
            ),
        ),
        MethodSpec(
            "penman_open_water",
            "Penman with the open-water wind function 6.43(1 + 0.536 u2)/lambda",
            "Shuttleworth (1993) Evaporation, Handbook of Hydrology ch. 4, eq. 4.2.30",
            (*_TURBULENT_NEEDS, frc.RADIATION_ALTERNATIVES),
            (*_PRESSURE_OPTIONAL, *_RADIATION_OPTIONAL),
            _params("albedo", *_WIND_PARAMS, "elevation_m"),
            _penman_open_water,
            equation=(
                "E = [Delta (Rn - G) + gamma 6.43 (1 + 0.536 u2)(es - ea)] / [lambda (Delta + "
                "gamma)], Rn and G in MJ m-2 day-1, es - ea in kPa, lambda in MJ kg-1: Penman's "
                "combination of available energy and ventilation with an empirical open-water wind "
                "function"
            ),
            assumptions=(
                "The reference of the ratios quoted for the other methods. Wind function fitted "
                "to land-station winds and small open-water surfaces; no fetch effect "
                "(penman_small_water_body gives less, the more so the larger the body) and no "
                "heat storage (G = 0 unless given: deep reservoirs evaporate less than this in "
                "spring and more in autumn, with a similar annual total)."
            ),
        ),
        MethodSpec(
            "penman_monteith_open_water",
            "Penman-Monteith, zero surface resistance, ra from the water roughness",
            "Allen et al. (1998) FAO-56 eqs. 3-4, with rs = 0 and z0 of water",
            (*_TURBULENT_NEEDS, frc.RADIATION_ALTERNATIVES),
            (*_PRESSURE_OPTIONAL, *_RADIATION_OPTIONAL),
            _params("albedo", *_WIND_PARAMS, "von_karman", "elevation_m"),
            _penman_monteith,
            equation=(
                "E = [Delta (Rn - G) + rho_a cp (es - ea)/ra] / [lambda (Delta + gamma)], ra = "
                "ln^2(2 m / z0) / (k^2 u2): Penman-Monteith with zero surface resistance and the "
                "neutral aerodynamic resistance of water; numerically the combination equation"
            ),
            assumptions=(
                "The ventilation term vanishes in still air, so it is lower than penman_open_water "
                "in light winds (0.84 on the demo); sensitive to z0 (0.3 mm by default; 1 mm "
                "raises it)."
            ),
        ),
        MethodSpec(
            "penman_small_water_body",
            "Penman with an area-dependent wind function (small water bodies)",
            "McJannet, Webster & Cook (2012) Environ. Model. Softw. 31, 76-83",
            (*_TURBULENT_NEEDS, frc.RADIATION_ALTERNATIVES, (("area_m2",),)),
            (*_PRESSURE_OPTIONAL, *_RADIATION_OPTIONAL),
            _params("albedo", *_WIND_PARAMS, "small_water_body_wind_form", "elevation_m"),
            _penman_small_water_body,
            equation=(
                "As penman_open_water with the wind function f(u) = (2.33 + 1.65 u2) L^-0.1, L = "
                "sqrt(4A/pi) in m, or (2.36 + 1.67 u2) A^-0.05 with A in m2 [mm day-1 kPa-1]: "
                "transfer per unit land wind grows as the fetch shortens"
            ),
            assumptions=(
                "The area exponent is robust, the constants are uncertain. Its wind function is "
                "below Shuttleworth's for every body larger than a few m2, most of all for large "
                "ones: 0.90 of penman_open_water in mean depth on the demo, 0.83 by volume (the "
                "reservoirs dominate the volume)."
            ),
        ),
        MethodSpec(
            "pan_coefficient",
            "pan evaporation times a pan-to-lake coefficient",
            "Kohler, Nordenson & Fox (1955) US Weather Bureau Research Paper 38",
            ((("pan_evaporation",),),),
            (),
            _params("pan_coefficient"),
            _pan,
            equation=(
                "E = Kp Epan: the measured pan evaporation scaled by a pan-to-lake coefficient"
            ),
            assumptions=(
                "Kp = 0.7 is an annual figure for Class A pans; monthly Kp varies with the heat "
                "stored by deep water and with the pan's own exposure. Only as good as the pan "
                "record."
            ),
        ),
        MethodSpec(
            "relaxation_check",
            "test of the stateful machinery: penman_open_water lagged by a relaxation",
            "closed-form solution of dr/dt = (E - r)/tau with E constant over each step",
            (*_TURBULENT_NEEDS, frc.RADIATION_ALTERNATIVES),
            (*_PRESSURE_OPTIONAL, *_RADIATION_OPTIONAL),
            _params("albedo", *_WIND_PARAMS, "elevation_m", "relaxation_days",
                    "relaxation_start_fraction"),
            _penman_open_water,
            equation=(
                "r1 = E + (r0 - E) exp(-dt/tau), reported rate = E + (r0 - E)(tau/dt)(1 - "
                "exp(-dt/tau)): the rate r relaxes towards the penman_open_water rate E with "
                "time constant tau = relaxation_days, starting at relaxation_start_fraction x E"
            ),
            assumptions=(
                "Not a physical method: it exists so that tests and benchmarks can check that "
                "a state is carried from step to step exactly, whatever the block size, the "
                "partitions or the scheduler."
            ),
            state=_RELAXATION_STATE,
            listed=False,
        ),
    )
}  # fmt: skip


# ---------------------------------------------------------------------------------------
# Public interface
# ---------------------------------------------------------------------------------------


def method_names() -> tuple[str, ...]:
    """Names of the methods offered to users, in registry order (not the test methods)."""
    return tuple(name for name, spec in _METHODS.items() if spec.listed)


def carries_state(name: str) -> bool:
    """Whether method ``name`` carries a state from one time step to the next."""
    return get(name).state is not None


def get(name: str) -> MethodSpec:
    """The :class:`MethodSpec` of ``name``; :class:`UnknownMethodError` if there is none."""
    try:
        return _METHODS[name]
    except (KeyError, TypeError):
        raise UnknownMethodError(
            _unknown_message("evaporation method", name, method_names())
        ) from None


def _unknown_message(kind: str, name: object, known: Iterable[str]) -> str:
    known = list(known)
    close = difflib.get_close_matches(str(name), known, n=1)
    hint = f" (did you mean {close[0]!r}?)" if close else ""
    return f"unknown {kind} {name!r}{hint}; expected one of: {', '.join(known)}"


def _satisfied(alternative: frc.Alternative, available: set[str]) -> bool:
    return all(part in available for part in alternative)


def missing_inputs(name: str, available: Iterable[str]) -> list[str]:
    """What ``name`` still needs, given the ``available`` input names; [] when runnable.

    Each item is one unmet need: a glossary name, or ``"one of: a | b+c | ..."`` listing the
    alternatives that would satisfy it.
    """
    spec = get(name)
    have = set(available)
    missing = []
    for group in spec.requires:
        if any(_satisfied(alternative, have) for alternative in group):
            continue
        shown = ["+".join(alternative) for alternative in group]
        missing.append(shown[0] if len(shown) == 1 else "one of: " + " | ".join(shown))
    return missing


def runnable(available: Iterable[str]) -> list[str]:
    """Names of the methods that can run with the ``available`` input names."""
    have = set(available)
    return [name for name in method_names() if not missing_inputs(name, have)]


def parameter_specs() -> dict[str, ParameterSpec]:
    """Every parameter of every method, by name (a name means the same thing everywhere)."""
    return dict(_PARAMETERS)


# Parameters whose value an input replaces where the input is given (per water body).
_REPLACED_BY_INPUT = {"elevation_m": "elevation"}

SEA_LEVEL_PRESSURE_NOTE = (
    "no surface_air_pressure input, no elevation input and no [parameters] elevation_m: "
    "air pressure is taken at sea level (101.3 kPa, FAO-56 eq. 7 at 0 m) for every water "
    "body; set elevation_m or an elevation input (pressure falls about 3 % per 250 m and "
    "the psychrometric constant with it)"
)


def effective_parameters(
    methods: Iterable[str],
    configured: Mapping[str, object],
    input_sources: Mapping[str, str] | None = None,
) -> dict[str, dict[str, object]]:
    """Every parameter the ``methods`` use, with the value used and where it came from.

    Parameters
    ----------
    methods : iterable of str
        Registered method names of one run.
    configured : Mapping[str, object]
        Parameter values the configuration sets; names of no method are ignored here.
    input_sources : Mapping[str, str], optional
        Per-body inputs given to the run and their source, e.g. ``{"elevation": "field"}``
        or ``{"elevation": "raster"}``; such an input replaces the parameter it stands for.

    Returns
    -------
    dict
        ``{name: {"value", "unit", "source", "methods"}}`` in registry order; ``source`` is
        ``"config"``, ``"default"``, or the source of the input that replaces the parameter
        (then ``value`` is the fallback for bodies the input does not cover).
    """
    names = list(dict.fromkeys(methods))
    sources = dict(input_sources or {})
    used: dict[str, dict[str, object]] = {}
    for key, spec in _PARAMETERS.items():
        users = [name for name in names if key in get(name).parameters]
        if not users:
            continue
        replacing_input = _REPLACED_BY_INPUT.get(key)
        if replacing_input in sources:
            source = sources[str(replacing_input)]
        else:
            source = "config" if key in configured else "default"
        used[key] = {
            "value": _check_value(spec, configured.get(key, spec.default)),
            "unit": spec.unit,
            "source": source,
            "methods": users,
        }
    return used


def assumption_notes(
    methods: Iterable[str], configured: Mapping[str, object], available: Iterable[str]
) -> list[str]:
    """Assumptions a run makes silently from defaults, one sentence each ([] when none).

    Today one: a method that uses air pressure gets the sea-level value because there is no
    pressure input, no elevation input (``available`` lists the input names) and no
    configured ``elevation_m``.
    """
    have = set(available)
    uses_pressure = any("surface_air_pressure" in get(name).optional for name in methods)
    if (
        uses_pressure
        and not {"surface_air_pressure", "elevation"} & have
        and "elevation_m" not in configured
    ):
        return [SEA_LEVEL_PRESSURE_NOTE]
    return []


def _check_value(spec: ParameterSpec, value: object) -> float | str:
    if spec.choices is not None:
        if value not in spec.choices:
            raise ParameterRangeError(
                f"parameter {spec.name!r} is {value!r}; expected one of: "
                f"{', '.join(spec.choices)}; set it to one of those"
            )
        return str(value)
    if isinstance(value, bool) or not isinstance(value, int | float | np.integer | np.floating):
        raise ConfigError(
            f"parameter {spec.name!r} is {value!r} of type {type(value).__name__}; "
            f"expected a number in [{spec.minimum}, {spec.maximum}] {spec.unit}"
        )
    number = float(value)
    assert spec.minimum is not None and spec.maximum is not None
    if not spec.minimum <= number <= spec.maximum:
        raise ParameterRangeError(
            f"parameter {spec.name!r} is {number:g}; expected {spec.minimum:g} to "
            f"{spec.maximum:g}{'' if spec.unit == '1' else ' ' + spec.unit}; "
            "set a value within that range"
        )
    return number


def validate_parameters(name: str, params: Mapping[str, object]) -> dict[str, object]:
    """The parameters of method ``name`` with defaults filled in and values checked.

    Names that belong to other methods are ignored (one configuration feeds several
    methods); names that belong to no method raise :class:`ConfigError`. Numbers outside
    their range, or strings outside their choices, raise :class:`ParameterRangeError`.
    """
    spec = get(name)
    for key in params:
        if key not in _PARAMETERS:
            raise ConfigError(_unknown_message("parameter", key, _PARAMETERS))
    return {
        key: _check_value(param, params.get(key, param.default))
        for key, param in spec.parameters.items()
    }


def _used_shapes(spec: MethodSpec, inputs: Mapping[str, np.ndarray]) -> list[tuple[int, ...]]:
    names = {part for group in spec.requires for alt in group for part in alt}
    names.update(spec.optional)
    return [inputs[key].shape for key in names if key in inputs]


def evaporate(
    name: str,
    inputs: Mapping[str, ArrayLike],
    params: Mapping[str, object] | None = None,
) -> np.ndarray:
    """Evaporation rate of method ``name`` for one or many time steps.

    Parameters
    ----------
    name : str
        Registered method name.
    inputs : Mapping[str, array_like]
        Glossary-named inputs in glossary units, broadcastable to one another.
    params : Mapping[str, object], optional
        Parameter values; missing ones take their defaults.

    Notes
    -----
    Forcing is prepared by :mod:`lakeloss.physics.forcing`: mean temperature from
    ``air_temperature`` or (Tmax + Tmin)/2; es by FAO-56 eq. 12 whenever Tmax and Tmin are both
    given (also with ``air_temperature``);
    actual vapour pressure from the first available of vapour pressure, dew point, specific
    humidity with pressure, RHmax/RHmin (eq. 17), RHmax (eq. 18), mean RH (eq. 19); pressure
    from ``surface_air_pressure``, else eq. 7 at ``elevation`` or the ``elevation_m``
    parameter; wind moved from ``wind_height_m`` to 2 m by ``wind_profile``; net radiation
    from ``surface_net_downward_radiative_flux``, else from shortwave with the water albedo,
    eq. 39 longwave and eq. 37 clear-sky radiation; G from ``heat_storage_flux``, else 0.
    Latent heat is λ(T) at the mean air temperature (Chow eq. 2.7.6) and γ = cp P/(0.622 λ).

    Returns
    -------
    numpy.ndarray
        Evaporation rate, broadcast over the inputs the method uses; NaN where an input is
        NaN; negative values as computed. [mm day-1]

    Raises
    ------
    UnknownMethodError
        ``name`` is not registered.
    MissingInputError
        ``inputs`` cannot satisfy a requirement of the method.
    ParameterRangeError, ConfigError
        A parameter is out of range, of the wrong type, or unknown.
    """
    spec = get(name)
    checked, arrays = _prepared(name, inputs, params)
    if spec.state is not None:
        return _evaporate_from_start(spec, arrays, checked)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        rate = np.asarray(spec.compute(arrays, checked), dtype=float)
    shape = np.broadcast_shapes(rate.shape, *_used_shapes(spec, arrays))
    if (
        rate.shape == shape
        and rate.flags.writeable
        and rate.flags.owndata
        and not any(np.may_share_memory(rate, value) for value in arrays.values())
    ):
        return rate  # already a fresh array of the full shape; a copy would only cost time
    return np.array(np.broadcast_to(rate, shape))


def _prepared(
    name: str, inputs: Mapping[str, ArrayLike], params: Mapping[str, object] | None
) -> tuple[dict[str, object], dict[str, np.ndarray]]:
    """The checked parameters and the inputs as float arrays; refuses missing inputs."""
    checked = validate_parameters(name, params or {})
    missing = missing_inputs(name, inputs)
    if missing:
        raise MissingInputError(
            f"method {name!r} lacks inputs: {'; '.join(missing)}; "
            "add them to the configuration or choose another method"
        )
    return checked, {key: np.asarray(value, dtype=float) for key, value in inputs.items()}


def _evaporate_from_start(
    spec: MethodSpec, arrays: dict[str, np.ndarray], checked: _Checked
) -> np.ndarray:
    """A stateful method run from its initial state over axis 0 of the inputs (time)."""
    assert spec.state is not None
    shape = np.broadcast_shapes(*_used_shapes(spec, arrays))
    one_body = len(shape) < 2
    steps = shape[0] if shape else 1
    if one_body:
        arrays = {k: np.reshape(v, (-1, 1)) if v.ndim == 1 else v for k, v in arrays.items()}
    n = 1 if one_body else shape[-1]
    arrays.setdefault("step_days", np.ones((steps, 1)))
    state = spec.state.initial(arrays, checked, n)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        rates, _ = spec.state.step(state, arrays, checked)
    return rates[:, 0] if one_body else rates


def initial_state(
    name: str, static: Mapping[str, ArrayLike], params: Mapping[str, object], n: int
) -> stf.State:
    """The state of stateful method ``name`` for ``n`` bodies before the first step.

    ``static`` holds the per-body inputs (shape (n,) or (1, n)).
    """
    spec = get(name)
    if spec.state is None:
        raise ValueError(f"method {name!r} carries no state")
    return spec.state.initial(static, validate_parameters(name, params), n)


def advance(
    name: str,
    state: stf.State,
    inputs: Mapping[str, ArrayLike],
    params: Mapping[str, object] | None = None,
) -> tuple[np.ndarray, stf.State]:
    """Advance stateful method ``name`` over a run of time steps.

    Parameters
    ----------
    name : str
        A method whose :attr:`MethodSpec.state` is set.
    state : dict of ndarray
        The state after the previous step (or :func:`initial_state`), one value per body.
    inputs : Mapping[str, array_like]
        Glossary-named forcing shaped (steps, bodies), per-body inputs (1, bodies), and
        ``step_days`` (steps, 1). [glossary units]
    params : Mapping[str, object], optional
        Parameter values; missing ones take their defaults.

    Returns
    -------
    rates : numpy.ndarray, shape (steps, bodies)
        Mean evaporation rate over each step. [mm day-1]
    state : dict of ndarray
        The state after the last step; the input state is not modified.
    """
    spec = get(name)
    if spec.state is None:
        raise ValueError(f"method {name!r} carries no state")
    checked, arrays = _prepared(name, inputs, params)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        rates, new_state = spec.state.step(dict(state), arrays, checked)
    return np.asarray(rates, dtype=float), new_state
