"""Methods that carry a state per water body from one time step to the next.

A stateless method is a function of one step's forcing. A stateful one (the water stored in
a pond, the heat stored in a deep reservoir) also needs what the previous step left behind.
Its :class:`StateSpec` names the arrays it carries (one value per water body), how they
start, and a step function that advances them over a run of time steps::

    rates, state = spec.step(state, forcing, params)

``forcing`` holds the glossary-named inputs of the steps, shaped (steps, bodies), the
per-body inputs shaped (1, bodies) or (bodies,), and ``step_days`` (steps, 1), the length of
each step in days. The step function loops over the steps in order; ``rates`` is (steps,
bodies) in mm day-1, the mean rate over each step. The run cuts the time axis into blocks
anywhere, so a step function must give the same numbers for one call over n steps as for
two calls over k and n - k steps with the state of the first handed to the second; the
tests check that for every stateful method.

Conventions every stateful method keeps:

* A state value of NaN means "not started": the first step whose forcing is complete sets
  it from that forcing (so the initial state can come from the inputs, as an equilibrium
  water temperature does) or from the per-body inputs.
* A step whose forcing is missing (NaN) gives a NaN rate and leaves the state as it was.

:func:`relaxation_step` is a small stateful method kept to test this machinery: a rate
relaxing towards a target rate with a time constant, whose solution is known in closed
form.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

State = dict[str, np.ndarray]
"""A method's state: named arrays, one value per water body."""

StepFunction = Callable[[State, Mapping[str, Any], Mapping[str, Any]], tuple[np.ndarray, State]]
"""``(state, forcing, params) -> (rates [mm day-1], new state)`` over a run of steps."""

InitialFunction = Callable[[Mapping[str, Any], Mapping[str, Any], int], State]
"""``(per-body inputs, params, number of bodies) -> state`` before the first step."""


@dataclass(frozen=True)
class StateSpec:
    """What a stateful method carries and how it advances.

    Attributes
    ----------
    names : tuple of str
        The arrays of the state, one value per water body each.
    units : Mapping[str, str]
        Unit of each state array (pint syntax), for documentation and outputs.
    initial : InitialFunction
        The state before the first step; NaN where it is set by the first complete forcing.
    step : StepFunction
        Advances the state over a run of steps and returns their mean rates.
    """

    names: tuple[str, ...]
    units: Mapping[str, str]
    initial: InitialFunction
    step: StepFunction


def not_started(names: tuple[str, ...], n: int) -> State:
    """A state of ``n`` bodies that the first complete forcing sets (all NaN)."""
    return {name: np.full(n, np.nan) for name in names}


def relaxation_step(
    rate: np.ndarray,
    target: np.ndarray,
    step_days: np.ndarray,
    time_constant_days: float,
    start_fraction: float,
) -> tuple[np.ndarray, np.ndarray]:
    """A rate r relaxing towards a target rate E: dr/dt = (E - r) / tau.

    With E constant over a step of length dt (days), the exact solution over the step is
    r(t) = E + (r0 - E) exp(-t / tau), so the state after the step and the mean rate over it
    are::

        r1 = E + (r0 - E) exp(-dt / tau)
        mean = E + (r0 - E) (tau / dt) (1 - exp(-dt / tau))

    (the solution of a linear first-order equation with constant forcing; e.g. Boyce &
    DiPrima, Elementary Differential Equations, section 2.1). A body not yet started takes
    ``start_fraction`` x E at its first step with a finite target.

    Parameters
    ----------
    rate : ndarray, shape (bodies,)
        r at the start of the first step (NaN: not started). [mm day-1]
    target : ndarray, shape (steps, bodies)
        E over each step. [mm day-1]
    step_days : ndarray, shape (steps, 1) or (steps,)
        Length of each step. [day]
    time_constant_days : float
        tau. [day]
    start_fraction : float
        r0 / E at the first step with a finite E. [1]

    Returns
    -------
    mean : ndarray, shape (steps, bodies)
        Mean rate over each step; NaN where E is NaN. [mm day-1]
    rate : ndarray, shape (bodies,)
        r at the end of the last step (unchanged over steps where E is NaN). [mm day-1]
    """
    r = np.array(rate, dtype=float)
    days = np.asarray(step_days, dtype=float).reshape(len(target), -1)
    means = np.empty(np.shape(target))
    for k in range(len(target)):
        e = target[k]
        known = np.isfinite(e)
        r = np.where(np.isnan(r) & known, start_fraction * e, r)
        ratio = days[k] / time_constant_days
        decay = np.exp(-ratio)
        gap = r - e
        means[k] = e + gap * (1.0 - decay) / ratio
        r = np.where(known, e + gap * decay, r)
    return means, r
