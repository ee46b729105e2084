"""Run one command in a fresh process and report its wall time and peak memory.

``run_measured(command)`` starts a small Python wrapper which starts ``command`` as its only child
and, once it ends, reads ``resource.getrusage(RUSAGE_CHILDREN).ru_maxrss`` - the peak resident
set size of that one child (a fresh wrapper per command, so values never mix), and its CPU time
(user + system, all threads) from the same call. The wall time is
taken inside the wrapper around the child, so it includes the command's own start-up (imports)
but not the wrapper's.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import tempfile
from dataclasses import dataclass, field

_WRAPPER = r"""
import json, resource, subprocess, sys, time
out_path, limit, command = sys.argv[1], float(sys.argv[2]), sys.argv[3:]
start = time.perf_counter()
try:
    done = subprocess.run(command, stdout=subprocess.PIPE, stderr=subprocess.PIPE, timeout=limit or None)
except subprocess.TimeoutExpired as exc:
    done = subprocess.CompletedProcess(command, 124, exc.stdout or b"",
                                       (exc.stderr or b"") + f"\ntimed out after {limit:.0f} s".encode())
seconds = time.perf_counter() - start
usage = resource.getrusage(resource.RUSAGE_CHILDREN)
peak_kb = usage.ru_maxrss
with open(out_path, "w", encoding="utf-8") as handle:
    json.dump({"seconds": seconds, "cpu_seconds": usage.ru_utime + usage.ru_stime, "peak_mb": peak_kb / 1024.0,
               "returncode": done.returncode,
               "stdout": done.stdout.decode("utf-8", "replace"),
               "stderr": done.stderr.decode("utf-8", "replace")}, handle)
"""


@dataclass
class Measured:
    """Outcome of one measured command."""

    command: list
    seconds: float
    peak_mb: float
    returncode: int
    cpu_seconds: float = 0.0
    stdout: str = ""
    stderr: str = ""
    extra: dict = field(default_factory=dict)

    @property
    def ok(self) -> bool:
        return self.returncode == 0

    def last_json_line(self) -> dict:
        """The last stdout line that parses as a JSON object ({} if none)."""
        for line in reversed(self.stdout.strip().splitlines()):
            line = line.strip()
            if line.startswith("{"):
                try:
                    return json.loads(line)
                except json.JSONDecodeError:
                    continue
        return {}

    def problem(self) -> str:
        """One line describing a failure ('' when the command succeeded)."""
        if self.ok:
            return ""
        text = (self.stderr.strip() or self.stdout.strip()).splitlines()
        return f"exit code {self.returncode}: {text[-1] if text else 'no output'}"


#: Seconds after which a measured command is stopped and reported as failed (0 = never); run_all's
#: ``--command-timeout`` sets it.
TIMEOUT_SECONDS = 0.0


def run_measured(command: list, env: dict | None = None, cwd=None) -> Measured:
    """Run ``command`` (list of strings) in a fresh wrapper process; see the module docstring."""
    with tempfile.NamedTemporaryFile("r", suffix=".json", delete=False) as handle:
        out_path = handle.name
    try:
        environment = dict(os.environ)
        environment.update(env or {})
        subprocess.run([sys.executable, "-c", _WRAPPER, out_path, str(TIMEOUT_SECONDS), *map(str, command)],
                       env=environment,
                       cwd=cwd, check=True)
        with open(out_path, encoding="utf-8") as handle:
            data = json.load(handle)
    finally:
        os.unlink(out_path)
    return Measured(command=list(map(str, command)), seconds=data["seconds"], peak_mb=data["peak_mb"],
                    returncode=data["returncode"], cpu_seconds=data["cpu_seconds"], stdout=data["stdout"],
                    stderr=data["stderr"])
