"""Who may do what in a PostgreSQL team workspace, enforced by the server.

Everything here is SQL run by the workspace owner (the login that ran ``caseview init``) on a
psycopg 3 connection. The server, not caseview, then decides what each connected login may read and
change (PostgreSQL documentation, "Database Roles", "Privileges", "Row Security Policies"):

* four **group roles** per workspace database (roles are cluster-wide, so their names carry the
  database's name, :func:`group_roles`): ``coordinator`` (reads and records contacts only for cases
  whose coordinator code is theirs: row-level security on every table with a ``case_id`` column and
  on ``cases``), ``supervisor`` (reads every case, records reviews, reads the audit trail),
  ``analyst`` (reads every case, fits and publishes model versions, changes rules) and ``auditor``
  (reads the audit trail; nothing else). Logins join them through :mod:`.postgres_team`;
* the **audit trail** is owned by a NOLOGIN *keeper* role nobody belongs to, so nobody (the owner's
  login included) holds UPDATE, DELETE, TRUNCATE or even INSERT on it; triggers refuse UPDATE, DELETE
  and TRUNCATE besides. Entries are appended only by the SECURITY DEFINER function
  ``caseview_audit_append``, which serialises appends (a table lock held to commit), takes the actor
  from ``session_user`` (the authenticated login, not a client-supplied string) and the time from the
  server's clock, chains and hashes
  the entry exactly as :func:`caseview.storage.audit.entry_hash` does, and sends a NOTIFY on
  :data:`NOTIFY_CHANNEL` in the same transaction (delivered only if it commits);
* columns that name who did something (``reviews.actor``, ``contact_provenance.recorded_by``,
  ``contact_versions.ended_by``, ``case_closures.closed_by``) are set to ``session_user`` by triggers.

:func:`install` is idempotent: run it after the schema is created or migrated (it grants on tables
that a later migration added, by the same rules).
"""

from __future__ import annotations

import hashlib
import re

#: LISTEN/NOTIFY channel of workspace changes; the payload is JSON ``{"entry": id, "action": ...,
#: "case_keys": [cases.id ...]}`` or ``"all_cases": true`` (internal keys, not case codes).
NOTIFY_CHANNEL = "caseview_changes"
TEAM_ROLES = ("coordinator", "supervisor", "analyst", "auditor")
#: Tables only the owner touches (the team mapping) or handled separately (the audit trail).
_OWNER_ONLY = ("team_members", "team_coordinators")
_AUDIT = "audit_log"
#: Writes beyond SELECT per role and table (row-level security narrows the coordinator's to their cases).
_WRITES = {
    "coordinator": {"cases": "INSERT, UPDATE", "contacts": "INSERT, UPDATE, DELETE", "contact_versions": "INSERT",
                    "contact_provenance": "INSERT, UPDATE, DELETE", "case_closures": "INSERT, DELETE",
                    "coordinators": "INSERT", "row_digests": "INSERT, UPDATE, DELETE"},
    "supervisor": {"reviews": "INSERT", "score_runs": "INSERT", "case_scores": "INSERT",
                   "row_digests": "INSERT, UPDATE, DELETE"},
    "analyst": {"model_versions": "INSERT, UPDATE", "channels": "INSERT", "categories": "INSERT",
                "covariates": "INSERT", "coordinators": "INSERT", "settings": "INSERT, UPDATE",
                "score_runs": "INSERT", "case_scores": "INSERT", "row_digests": "INSERT, UPDATE, DELETE"},
}
#: Tables every team role reads and none writes (the workspace's identity and schema version).
_IDENTITY = ("caseview_workspace",)
#: Tables whose rows coordinators must not read at all (case-keyed rows are narrowed to their cases instead).
_HIDDEN_FROM_COORDINATORS = ()
#: Columns the server fills with the login that wrote the row: table -> column.
_WHO_COLUMNS = {"reviews": "actor", "contact_provenance": "recorded_by", "contact_versions": "ended_by",
                "case_closures": "closed_by"}


