"""Water bodies that must get the same numbers, so that each is computed once.

Most farm dams and stock ponds lie inside one climate cell, and many share a cell: their
area-weighted climate is that cell's value, and when their per-body inputs (latitude,
elevation, area where a method uses them) are equal too, every method gives them the same
rate at every step. The per-block computation runs on one representative of each such
group and the period sums are copied to the members at the end. The copy is exact: a member
gets the representative's bits, which are the bits it would have got on its own.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import dataclass

import numpy as np

from lakeloss.physics import registry
from lakeloss.zonal import ZonalWeights


@dataclass(frozen=True)
class BodyGroups:
    """Groups of water bodies with identical inputs to the per-block computation.

    Attributes
    ----------
    representative : numpy.ndarray
        ``(k,)`` index of the first body of each group, ascending.
    member_of : numpy.ndarray
        ``(n,)`` group of each body: ``representative[member_of[i]]`` stands for body ``i``.
    count : numpy.ndarray
        ``(k,)`` int64 number of bodies in each group.
    """

    representative: np.ndarray
    member_of: np.ndarray
    count: np.ndarray

    @property
    def n_groups(self) -> int:
        return int(self.representative.size)

    @property
    def n_bodies(self) -> int:
        return int(self.member_of.size)

    @property
    def one_body_each(self) -> bool:
        """No two bodies alike: every group is one body, in layer order."""
        return self.n_groups == self.n_bodies

    def group_weights(self, weights: Mapping[str, ZonalWeights]) -> dict[str, ZonalWeights]:
        """The weights of the representatives only (the same objects when all distinct)."""
        if self.one_body_each:
            return dict(weights)
        return {key: w.take_rows(self.representative) for key, w in weights.items()}

    def group_values(self, values: Mapping[str, np.ndarray]) -> dict[str, np.ndarray]:
        """Per-body arrays ``(..., n)`` cut to the representatives ``(..., k)``."""
        if self.one_body_each:
            return dict(values)
        return {name: v[..., self.representative] for name, v in values.items()}

    def body_values(self, values: np.ndarray) -> np.ndarray:
        """Per-group array ``(..., k)`` copied out to every member ``(..., n)``."""
        return values if self.one_body_each else values[..., self.member_of]


def inputs_used(methods: Iterable[str]) -> set[str]:
    """Every input name the ``methods`` can read, required (any alternative) or optional."""
    names: set[str] = set()
    for name in methods:
        spec = registry.get(name)
        for need in spec.requires:
            for alternative in need:
                names.update(alternative)
        names.update(spec.optional)
    return names


def group_bodies(
    weights: Mapping[str, ZonalWeights],
    static: Mapping[str, np.ndarray],
    used: set[str],
) -> BodyGroups:
    """Group the bodies whose zonal means on every grid and used static inputs are equal.

    Parameters
    ----------
    weights : mapping of str to ZonalWeights
        The weights of every grid the run reads, all with the same bodies in the same order.
    static : mapping of str to numpy.ndarray
        Per-body inputs of the physics, shaped ``(1, n)`` or ``(n,)``.
    used : set of str
        Input names the configured methods read (:func:`inputs_used`); static inputs not in
        it do not split groups.
    """
    keys = [w.row_groups() for _, w in sorted(weights.items())]
    for name in sorted(static):
        if name in used:
            # Equal float bits, not equal values: -0.0 and 0.0 (or two NaNs with different
            # payloads) are kept apart, which only costs a group.
            values = np.ascontiguousarray(np.ravel(static[name]), dtype=np.float64)
            keys.append(values.view(np.int64))
    group = np.zeros(keys[0].size, dtype=np.int64)
    for key in keys:
        # Dense ids of (groups so far, this key); both below n, so the pair fits in int64.
        _, dense = np.unique(key, return_inverse=True)
        _, group = np.unique(group * keys[0].size + dense.ravel(), return_inverse=True)
        group = group.ravel()
    # Groups numbered in order of their first body, so representatives ascend with the layer.
    _, first, member_of, count = np.unique(
        group, return_index=True, return_inverse=True, return_counts=True
    )
    order = np.argsort(first, kind="stable")
    renumber = np.empty_like(order)
    renumber[order] = np.arange(order.size)
    return BodyGroups(
        representative=first[order],
        member_of=renumber[member_of.ravel()],
        count=count[order].astype(np.int64),
    )
