"""Shared test set-up: offscreen Qt, a printed and overridable seed, paths to resources."""

from __future__ import annotations

import os
import sys
from pathlib import Path

import numpy as np
import pytest

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
os.environ.setdefault("MPLBACKEND", "Agg")

ROOT = Path(__file__).resolve().parents[1]
DEMO_MODEL = ROOT / "resources" / "models" / "home_support_demo.json"


def _base_seed() -> int:
    return int(os.environ.get("CASEVIEW_TEST_SEED", "20261202"))


def pytest_report_header(config):
    return f"caseview test seed: {_base_seed()} (override with CASEVIEW_TEST_SEED)"


@pytest.fixture
def seed(request) -> int:
    """A seed per test, derived from the base seed and the test name; printed on failure."""
    value = (_base_seed() + sum(map(ord, request.node.nodeid))) % (2**32)
    print(f"seed={value} (base CASEVIEW_TEST_SEED={_base_seed()})")
    return value


@pytest.fixture
def rng(seed) -> np.random.Generator:
    return np.random.default_rng(seed)


@pytest.fixture
def demo_model():
    from caseview.modelfile import load_model

    return load_model(DEMO_MODEL)


@pytest.fixture
def python_exe() -> str:
    return sys.executable
