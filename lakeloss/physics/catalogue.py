"""Plain-text descriptions of the registered methods, for ``lakeloss methods``.

:func:`overview` is one line per method; :func:`describe` is one method in full: the
equation in words, each input need with its alternatives, the parameters with defaults and
ranges, what the method assumes, and its source. Text only, ASCII, lines of at most
:data:`WIDTH` characters.
"""

from __future__ import annotations

import textwrap

from lakeloss.physics import registry
from lakeloss.physics.forcing import Alternative

WIDTH = 100
"""Longest line of the text, in characters."""

DOCUMENT = "docs/methods.md"
"""The project's description of the methods and their equations."""

# Inputs every run derives itself (from the layer and the time axis), not shown as needs.
_ALWAYS_DERIVED = frozenset({"latitude", "day_of_year", "area_m2"})

_SATURATION_RULE = (
    "es is FAO-56 eq. 12, the mean of e(Tmax) and e(Tmin), whenever air_temperature_max "
    "and air_temperature_min are both given, also when air_temperature is given too (the "
    "mean temperature then sets only the slope Delta, lambda and gamma); otherwise "
    "e(air_temperature). Every method of a run uses the same es and ea."
)
_NAME_COLUMN = max(len(name) for name in registry.method_names()) + 2


def overview() -> str:
    """One line per method, name and description, and how to see one in full."""
    lines = [
        f"{name:<{_NAME_COLUMN}}{registry.get(name).description}"
        for name in registry.method_names()
    ]
    lines += ["", "'lakeloss methods NAME' shows one method in full; equations: " + DOCUMENT]
    return "\n".join(lines)


def describe(name: str) -> str:
    """One method in full; :class:`~lakeloss.errors.UnknownMethodError` for an unknown name."""
    spec = registry.get(name)
    parts = [
        f"{spec.name}: {spec.description}",
        _section("Equation", spec.equation),
        _inputs(spec),
    ]
    if any("humidity" in _need_label(group) for group in spec.requires):
        parts.append(_section("Vapour pressures", _SATURATION_RULE))
    parts += [
        _parameters(spec),
        _section("Assumptions", spec.assumptions),
        _section("Source", f"{spec.reference}; {DOCUMENT}#{spec.name}"),
    ]
    return "\n\n".join(parts)


def _wrap(text: str, indent: str = "  ", hanging: str = "  ") -> str:
    return textwrap.fill(
        text,
        WIDTH,
        initial_indent=indent,
        subsequent_indent=hanging,
        break_long_words=False,
        break_on_hyphens=False,
    )


def _section(title: str, text: str) -> str:
    return f"{title}\n{_wrap(text)}"


def _need_label(group: tuple[Alternative, ...]) -> str:
    names = " ".join(name for alternative in group for name in alternative)
    if "radiative_flux" in names or "shortwave" in names:
        longwave = " (humidity only for the longwave term)" if "dew_point" in names else ""
        return "radiation" + longwave
    for word, label in (
        ("pan_evaporation", "pan evaporation"),
        ("wind", "wind"),
        ("humidity", "humidity"),
        ("area_m2", "area"),
    ):
        if word in names:
            return label
    return "air temperature"


def _alternatives(group: tuple[Alternative, ...]) -> list[str]:
    shown: list[str] = []
    for alternative in group:
        names = [part for part in alternative if part not in _ALWAYS_DERIVED]
        text = " + ".join(names) or "the water-body area (always given)"
        if text not in shown:
            shown.append(text)
    return shown


def _inputs(spec: registry.MethodSpec) -> str:
    lines = ["Inputs (per need, the first alternative given is used)"]
    for group in spec.requires:
        alternatives = _alternatives(group)
        lines.append(f"  {_need_label(group)}:")
        lines += [_wrap(text, "    ", "      ") for text in alternatives]
    optional = [name for name in dict.fromkeys(spec.optional) if name not in _ALWAYS_DERIVED]
    if optional:
        lines.append("  optional:")
        lines.append(_wrap(", ".join(optional), "    ", "    "))
    return "\n".join(lines)


def _parameters(spec: registry.MethodSpec) -> str:
    if not spec.parameters:
        return "Parameters\n  none"
    lines = ["Parameters (default, valid range)"]
    for param in spec.parameters.values():
        unit = "" if param.unit == "1" else f" {param.unit}"
        if param.choices:
            limits = "one of " + ", ".join(param.choices)
            default = str(param.default)
        else:
            limits = f"{param.minimum:g} to {param.maximum:g}{unit}"
            default = f"{param.default:g}{unit}"
        lines.append(f"  {param.name} = {default} ({limits})")
        lines.append(_wrap(param.description, "      ", "      "))
    return "\n".join(lines)
