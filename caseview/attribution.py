"""Who is recorded in the audit trail.

The actor is the operating-system user unless the person names themselves (``--by`` on the command
line). This is attribution, not authentication: nothing checks that the name is true.
"""

from __future__ import annotations


def os_user() -> str:
    """The operating-system user name, or "unknown" where the system has none (some containers)."""
    import getpass

    try:
        return getpass.getuser() or "unknown"
    except Exception:
        return "unknown"
