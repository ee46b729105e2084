"""Which text names a PostgreSQL workspace, and what a URL may carry (no server needed).

URL forms: PostgreSQL documentation, "Connection URIs" (libpq, section 34.1.1).
"""

from __future__ import annotations

from pathlib import Path

import pytest


def test_urls_and_paths_are_told_apart():
    from caseview.storage.location import DatabaseURL, workspace_location

    assert isinstance(workspace_location("team.cvw"), Path)
    assert isinstance(workspace_location("/data/postgresql/team.cvw"), Path)  # a folder named postgresql
    url = workspace_location("postgresql://ana@db.example.org:5433/casework")
    assert isinstance(url, DatabaseURL)
    assert (url.user, url.host, url.port, url.dbname, url.name) == ("ana", "db.example.org", 5433, "casework", "casework")
    assert url.connection_parameters() == {"dbname": "casework", "user": "ana", "host": "db.example.org", "port": 5433}
    assert str(url) == "postgresql://ana@db.example.org:5433/casework"


def test_socket_form_keeps_its_parameters():
    from caseview.storage.location import workspace_location

    url = workspace_location("postgresql:///casework?host=/run/postgresql&sslmode=disable")
    assert url.host is None
    assert url.connection_parameters() == {"dbname": "casework", "host": "/run/postgresql", "sslmode": "disable"}
    assert workspace_location("postgres:///other").dbname == "other"  # the short scheme libpq accepts too


@pytest.mark.parametrize("text, message", [
    ("postgresql://ana:pw@db/casework", "password in the URL is refused"),
    ("postgresql:///casework?password=pw", "password in the URL is refused"),
    ("postgresql://db", "no database name"),
    ("postgresql://db/a/b", "no database name"),
    ("postgresql:///casework?options=-c%20role%3Dadmin", "unknown URL parameter 'options'"),
])
def test_refused_urls_say_why_without_showing_a_password(text, message):
    from caseview.errors import WorkspaceError
    from caseview.storage.location import workspace_location

    with pytest.raises(WorkspaceError, match=message) as caught:
        workspace_location(text)
    assert "pw@" not in str(caught.value) and "password=pw" not in str(caught.value)
