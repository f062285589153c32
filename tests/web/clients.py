"""Log-in and form helpers for Starlette's TestClient (httpx) against the web application."""

from __future__ import annotations

import re

from starlette.testclient import TestClient

from tests.web.serving import USERS

_CSRF = re.compile(r'name="csrf_token" value="([^"]+)"')


def csrf_of(html: str) -> str:
    found = _CSRF.search(html)
    assert found is not None, "no CSRF field on the page"
    return found.group(1)


def log_in(client: TestClient, role: str, *, password: str | None = None):
    """Log in as the test user of ``role``; returns the response to the log-in POST (not followed)."""
    name, right = USERS[role]
    page = client.get("/login")
    return client.post("/login", data={"name": name, "password": password if password is not None else right,
                                       "csrf_token": csrf_of(page.text), "next": "/"}, follow_redirects=False)


def form_token(client: TestClient, path: str) -> str:
    """The CSRF token on the page at ``path`` (the logged-in session's)."""
    return csrf_of(client.get(path).text)
