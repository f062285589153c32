"""Every test writes knobline's log to its own file, never to the developer's home folder.

Tests that write results take ``database_url``: a fresh database on each backend (tests/databases.py).
"""

from __future__ import annotations

import pytest

from fixture.log_file import stop_log
from tests.databases import BACKENDS, fresh_database


@pytest.fixture(autouse=True)
def _own_log_file(tmp_path_factory, monkeypatch):
    path = tmp_path_factory.mktemp("log") / "knobline.log"
    monkeypatch.setenv("KNOBLINE_LOG", str(path))
    yield path
    stop_log()


@pytest.fixture(params=BACKENDS)
def database_url(request, tmp_path):
    """A new, empty results database: once as a SQLite file, once on PostgreSQL (see tests/databases.py)."""
    with fresh_database(request.param, tmp_path) as url:
        yield url
