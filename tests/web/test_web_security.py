"""The web application's security, checked through its HTTP interface (Starlette's TestClient).

What is pinned: passwords are stored as argon2id hashes only; log-in needs the right name and
password and slows down after failures; every request that changes something needs the session's
CSRF token; sessions end when idle, when old and at log-out; each role opens only its pages (an
operator never an engineer's), checked on the server; text from outside is shown as text.
"""

from __future__ import annotations

import re

import pytest
from starlette.routing import Route
from starlette.testclient import TestClient

from fixture.store import open_store
from fixture.store.web_users import find_web_user
from fixture.web.auth import LoginThrottle, Role, SessionBook, allowed_roles, safe_next
from fixture.web.passwords import check_password, hash_password
from tests.web.clients import csrf_of, form_token, log_in
from tests.web.serving import USERS, served_app, state_of


@pytest.fixture
def app(tmp_path):
    return served_app(tmp_path)


@pytest.fixture
def client(app):
    with TestClient(app) as c:
        yield c


def test_passwords_are_stored_as_argon2id_hashes_only(tmp_path, app) -> None:
    # RFC 9106 names Argon2id the primary variant; the PHC string format starts "$argon2id$v=19$"
    # (argon2-cffi docs, "Parameters"; PHC string format spec).
    with open_store(str(tmp_path / "results.sqlite")) as store:
        stored = find_web_user(store, USERS["operator"][0])
    assert stored is not None
    assert stored.password_hash.startswith("$argon2id$v=19$")
    assert USERS["operator"][1] not in stored.password_hash
    assert check_password(stored.password_hash, USERS["operator"][1])
    assert not check_password(stored.password_hash, USERS["operator"][1] + "x")
    assert hash_password("same words") != hash_password("same words")  # a fresh salt each time


def test_the_right_password_logs_in_and_a_wrong_one_does_not(client) -> None:
    assert log_in(client, "operator", password="not-the-password").status_code == 401
    assert client.get("/station/1", follow_redirects=False).status_code == 303  # still sent to log in
    answer = log_in(client, "operator")
    assert answer.status_code == 303 and answer.headers["location"] == "/station/1"
    assert client.get("/station/1").status_code == 200


def test_an_unknown_name_is_refused_with_the_same_words_as_a_wrong_password(client) -> None:
    page = client.get("/login")
    unknown = client.post("/login", data={"name": "nobody", "password": "whatever-1", "csrf_token": csrf_of(page.text)})
    wrong = log_in(client, "operator", password="whatever-1")
    assert unknown.status_code == wrong.status_code == 401
    assert "do not match a user" in unknown.text and "do not match a user" in wrong.text


def test_failed_log_ins_slow_the_next_try_doubling_up_to_the_cap() -> None:
    now = [0.0]
    throttle = LoginThrottle(first_delay_s=0.5, max_delay_s=8.0, forget_after_s=900.0, clock=lambda: now[0])
    keys = ("name:olwen", "client:10.0.0.7")
    assert throttle.delay_s(*keys) == 0.0
    delays = []
    for _ in range(7):
        throttle.failed(*keys)
        delays.append(throttle.delay_s(*keys))
    assert delays == [0.5, 1.0, 2.0, 4.0, 8.0, 8.0, 8.0]
    assert throttle.delay_s("name:olwen", "client:10.0.0.8") == 8.0  # the name alone keeps it slow
    now[0] = 901.0
    assert throttle.delay_s(*keys) == 0.0  # forgotten after a quiet quarter-hour
    throttle.failed(*keys)
    throttle.succeeded(*keys)
    assert throttle.delay_s(*keys) == 0.0


def test_every_request_that_changes_something_is_refused_without_the_csrf_token(app, client) -> None:
    log_in(client, "engineer")  # the role that may open the most
    posts = [re.sub(r"\{[^}]+\}", "1", r.path) for r in app.routes
             if isinstance(r, Route) and r.methods and "POST" in r.methods]
    assert {"/login", "/logout", "/station/1/start", "/station/1/stop"} <= set(posts)
    for path in posts:
        for token in (None, "forged-token"):
            data = {"serial": "PW22-000901", "run": "1"} | ({"csrf_token": token} if token else {})
            answer = client.post(path, data=data, follow_redirects=False)
            assert answer.status_code == 403, (path, token, answer.status_code)
    assert state_of(app).desks[next(iter(state_of(app).desks))].current() is None  # nothing was started


def test_a_log_in_form_from_another_session_is_refused(app) -> None:
    with TestClient(app) as first, TestClient(app) as second:
        token = csrf_of(first.get("/login").text)
        second.get("/login")
        name, password = USERS["operator"]
        answer = second.post("/login", data={"name": name, "password": password, "csrf_token": token})
        assert answer.status_code == 403


def test_an_idle_session_ends_and_an_old_one_ends_however_busy() -> None:
    now = [0.0]
    book = SessionBook(idle_s=600.0, absolute_s=3600.0, clock=lambda: now[0])
    session = book.log_in(None, "olwen", Role.OPERATOR)
    now[0] = 599.0
    assert book.get(session.token) is session
    now[0] = 599.0 + 601.0
    assert book.get(session.token) is None  # idle past 10 minutes
    busy = book.log_in(None, "olwen", Role.OPERATOR)
    start = now[0]
    while book.get(busy.token) is not None:
        now[0] += 300.0  # a request every 5 minutes: never idle
    assert 3600.0 < now[0] - start <= 3600.0 + 300.0  # ended by its age, at the first request past an hour


