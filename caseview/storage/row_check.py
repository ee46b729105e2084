"""Check that every stored record matches the audit trail (see :mod:`caseview.storage.row_digests`).

Replaying the ``row_digests`` records of all audit entries gives, for each protected set, the
expected set digest (sum of element digests modulo 2**256) and the expected number of elements.
Both are compared with the digests of the rows actually stored. When a set differs, the first
element that differs is named: its expected digest comes from the newest audit entry that listed it
by key (after the set's last bulk change), else from the ``row_digests`` locator table.
"""

from __future__ import annotations

from dataclasses import dataclass

from .row_digests import CASES, MODULUS, SETS, current_row_digests


@dataclass(frozen=True)
class RowCheck:
    """Result of :func:`check_rows`: ``problem`` names the first record that does not match ('' if all do)."""

    ok: bool
    n_records: int
    problem: str


def _sort_key(key: str):
    return (0, int(key), "") if key.lstrip("-").isdigit() else (1, 0, key)


def _describe(connection, name: str, key: str) -> str:
    if name == CASES:
        return f"case {key} (its record or contacts)"
    if name == "reviews":
        row = connection.execute("SELECT c.case_code FROM reviews r LEFT JOIN cases c ON c.id = r.case_id "
                                 "WHERE r.id = ?", (int(key),)).fetchone()
        return f"review {key} of case {row[0]}" if row and row[0] else f"review {key}"
    if name == "model_versions":
        return f"model version {key}"
    if name == "settings":
        return f"setting {key!r}"
    if name == "score_runs":
        return f"score run {key}"
    if name == "categories":
        return f"category {key} (channel id:code)"
    return f"{name} row {key}"


def replay(entries) -> tuple[dict, dict, dict]:
    """Expected set digests, element counts and per-key hints from ``(entry_id, details)`` pairs."""
    expected = {name: 0 for name in SETS}
    counts = {name: 0 for name in SETS}
    hints: dict = {name: {} for name in SETS}
    for _entry_id, details in entries:
        rows = details.get("row_digests") if isinstance(details, dict) else None
        if not isinstance(rows, dict):
            continue
        for name, record in rows.items():
            if name not in expected or not isinstance(record, dict):
                continue
            expected[name] = (expected[name] + int(record.get("added", "0"), 16)
                              - int(record.get("removed", "0"), 16)) % MODULUS
            counts[name] += int(record.get("count", 0))
            keys = record.get("keys")
            if isinstance(keys, dict):
                hints[name].update(keys)
            else:  # a bulk change: which keys it touched is not listed
                hints[name] = {}
    return expected, counts, hints


def check_rows(connection, entries) -> RowCheck:
    """Compare every protected record with the trail; ``entries`` are ``(entry_id, details)`` in id order."""
    expected, counts, hints = replay(entries)
    n_records = 0
    for name in SETS:
        actual = current_row_digests(connection, name)
        n_records += len(actual)
        total = sum(int.from_bytes(d, "big") for d in actual.values()) % MODULUS
        if total == expected[name] and len(actual) == counts[name]:
            continue
        locator = dict(connection.execute("SELECT key, digest FROM row_digests WHERE set_name = ?",
                                          (name,)).fetchall())
        expectation = {**locator, **hints[name]}
        for key in sorted(set(actual) | set(expectation), key=_sort_key):
            now = actual[key].hex() if key in actual else None
            then = expectation.get(key)
            if now == then:
                continue
            what = _describe(connection, name, key)
            if then is None:
                problem = f"{what} is not in the audit trail (added outside caseview)"
            elif now is None:
                problem = f"{what} is missing: the audit trail records it (deleted outside caseview)"
            else:
                problem = f"{what} does not match the audit trail (changed outside caseview)"
            return RowCheck(False, n_records, problem)
        return RowCheck(False, n_records, f"the {name} records do not match the audit trail, and the changed record "
                                          "could not be located (the row digests were edited as well)")
    return RowCheck(True, n_records, "")
