"""The window's caseload table shows the cases that cannot be scored, and the fit refuses them."""

from __future__ import annotations

import numpy as np
import pytest

from .conftest import open_ws

pytestmark = pytest.mark.gui

MOVED = "Moved to residential care"


def _store_contradiction(path):
    """A case with a contact after its recorded move (written past the import checks)."""
    from caseview.storage import ContactBatch, Workspace

    with Workspace.open(path) as ws:
        model, _ = ws.current_model()
        days = np.array([20000, 20030, 20060])
        batch = ContactBatch(
            case_codes=np.array(["ZZ-0001"] * 3, dtype=object), days=days,
            coordinators=np.full(3, "", dtype=object), channel_names=tuple(c.name for c in model.channels),
            channel_categories=tuple(tuple(c.categories) for c in model.channels),
            channel_values=np.full((3, len(model.channels)), -1, dtype=np.int16),
            covariate_names=tuple(model.covariates), covariates=np.zeros((3, model.n_covariates)),
            stage_known=np.array(["", MOVED, ""], dtype=object))
        ws.write_contacts(batch)
        return ws.case_count()


def test_cases_that_cannot_be_scored_are_shown_not_dropped(window, qtbot, workspace_path):
    n_cases = _store_contradiction(workspace_path)
    loaded = open_ws(window, qtbot, workspace_path)
    panel = window.caseload
    assert loaded.scores.n_cases == n_cases - 1 and loaded.scores.unscorable.case_ids.tolist() == ["ZZ-0001"]
    assert panel.not_scored.isVisible()
    assert "ZZ-0001" in panel.not_scored.text() and "contradictory record" in panel.not_scored.text()
    assert "1 cannot be scored" in panel.count.text()
    versions = len(window.workspace().model_versions())
    window.model_panel.start_fit()
    assert "Cannot fit" in window.model_panel.fit_message.text() and "ZZ-0001" in window.model_panel.fit_message.text()
    assert len(window.workspace().model_versions()) == versions


def test_the_notice_stays_hidden_for_a_healthy_caseload(window, qtbot, workspace_path):
    open_ws(window, qtbot, workspace_path)
    assert not window.caseload.not_scored.isVisible()
    assert "cannot be scored" not in window.caseload.count.text()
