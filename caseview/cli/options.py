"""Options several commands share, declared once: ``--as-of``, ``--horizon``, ``--seed`` and ``--by``.

Each ``add_*`` function adds one option to a sub-command's parser; the readers (:func:`as_of_date`,
:func:`actor_name`) turn the parsed text into a value, naming the option in a refusal (this is the
command line, so the option is what the user typed). Library code never names an option.
"""

from __future__ import annotations

from caseview.operations import DEFAULT_SEED

__all__ = ["add_as_of_option", "as_of_date", "add_horizon_option", "add_seed_option", "add_actor_option",
           "actor_name", "DEFAULT_SEED"]


def add_as_of_option(parser, required: bool = True, help: str | None = None, metavar: str = "YYYY-MM-DD") -> None:
    """``--as-of YYYY-MM-DD``: the day the caseload is looked at (read with :func:`as_of_date`)."""
    parser.add_argument("--as-of", required=required, metavar=metavar, help=help)


def as_of_date(args):
    """The ``--as-of`` date (``datetime.date``), or None when the option is optional and not given.

    Raises
    ------
    InputError
        "--as-of: expected a date as YYYY-MM-DD, got '...'".
    """
    from caseview.dates import parse_date

    text = getattr(args, "as_of", None)
    return None if text is None else parse_date(text, "--as-of")


def add_horizon_option(parser, default=90.0, help: str | None = None, as_text: bool = False) -> None:
    """``--horizon DAYS``: how far ahead forecasts look (default 90 days).

    ``as_text=True`` keeps the text for an application function that checks it itself.
    """
    kind = {} if as_text else {"type": float}
    parser.add_argument("--horizon", default=str(default) if as_text else default, metavar="DAYS",
                        help=help or f"forecast horizon in days (default {default:g})", **kind)


def add_seed_option(parser, what: str, default: int | None = DEFAULT_SEED, as_text: bool = False) -> None:
    """``--seed N`` for ``what`` (default :data:`DEFAULT_SEED`, the window's seed too).

    ``default=None`` draws fresh entropy unless a seed is given; ``as_text=True`` keeps the text for an
    application function that checks it itself.
    """
    shown = "random" if default is None else str(default)
    kind = {} if as_text else {"type": int}
    parser.add_argument("--seed", default=(None if default is None else str(default)) if as_text else default,
                        metavar="N", help=f"seed for {what} (default {shown})", **kind)


def add_actor_option(parser, what: str = "who is recorded in the audit trail") -> None:
    """The ``--by NAME`` option every audited command takes (read back by :func:`actor_name`)."""
    parser.add_argument("--by", metavar="NAME", help=f"{what} (default: the operating-system user; "
                                                      "attribution, not authentication)")


def actor_name(args) -> str:
    """The name recorded in the audit trail: ``--by`` or the operating-system user (attribution only).

    On a PostgreSQL workspace the server records the login it authenticated (``session_user``), so
    ``--by`` is refused there rather than silently ignored.
    """
    from caseview.attribution import os_user
    from caseview.errors import InputError
    from caseview.storage.location import is_database_url
    from caseview.textfiles import check_one_line

    given = getattr(args, "by", None)   # argparse Namespace: a command without --by has no attribute
    if given and any(is_database_url(getattr(args, name, None))  # the workspace, a copy's or demo's target
                     for name in ("workspace", "destination", "path")):
        raise InputError("--by is not accepted on a PostgreSQL workspace: the server records the login you "
                         "connected as; connect as that person instead (nothing was changed)")
    return check_one_line(given, "--by") if given else os_user()
