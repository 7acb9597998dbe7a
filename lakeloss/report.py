"""What the end of a run tells its user: the summary line, the notes on flagged bodies, and
why a run that wrote its outputs must still fail."""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import Any

from lakeloss.results import RunResult


def no_total_message(result: RunResult, target: Path) -> str | None:
    """Why a run that wrote its outputs must still fail: no body has a whole-run total.

    Some periods have results (a run without any is refused before writing), so the outputs
    are kept for them; the exit status tells scripts that the run's totals are missing.
    """
    counts = result.provenance["counts"]
    if not counts["waterbodies"] or counts["without_result"] < counts["waterbodies"]:
        return None
    return (
        f"none of the {counts['waterbodies']} water bodies has a whole-run evaporation total "
        f"(gaps in the climate too long to fill, see the warnings above); the periods that "
        f"have results are written to {target}; fill the gaps (raise [checks] max_gap_steps) "
        "or limit the run to the dates with data"
    )


def summary_line(result: RunResult, target: Path) -> str:
    """One line for the end of a run: what was computed, over what span, what is missing.

    The volume is the sum over the bodies with a result, over the whole run; its span is
    named, and a run of more than a year gives the volume per year as well.
    """
    counts = result.provenance["counts"]
    n_periods = int(counts["periods"])
    periods = result.summary_by_period.iloc[:n_periods]
    # The whole-run volume covers every day of the run, also those between the periods of
    # a custom period table: its span and days are the run's (the time axis').
    days = int(counts.get("days", periods["days"].sum()))
    years = days / 365.2425
    with_result = int(counts["waterbodies"]) - int(counts["without_result"])
    total = float(result.totals.get("evaporation", 0.0))
    # Dates are Timestamps or cftime dates in the API; the line names the calendar days.
    first, last = periods["period_start"].iloc[0], periods["period_end"].iloc[-1]
    span = str(result.provenance.get("time_axis", "")).split(",")[0] or (
        f"{str(first)[:10]}..{str(last)[:10]}"
    )
    over = f"over {days} days" if years < 0.95 else f"over {years:.1f} years"
    per_year = f", {total / years:,.0f} m3 per year" if years >= 1.5 else ""
    head = f"{counts['waterbodies']} water bodies, {n_periods} periods ({span}): "
    method = result.config.method.name
    volume = (
        f"{total:,.0f} m3 evaporated {over}{per_year} ({method}) "
        f"by the {with_result} with a whole-run result"
        if with_result
        else f"no whole-run evaporation volume ({method})"
    )
    return f"{head}{volume}; {without_result(counts)}; {counts['flagged']} flagged; outputs in {target}"


def without_result(counts: Mapping[str, Any]) -> str:
    """How many bodies have no whole-run result, and how many of those have some periods."""
    text = f"{counts['without_result']} without"
    some = int(counts["without_result"]) - int(counts["without_any_result"])
    return text + (f" ({some} of them with results for some periods)" if some else "")


def flag_notes(result: RunResult, examples: int = 5) -> list[str]:
    """One note per qa flag that occurs: how many bodies, and the first ids."""
    notes = []
    for flag, count in result.provenance["counts"]["qa_flags"].items():
        first = result.flag_examples.get(flag, [])[:examples]
        more = ", ..." if count > examples else ""
        shown = ", ".join(str(v) for v in first)
        notes.append(
            f"{count} water bodies flagged {flag} ({result.id_field} {shown}{more}); "
            "see qa_flags in the outputs"
        )
    if result.provenance["counts"]["without_result"]:
        notes.append(
            f"{result.provenance['counts']['without_result']} water bodies have no "
            "whole-run result (evap_mm empty) and no loss_rank"
        )
    return notes
