"""The workspace schema on PostgreSQL: the same :data:`~caseview.storage.schema.MIGRATIONS`, translated.

Each SQLite migration script is translated statement by statement (so a migration another change
appends to ``MIGRATIONS`` is carried over without a second copy):

* ``INTEGER`` -> ``BIGINT``; ``REAL`` -> ``DOUBLE PRECISION`` (float64 as in SQLite); ``BLOB`` ->
  ``BYTEA``; ``WITHOUT ROWID`` dropped;
* ``id INTEGER PRIMARY KEY`` keeps SQLite's rule for a new row's id (one more than the largest, the
  same ids on both backends) through the trigger function ``caseview_next_id``;
* the foreign keys of the bulk tables (:data:`BULK_TABLES`) are checked once per
  statement over all its rows (an anti-join in an ``AFTER ... FOR EACH STATEMENT`` trigger with a
  transition table, on the child and the parent side) instead of once per row: PostgreSQL's row
  checks cost 30 s of a 1.2-million-contact import, the statement check about a second;
* a foreign key to ``audit_log`` is ``DEFERRABLE`` (a row that stores its own audit entry's id is
  written first, as on SQLite with ``PRAGMA defer_foreign_keys``);
* ``CREATE TRIGGER ... BEGIN SELECT RAISE(ABORT, 'text'); END`` becomes a PL/pgSQL function raising
  the same text and a ``BEFORE`` trigger (the append-only tables).

The workspace identifies itself with the table ``caseview_workspace`` (one row: application id,
schema version, owner role, creation time) instead of SQLite's ``application_id``/``user_version``.

Where PostgreSQL-only DDL goes: :data:`PG_SETUP` runs before the first migration, and
:func:`after_migrations` after every migration run, inside the same transaction (roles, GRANTs and
row-level security policies of the team set-up belong there).
"""

from __future__ import annotations

import re

from . import schema as _schema

META_TABLE = "caseview_workspace"

#: PostgreSQL-only objects created with a new workspace (before migration 1).
PG_SETUP = f"""
CREATE TABLE {META_TABLE} (
  one_row BOOLEAN PRIMARY KEY DEFAULT TRUE CHECK (one_row),
  application_id BIGINT NOT NULL,
  schema_version INTEGER NOT NULL,
  owner TEXT NOT NULL,
  created_utc TEXT NOT NULL);
CREATE FUNCTION caseview_next_id() RETURNS trigger LANGUAGE plpgsql SECURITY DEFINER
  SET search_path = pg_catalog AS $$
BEGIN
  IF NEW.id IS NULL THEN
    EXECUTE format('SELECT COALESCE(MAX(id), 0) + 1 FROM %I.%I', TG_TABLE_SCHEMA, TG_TABLE_NAME) INTO NEW.id;
  END IF;
  RETURN NEW;
END $$;
"""

_TRIGGER = re.compile(r"CREATE\s+TRIGGER\s+(?:IF\s+NOT\s+EXISTS\s+)?(\w+)\s+BEFORE\s+(UPDATE|DELETE|INSERT)\s+ON\s+"
                      r"(\w+)\s+BEGIN\s+SELECT\s+RAISE\s*\(\s*ABORT\s*,\s*'([^']*)'\s*\)\s*;\s*END", re.IGNORECASE)
_CREATE_TABLE = re.compile(r"CREATE\s+(?:TEMP\s+)?TABLE\s+(?:IF\s+NOT\s+EXISTS\s+)?(\w+)", re.IGNORECASE)
_ID_KEY = re.compile(r"\bid\s+INTEGER\s+PRIMARY\s+KEY\b", re.IGNORECASE)
_AUDIT_REFERENCE = re.compile(r"(REFERENCES\s+audit_log\s*\(\s*id\s*\))", re.IGNORECASE)


#: Tables whose foreign keys are checked per statement (see the module docstring).
BULK_TABLES = frozenset({"contacts", "case_packs"})  # (case_packs: one row per case, when that table exists)
_REFERENCE = re.compile(r"\b(\w+)(\s+INTEGER(?:\s+NOT\s+NULL)?(?:\s+PRIMARY\s+KEY)?)\s+REFERENCES\s+(\w+)\s*\(\s*id\s*\)", re.IGNORECASE)


