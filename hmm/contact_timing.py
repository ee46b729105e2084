"""Timing of unscheduled contacts: the step matrices into unscheduled contacts.

With a model's ``unscheduled_contacts`` block (:class:`hmm.model.UnscheduledContacts`) the matrix of
the step from one contact to the next is ``expm((Q - Lambda) gap)``; when the later contact is
unscheduled it is multiplied by ``Lambda = diag(lambda)`` on the right (each column ``s`` by the rate
of unscheduled contacts in stage ``s``). See :mod:`hmm.inference` for the model.
"""

from __future__ import annotations

import numpy as np

from .model import StageModel

__all__ = ["unscheduled_steps"]


def unscheduled_steps(model: StageModel, distinct: np.ndarray, group: np.ndarray, matrices: np.ndarray,
                       index: np.ndarray, unscheduled: np.ndarray) -> tuple:
    """Step matrices into unscheduled contacts: ``expm((Q - Lambda) gap) Lambda`` (columns times lambda).

    Parameters
    ----------
    distinct : ndarray, shape (G, n_covariates)
        Covariate rows of the generators.
    group : ndarray of int, shape (n_steps,)
        Generator of each step.
    matrices : ndarray, shape (m, S, S)
    index : ndarray of int, shape (n_steps,)
        Matrix of each step.
    unscheduled : ndarray of bool, shape (n_steps,)
        The step ends at an unscheduled contact.

    Returns
    -------
    matrices, index
        With one more matrix per distinct (matrix, generator) pair that ends at an unscheduled contact.
    """
    if not unscheduled.any():
        return matrices, index
    rates = model.unscheduled_rates(distinct)                                 # (G, S)
    key = index[unscheduled] * rates.shape[0] + group[unscheduled]
    keys, inverse = np.unique(key, return_inverse=True)
    scaled = matrices[keys // rates.shape[0]] * rates[keys % rates.shape[0]][:, None, :]
    index = index.copy()
    index[unscheduled] = matrices.shape[0] + inverse.reshape(-1)
    return np.concatenate([matrices, scaled]), index
