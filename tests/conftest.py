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


# ---------------------------------------------------------------------------- PostgreSQL (a real server)
@pytest.fixture(scope="session")
def postgres_cluster():
    """A throwaway PostgreSQL cluster for the whole session (initdb + pg_ctl on a unix socket in a
    temporary folder; stopped and removed at the end). Skipped when the machine has no server
    programs, unless CASEVIEW_REQUIRE_POSTGRES=1 (CI), where that FAILS the PostgreSQL tests."""
    from postgres_cluster import start_for_tests

    cluster = start_for_tests()
    yield cluster
    cluster.stop()


@pytest.fixture
def pg_url(postgres_cluster) -> str:
    """The URL of a fresh, empty database of its own for one test."""
    return postgres_cluster.create_database()


@pytest.fixture(params=["sqlite", "postgresql"])
def workspace_target(request, tmp_path) -> str:
    """Where to create a workspace: a new SQLite file path, or the URL of an empty PostgreSQL database."""
    if request.param == "sqlite":
        return str(tmp_path / "shared.cvw")
    return request.getfixturevalue("pg_url")
