"""Type alias for the physics functions' array arguments."""

from typing import Any, TypeAlias

import numpy as np

ArrayLike: TypeAlias = Any
"""A scalar, numpy array, pandas or xarray object used with numpy semantics.

numpy.typing.ArrayLike describes what ``np.asarray`` accepts (including strings and nested
lists), not what supports arithmetic, so the physics uses this looser alias instead.
"""


def is_scratch(value: object) -> bool:
    """Whether ``value`` is a plain numpy array a ufunc just created, safe to overwrite.

    The physics functions overwrite their own temporaries with ``out=`` to save allocations
    (each fresh large array costs page faults); scalars, 0-d results and xarray or pandas
    objects keep the plain expression, which gives the same values.
    """
    return type(value) is np.ndarray and value.ndim > 0


def apply_into(ufunc: np.ufunc, left: Any, right: Any, scratch: Any) -> Any:
    """``ufunc(left, right)``, written into ``scratch`` when that is possible.

    ``scratch`` must be a temporary the caller created (never an input); it is reused when
    it is a plain array of exactly the result's shape and dtype, so the value is the one the
    plain expression gives, without allocating another array.
    """
    if (
        is_scratch(scratch)
        and scratch.shape == np.broadcast_shapes(np.shape(left), np.shape(right))
        and scratch.dtype == np.result_type(left, right)
    ):
        return ufunc(left, right, out=scratch)
    return ufunc(left, right)
