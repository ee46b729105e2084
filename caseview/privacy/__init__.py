"""Privacy checks on imported data: the identifier screen (HIPAA Safe Harbor categories).

See :mod:`caseview.privacy.identifiers` for the rules and :data:`SCREEN_LIMITS` for what the
screen cannot catch. Standard library only.
"""

from .identifiers import (
    ROLES,
    SCREEN_LIMITS,
    IdentifierFinding,
    mask,
    screen_column_name,
    screen_value,
    screen_values,
)

__all__ = ["IdentifierFinding", "screen_value", "screen_values", "screen_column_name", "mask",
           "SCREEN_LIMITS", "ROLES"]
