"""The tests' one reference filter: a textbook forward filter for ONE case, written independently of hmm/.

Used wherever a test checks scores against an outside computation (tests/app/test_scoring.py,
tests/followup). Keep it plain: a loop over contacts and ``scipy.linalg.expm``.
"""

from __future__ import annotations

import numpy as np


def reference_p_now(model, times, codes, allowed, covariates, as_of):
    """Textbook forward filter for ONE case with scipy.linalg.expm (Rabiner 1989, eq. 19-20, with
    continuous-time steps P(dt) = expm(Q dt), Jackson 2011 msm), written independently of hmm/.

    Returns P(stage on as_of | contacts), shape (n_stages,)."""
    import scipy.linalg

    tables = model.emission_matrices()

    def likelihood(j):
        value = np.asarray(allowed[j], dtype=float).copy()
        if value.sum() > 1:  # an entry into an exact-entry stage is always recorded, so not here
            for name in model.exact_entry_stages:
                value[model.stage_index(name)] = 0.0
        for table, code in zip(tables, codes[j]):
            if code >= 0:
                value *= table[:, code]
        return value

    alpha = np.asarray(model.initial, dtype=float) * likelihood(0)
    alpha /= alpha.sum()
    for j in range(1, len(times)):
        step = scipy.linalg.expm(model.generator(covariates[j - 1]) * (times[j] - times[j - 1]))
        alpha = (alpha @ step) * likelihood(j)
        alpha /= alpha.sum()
    return alpha @ scipy.linalg.expm(model.generator(covariates[-1]) * (as_of - times[-1]))
