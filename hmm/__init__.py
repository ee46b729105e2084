"""hmm: a continuous-time hidden-Markov engine for irregularly observed stage processes.

Pure numpy/scipy; no files, databases, Qt or plotting. Usable from a notebook::

    from hmm import StageModel, Timelines
"""

from .model import Channel, ModelError, StageModel, Transition
from .timelines import MISSING, Timelines

__all__ = ["Channel", "ModelError", "StageModel", "Transition", "Timelines", "MISSING"]
