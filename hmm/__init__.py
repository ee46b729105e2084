"""hmm: a continuous-time hidden-Markov engine for irregularly observed stage processes.

Pure numpy/scipy; no files, databases, Qt or plotting. Usable from a notebook::

    from hmm import StageModel, Timelines, forward, smoothed_probabilities
"""

from .forecasting import Forecast, forecast, occupancy_over_time, reach_probability, stage_probabilities_now
from .inference import ForwardResult, backward, contact_likelihoods, forward, most_likely_path, smoothed_probabilities
from .model import Channel, ModelError, StageModel, Transition, UnscheduledContacts
from .simulate import SimulatedCaseload, regular_contacts, simulate_caseload, simulate_path
from .timelines import MISSING, Timelines
from .transition import eigen_path_is_safe, transition_matrices, transition_matrix

__all__ = [
    "Channel", "ModelError", "StageModel", "Transition", "UnscheduledContacts", "Timelines", "MISSING",
    "transition_matrix", "transition_matrices", "eigen_path_is_safe",
    "contact_likelihoods", "forward", "backward", "smoothed_probabilities", "most_likely_path",
    "stage_probabilities_now", "forecast", "reach_probability", "occupancy_over_time",
    "ForwardResult", "Forecast",
    "simulate_path", "simulate_caseload", "regular_contacts", "SimulatedCaseload",
]
