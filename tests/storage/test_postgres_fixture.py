"""The throwaway-cluster fixture: skips without a server, FAILS without one when CI requires it."""

from __future__ import annotations

import pytest
from _pytest.outcomes import Failed, Skipped

from postgres_cluster import PostgresUnavailable, start_for_tests


def _no_server():
    raise PostgresUnavailable("no PostgreSQL server programs (initdb) found")


def test_missing_server_skips_locally(monkeypatch):
    monkeypatch.delenv("CASEVIEW_REQUIRE_POSTGRES", raising=False)
    with pytest.raises(Skipped, match="no PostgreSQL server"):
        start_for_tests(_no_server)


def test_missing_server_fails_when_required(monkeypatch):
    monkeypatch.setenv("CASEVIEW_REQUIRE_POSTGRES", "1")
    with pytest.raises(Failed, match="CASEVIEW_REQUIRE_POSTGRES=1"):
        start_for_tests(_no_server)


def test_the_session_cluster_is_a_real_server_on_a_socket(postgres_cluster):
    with postgres_cluster.admin() as con:
        version = con.execute("SHOW server_version").fetchone()[0]
        socket_dirs = con.execute("SHOW unix_socket_directories").fetchone()[0]
        listen = con.execute("SHOW listen_addresses").fetchone()[0]
    assert int(version.split(".")[0]) >= 12
    assert socket_dirs == str(postgres_cluster.socket_dir) and listen == ""
