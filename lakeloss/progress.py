"""What a run reports its progress to: a tqdm-like bar made by a factory the caller gives."""

from __future__ import annotations

from collections.abc import Callable
from typing import Protocol


class ProgressBar(Protocol):
    """The part of a tqdm bar a run uses: its count, advancing it, and closing it."""

    n: float

    def update(self, n: float = 1) -> object: ...

    def close(self) -> None: ...


ProgressFactory = Callable[[int, str], ProgressBar]
"""``factory(total, label)``: a new bar for ``total`` steps of the stage named ``label``."""
