"""Finding a case or a coordinator by the code a person typed (SQL side of the one lookup rule).

The rule itself (normalise like an imported cell, ignore letter case, suggest a near match) is
:func:`caseview.timeline_io.case_ids.match_case_id`; these functions feed it the stored codes. An
exact hit costs one indexed query; only a miss reads every stored code (to match without regard
to letter case and to find a near match).
"""

from __future__ import annotations


def find_case_code(connection, typed: str, where: str) -> str:
    """The stored case ID that ``typed`` names; InputError (one line) when there is none.

    Parameters
    ----------
    connection : sqlite3.Connection
    typed : str
        A case ID as typed (any letter case, Unicode dashes, full-width digits, invisible characters).
    where : str
        The workspace, for messages.
    """
    from ..timeline_io.case_ids import match_case_id, normalise_case_id
    from .contacts import stored_case_codes

    value, why = normalise_case_id(typed)
    if why is None:
        row = connection.execute("SELECT case_code FROM cases WHERE case_code = ?", (value,)).fetchone()
        if row is not None:
            return row[0]
    return match_case_id(typed, stored_case_codes(connection), where)


def stored_coordinator_codes(connection) -> list:
    """Every coordinator code recorded at a contact or as a case's coordinator, in the order first stored."""
    codes = [code for (code,) in connection.execute("SELECT code FROM coordinators ORDER BY id")]
    codes += [code for (code,) in connection.execute("SELECT DISTINCT coordinator FROM cases WHERE coordinator != ''")]
    return list(dict.fromkeys(codes))


def find_coordinator_code(connection, typed: str, where: str) -> str:
    """The stored coordinator code that ``typed`` names; InputError naming the known ones otherwise."""
    from ..timeline_io.case_ids import match_coordinator_code

    return match_coordinator_code(typed, stored_coordinator_codes(connection), where)
