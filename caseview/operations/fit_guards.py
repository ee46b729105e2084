"""What a fit must not do: fit around impossible cases, or save a model that failed.

Both faces (``caseview fit`` and the window's model panel) call these two functions around the
engine's fit, so a workspace holding a case that cannot be scored is refused the same way, and a
failed fit (log-likelihood not finite, or rates that overflow over the covariates seen) is never
saved as a model version.

Decision: a fit **refuses** (exit 1, nothing saved) rather than silently leaving cases out: a fit
to a caseload with some cases quietly excluded would describe a different caseload from the one
the workspace holds, and the records to correct are named.
"""

from __future__ import annotations

import numpy as np

from hmm import ModelError

from ..errors import FitRefused


def refuse_unscorable_cases(caseload, model) -> None:
    """Raise :class:`~caseview.errors.FitRefused` naming the cases that cannot be scored under ``model``.

    Parameters
    ----------
    caseload : caseview.storage.Caseload
        Every stored contact (a fit uses all of them).
    model : hmm.StageModel
        The start model.
    """
    from ..scoring import split_unscorable

    timelines = caseload.timelines
    if not timelines.n_cases:
        return
    last_day = int(timelines.times.max())
    kept = np.arange(timelines.n_cases, dtype=np.int64)
    lost = split_unscorable(caseload, model, timelines, kept, last_day)[3]
    if lost.n_cases:
        raise FitRefused(f"cannot fit or check the fit: {lost.summary()}; correct or void those records first, or "
                         "use a model under which they are possible (nothing was fitted or saved)")


def fitted_model_to_save(fitted, timelines):
    """The fitted model as it is saved: covariates without a declared range get the range seen.

    Parameters
    ----------
    fitted : hmm.fitting.FitResult
    timelines : hmm.Timelines
        The contacts it was fitted to.

    Returns
    -------
    hmm.StageModel
        ``fitted.model`` with ``covariate_ranges`` filled in from the fitted contacts (the range
        seen at fit time is the default range; it is kept with the version, so later imports and
        scoring refuse values outside it).

    Raises
    ------
    FitRefused
        When the log-likelihood is not a finite number, or the fitted rates overflow over the
        covariate values seen (nothing is saved).
    """
    log_likelihood = fitted.log_likelihood
    if log_likelihood is None or not np.isfinite(log_likelihood):
        raise FitRefused(f"the fit failed: its log-likelihood is {log_likelihood} (some case is impossible under "
                         "the model); nothing was saved")
    model = fitted.model
    seen = {}
    if timelines.n_contacts:
        for k, name in enumerate(model.covariates):
            if name not in model.range_of:
                seen[name] = (float(timelines.covariates[:, k].min()), float(timelines.covariates[:, k].max()))
    if not seen:
        return model
    try:
        return model.with_covariate_ranges(seen)
    except ModelError as exc:
        raise FitRefused(f"the fitted model cannot be saved: {exc} (over the covariate values the fit saw); "
                         "fix that effect in the model file or declare the covariate's range") from None


def run_guarded(fit):
    """Call ``fit()`` and turn a model the engine refuses into :class:`~caseview.errors.FitRefused`."""
    try:
        return fit()
    except ModelError as exc:
        raise FitRefused(f"the fit failed: {exc}; nothing was saved") from None