def test_an_expired_session_is_sent_back_to_log_in(app, client) -> None:
    log_in(client, "operator")
    assert client.get("/station/1").status_code == 200
    book = state_of(app).sessions
    later = book.clock() + book.idle_s + 1.0
    book.clock = lambda: later
    answer = client.get("/station/1", follow_redirects=False)
    assert answer.status_code == 303 and answer.headers["location"].startswith("/login")


def test_log_out_ends_the_session_for_every_copy_of_its_cookie(app, client) -> None:
    log_in(client, "operator")
    cookie = client.cookies.get("knobline_session")
    client.post("/logout", data={"csrf_token": form_token(client, "/station/1")})
    with TestClient(app) as copy:
        copy.cookies.set("knobline_session", cookie)
        assert copy.get("/station/1", follow_redirects=False).status_code == 303


def test_log_in_gives_a_new_session_token(client) -> None:
    client.get("/login")
    before = client.cookies.get("knobline_session")
    log_in(client, "operator")
    assert client.cookies.get("knobline_session") not in (None, before)  # no session fixation


@pytest.mark.parametrize(("role", "allowed", "refused"), [
    ("operator", ["/station/1"], ["/engineer", "/quality"]),
    ("quality", ["/quality", "/engineer"], ["/station/1"]),  # quality engineers may read the engineer page
    ("engineer", ["/station/1", "/engineer", "/quality"], []),
])
def test_each_role_opens_only_its_pages(client, role, allowed, refused) -> None:
    log_in(client, role)
    for path in allowed:
        assert client.get(path).status_code == 200, path
    for path in refused:
        answer = client.get(path)
        assert answer.status_code == 403, path
        assert "may not open this page" in answer.text
    page = client.get(allowed[0]).text
    for path in refused:
        assert f'href="{path}"' not in page  # the navigation shows only what the role may open


def test_an_operator_cannot_start_a_run_on_the_engineer_pages_nor_post_there(app, client) -> None:
    log_in(client, "operator")
    token = form_token(client, "/station/1")
    guarded = [r for r in app.routes if isinstance(r, Route) and allowed_roles(r.endpoint) is not None]
    for route in guarded:
        if Role.OPERATOR in allowed_roles(route.endpoint):
            continue
        path = re.sub(r"\{[^}]+\}", "1", route.path)  # every path parameter (station, run, serial, kind)
        for method in sorted(route.methods or ()):
            answer = client.request(method, path, data={"csrf_token": token} if method == "POST" else None)
            assert answer.status_code in (403, 405), (method, path)


def test_every_page_but_log_in_and_out_is_guarded_by_a_role(app) -> None:
    open_to_all = {"/", "/login", "/logout"}  # "/" only redirects: to log in, or to the role's first page
    unguarded = [r.path for r in app.routes if isinstance(r, Route) and r.path not in open_to_all
                 and allowed_roles(r.endpoint) is None]
    assert unguarded == []


def test_nobody_logged_in_is_sent_to_log_in_from_every_page(app) -> None:
    with TestClient(app) as anonymous:
        for path in ("/", "/station/1", "/quality", "/engineer"):
            answer = anonymous.get(path, follow_redirects=False)
            assert answer.status_code == 303 and answer.headers["location"].startswith("/login"), path


def test_after_log_in_only_a_path_on_this_site_is_followed() -> None:
    assert safe_next("/station/1") == "/station/1"
    for hostile in ("//evil.example/", "https://evil.example/", "/\\evil.example", "", None, "station"):
        assert safe_next(hostile) == "/"


def test_a_hostile_serial_is_shown_as_text(client) -> None:
    log_in(client, "operator")
    hostile = '<script>alert("x")</script>'
    answer = client.post("/station/1/start", data={"serial": hostile,
                                                   "csrf_token": form_token(client, "/station/1")})
    assert answer.status_code == 400
    assert hostile not in answer.text
    assert "&lt;script&gt;alert(" in answer.text  # the refusal names it, escaped (HTML 5, 13.1.2.6)


def test_hostile_lots_are_stored_as_typed_and_shown_as_text(tmp_path) -> None:
    app = served_app(tmp_path, traveller=False)
    hostile = '<b>C1</b>"onmouseover="alert(1)'
    with TestClient(app) as client:
        log_in(client, "operator")
        desk = next(iter(state_of(app).desks.values()))
        lots = {f"lot:{p.key}": hostile for p in desk.tester.lot_parts()}
        answer = client.post("/station/1/start", data={"serial": "PW22-000901", **lots,
                                                       "csrf_token": form_token(client, "/station/1")},
                             follow_redirects=False)
        assert answer.status_code == 303
        view = desk.current()
        while view is not None and not view.finished:
            desk.wait_for_events(view, len(view.events), 1.0)
        page = client.get("/station/1").text  # the next unit's form keeps the lots
    assert hostile not in page and 'value="&lt;b&gt;C1&lt;/b&gt;&#34;onmouseover=&#34;alert(1)"' in page
    with open_store(state_of(app).settings.db_url) as store:
        assert set(store.unit("PW22-000901").lots.values()) == {hostile}  # stored exactly as typed


def test_pages_forbid_framing_and_scripts_from_elsewhere(client) -> None:
    answer = client.get("/login")
    assert answer.headers["x-frame-options"] == "DENY"
    assert "default-src 'self'" in answer.headers["content-security-policy"]
    assert "frame-ancestors 'none'" in answer.headers["content-security-policy"]
    cookie = answer.headers["set-cookie"].lower()
    assert "httponly" in cookie and "samesite=strict" in cookie
