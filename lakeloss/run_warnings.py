"""The warnings a run records in run.json and shows on stderr.

Warnings raised while a stage runs are recorded (to go into run.json) and re-issued so the
command line prints them; the others are written here from what the stages counted: rates
that were negative, gaps too long to fill, and repairs of polygons whose weights came from
the cache.
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping

from lakeloss.body_facts import BodyFacts
from lakeloss.config import RunConfig
from lakeloss.errors import (
    ClimateGapsWarning,
    GeometryRepairedWarning,
    LakelossWarning,
    ValuesAdjustedWarning,
)
from lakeloss.gaps import GapReport, steps_text


def replay(seen: list[warnings.WarningMessage]) -> list[str]:
    """Re-issue recorded lakeloss warnings (so the CLI prints them); return their texts."""
    texts = []
    for item in seen:
        if issubclass(item.category, LakelossWarning):
            texts.append(str(item.message))
        warnings.warn_explicit(item.message, item.category, item.filename, item.lineno)
    return texts


def negative_warning(config: RunConfig, negatives: Mapping[str, int]) -> str | None:
    """The warning about negative rates (counted per method over the run), or None."""
    total = sum(negatives.values())
    if not total:
        return None
    verb = "set to zero" if config.clip_negative else "kept"
    detail = ", ".join(f"{m}: {c}" for m, c in negatives.items() if c)
    message = (
        f"{total} negative daily evaporation rates (condensation or negative net "
        f"radiation) were {verb} ({detail})"
    )
    warnings.warn(message, ValuesAdjustedWarning, stacklevel=2)
    return message


def gap_warnings(gaps: GapReport) -> list[str]:
    """One warning per variable with gaps too long to fill (or at the ends of the data)."""
    messages = []
    for name, gap in gaps.long.items():
        message = (
            f"{name} is missing for {gap['bodies']} water bodies at "
            f"{steps_text(int(gap['steps']))} ({gap['dates']}), in gaps longer than [checks] "
            f"max_gap_steps = {gaps.limit} "
            "or at the start or end of the data; those bodies have no total for the run "
            "nor for the periods with a gap (flagged climate_gaps)"
        )
        warnings.warn(message, ClimateGapsWarning, stacklevel=2)
        messages.append(message)
    return messages


def repair_warning(n_repaired: int, n_empty: int) -> list[str]:
    """The warning about repaired and empty polygons of the run (none when there are none).

    Said once for the whole run from the counts of its partitions, whether their weights
    were built or came from the cache.
    """
    if not (n_repaired or n_empty):
        return []
    message = (
        f"{n_repaired} invalid water-body polygons were repaired and {n_empty} are empty "
        "(flagged geometry_repaired / geometry_empty; empty ones get NaN results)"
    )
    warnings.warn(message, GeometryRepairedWarning, stacklevel=3)
    return [message]


def repair_counts(facts: BodyFacts) -> tuple[int, int]:
    """Polygons repaired and polygons empty, from the flags the weights keep."""
    tokens = [set(str(f).split(";")) for f in facts.geometry_flags]
    return (
        sum("geometry_repaired" in t for t in tokens),
        sum("geometry_empty" in t for t in tokens),
    )
