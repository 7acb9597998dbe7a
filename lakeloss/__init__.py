"""lakeloss: open-water evaporation for many water bodies from gridded climate.

The whole batch run is one call; nothing is written until ``write``.

Examples
--------
Run the invented demo scenario from the project directory (the paths in its file are
relative to the directory you run in):

>>> import lakeloss
>>> result = lakeloss.run("config/demo.toml")  # a path, a dict or a RunConfig
>>> result  # doctest: +ELLIPSIS
<lakeloss RunResult: 335 water bodies (dam_id), 24 periods (month)
  time axis   : 2031-01-01..2032-12-31, daily, calendar standard, stamps at 12:00
  method      : penman_open_water (compare: priestley_taylor, aerodynamic)
  totals      : evaporation ... m3, rain ... m3, net loss ... m3; ... water bodies flagged
  written to  : not yet (call .write())>

``result.waterbodies`` is the layer (a GeoDataFrame) with the result columns;
``result.by_period`` has one row per water body and period, indexed by the water-body id,
with the period's first and last day as dates:

>>> result.by_period.loc[1001, ["period_start", "period_end", "days"]].head(2)
       period_start period_end  days
dam_id
1001     2031-01-01 2031-01-31    31
1001     2031-02-01 2031-02-28    28
>>> depth = result.by_period.pivot(columns="period_start", values="evap_mm")
>>> depth.shape  # water bodies x months, ready to join to the layer on dam_id
(335, 24)
>>> result.by_period["period_start"].dtype  # pandas Timestamps
dtype('<M8[s]')
>>> written = result.write("out/demo", overwrite=True)
>>> sorted(path.name for path in written.iterdir())  # doctest: +NORMALIZE_WHITESPACE
['run.json', 'summary_by_group.csv', 'summary_by_period.csv', 'summary_by_waterbody.csv',
 'waterbodies.gpkg']

Figures are estimates for screening and water accounting, not for design, licensing or
dam-safety decisions.
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from lakeloss.config import RunConfig
    from lakeloss.progress import ProgressFactory
    from lakeloss.results import RunResult

__version__ = "0.1.0"

__all__ = ["__version__", "load_config", "run"]


def load_config(config: str | Path | Mapping[str, Any] | RunConfig) -> RunConfig:
    """Load and validate a run configuration (see :func:`lakeloss.config.load_config`)."""
    from lakeloss.config import load_config as _load

    return _load(config)


def run(
    config: str | Path | Mapping[str, Any] | RunConfig,
    *,
    progress: bool | ProgressFactory | None = None,
    series: bool | None = None,
) -> RunResult:
    """Run the whole batch in memory and return a :class:`lakeloss.results.RunResult`.

    Parameters
    ----------
    config : path, mapping or RunConfig
        The run configuration (TOML file, parsed mapping, or config object).
    progress : bool or callable, optional
        True for progress bars (tqdm; widgets in Jupyter), or ``progress(total, label)``
        returning a tqdm-like bar; None or False for none.
    series : bool, optional
        Keep the per-step series in ``result.series`` (default: ``[output] series``).
    """
    from lakeloss.pipeline import run_stages
    from lakeloss.results import progress_bars

    return run_stages(config, progress=progress_bars(progress), series=series)
