"""Test helpers for the web pages: an application on a demo database, users of each role, logging in.

The users and passwords are invented for the tests.
"""

from __future__ import annotations

import re
from contextlib import contextmanager
from collections.abc import Iterator
from typing import Any

from starlette.testclient import TestClient

from fixture.store import open_store
from fixture.store.web_users import add_web_user, find_web_user
from fixture.web.app import WebSettings, build_app
from fixture.web.passwords import hash_password

PASSWORD = "correct horse battery staple"
USERS = {"operator": "olga.operator", "engineer": "emil.engineer", "quality": "quinn.quality"}


def add_users(url: str) -> None:
    """One user of each role (once per database), all with :data:`PASSWORD`."""
    with open_store(url) as store:
        for role, name in USERS.items():
            if find_web_user(store, name) is None:
                add_web_user(store, name, role, hash_password(PASSWORD))


def csrf_token(html: str) -> str:
    """The CSRF token a page's forms carry."""
    found = re.search(r'name="csrf_token" value="([^"]+)"', html)
    assert found, "the page has no form with a CSRF token"
    return found.group(1)


def log_in(client: TestClient, role: str) -> None:
    """Log ``client`` in as the user of ``role``, through the log-in form."""
    token = csrf_token(client.get("/login").text)
    reply = client.post("/login", data={"csrf_token": token, "name": USERS[role], "password": PASSWORD, "next": "/"},
                        follow_redirects=False)
    assert reply.status_code == 303, reply.text


@contextmanager
def clients(url: str, **settings: Any) -> Iterator[dict[str, TestClient]]:
    """One application on ``url`` (with further :class:`WebSettings` ``settings``) and a logged-in client per
    role (plus ``anonymous``)."""
    add_users(url)
    app = build_app(WebSettings(db_url=url, login_first_delay_s=0.0, **settings))
    with TestClient(app) as first:
        out = {"anonymous": TestClient(app)}
        for i, role in enumerate(USERS):
            client = first if i == 0 else TestClient(app)
            log_in(client, role)
            out[role] = client
        yield out
