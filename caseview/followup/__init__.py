"""Follow-up: rules, flags with reasons, next contact due, supervisor reviews, what-if forecasts.

Everything here is advisory (``caseview.ADVISORY_NOTICE``): a flag is a prompt for a person to
look at a case, not a diagnosis; concerns go to a licensed clinician under local protocols.
"""

from .assess import CaseloadAssessment, assess_caseload, assess_scores
from .flags import ContactInfluence, FlagReason
from .reviews import ALLOWED_CHANGES, REOPEN_RISE, STATUSES, record_review
from .rules import Rule, RuleSet, default_rules, load_rule_file, workspace_rules
from .schedule import next_contact_due_day
from .whatif import CaseloadWhatIf, WhatIf, caseload_whatif, whatif_forecast

__all__ = [
    "assess_caseload", "assess_scores", "CaseloadAssessment", "FlagReason", "ContactInfluence",
    "record_review", "STATUSES", "ALLOWED_CHANGES", "REOPEN_RISE", "whatif_forecast", "caseload_whatif",
    "WhatIf", "CaseloadWhatIf", "Rule", "RuleSet", "default_rules", "load_rule_file", "workspace_rules",
    "next_contact_due_day",
]
