"""Fixtures for workspace/import tests: the demo model and small invented timelines."""

from __future__ import annotations

from pathlib import Path

import pytest

from storage_helpers import DEMO_MODEL_PATH, ROWS, write_csv


@pytest.fixture
def model_text() -> str:
    return DEMO_MODEL_PATH.read_text(encoding="utf-8")


@pytest.fixture
def ws(tmp_path, model_text):
    from caseview.storage import Workspace

    workspace = Workspace.create(tmp_path / "team.cvw", model_text, actor="tester")
    yield workspace
    workspace.close()


@pytest.fixture
def small_csv(tmp_path) -> Path:
    return write_csv(tmp_path / "timelines.csv", ROWS)
