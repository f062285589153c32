"""The quality and engineer pages in a real browser (Debian's chromium, headless, through Playwright).

A quality engineer logs in, watches the yield page take in a new unit by itself, opens a unit's
history from the list of runs, downloads its signed PDF certificate and verifies it. Screenshots of
each page go to ``tests/web/artifacts/`` (``2x-*.png``). Skipped only when chromium is missing and
``$KNOBLINE_REQUIRE_BROWSER`` is not set, as in ``test_browser.py``.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from fixture.store import open_store
from fixture.web import quality_pages
from fixture.web.app import WebSettings, build_app
from tests.quality_demo import demo_database
from tests.web.pages import PASSWORD, USERS, add_users
from tests.web.browser import chromium, shot
from tests.web.serving import live_server

WAIT_MS = 30_000


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    url = demo_database(tmp_path_factory.mktemp("demo"), units=8)
    add_users(url)
    with live_server(build_app(WebSettings(db_url=url, login_first_delay_s=0.0))) as live:
        live.db_url = url  # type: ignore[attr-defined]
        yield live


@pytest.fixture
def page(server):
    with chromium() as browser:
        context = browser.new_context(viewport={"width": 1280, "height": 900}, accept_downloads=True)
        opened = context.new_page()
        errors: list[str] = []
        opened.on("pageerror", lambda e: errors.append(str(e)))
        opened.errors = errors
        yield opened


def log_in(page, server, role: str) -> None:
    page.goto(server.url + "/login")
    page.fill("#name", USERS[role])
    page.fill("input[name=password]", PASSWORD)
    page.keyboard.press("Enter")
    page.wait_for_selector(".who-name")


def test_the_yield_page_takes_in_a_new_unit_by_itself(page, server, monkeypatch) -> None:
    monkeypatch.setattr(quality_pages, "REFRESH_S", 5)  # the shortest the page's script accepts
    log_in(page, server, "quality")
    page.goto(server.url + "/quality/yield?by=product&period=all")
    before = page.inner_text(".figure-detail >> nth=0")
    shot(page, "20-quality-yield")
    with open_store(server.db_url) as store:  # one more unit judged while the page is open
        last = store.runs(limit=1)[0]
        run_id = store.begin_run("PW22-LIVE-1", {}, last.station, "operator", last.software_version,
                                 last.sequence_sha256, last.design_sha256)
        store.finish_run(run_id, "fail")
    page.wait_for_function("t => document.querySelector('.figure-detail').innerText !== t", arg=before,
                           timeout=WAIT_MS)
    judged = int(before.split(" of ")[1].split(" ")[0])
    assert f" of {judged + 1} units" in page.inner_text(".figure-detail >> nth=0")  # no reload, one unit more
    assert page.errors == []


def test_a_quality_engineer_opens_a_units_history_and_verifies_its_certificate(page, server) -> None:
    log_in(page, server, "quality")
    page.goto(server.url + "/quality/lots")
    shot(page, "21-quality-lots")
    page.goto(server.url + "/quality/runs")
    shot(page, "22-quality-runs")
    page.click("table.grid a[href^='/unit/PW22-0000']")
    page.wait_for_selector(".run")
    assert "Acceptance limits" in page.inner_text("table.readings-table >> nth=0")
    shot(page, "23-quality-unit-history")
    run = page.locator(".run", has=page.locator("a", has_text="Download PDF")).first
    assert run.locator("button", has_text="Verify PDF").count() == 0  # nothing written yet to verify
    with page.expect_download() as download:
        run.locator("a", has_text="Download PDF").click()
    saved = download.value.path()
    assert saved is not None and Path(saved).read_bytes().startswith(b"%PDF-")
    page.reload()
    run = page.locator(".run", has=page.locator("a", has_text="Download PDF")).first
    run.locator("button", has_text="Verify PDF").click()
    page.wait_for_selector(".outcome")
    assert page.inner_text(".outcome-word").strip().endswith("VALID")
    assert "DOES NOT VERIFY" not in page.inner_text("main")
    shot(page, "24-quality-certificate-verified")
    page.goto(server.url + "/engineer")
    page.wait_for_selector("table.limits")
    assert page.evaluate("document.querySelector('figure.plot img').naturalWidth") > 0  # the plot drew
    shot(page, "25-engineer-limits")
    assert page.errors == []
