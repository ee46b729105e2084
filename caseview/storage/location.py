"""Where a workspace lives: a SQLite file path or a PostgreSQL connection URL.

Every place that takes a workspace (each command, the window's Open path, ``Workspace.open`` /
``Workspace.create``) passes what the person typed through :func:`workspace_location`: a text
starting with ``postgresql://`` or ``postgres://`` is a :class:`DatabaseURL`, anything else a file
path. A URL never carries a password (libpq reads it from PGPASSWORD, the password file or a
service file; the window may pass a prompted one to ``Workspace.open(..., password=...)``).

Accepted forms (PostgreSQL documentation, "Connection URIs", section 34.1.1):
``postgresql://[user@]host[:port]/dbname`` and ``postgresql:///dbname?host=/socket/dir``.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from urllib.parse import parse_qsl, unquote, urlsplit

from ..errors import WorkspaceError

SCHEMES = ("postgresql", "postgres")
#: Query parameters a workspace URL may carry (libpq connection parameters; no password).
ALLOWED_PARAMETERS = frozenset({"host", "port", "user", "sslmode", "sslrootcert", "sslcert", "sslkey",
                                "connect_timeout", "application_name", "service", "target_session_attrs"})


def is_database_url(value) -> bool:
    """True when ``value`` is text naming a PostgreSQL database (``postgresql://...``)."""
    if isinstance(value, DatabaseURL):
        return True
    if not isinstance(value, str):
        return False
    head = value.strip().split(":", 1)[0].lower()
    return head in SCHEMES and "://" in value


@dataclass(frozen=True)
class DatabaseURL:
    """A PostgreSQL workspace: the URL as given (never with a password) and its parts.

    ``name`` is the database name, so messages that show ``ws.path.name`` read naturally.
    """

    url: str
    dbname: str
    user: str | None
    host: str | None
    port: int | None
    parameters: tuple  # ((key, value), ...) from the query string

    @property
    def name(self) -> str:
        return self.dbname

    def __str__(self) -> str:
        return self.url

    def connection_parameters(self) -> dict:
        """Keyword arguments for ``psycopg.connect`` (libpq fills in anything not given)."""
        out = {"dbname": self.dbname}
        if self.user:
            out["user"] = self.user
        if self.host:
            out["host"] = self.host
        if self.port:
            out["port"] = self.port
        out.update(dict(self.parameters))
        return out

    def with_dbname(self, dbname: str) -> "DatabaseURL":
        """The same server, another database (used to create or reach a maintenance database)."""
        return parse_database_url(self.url.replace(f"/{self.dbname}", f"/{dbname}", 1))


def parse_database_url(text: str) -> DatabaseURL:
    """Parse a workspace URL; WorkspaceError (one line) for anything malformed or carrying a password."""
    text = str(text).strip()
    try:
        parts = urlsplit(text)
        port = parts.port
    except ValueError as exc:
        raise WorkspaceError(f"{_shown(text)}: not a valid PostgreSQL URL ({exc}); expected "
                             "postgresql://[user@]host[:port]/dbname or postgresql:///dbname?host=/socket/dir") from None
    if parts.scheme.lower() not in SCHEMES:
        raise WorkspaceError(f"{_shown(text)}: not a PostgreSQL URL (expected postgresql://...)")
    if parts.password is not None:
        raise WorkspaceError(f"{_shown(text)}: a password in the URL is refused (it would show in process lists "
                             "and shell history); use PGPASSWORD, ~/.pgpass or a service file")
    dbname = unquote(parts.path.lstrip("/"))
    if not dbname or "/" in dbname:
        raise WorkspaceError(f"{_shown(text)}: no database name; expected postgresql://[user@]host[:port]/dbname")
    query = parse_qsl(parts.query, keep_blank_values=True)
    for key, _value in query:
        if key == "password":
            raise WorkspaceError(f"{_shown(text)}: a password in the URL is refused; use PGPASSWORD, ~/.pgpass or "
                                 "a service file")
        if key not in ALLOWED_PARAMETERS:
            raise WorkspaceError(f"{_shown(text)}: unknown URL parameter {key!r} (known: "
                                 f"{', '.join(sorted(ALLOWED_PARAMETERS))})")
    return DatabaseURL(url=text, dbname=dbname, user=unquote(parts.username) if parts.username else None,
                       host=unquote(parts.hostname) if parts.hostname else None, port=port,
                       parameters=tuple(query))


def _shown(text: str) -> str:
    """The URL for a message, with any password replaced."""
    import re

    text = re.sub(r"([?&]password=)[^&]*", r"\1***", text)
    try:
        parts = urlsplit(text)
        if parts.password is not None:
            return text.replace(f":{parts.password}@", ":***@", 1)
    except ValueError:
        pass
    return text


def workspace_location(value):
    """A :class:`DatabaseURL` for a PostgreSQL URL, else a :class:`pathlib.Path`."""
    if isinstance(value, DatabaseURL):
        return value
    if is_database_url(value):
        return parse_database_url(value)
    return Path(value)
