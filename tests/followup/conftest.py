"""Fixtures for follow-up tests (helpers live in followup_helpers.py)."""

from __future__ import annotations

import pytest

from followup_helpers import TOY_MODEL


@pytest.fixture
def toy_model():
    from caseview.modelfile import model_from_dict

    return model_from_dict(TOY_MODEL, "toy")