def role_prefix(database: str) -> str:
    """``cv_<database>_`` (lower case, letters, digits and _ only; long or altered names get a short hash)."""
    safe = re.sub(r"[^a-z0-9_]", "_", database.lower())
    if safe != database or len(safe) > 30:
        safe = f"{safe[:24]}_{hashlib.sha256(database.encode('utf-8')).hexdigest()[:5]}"
    return f"cv_{safe}_"


def group_roles(database: str) -> dict:
    """Role name of each team role in ``database``, plus ``"keeper"`` (the audit trail's owner)."""
    prefix = role_prefix(database)
    return {**{role: prefix + role for role in TEAM_ROLES}, "keeper": prefix + "audit_keeper"}


def _sql(text: str, **names):
    from psycopg import sql

    return sql.SQL(text).format(**{k: sql.Identifier(v) for k, v in names.items()})


def _role_exists(cur, name: str) -> bool:
    cur.execute("SELECT 1 FROM pg_roles WHERE rolname = %s", (name,))
    return cur.fetchone() is not None


def _tables(cur) -> dict:
    """Table name -> has a ``case_id`` column, for the tables of the current schema."""
    cur.execute("SELECT c.relname, EXISTS (SELECT 1 FROM pg_attribute a WHERE a.attrelid = c.oid"
                " AND a.attname = 'case_id' AND NOT a.attisdropped) FROM pg_class c"
                " WHERE c.relkind IN ('r', 'p') AND c.relnamespace = current_schema()::regnamespace")
    return dict(cur.fetchall())


def install(connection) -> dict:
    """Create (or bring up to date) the group roles, grants, row-level security and the audit keeper.

    Run by the workspace owner inside one transaction, after the schema exists. The owner's login
    needs CREATEROLE (to create the group roles and, later, grant them).

    Returns
    -------
    dict
        :func:`group_roles` of this database.
    """
    cur = getattr(connection, "raw", connection).cursor()  # a PgConnection or a psycopg connection
    cur.execute("SELECT current_database(), current_user, rolcreaterole OR rolsuper FROM pg_roles"
                " WHERE rolname = current_user")
    database, owner, may_create_roles = cur.fetchone()
    roles = group_roles(database)
    if not may_create_roles:
        from ..errors import WorkspaceError

        raise WorkspaceError(f"{database}: the login {owner} cannot create roles, and a team workspace needs its own "
                             f"group roles; ask the database administrator for ALTER ROLE {owner} CREATEROLE "
                             "(nothing was changed)")
    for name in roles.values():
        if not _role_exists(cur, name):
            cur.execute(_sql("CREATE ROLE {r} NOLOGIN", r=name))
    cur.execute("CREATE TABLE IF NOT EXISTS team_members (login TEXT PRIMARY KEY, role TEXT NOT NULL,"
                " added_utc TEXT NOT NULL, added_by TEXT NOT NULL)")
    cur.execute("CREATE TABLE IF NOT EXISTS team_coordinators (login TEXT NOT NULL REFERENCES team_members(login)"
                " ON DELETE CASCADE, coordinator TEXT NOT NULL, PRIMARY KEY (login, coordinator))")
    cur.execute("CREATE OR REPLACE FUNCTION caseview_my_coordinators() RETURNS SETOF text LANGUAGE sql STABLE"
                " SECURITY DEFINER SET search_path = pg_catalog, public AS"
                " $$ SELECT coordinator FROM public.team_coordinators WHERE login = session_user $$")
    cur.execute("REVOKE ALL ON FUNCTION caseview_my_coordinators() FROM PUBLIC")
    _grant_connect(cur, database, roles)
    tables = _tables(cur)
    for table, keyed in sorted(tables.items()):
        if table in _OWNER_ONLY or table == _AUDIT:
            continue
        _grant_table(cur, table, keyed, roles, tables)
    _who_triggers(cur, tables)
    _audit_keeper(cur, roles, owner)
    return roles


