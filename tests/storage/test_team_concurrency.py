"""Many people on one PostgreSQL team workspace at once: nothing lost, nothing doubled, an unbroken chain.

Nine processes start together (a barrier): six coordinators (two share C1) add people and record
contacts, two supervisors acknowledge the same flags in the same order, an analyst publishes model
versions. Afterwards every write that reported success is in the database exactly once, every write
that did not is absent, each reviewed case has ONE review (the other supervisor was told "changed by
X a moment ago" or "already acknowledged"), and ``audit verify`` recomputes the whole chain and every
record.
"""

from __future__ import annotations

import multiprocessing
import re
from collections import Counter

import pytest

import team_workers as workers
from team_workspace import PASSWORD, make_team_workspace

CASES_EACH = 3
COORDINATORS = {1: "C1", 2: "C2", 3: "C3", 4: "C4", 5: "C1", 6: "C2"}
PEOPLE = {**{f"co{k}": ("coordinator", [code]) for k, code in COORDINATORS.items()},
          "sup1": ("supervisor", []), "sup2": ("supervisor", []), "ana": ("analyst", [])}
MODEL_VERSIONS = 3


@pytest.fixture(scope="module")
def team(postgres_cluster, tmp_path_factory):
    return make_team_workspace(postgres_cluster, tmp_path_factory.mktemp("busy"), PEOPLE)


def _run_everyone(team, reviewed):
    ctx = multiprocessing.get_context("spawn")
    queue = ctx.Queue()
    start = ctx.Barrier(len(COORDINATORS) + 3)
    procs = [ctx.Process(target=workers.coordinator, args=(team.url(team.login(f"co{k}")), PASSWORD, k, code,
                                                           CASES_EACH, start, queue))
             for k, code in COORDINATORS.items()]
    procs += [ctx.Process(target=workers.supervisor, args=(team.url(team.login(name)), PASSWORD, reviewed,
                                                           "2026-11-30", start, queue)) for name in ("sup1", "sup2")]
    procs.append(ctx.Process(target=workers.analyst, args=(team.url(team.login("ana")), PASSWORD, MODEL_VERSIONS,
                                                           start, queue)))
    for p in procs:
        p.start()
    expected = sum(2 * CASES_EACH + (code == "C1") for code in COORDINATORS.values()) + 2 * len(reviewed) \
        + MODEL_VERSIONS
    results = []
    while len(results) < expected:
        try:
            results.append(queue.get(timeout=180))
        except Exception:
            break
    for p in procs:
        p.join(60)
    assert all(p.exitcode == 0 for p in procs), [p.exitcode for p in procs]
    assert len(results) == expected
    return results


def test_nine_people_at_once_lose_nothing_double_nothing_and_keep_the_chain(team, capsys):
    reviewed = team.cases_by_coordinator["C1"] + team.cases_by_coordinator["C2"]
    results = _run_everyone(team, reviewed)
    contact_results = [r for r in results if "@" in r[1]]
    review_results = [r for r in results if r[1] in reviewed]
    recorded = [r for r in contact_results if r[2] == "ok"]
    failed = [r for r in contact_results if r[2] != "ok"]

    # the shared new person: exactly one of the two C1 coordinators added them, the other was told
    shared = [r for r in contact_results if r[1].startswith(workers.SHARED_NEW_CASE)]
    assert sorted(r[2] == "ok" for r in shared) == [False, True]
    assert all("already exists" in r[2] for r in shared if r[2] != "ok")
    assert failed == [r for r in shared if r[2] != "ok"]  # nothing else failed

    # reviews: one per case; the other supervisor got a clear one-line reason
    outcomes = Counter(r[1] for r in review_results if r[2] == "ok")
    assert set(outcomes) == set(reviewed) and set(outcomes.values()) == {1}
    refused = [r[2] for r in review_results if r[2] != "ok"]
    assert len(refused) == len(reviewed)
    moment = [m for m in refused if re.search(r"changed by \w+ a moment ago \(now acknowledged\)", m)]
    assert all(m in moment or "already acknowledged" in m for m in refused)

    with team.open(team.owner) as ws:
        con = ws.connection
        stored = Counter(f"{code}@{day}" for code, day in con.execute(
            "SELECT c.case_code, to_char(date '1970-01-01' + k.day::integer, 'YYYY-MM-DD') FROM contacts k "
            "JOIN cases c ON c.id = k.case_id WHERE c.case_code LIKE 'HS-7%'").fetchall())
        assert sorted(stored) == sorted(r[1] for r in recorded) and set(stored.values()) == {1}
        reviews = con.execute("SELECT c.case_code, r.actor FROM reviews r JOIN cases c ON c.id = r.case_id").fetchall()
        assert Counter(code for code, _ in reviews) == Counter({code: 1 for code in reviewed})
        assert {actor for _, actor in reviews} <= {team.login("sup1"), team.login("sup2")}
        entries = ws.audit_entries()
        actions = Counter(e.action for e in entries)
        assert actions["contact.record"] == len(recorded)
        assert actions["review.acknowledged"] == len(reviewed)
        assert actions["model.add"] == 1 + MODEL_VERSIONS
        assert [e.id for e in entries] == list(range(1, len(entries) + 1))
        by_login = Counter(e.actor for e in entries if e.action == "contact.record")
        assert set(by_login) == {team.login(f"co{k}") for k in COORDINATORS}
        verified = ws.audit_verify()
        assert verified.ok and verified.rows_checked, verified.problem
    with capsys.disabled():
        print(f"\nteam concurrency: 9 processes; contacts recorded {len(recorded)}, refused {len(failed)} (a person "
              f"added twice at once); reviews stored {sum(outcomes.values())} of {len(review_results)} attempts "
              f"({len(moment)} 'changed by X a moment ago', {len(refused) - len(moment)} 'already acknowledged'); "
              f"model versions {MODEL_VERSIONS}; audit entries {verified.n_entries}, records checked "
              f"{verified.n_records}, verify ok")
