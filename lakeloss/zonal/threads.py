"""Run vectorised shapely / pyproj calls on slices of a big array in a few threads.

Shapely 2 and pyproj release the GIL inside their vectorised calls, so splitting a call over
a million polygons into one slice per core gives a near-linear speed-up without processes
or copies.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor

import numpy as np

# Below this many items a single call is faster than starting threads.
_MIN_ITEMS = 50_000


def workers() -> int:
    """Cores this process may run on (at most 8: more slices only add overhead here)."""
    try:
        available = len(os.sched_getaffinity(0))
    except AttributeError:  # not on Linux
        available = os.cpu_count() or 1
    return max(1, min(available, 8))


def sliced(func: Callable[[np.ndarray], np.ndarray], items: np.ndarray) -> np.ndarray:
    """``func(items)`` computed as ``concatenate([func(slice) ...])`` over one slice per core.

    ``func`` must map a 1-D array (or rows of a 2-D array) to an array of the same length,
    element by element, and be safe to run in several threads at once.
    """
    n_workers = workers()
    if n_workers == 1 or len(items) < _MIN_ITEMS:
        return func(items)
    bounds = np.linspace(0, len(items), n_workers + 1).astype(int)
    slices = [items[a:b] for a, b in zip(bounds[:-1], bounds[1:], strict=True)]
    with ThreadPoolExecutor(max_workers=n_workers) as pool:
        return np.concatenate(list(pool.map(func, slices)))
