"""Every test writes knobline's log and its computed-limits cache to its own folder, never the developer's home.

Tests that write results take ``database_url``: a fresh database on each backend (tests/databases.py).
"""

from __future__ import annotations

import pytest

from fixture.log_file import stop_log
from tests.databases import BACKENDS, fresh_database


@pytest.fixture(scope="session", autouse=True)
def _own_cache(tmp_path_factory):
    """The computed-limits cache of fixtures wider than a test (set again per test below)."""
    with pytest.MonkeyPatch.context() as patch:
        patch.setenv("KNOBLINE_CACHE", str(tmp_path_factory.mktemp("session-cache")))
        yield


@pytest.fixture(autouse=True)
def _own_log_file(tmp_path_factory, monkeypatch):
    path = tmp_path_factory.mktemp("log") / "knobline.log"
    monkeypatch.setenv("KNOBLINE_LOG", str(path))
    # computed limits (fixture/runner/limits_cache.py): each test its own cache, never the developer's
    monkeypatch.setenv("KNOBLINE_CACHE", str(tmp_path_factory.mktemp("cache")))
    yield path
    stop_log()


@pytest.fixture(params=BACKENDS)
def database_url(request, tmp_path):
    """A new, empty results database: once as a SQLite file, once on PostgreSQL (see tests/databases.py)."""
    with fresh_database(request.param, tmp_path) as url:
        yield url
