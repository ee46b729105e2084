"""Fixtures for engine tests."""

from __future__ import annotations

import pytest

from engine_helpers import model_from_matrices, timelines_from_lists


@pytest.fixture
def make_model():
    return model_from_matrices


@pytest.fixture
def make_timelines():
    return timelines_from_lists
