"""Workspace schema, its version number and the forward migrations.

A workspace is one SQLite file. It identifies itself with ``PRAGMA application_id`` =
:data:`APPLICATION_ID` (0x43565753, the ASCII bytes "CVWS") and records its schema version in
``PRAGMA user_version`` (SQLite documentation, "PRAGMA application_id" / "PRAGMA user_version").

:data:`MIGRATIONS` is the ordered list of forward migrations: migration ``k`` (1-based) takes a
workspace from version ``k - 1`` to ``k``. Migration 1 is the whole first schema. A migration is
never edited once released; a schema change is a new entry at the end.

Contact values are stored compactly (see :mod:`caseview.storage.contacts`):

* ``contacts.observations`` is a BLOB with one unsigned byte per workspace channel (in
  ``channels.position`` order): the workspace category code from ``categories``, 255 = blank.
* ``contacts.covariates`` is a BLOB with one little-endian IEEE-754 float64 (REAL) per workspace
  covariate (in ``covariates.position`` order); NaN = not recorded (a covariate added by a later
  model).

Codes are per workspace, not per model, so a later model that reorders or adds categories keeps
reading the stored values correctly.
"""

from __future__ import annotations

APPLICATION_ID = 0x43565753  # "CVWS"

BLANK_CODE = 255
MAX_CATEGORIES_PER_CHANNEL = 255

SCHEMA_V1 = """
CREATE TABLE model_versions (
  id INTEGER PRIMARY KEY,
  created_utc TEXT NOT NULL,
  note TEXT NOT NULL DEFAULT '',
  json_text TEXT NOT NULL,
  fit_summary TEXT,
  is_current INTEGER NOT NULL DEFAULT 0 CHECK (is_current IN (0, 1)));
CREATE UNIQUE INDEX model_versions_one_current ON model_versions(is_current) WHERE is_current = 1;

CREATE TABLE channels (
  id INTEGER PRIMARY KEY, name TEXT NOT NULL UNIQUE, position INTEGER NOT NULL UNIQUE);
CREATE TABLE categories (
  channel_id INTEGER NOT NULL REFERENCES channels(id), code INTEGER NOT NULL CHECK (code BETWEEN 0 AND 254),
  label TEXT NOT NULL, PRIMARY KEY (channel_id, code), UNIQUE (channel_id, label));
CREATE TABLE covariates (
  id INTEGER PRIMARY KEY, name TEXT NOT NULL UNIQUE, position INTEGER NOT NULL UNIQUE);
CREATE TABLE coordinators (id INTEGER PRIMARY KEY, code TEXT NOT NULL UNIQUE);

CREATE TABLE cases (
  id INTEGER PRIMARY KEY, case_code TEXT NOT NULL UNIQUE, coordinator TEXT NOT NULL DEFAULT '');
CREATE TABLE contacts (
  case_id INTEGER NOT NULL REFERENCES cases(id),
  day INTEGER NOT NULL,
  observations BLOB NOT NULL,
  covariates BLOB NOT NULL,
  stage_known TEXT,
  coordinator_id INTEGER REFERENCES coordinators(id),
  PRIMARY KEY (case_id, day)) WITHOUT ROWID;

CREATE TABLE audit_log (
  id INTEGER PRIMARY KEY,
  at_utc TEXT NOT NULL,
  actor TEXT NOT NULL,
  action TEXT NOT NULL,
  target TEXT NOT NULL,
  details_json TEXT NOT NULL,
  prev_hash TEXT NOT NULL,
  entry_hash TEXT NOT NULL);
CREATE TRIGGER audit_log_no_update BEFORE UPDATE ON audit_log
BEGIN SELECT RAISE(ABORT, 'the audit trail is append-only'); END;
CREATE TRIGGER audit_log_no_delete BEFORE DELETE ON audit_log
BEGIN SELECT RAISE(ABORT, 'the audit trail is append-only'); END;

CREATE TABLE reviews (id INTEGER PRIMARY KEY, case_id INTEGER NOT NULL REFERENCES cases(id),
  status TEXT NOT NULL CHECK (status IN ('new','acknowledged','actioned','dismissed')),
  note TEXT NOT NULL DEFAULT '', actor TEXT NOT NULL, at_utc TEXT NOT NULL,
  flags TEXT NOT NULL DEFAULT '', p_follow_up REAL, as_of TEXT, audit_id INTEGER REFERENCES audit_log(id));
CREATE INDEX reviews_case ON reviews(case_id, at_utc);
CREATE TABLE score_runs (id INTEGER PRIMARY KEY, as_of TEXT NOT NULL, horizon_days REAL NOT NULL,
  model_version INTEGER REFERENCES model_versions(id), created_utc TEXT NOT NULL);
CREATE TABLE case_scores (run_id INTEGER NOT NULL REFERENCES score_runs(id) ON DELETE CASCADE,
  case_id INTEGER NOT NULL REFERENCES cases(id), p_follow_up_now REAL NOT NULL,
  p_reach_follow_up REAL NOT NULL, flags TEXT NOT NULL DEFAULT '', PRIMARY KEY (run_id, case_id));
CREATE TABLE settings (key TEXT PRIMARY KEY, value TEXT NOT NULL);
"""

