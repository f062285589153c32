"""A knobline web application on the simulated demo station, for the web tests.

``served_app`` builds it on a fresh SQLite database with one user per role (passwords known to the
test), the demo station and sequence, lots from the shipped demo traveller, and one serial planted
with a wrong part so a test can watch a unit fail. ``LiveServer`` runs it under uvicorn in a thread
on a free port of 127.0.0.1 for the browser.
"""

from __future__ import annotations

import functools
import shutil
import socket
import tempfile
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, replace
from pathlib import Path

import uvicorn
from starlette.applications import Starlette

from fixture._data import data_dir, resolve_shipped, resolve_station
from fixture.commands._planting import Planted, parse_defect
from fixture.commands._web_station import WebStation
from fixture.files.sequence_file import Sequence, load_sequence
from fixture.files.station_config import StationConfig
from fixture.files.station_file import load_station
from fixture.runner.plan import compile_plan
from fixture.runner.plan_points import TestPlan
from fixture.store import open_store
from fixture.store.web_users import add_web_user
from fixture.web.app import WebSettings, WebState, build_app
from fixture.web.passwords import hash_password

#: the shipped demo traveller's serials (sequences/demo-traveller.csv)
GOOD_SERIAL = "PW22-000901"
SECOND_SERIAL = "PW22-000902"
#: planted with the integrator resistor from the wrong reel (x10): fails its frequency readings
BAD_SERIAL = "PW22-000903"
USERS = {"operator": ("olwen.test", "operator-pass-1"), "engineer": ("eli.test", "engineer-pass-1"),
         "quality": ("quinn.test", "quality-pass-1")}


@functools.lru_cache(maxsize=1)
def _demo_files() -> tuple[StationConfig, Sequence, TestPlan]:
    config = load_station(resolve_station(None))
    seq = load_sequence(resolve_shipped(None, "demo-sequence.toml"), station=config,
                        search_dirs=(data_dir("sequences"),))
    return config, seq, compile_plan(seq, seq.design, config)


def demo_station(db_url: str, *, traveller: bool = True) -> WebStation:
    config, seq, plan = _demo_files()
    wrong = Planted(defects=(parse_defect(seq.design, "wrong-part"),), words=("wrong part",))
    return WebStation(config, seq, plan, db_url,
                      data_dir("sequences") / "demo-traveller.csv" if traveller else None,
                      planted_for=lambda serial: wrong if serial == BAD_SERIAL else None)


_TEMPLATE: dict[str, Path] = {}


def _fresh_database(tmp_path: Path) -> str:
    """A copy of one migrated database with :data:`USERS` added: argon2id takes about half a second a hash
    on this machine, so the users are hashed once per test session, not per test."""
    if "db" not in _TEMPLATE:
        folder = Path(tempfile.mkdtemp(prefix="knobline-web-template-"))
        with open_store(str(folder / "results.sqlite")) as store:
            for role, (name, password) in USERS.items():
                add_web_user(store, name, role, hash_password(password))
        _TEMPLATE["db"] = folder / "results.sqlite"
    target = tmp_path / "results.sqlite"
    shutil.copyfile(_TEMPLATE["db"], target)
    return str(target)


def served_app(tmp_path: Path, *, traveller: bool = True, **settings: object) -> Starlette:
    """The application on a fresh database in ``tmp_path`` with :data:`USERS` added (lots from the demo
    traveller, or typed on the page without it)."""
    db_url = _fresh_database(tmp_path)
    base = WebSettings(db_url=db_url, stations=[demo_station(db_url, traveller=traveller)], login_first_delay_s=0.05,
                       login_max_delay_s=0.2)
    return build_app(replace(base, **settings))  # type: ignore[arg-type]


def state_of(app: Starlette) -> WebState:
    return app.state.web  # type: ignore[no-any-return]


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


@dataclass
class LiveServer:
    app: Starlette
    port: int

    @property
    def url(self) -> str:
        return f"http://127.0.0.1:{self.port}"


@contextmanager
def live_server(app: Starlette) -> Iterator[LiveServer]:
    """``app`` under uvicorn in a thread until the block ends."""
    port = free_port()
    server = uvicorn.Server(uvicorn.Config(app, host="127.0.0.1", port=port, log_level="warning",
                                           lifespan="on", timeout_graceful_shutdown=5))
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    deadline = time.monotonic() + 30
    while not server.started:
        if time.monotonic() > deadline or not thread.is_alive():
            raise RuntimeError("uvicorn did not start")
        time.sleep(0.02)
    try:
        yield LiveServer(app, port)
    finally:
        server.should_exit = True
        thread.join(30)