def _statement_checks(table: str, references: list[tuple[str, str]]) -> list[str]:
    """Triggers checking ``table``'s references [(column, parent table)] once per statement, both sides."""
    out = []
    for column, parent in references:
        child_fn = f"caseview_check_{table}_{column}"
        out.append(
            f"CREATE OR REPLACE FUNCTION {child_fn}() RETURNS trigger LANGUAGE plpgsql SECURITY DEFINER "
            f"SET search_path FROM CURRENT AS $$ BEGIN "
            f"IF EXISTS (SELECT 1 FROM new_rows n WHERE n.{column} IS NOT NULL AND NOT EXISTS "
            f"(SELECT 1 FROM {parent} p WHERE p.id = n.{column})) THEN "
            f"RAISE EXCEPTION USING ERRCODE = 'foreign_key_violation', MESSAGE = "
            f"'{table}.{column} refers to a row of {parent} that does not exist'; END IF; RETURN NULL; END $$")
        for event in ("INSERT", "UPDATE"):
            out.append(f"CREATE OR REPLACE TRIGGER {table}_{column}_{event.lower()}_check AFTER {event} ON {table} "
                       f"REFERENCING NEW TABLE AS new_rows FOR EACH STATEMENT EXECUTE FUNCTION {child_fn}()")
        parent_fn = f"caseview_check_{parent}_used_by_{table}_{column}"
        out.append(
            f"CREATE OR REPLACE FUNCTION {parent_fn}() RETURNS trigger LANGUAGE plpgsql SECURITY DEFINER "
            f"SET search_path FROM CURRENT AS $$ BEGIN "
            f"IF EXISTS (SELECT 1 FROM old_rows o JOIN {table} c ON c.{column} = o.id WHERE NOT EXISTS "
            f"(SELECT 1 FROM {parent} p WHERE p.id = o.id)) THEN "
            f"RAISE EXCEPTION USING ERRCODE = 'foreign_key_violation', MESSAGE = "
            f"'a row of {parent} is still used by {table}.{column}'; END IF; RETURN NULL; END $$")
        for event in ("DELETE", "UPDATE"):
            out.append(f"CREATE OR REPLACE TRIGGER {parent}_{event.lower()}_{table}_{column}_check AFTER {event} "
                       f"ON {parent} REFERENCING OLD TABLE AS old_rows FOR EACH STATEMENT "
                       f"EXECUTE FUNCTION {parent_fn}()")
    return out


def statement_checked_parents(table: str) -> set[str]:
    """Parent tables of ``table`` whose references are checked per statement (no PostgreSQL foreign key)."""
    if table not in BULK_TABLES:
        return set()
    out = set()
    for script in _schema.MIGRATIONS:
        for found in _CREATE_TABLE.finditer(script):
            if found.group(1) != table:
                continue
            body = script[found.end():].split(";", 1)[0]
            out |= {m.group(3) for m in _REFERENCE.finditer(body)}
    return out


def translate_statement(statement: str) -> list[str]:
    """PostgreSQL statements for one SQLite DDL statement of a migration."""
    trigger = _TRIGGER.search(statement)
    if trigger:
        name, event, table, message = trigger.groups()
        function = f"caseview_refuse_{name}"
        quoted = message.replace("'", "''")
        return [f"CREATE OR REPLACE FUNCTION {function}() RETURNS trigger LANGUAGE plpgsql AS $$ "
                f"BEGIN RAISE EXCEPTION '{quoted}'; END $$",
                f"CREATE OR REPLACE TRIGGER {name} BEFORE {event.upper()} ON {table} FOR EACH ROW "
                f"EXECUTE FUNCTION {function}()"]
    text = statement.strip().rstrip(";")
    table = _CREATE_TABLE.match(text)
    has_id_key = bool(table and _ID_KEY.search(text))
    checks = []
    if table and table.group(1) in BULK_TABLES:
        references = [(m.group(1), m.group(3)) for m in _REFERENCE.finditer(text)]
        text = _REFERENCE.sub(lambda m: m.group(1) + m.group(2), text)
        checks = _statement_checks(table.group(1), references)
    text = re.sub(r"\bWITHOUT\s+ROWID\b", "", text, flags=re.IGNORECASE)
    text = re.sub(r"\bINTEGER\b", "BIGINT", text)
    text = re.sub(r"\bREAL\b", "DOUBLE PRECISION", text)
    text = re.sub(r"\bBLOB\b", "BYTEA", text)
    text = _AUDIT_REFERENCE.sub(r"\1 DEFERRABLE", text)
    out = [text.strip()]
    if has_id_key:
        name = table.group(1)
        out.append(f"CREATE OR REPLACE TRIGGER {name}_next_id BEFORE INSERT ON {name} FOR EACH ROW "
                   "EXECUTE FUNCTION caseview_next_id()")
    return out + checks


def migration_statements(script: str) -> list[str]:
    """PostgreSQL statements for one migration script of :data:`caseview.storage.schema.MIGRATIONS`."""
    from .workspace import _split_sql

    out = []
    for statement in _split_sql(script):
        out += translate_statement(statement)
    return out


def setup_statements() -> list[str]:
    """The statements of :data:`PG_SETUP` (dollar-quoted bodies kept whole)."""
    parts, current, in_body = [], [], False
    for line in PG_SETUP.strip().splitlines():
        current.append(line)
        if line.count("$$") % 2:
            in_body = not in_body
        if line.rstrip().endswith(";") and not in_body:
            parts.append("\n".join(current).rstrip().rstrip(";"))
            current = []
    if current and "".join(current).strip():
        parts.append("\n".join(current))
    return parts


def after_migrations(connection, from_version: int, to_version: int) -> None:
    """PostgreSQL-only DDL after migrations ``from_version`` -> ``to_version`` (same transaction):
    the team set-up (group roles, GRANTs, row-level security, the audit keeper; idempotent, so
    tables a migration added get their grants), :func:`caseview.storage.postgres_roles.install`."""
    from .postgres_roles import install

    install(connection)


def schema_version() -> int:
    return _schema.schema_version()