#: Case work (issue 15): earlier versions of contacts, who recorded the current ones, closed cases.
#: ``contacts`` keeps holding only the current version of each contact (so the fast read is
#: unchanged); a correction or a void moves the version it replaces to ``contact_versions`` in the
#: same transaction. ``contact_provenance`` says who recorded a current contact, when and why (a
#: contact imported from a file has no row: its import is in the audit trail). A case is closed from
#: ``closed_day`` on while it has a ``case_closures`` row; reopening deletes the row (both audited).
#: Written with IF NOT EXISTS so that it does not depend on where it lands among other migrations.
CASEWORK_SCHEMA = """
CREATE TABLE IF NOT EXISTS contact_versions (
  id INTEGER PRIMARY KEY,
  case_id INTEGER NOT NULL REFERENCES cases(id),
  day INTEGER NOT NULL,
  observations BLOB NOT NULL,
  covariates BLOB NOT NULL,
  stage_known TEXT,
  coordinator_id INTEGER REFERENCES coordinators(id),
  contact_kind TEXT NOT NULL DEFAULT 'scheduled',
  status TEXT NOT NULL CHECK (status IN ('superseded', 'voided')),
  recorded_at TEXT NOT NULL DEFAULT '',
  recorded_by TEXT NOT NULL DEFAULT '',
  recorded_reason TEXT NOT NULL DEFAULT '',
  ended_at TEXT NOT NULL,
  ended_by TEXT NOT NULL,
  reason TEXT NOT NULL,
  audit_id INTEGER REFERENCES audit_log(id));
CREATE INDEX IF NOT EXISTS contact_versions_case ON contact_versions(case_id, day);
CREATE TRIGGER IF NOT EXISTS contact_versions_no_update BEFORE UPDATE ON contact_versions
BEGIN SELECT RAISE(ABORT, 'earlier contact versions are kept as recorded'); END;
CREATE TRIGGER IF NOT EXISTS contact_versions_no_delete BEFORE DELETE ON contact_versions
BEGIN SELECT RAISE(ABORT, 'earlier contact versions are kept as recorded'); END;
CREATE TABLE IF NOT EXISTS contact_provenance (
  case_id INTEGER NOT NULL REFERENCES cases(id),
  day INTEGER NOT NULL,
  recorded_at TEXT NOT NULL,
  recorded_by TEXT NOT NULL,
  reason TEXT NOT NULL DEFAULT '',
  PRIMARY KEY (case_id, day)) WITHOUT ROWID;
CREATE TABLE IF NOT EXISTS case_closures (
  case_id INTEGER PRIMARY KEY REFERENCES cases(id),
  closed_day INTEGER NOT NULL,
  reason TEXT NOT NULL CHECK (reason IN ('moved', 'discharged', 'died', 'transferred', 'other')),
  closed_at TEXT NOT NULL,
  closed_by TEXT NOT NULL,
  audit_id INTEGER REFERENCES audit_log(id));
"""

#: Digest of every protected record as last recorded in the audit trail (a locator only: the evidence is
#: the trail; see caseview.storage.row_digests). Opening an older workspace records a baseline entry.
ROW_DIGESTS = """
CREATE TABLE row_digests (set_name TEXT NOT NULL, key TEXT NOT NULL, digest TEXT NOT NULL,
  PRIMARY KEY (set_name, key)) WITHOUT ROWID;
"""

#: Whether a contact was scheduled (a planned review) or unscheduled (a fall, a worried call); only
#: models with an ``unscheduled_contacts`` block use it. Rows stored before keep the default.
CONTACT_KIND = """
ALTER TABLE contacts ADD COLUMN contact_kind TEXT NOT NULL DEFAULT 'scheduled'
  CHECK (contact_kind IN ('scheduled', 'unscheduled'));
"""

#: Each case's current contacts packed as column blobs, one row per case (issue 19: the caseload reaches the
#: engine at close to memory speed). Derived from ``contacts`` and rewritten in the same transaction by every
#: write; layout and upkeep in :mod:`caseview.storage.case_packs`. Opening an older workspace builds the packs
#: (``Workspace._migrate``); ``caseview check`` compares them with the rows.
CASE_PACKS = """
CREATE TABLE IF NOT EXISTS case_packs (
  case_id INTEGER PRIMARY KEY REFERENCES cases(id),
  n_contacts INTEGER NOT NULL,
  n_channels INTEGER NOT NULL,
  n_covariates INTEGER NOT NULL,
  contacts BLOB NOT NULL,
  stage_known TEXT);
"""

#: Forward migrations; ``MIGRATIONS[k - 1]`` takes version ``k - 1`` to ``k``.
MIGRATIONS: list[str] = [SCHEMA_V1, ROW_DIGESTS, CONTACT_KIND, CASEWORK_SCHEMA, CASE_PACKS]


def schema_version() -> int:
    """The schema version this caseview writes (the number of migrations)."""
    return len(MIGRATIONS)