def _grant_connect(cur, database: str, roles: dict) -> None:
    team = [roles[r] for r in TEAM_ROLES]
    for name in team:
        cur.execute(_sql("GRANT CONNECT ON DATABASE {d} TO {r}", d=database, r=name))
        cur.execute(_sql("GRANT USAGE ON SCHEMA public TO {r}", r=name))
        cur.execute(_sql("GRANT EXECUTE ON FUNCTION caseview_my_coordinators() TO {r}", r=name))
    for name in (roles["coordinator"], roles["supervisor"], roles["analyst"]):
        cur.execute(_sql("GRANT USAGE, SELECT ON ALL SEQUENCES IN SCHEMA public TO {r}", r=name))


def _grant_table(cur, table: str, keyed: bool, roles: dict, tables: dict) -> None:
    coordinator, supervisor, analyst = roles["coordinator"], roles["supervisor"], roles["analyst"]
    for name in (coordinator, supervisor, analyst, roles["auditor"]):
        cur.execute(_sql("REVOKE ALL ON {t} FROM {r}", t=table, r=name))
    readers = (supervisor, analyst) if table in _HIDDEN_FROM_COORDINATORS else (coordinator, supervisor, analyst)
    for name in readers + ((roles["auditor"],) if table in _IDENTITY else ()):
        cur.execute(_sql("GRANT SELECT ON {t} TO {r}", t=table, r=name))
    if table in _IDENTITY:
        return
    known = any(table in writes for writes in _WRITES.values()) or table in ("cases", "reviews")
    for role in ("coordinator", "supervisor", "analyst"):
        writes = _WRITES[role].get(table) or ("" if known else "INSERT, UPDATE, DELETE")
        if writes:
            cur.execute(_sql(f"GRANT {writes} ON {{t}} TO {{r}}", t=table, r=roles[role]))
    if table == "row_digests":
        _locator_policies(cur, roles, tables)
    if table != "cases" and not keyed:
        return
    # Row-level security: the owner (table owner) is not subject to it; the coordinator's policy
    # reads ``cases`` under the coordinator's own policy, so case-keyed rows follow their case.
    cur.execute(_sql("ALTER TABLE {t} ENABLE ROW LEVEL SECURITY", t=table))
    mine = ("coordinator IN (SELECT caseview_my_coordinators())" if table == "cases"
            else "case_id IN (SELECT id FROM public.cases)")
    if table == "cases":  # the append function (run as the keeper) names the case keys in its NOTIFY
        cur.execute(_sql("GRANT SELECT (id, case_code) ON cases TO {r}", r=roles["keeper"]))
    policies = [("caseview_coordinator_own_cases", coordinator, mine),
                ("caseview_supervisor_all_cases", supervisor, "true"), ("caseview_analyst_all_cases", analyst, "true")]
    if table == "cases":
        policies.append(("caseview_keeper_case_keys", roles["keeper"], "true"))
    for policy, role, using in policies:
        cur.execute(_sql("DROP POLICY IF EXISTS {p} ON {t}", p=policy, t=table))
        cur.execute(_sql(f"CREATE POLICY {{p}} ON {{t}} TO {{r}} USING ({using}) WITH CHECK ({using})",
                         p=policy, t=table, r=role))


#: The row-digest locator rows a coordinator's writes touch: their cases' rows (read through the
#: coordinator's own policies) and the coordinator codes (every contact change re-reads them).
_COORDINATOR_LOCATOR = (
    "set_name = 'coordinators'"
    " OR (set_name = 'cases' AND key IN (SELECT case_code FROM public.cases))"
    " OR (set_name = 'case_closures' AND key IN (SELECT id::text FROM public.cases))"
    " OR (set_name = 'contact_provenance' AND split_part(key, ':', 1) IN (SELECT id::text FROM public.cases))")
