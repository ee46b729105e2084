"""The ``caseview`` command.

Each command module in :data:`COMMAND_MODULES` exposes ``register(subparsers)``, which adds its
sub-commands with ``parser.set_defaults(run=function)``; ``function(args)`` returns an exit code.
Command modules import heavy libraries inside their functions so that start-up stays lean.

Errors: a :class:`~caseview.errors.CaseviewError` becomes one line on stderr and its exit code;
Ctrl-C becomes "cancelled" and exit code 130; anything unexpected becomes one line naming the
problem (set CASEVIEW_DEBUG=1 to see the traceback). Never a traceback by default.
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys

from caseview import ADVISORY_NOTICE, __version__
from caseview.errors import CaseviewError

COMMAND_MODULES = (
    "caseview.cli.workspace_commands",  # init, import, export, backup, audit
    "caseview.cli.basic",       # score, history, demo
    "caseview.cli.fitting",     # fit, models, goodness-of-fit, staff estimates
    "caseview.cli.followup",    # flags, review, forecast, rules
    "caseview.cli.reporting",   # report
    "caseview.cli.casework_commands",  # record, correct, void, contacts, close, reopen
    "caseview.cli.outlook_commands",  # outlook, target
    "caseview.cli.window",      # gui
    "caseview.cli.team_commands",  # team add/remove/list (PostgreSQL workspaces)
    "caseview.cli.copy_command",  # copy (SQLite <-> PostgreSQL)
)


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # one line, exit 2, like every other caseview error
        self.exit(2, f"caseview: error: {message} (see 'caseview {self.prog.split(' ', 1)[-1]} --help')\n"
                  if " " in self.prog else f"caseview: error: {message} (see 'caseview --help')\n")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="caseview",
        description="Stage estimates for a caseload from a continuous-time hidden-Markov model. " + ADVISORY_NOTICE,
    )
    parser.add_argument("--version", action="version", version=f"caseview {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name in COMMAND_MODULES:
        importlib.import_module(name).register(sub)
    return parser


def _terminate_as_interrupt(signum, frame):
    raise KeyboardInterrupt  # termination runs the same clean-up as Ctrl-C (partial files removed, rolled back)


def main(argv=None) -> int:
    import signal
    import threading

    if threading.current_thread() is threading.main_thread():
        signal.signal(signal.SIGTERM, _terminate_as_interrupt)
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "run", None):
        parser.print_help()
        return 2
    try:
        code = args.run(args)
    except CaseviewError as exc:
        print(f"caseview: error: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print("caseview: cancelled; nothing was changed", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0
    except Exception as exc:  # never a traceback for the user
        if os.environ.get("CASEVIEW_DEBUG"):
            raise
        print(f"caseview: internal error: {type(exc).__name__}: {exc} (set CASEVIEW_DEBUG=1 for details)",
              file=sys.stderr)
        return 1
    return int(code or 0)


if __name__ == "__main__":
    sys.exit(main())
