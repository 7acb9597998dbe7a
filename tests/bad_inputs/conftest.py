"""Fixture of the bad-input corpus (the helpers are in corpus.py)."""

from __future__ import annotations

import pytest
from bad_inputs.corpus import Case


@pytest.fixture
def case(tmp_path) -> Case:
    """A clean, small run in ``tmp_path`` (see corpus.py) for one test to break."""
    return Case(tmp_path)