_COORDINATOR_VERSIONS = " OR (set_name = 'contact_versions' AND key IN (SELECT id::text FROM public.contact_versions))"


def _locator_policies(cur, roles: dict, tables: dict) -> None:
    """Row-level security on the row-digest locator: a coordinator cannot spoil other cases' verification."""
    cur.execute("ALTER TABLE row_digests ENABLE ROW LEVEL SECURITY")
    mine = _COORDINATOR_LOCATOR + (_COORDINATOR_VERSIONS if "contact_versions" in tables else "")
    for policy, role, using in (("caseview_coordinator_own_digests", roles["coordinator"], mine),
                                ("caseview_supervisor_all_digests", roles["supervisor"], "true"),
                                ("caseview_analyst_all_digests", roles["analyst"], "true")):
        cur.execute(_sql("DROP POLICY IF EXISTS {p} ON row_digests", p=policy))
        cur.execute(_sql(f"CREATE POLICY {{p}} ON row_digests TO {{r}} USING ({using}) WITH CHECK ({using})",
                         p=policy, r=role))


def _who_triggers(cur, tables: dict) -> None:
    for table, column in _WHO_COLUMNS.items():
        if table not in tables:
            continue
        function = f"caseview_{table}_{column}_is_session_user"
        # the one exception: the owner restoring a copied workspace (begin_restore) keeps who recorded it
        cur.execute(_sql(f"CREATE OR REPLACE FUNCTION {{f}}() RETURNS trigger LANGUAGE plpgsql AS $$ BEGIN"
                         f" IF current_setting('caseview.restoring', true) = 'on' AND session_user ="
                         f" (SELECT pg_get_userbyid(relowner) FROM pg_class WHERE oid = TG_RELID) THEN RETURN NEW;"
                         f" END IF; NEW.{column} := session_user; RETURN NEW; END $$", f=function))
        cur.execute(_sql("CREATE OR REPLACE TRIGGER {g} BEFORE INSERT ON {t} FOR EACH ROW EXECUTE FUNCTION {f}()",
                         g=f"{table}_{column}_is_session_user", t=table, f=function))


