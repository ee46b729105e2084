"""Fitting stage models to a caseload: maximum likelihood with analytic gradients and what goes with it.

Main entry points::

    from hmm.fitting import fit_model, likelihood_ratio_test
    result = fit_model(model, timelines, starts=3, rng=numpy.random.default_rng(1))
    print(result.format_table())
"""

from .compare import LikelihoodRatioTest, likelihood_ratio_test
from .goodness import GoodnessOfFit, goodness_of_fit
from .goodness_occupancy import OccupancyOverTime, occupancy_over_calendar_time, one_step_predictions
from .likelihood import log_likelihood_and_gradient
from .optimise import fit_model
from .parameters import ParameterSpec, parameter_spec
from .priors import Prior
from .result import FitProgress, FitResult, StartResult
from .staff_estimates import UsualResult, model_from_staff_estimates, staff_estimates_from_model
from .summary import FitIteration, FitSummary
from .uncertainty import ParameterEstimate

__all__ = ["fit_model", "FitResult", "FitSummary", "FitIteration", "FitProgress", "StartResult", "ParameterEstimate", "ParameterSpec", "parameter_spec",
           "log_likelihood_and_gradient", "Prior", "likelihood_ratio_test", "LikelihoodRatioTest",
           "goodness_of_fit", "GoodnessOfFit", "occupancy_over_calendar_time", "OccupancyOverTime",
           "one_step_predictions", "model_from_staff_estimates", "staff_estimates_from_model", "UsualResult"]
