"""The pages in a real browser: Debian's chromium, headless, driven by Playwright (no browser download).

One server (uvicorn in a thread, the simulated demo station, readings paced at 50 ms so progress
is visible) serves the module; each test logs in in a fresh browser context. Screenshots of every
page go to ``tests/web/artifacts/`` (git ignores it; CI keeps it as a test artifact). Skipped only
when chromium is missing and ``$KNOBLINE_REQUIRE_BROWSER`` is not set (CI sets it: a missing
browser fails there).
"""

from __future__ import annotations

import time

import pytest

from fixture.runner.ownership import hold_station
from fixture.store import open_store
from tests.web.browser import chromium, shot
from tests.web.serving import BAD_SERIAL, GOOD_SERIAL, SECOND_SERIAL, USERS, live_server, served_app, state_of

#: how long a page may take to show what a test waits for (a whole simulated unit is ~2 s at this pace)
WAIT_MS = 60_000


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    app = served_app(tmp_path_factory.mktemp("web"), pace_s=0.05)
    with live_server(app) as live:
        yield live


@pytest.fixture(scope="module")
def browser():
    with chromium() as launched:
        yield launched


@pytest.fixture
def page(browser):
    context = browser.new_context(viewport={"width": 1280, "height": 900})
    opened = context.new_page()
    dialogs: list[str] = []
    opened.on("dialog", lambda d: (dialogs.append(d.message), d.dismiss()))
    opened.dialogs = dialogs
    try:
        yield opened
    finally:
        context.close()


def log_in(page, server, role: str) -> None:
    """Log in with the keyboard alone: the name field has the focus, Tab, password, Enter."""
    name, password = USERS[role]
    page.goto(server.url + "/")
    page.wait_for_selector("#name:focus")
    page.keyboard.type(name)
    page.keyboard.press("Tab")
    page.keyboard.type(password)
    page.keyboard.press("Enter")
    page.wait_for_selector(".who-name")


def scan(page, serial: str) -> None:
    """What a barcode scanner does: type into the focused field and press Enter."""
    page.wait_for_selector("#serial:focus")
    page.keyboard.type(serial)
    page.keyboard.press("Enter")


def verdict(page) -> str:
    page.wait_for_selector("#verdict", timeout=WAIT_MS)
    return page.get_attribute("#verdict", "data-verdict")


def test_an_operator_scans_a_serial_watches_it_pass_then_the_next_fail(page, server) -> None:
    page.goto(server.url + "/login")
    shot(page, "01-login")
    log_in(page, server, "operator")
    assert page.url.endswith("/station/1")
    shot(page, "02-station-ready")
    scan(page, GOOD_SERIAL)
    page.wait_for_selector(".running")
    page.wait_for_selector("#step-list .step-pass", timeout=WAIT_MS)  # a step judged while the run goes on
    assert page.is_visible("#stop")
    shot(page, "03-station-testing")
    assert verdict(page) == "pass"
    assert page.inner_text(".verdict-word").strip().upper() == "PASS"
    assert GOOD_SERIAL in page.inner_text(".verdict-serial")
    shot(page, "04-verdict-pass")
    scan(page, BAD_SERIAL)  # the next unit with no key but the scan: the serial field has the focus
    assert verdict(page) == "fail"
    assert page.inner_text(".verdict-word").strip().upper() == "FAIL"
    assert "frequency at knob A stops" in page.inner_text("#failing-step")
    assert "outside" in page.inner_text("#why")
    shot(page, "05-verdict-fail")


def test_escape_stops_a_run_which_ends_aborted_not_judged(page, server) -> None:
    log_in(page, server, "operator")
    scan(page, SECOND_SERIAL)
    page.wait_for_selector("#step-list .step", timeout=WAIT_MS)
    page.keyboard.press("Escape")
    assert verdict(page) == "aborted"
    assert "not judged" in page.inner_text("#verdict").lower()
    shot(page, "06-verdict-stopped")


def test_a_station_in_use_elsewhere_is_a_station_fault_not_a_unit_fail(page, server) -> None:
    log_in(page, server, "operator")
    state = state_of(server.app)
    station = next(iter(state.desks.values())).tester
    with open_store(state.settings.db_url) as store, hold_station(store, station.name):
        scan(page, GOOD_SERIAL)
        assert verdict(page) == "station-fault"
    text = page.inner_text("#verdict")
    assert "not the unit's fault" in text and "call the test engineer" in text
    assert "in use" in page.inner_text("#why")
    shot(page, "07-verdict-station-fault")


def test_a_run_goes_on_to_its_verdict_when_the_browser_leaves(browser, server) -> None:
    context = browser.new_context()
    leaving = context.new_page()
    log_in(leaving, server, "operator")
    scan(leaving, GOOD_SERIAL)
    leaving.wait_for_selector("#step-list .step", timeout=WAIT_MS)
    context.close()  # the page is gone mid-run
    desk = next(iter(state_of(server.app).desks.values()))
    deadline = time.monotonic() + 60
    while desk.busy():
        assert time.monotonic() < deadline
        time.sleep(0.1)
    run = desk.current()
    assert run is not None and run.end is not None and run.end["verdict"] == "pass"
    with open_store(state_of(server.app).settings.db_url) as store:
        stored = {r.run_id: r.verdict for r in store.runs(limit=50)}
    assert stored[run.end["run_id"]] == "pass"  # decided in the store, not left running


def test_an_operator_is_refused_the_engineer_and_quality_pages(page, server) -> None:
    log_in(page, server, "operator")
    assert page.locator("nav a", has_text="Designs").count() == 0
    answer = page.goto(server.url + "/engineer")
    assert answer.status == 403
    assert "may not open this page" in page.inner_text("main")
    shot(page, "08-operator-refused-engineer-page")
    assert page.goto(server.url + "/quality").status == 403


def test_a_form_with_a_forged_csrf_token_is_refused(page, server) -> None:
    log_in(page, server, "operator")
    page.wait_for_selector("#serial:focus")
    page.eval_on_selector("#scan-form input[name=csrf_token]", "e => e.value = 'forged'")
    scan(page, GOOD_SERIAL)
    page.wait_for_selector(".problem")
    assert "did not come from knobline" in page.inner_text("main")
    shot(page, "09-csrf-refused")


def test_an_expired_session_goes_back_to_log_in(page, server) -> None:
    log_in(page, server, "operator")
    book = state_of(server.app).sessions
    real = book.clock
    try:
        ahead = real() + book.idle_s + 1.0
        book.clock = lambda: ahead
        page.goto(server.url + "/station/1")
        assert "/login" in page.url
        shot(page, "10-session-expired-login")
    finally:
        book.clock = real


def test_a_hostile_serial_is_shown_as_text_and_never_run(page, server) -> None:
    log_in(page, server, "operator")
    hostile = '<img src=x onerror="alert(1)"><script>alert(2)</script>'
    scan(page, hostile)
    page.wait_for_selector("#problem")
    assert hostile in page.inner_text("#problem")  # the very characters, shown
    assert page.locator("main img").count() == 0 and page.dialogs == []
    shot(page, "11-hostile-serial-as-text")


def test_every_page_a_role_may_open_is_drawn(browser, server) -> None:
    for role, paths in (("engineer", ["/engineer", "/quality"]), ("quality", ["/quality"])):
        context = browser.new_context(viewport={"width": 1280, "height": 900})
        page = context.new_page()
        log_in(page, server, role)
        for path in paths:
            assert page.goto(server.url + path).status == 200
            shot(page, f"12-{role}{path.replace('/', '-')}")
        context.close()