# The entry hash is SHA-256 of the canonical JSON array [id, at, actor, action, target, details, prev]
# (caseview.storage.audit.entry_hash: json.dumps(..., separators=(",", ":"), ensure_ascii=False)).
# PostgreSQL's to_json(text) escapes exactly what Python's json.dumps does with ensure_ascii=False:
# '"', '\', \b \f \n \r \t and other characters below U+0020 as \u00xx, lower-case hex
# (PostgreSQL source, src/backend/utils/adt/json.c, escape_json; CPython Lib/json/encoder.py).
_APPEND = r"""
CREATE OR REPLACE FUNCTION caseview_audit_append(p_action text, p_target text, p_details_json text, p_at_utc text)
RETURNS TABLE (entry_id bigint, entry_at text, entry_actor text, entry_prev text, entry_hash_hex text)
LANGUAGE plpgsql SECURITY DEFINER SET search_path = pg_catalog, public AS $fn$
DECLARE
  v_id bigint; v_prev text; v_at text; v_actor text := session_user; v_hash text; v_keys jsonb;
BEGIN
  LOCK TABLE public.audit_log IN EXCLUSIVE MODE;  -- one writer at a time until commit: an unbroken chain
  SELECT a.id, a.entry_hash INTO v_id, v_prev FROM public.audit_log a ORDER BY a.id DESC LIMIT 1;
  IF NOT FOUND THEN v_id := 1; v_prev := repeat('0', 64); ELSE v_id := v_id + 1; END IF;
  -- the server's clock, not the client's (p_at_utc is ignored: no entry can be back-dated)
  v_at := to_char(clock_timestamp() AT TIME ZONE 'UTC', 'YYYY-MM-DD"T"HH24:MI:SS.US"Z"');
  v_hash := encode(sha256(convert_to('[' || v_id::text || ',' || to_json(v_at)::text || ',' || to_json(v_actor)::text
            || ',' || to_json(p_action)::text || ',' || to_json(p_target)::text || ',' || to_json(p_details_json)::text
            || ',' || to_json(v_prev)::text || ']', 'UTF8')), 'hex');
  INSERT INTO public.audit_log (id, at_utc, actor, action, target, details_json, prev_hash, entry_hash)
    VALUES (v_id, v_at, v_actor, p_action, p_target, p_details_json, v_prev, v_hash);
  SELECT COALESCE(jsonb_agg(c.id), '[]'::jsonb) INTO v_keys FROM public.cases c WHERE c.case_code = p_target;
  PERFORM pg_notify('caseview_changes', json_build_object('entry', v_id, 'action', p_action, 'by', v_actor,
    'case_keys', v_keys, 'all_cases', jsonb_array_length(v_keys) = 0)::text);
  RETURN QUERY SELECT v_id, v_at, v_actor, v_prev, v_hash;
END $fn$;
CREATE OR REPLACE FUNCTION caseview_next_audit_id() RETURNS bigint
LANGUAGE plpgsql SECURITY DEFINER SET search_path = pg_catalog, public AS $fn$
BEGIN
  LOCK TABLE public.audit_log IN EXCLUSIVE MODE;  -- the id stays the next one until this transaction ends
  RETURN COALESCE((SELECT max(id) FROM public.audit_log), 0) + 1;
END $fn$;
CREATE OR REPLACE FUNCTION caseview_audit_head() RETURNS TABLE (head_id bigint, head_hash text)
LANGUAGE sql STABLE SECURITY DEFINER SET search_path = pg_catalog, public AS $fn$
  SELECT COALESCE(max(id), 0), COALESCE((SELECT a.entry_hash FROM public.audit_log a ORDER BY a.id DESC LIMIT 1),
    repeat('0', 64)) FROM public.audit_log
$fn$;
CREATE OR REPLACE FUNCTION caseview_audit_restore(p_entries json) RETURNS bigint
LANGUAGE plpgsql SECURITY DEFINER SET search_path = pg_catalog, public AS $fn$
DECLARE v_count bigint;
BEGIN
  LOCK TABLE public.audit_log IN EXCLUSIVE MODE;
  IF EXISTS (SELECT 1 FROM public.audit_log) THEN
    RAISE EXCEPTION 'the audit trail can be restored only into a new, empty workspace';
  END IF;
  INSERT INTO public.audit_log (id, at_utc, actor, action, target, details_json, prev_hash, entry_hash)
    SELECT e.id, e.at_utc, e.actor, e.action, e.target, e.details_json, e.prev_hash, e.entry_hash
    FROM json_to_recordset(p_entries) AS e(id bigint, at_utc text, actor text, action text, target text,
                                           details_json text, prev_hash text, entry_hash text);
  GET DIAGNOSTICS v_count = ROW_COUNT;
  RETURN v_count;
END $fn$;
CREATE OR REPLACE FUNCTION caseview_audit_is_append_only() RETURNS trigger LANGUAGE plpgsql AS $fn$
BEGIN RAISE EXCEPTION 'the audit trail is append-only'; END $fn$;
CREATE OR REPLACE TRIGGER audit_log_no_update BEFORE UPDATE OR DELETE ON audit_log
  FOR EACH ROW EXECUTE FUNCTION caseview_audit_is_append_only();
CREATE OR REPLACE TRIGGER audit_log_no_truncate BEFORE TRUNCATE ON audit_log
  FOR EACH STATEMENT EXECUTE FUNCTION caseview_audit_is_append_only();
"""
_AUDIT_FUNCTIONS = ("caseview_audit_append(text, text, text, text)", "caseview_next_audit_id()",
                    "caseview_audit_head()", "caseview_audit_restore(json)", "caseview_audit_is_append_only()")


