"""A throwaway PostgreSQL cluster for tests and benchmarks: ``initdb`` + ``pg_ctl`` on a unix socket.

Usage::

    with PostgresCluster() as cluster:
        url = cluster.create_database("ws1")      # postgresql:///ws1?host=/tmp/...&user=postgres

The cluster lives in a new temporary folder, listens only on a unix socket there (no TCP port),
and is stopped and removed on exit. Server programs are found on PATH, through ``pg_config
--bindir``, or in /usr/lib/postgresql/*/bin (Debian). initdb refuses to run as root, so as root the
folder is given to the ``postgres`` system user and the server programs run through
``runuser -u postgres --``.

Authentication (pg_hba.conf): the superuser ``postgres`` connects without a password; every other
role must give its password (scram-sha-256), so tests can check a wrong password.
"""

from __future__ import annotations

import glob
import os
import shutil
import subprocess
import tempfile
from pathlib import Path

SUPERUSER = "postgres"


class PostgresUnavailable(RuntimeError):
    """No PostgreSQL server programs on this machine (or they cannot run)."""


def find_bindir() -> Path:
    """Folder holding initdb, pg_ctl and postgres; PostgresUnavailable when there is none."""
    found = shutil.which("initdb")
    if found and shutil.which("pg_ctl"):
        return Path(os.path.realpath(found)).parent
    if shutil.which("pg_config"):
        try:
            bindir = subprocess.run(["pg_config", "--bindir"], capture_output=True, text=True, check=True).stdout.strip()
            if (Path(bindir) / "initdb").exists():
                return Path(bindir)
        except (OSError, subprocess.CalledProcessError):
            pass
    candidates = sorted(glob.glob("/usr/lib/postgresql/*/bin/initdb"),
                        key=lambda p: int(Path(p).parts[-3]) if Path(p).parts[-3].isdigit() else 0)
    if candidates:
        return Path(candidates[-1]).parent
    raise PostgresUnavailable("no PostgreSQL server programs (initdb) found on PATH, via pg_config, or in "
                              "/usr/lib/postgresql/*/bin; install the 'postgresql' package")


class PostgresCluster:
    """A private PostgreSQL cluster in a temporary folder (see the module docstring).

    Parameters
    ----------
    durable : bool
        False (tests): fsync and synchronous_commit off for speed. True (benchmarks): the server's
        defaults, durable like a SQLite workspace with ``synchronous=FULL``.
    """

    def __init__(self, durable: bool = False):
        self.durable = durable
        self.bindir = find_bindir()
        self.root: Path | None = None
        self.started = False
        self._as_root = os.geteuid() == 0
        self._counter = 0

    # ------------------------------------------------------------------ commands
    def _run(self, program: str, *args: str, check: bool = True) -> subprocess.CompletedProcess:
        command = [str(self.bindir / program), *args]
        if self._as_root:
            command = ["runuser", "-u", SUPERUSER, "--", *command]
        result = subprocess.run(command, capture_output=True, text=True, cwd="/")
        if check and result.returncode != 0:
            raise PostgresUnavailable(f"{program} failed ({result.returncode}): {result.stderr.strip()[-800:]}")
        return result

    @property
    def socket_dir(self) -> Path:
        return self.root / "socket"

    @property
    def data_dir(self) -> Path:
        return self.root / "data"

    def start(self) -> "PostgresCluster":
        self.root = Path(tempfile.mkdtemp(prefix="cvpg-"))
        try:
            self.socket_dir.mkdir()
            if self._as_root:
                subprocess.run(["chown", "-R", f"{SUPERUSER}:", str(self.root)], check=True, capture_output=True)
            self._run("initdb", "-D", str(self.data_dir), "-U", SUPERUSER, "-E", "UTF8", "--locale=C",
                      "--auth-local=trust", "--auth-host=reject", "-N")
            hba = self.data_dir / "pg_hba.conf"
            hba.write_text(f"local all {SUPERUSER} trust\nlocal all all scram-sha-256\n", encoding="utf-8")
            options = [f"-k {self.socket_dir}", "-c listen_addresses=''", "-c max_connections=60",
                       "-c shared_buffers=64MB"]
            if not self.durable:
                options += ["-c fsync=off", "-c synchronous_commit=off", "-c full_page_writes=off"]
            self._run("pg_ctl", "-D", str(self.data_dir), "-l", str(self.root / "server.log"), "-w", "-t", "60",
                      "-o", " ".join(options), "start")
            self.started = True
        except BaseException:
            self.stop()
            raise
        return self

    def stop(self) -> None:
        if self.root is None:
            return
        if self.started:
            self._run("pg_ctl", "-D", str(self.data_dir), "-m", "fast", "-w", "stop", check=False)
            self.started = False
        shutil.rmtree(self.root, ignore_errors=True)
        self.root = None

    def __enter__(self):
        return self.start()

    def __exit__(self, *exc):
        self.stop()
        return False

    # ------------------------------------------------------------------ databases and roles
    def url(self, dbname: str, user: str = SUPERUSER) -> str:
        return f"postgresql:///{dbname}?host={self.socket_dir}&user={user}"

    def admin(self):
        """A superuser connection to the maintenance database (autocommit)."""
        import psycopg

        return psycopg.connect(dbname="postgres", host=str(self.socket_dir), user=SUPERUSER, autocommit=True)

    def create_database(self, name: str | None = None, owner: str = SUPERUSER) -> str:
        """A new empty database (a fresh name when ``name`` is None); returns its superuser URL."""
        if name is None:
            self._counter += 1
            name = f"ws_{os.getpid()}_{self._counter}"
        with self.admin() as con:
            con.execute(f'CREATE DATABASE "{name}" OWNER "{owner}"')
        return self.url(name)

    def drop_database(self, name: str) -> None:
        with self.admin() as con:
            con.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')

    def create_role(self, name: str, password: str, superuser: bool = False) -> None:
        from psycopg import sql

        with self.admin() as con:
            con.execute(sql.SQL("CREATE ROLE {} LOGIN PASSWORD {}{}").format(
                sql.Identifier(name), sql.Literal(password), sql.SQL(" SUPERUSER" if superuser else "")))


def require_postgres() -> bool:
    """True when CASEVIEW_REQUIRE_POSTGRES=1: a missing server fails the PostgreSQL tests instead of skipping."""
    return os.environ.get("CASEVIEW_REQUIRE_POSTGRES", "") == "1"


def start_for_tests(cluster_factory=None):
    """A started cluster for the test session, or ``pytest.skip`` when this machine has no PostgreSQL
    server programs; with CASEVIEW_REQUIRE_POSTGRES=1 (CI) that is ``pytest.fail`` instead."""
    import pytest

    try:
        return (cluster_factory or PostgresCluster)().start()
    except PostgresUnavailable as exc:
        if require_postgres():
            pytest.fail(f"CASEVIEW_REQUIRE_POSTGRES=1 but no PostgreSQL server could be started: {exc}")
        pytest.skip(f"no PostgreSQL server: {exc}")
