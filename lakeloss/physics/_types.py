"""Type alias for the physics functions' array arguments."""

from typing import Any, TypeAlias

ArrayLike: TypeAlias = Any
"""A scalar, numpy array, pandas or xarray object used with numpy semantics.

numpy.typing.ArrayLike describes what ``np.asarray`` accepts (including strings and nested
lists), not what supports arithmetic, so the physics uses this looser alias instead.
"""
