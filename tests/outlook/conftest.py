"""Fixtures for the outlook tests (helpers in outlook_helpers.py)."""

from __future__ import annotations

import pytest

from outlook_helpers import scored_caseload


@pytest.fixture
def scores(demo_model, rng):
    return scored_caseload(demo_model, 150, rng)
