"""caseview: continuous-time hidden-Markov stage estimates for caseloads.

Advisory only: the estimates are not a diagnosis. Refer concerns to a licensed clinician and
follow local protocols.
"""

__version__ = "0.1.0"

ADVISORY_NOTICE = (
    "Advisory only: statistical estimates, not a diagnosis. Refer concerns to a licensed clinician "
    "and follow local protocols."
)
