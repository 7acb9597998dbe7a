"""lakeloss: open-water evaporation for many water bodies from gridded climate.

The whole batch run is one call::

    import lakeloss
    result = lakeloss.run("config/demo.toml")   # a path, a dict or a RunConfig
    result.waterbodies      # GeoDataFrame with the result columns
    result.by_period        # DataFrame, one row per water body and period
    result.write("out/demo", overwrite=True)

Figures are estimates for screening and water accounting, not for design, licensing or
dam-safety decisions.
"""

from __future__ import annotations

from typing import Any

__version__ = "0.1.0"

__all__ = ["__version__", "load_config", "run"]


def load_config(config: Any) -> Any:
    """Load and validate a run configuration (see :func:`lakeloss.config.load_config`)."""
    from lakeloss.config import load_config as _load

    return _load(config)


def run(config: Any, *, progress: Any = None, series: bool | None = None) -> Any:
    """Run the whole batch in memory and return a :class:`lakeloss.results.RunResult`.

    Parameters
    ----------
    config : path, mapping or RunConfig
        The run configuration (TOML file, parsed mapping, or config object).
    progress : callable, optional
        ``progress(total, label)`` returning a tqdm-like bar; None for no progress.
    series : bool, optional
        Keep the per-step series in ``result.series`` (default: ``[output] series``).
    """
    from lakeloss.pipeline import run_stages

    return run_stages(config, progress=progress, series=series)
