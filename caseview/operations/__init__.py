"""The application layer: one function per job that both faces (the window and the command line) call.

Each module here holds the jobs of one area (fitting, case work, outlook, ...). A job takes an open
:class:`caseview.storage.workspace.Workspace` and plain arguments, does its reading, computing and audited
writing, and returns a typed result (a frozen dataclass). Neither ``caseview.gui`` nor ``caseview.cli``
calls the engine (``hmm``) directly for a job listed here, so the two faces can never give different
answers.
"""

#: The seed the window and the command line use unless told otherwise (extra fit starts, simulated
#: caseloads, parameter draws, the random-choice comparison of targeting): one constant, so the two
#: faces give the same numbers. Turned into a generator by :func:`hmm.random_state.random_generator`.
DEFAULT_SEED = 1
