"""Run the ``caseview`` command in-process (``caseview.cli.main.main``), for CLI tests where a separate
process adds nothing: the same parser, commands, error handling and exit codes, without a new
interpreter per call. Tests of what only a process shows (a crash, a signal, several writers) keep
``subprocess``."""

from __future__ import annotations

import contextlib
import io
from dataclasses import dataclass


@dataclass(frozen=True)
class CommandResult:
    """What ``subprocess.run(..., capture_output=True, text=True)`` would give: exit code and output."""

    returncode: int
    stdout: str
    stderr: str


def run_cli(*args) -> CommandResult:
    """``caseview ARGS...`` in this process; arguments are turned into text."""
    from caseview.cli.main import main

    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            code = main([str(a) for a in args])
        except SystemExit as exc:   # argparse: --help, --version, usage errors (exit 2)
            code = exc.code if isinstance(exc.code, int) else 2
    return CommandResult(int(code), out.getvalue(), err.getvalue())
