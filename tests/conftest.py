"""Every test writes knobline's log to its own file, never to the developer's home folder."""

from __future__ import annotations

import pytest

from fixture.log_file import stop_log


@pytest.fixture(autouse=True)
def _own_log_file(tmp_path_factory, monkeypatch):
    path = tmp_path_factory.mktemp("log") / "knobline.log"
    monkeypatch.setenv("KNOBLINE_LOG", str(path))
    yield path
    stop_log()