def _audit_keeper(cur, roles: dict, owner: str) -> None:
    """Hand the audit table and its functions to the keeper role; grant reading and appending."""
    keeper = roles["keeper"]
    cur.execute("SELECT pg_get_userbyid(relowner) FROM pg_class WHERE oid = 'public.audit_log'::regclass")
    if cur.fetchone()[0] != keeper:
        cur.execute(_APPEND)
        # PostgreSQL 15: a new owner must be a role the current user can become and must be allowed
        # to create in the schema; the owner joins the keeper for the hand-over only.
        cur.execute(_sql("GRANT {k} TO {o}", k=keeper, o=owner))
        cur.execute(_sql("GRANT CREATE ON SCHEMA public TO {k}", k=keeper))
        cur.execute(_sql("ALTER TABLE audit_log OWNER TO {k}", k=keeper))
        for function in _AUDIT_FUNCTIONS:
            cur.execute(_sql(f"ALTER FUNCTION {function} OWNER TO {{k}}", k=keeper))
        cur.execute(_sql("REVOKE CREATE ON SCHEMA public FROM {k}", k=keeper))
        cur.execute(_sql("REVOKE {k} FROM {o}", k=keeper, o=owner))
    writers = (owner, roles["coordinator"], roles["supervisor"], roles["analyst"])
    readers = (owner, roles["supervisor"], roles["auditor"])
    for function, callers in ((_AUDIT_FUNCTIONS[0], writers), (_AUDIT_FUNCTIONS[1], writers),
                              (_AUDIT_FUNCTIONS[2], (*writers, roles["auditor"])),  # the head tells nothing
                              (_AUDIT_FUNCTIONS[3], (owner,))):  # into an empty trail only (copy)
        cur.execute(f"REVOKE ALL ON FUNCTION {function} FROM PUBLIC")
        for name in callers:
            cur.execute(_sql(f"GRANT EXECUTE ON FUNCTION {function} TO {{r}}", r=name))
    # Only the keeper (the table owner) can grant on its table: the owner acts as the keeper briefly.
    _as_keeper(cur, keeper, owner, [_sql("REVOKE ALL ON audit_log FROM PUBLIC")]
               + [_sql("REVOKE ALL ON audit_log FROM {r}", r=name) for name in (*writers, roles["auditor"])]
               + [_sql("GRANT SELECT ON audit_log TO {r}", r=name) for name in readers])


def _as_keeper(cur, keeper: str, owner: str, statements) -> None:
    cur.execute(_sql("GRANT {k} TO {o}", k=keeper, o=owner))
    try:
        cur.execute(_sql("SET LOCAL ROLE {k}", k=keeper))
        for statement in statements:
            cur.execute(statement)
    finally:
        cur.execute("RESET ROLE")
        cur.execute(_sql("REVOKE {k} FROM {o}", k=keeper, o=owner))


def begin_restore(connection) -> None:
    """In the owner's copy transaction: rows keep the names of who recorded them (transaction only)."""
    getattr(connection, "raw", connection).execute("SET LOCAL caseview.restoring = 'on'")


def restore_audit_rows(connection, columns, rows) -> int:
    """Put a copied trail, entry for entry, into this workspace's EMPTY audit table (owner only).

    ``columns`` names the values of each row in ``rows`` (the audit table's columns). The server
    refuses when the table holds any entry, so no one can slip entries into a trail in use.
    """
    import json

    names = [str(c).strip('"') for c in columns]
    entries = [dict(zip(names, row)) for row in rows]
    cur = getattr(connection, "raw", connection).cursor()
    cur.execute("SELECT caseview_audit_restore(%s::json)", (json.dumps(entries, ensure_ascii=False),))
    return int(cur.fetchone()[0])
