"""The quality and engineer pages through HTTP: roles, yields, a unit's history, certificates, errors in words."""

from __future__ import annotations

import datetime as dt
import hashlib
import html
from pathlib import Path

import pytest
from starlette.testclient import TestClient

from fixture.analytics.period import parse_period
from fixture.reporting.unit_history_view import history_view
from fixture.store import open_store
from fixture.reporting.person_keys import load_person_private_key
from fixture.reporting.release_signature import sign_registration
from fixture.store.programs import programs, register_program
from tests.programs import DEMO_FILES, ENGINEER, add_people
from tests.quality_demo import FAULTED_SERIAL, demo_database
from tests.web.pages import clients, csrf_token

HOSTILE = "<script>alert('x')</script>"
QUALITY_PAGES = ["/quality/yield", "/quality/lots", "/quality/runs"]


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> tuple[str, Path]:
    folder = tmp_path_factory.mktemp("demo")
    url = demo_database(folder, units=10)
    with open_store(url) as store:  # a unit whose serial and lot are markup, as a hostile tool could store
        last = store.runs(limit=1)[0]
        run_id = store.begin_run(HOSTILE, {"c_integrator": HOSTILE}, last.station, HOSTILE, last.software_version,
                                 last.sequence_sha256, last.design_sha256)
        store.finish_run(run_id, "fail")
    draft = folder / "edited" / "demo-sequence.toml"  # an edited sequence, registered and not yet released
    draft.parent.mkdir()
    draft.write_text(DEMO_FILES["sequence"].read_text(encoding="utf-8") + "\n# edited for the test\n",
                     encoding="utf-8")
    with open_store(url) as store:
        engineer_key, _ = add_people(store, folder / "people")
        raw = draft.read_bytes()
        sha = hashlib.sha256(raw).hexdigest()
        register_program(store, "sequence", draft.name, sha, raw.decode("utf-8"),
                         sign_registration(load_person_private_key(engineer_key), "sequence", draft.name, sha,
                                           ENGINEER))
    return url, folder


@pytest.fixture(scope="module")
def web(demo: tuple[str, Path]):
    with clients(demo[0]) as by_role:
        yield by_role


def a_judged_run(url: str) -> tuple[int, str]:
    with open_store(url) as store:
        s = next(s for s in store.runs(limit=100) if s.verdict in ("pass", "fail") and s.serial.startswith("PW22-0"))
        return s.run_id, s.serial


@pytest.mark.parametrize("path", [*QUALITY_PAGES, "/engineer", "/unit/PW22-000001", "/run/1/certificate.pdf"])
def test_operators_may_not_open_quality_or_engineer_pages(web: dict[str, TestClient], path: str) -> None:
    reply = web["operator"].get(path)
    assert reply.status_code == 403 and "may not open this page" in reply.text
    anonymous = web["anonymous"].get(path, follow_redirects=False)
    assert anonymous.status_code == 303 and anonymous.headers["location"].startswith("/login?next=")


@pytest.mark.parametrize("role", ["quality", "engineer"])
@pytest.mark.parametrize("path", [*QUALITY_PAGES, "/engineer"])
def test_quality_and_test_engineers_open_the_pages(web: dict[str, TestClient], role: str, path: str) -> None:
    reply = web[role].get(path)
    assert reply.status_code == 200, reply.text


def test_the_yield_page_shows_the_hand_count_and_refreshes_itself(web: dict[str, TestClient], demo) -> None:
    # Counted run by run: a unit's first judged (pass or fail) run decides its first-pass yield (README "yield").
    firsts: dict[str, str] = {}
    with open_store(demo[0]) as store:
        for s in sorted(store.runs(limit=1000), key=lambda s: s.run_id):
            if s.verdict in ("pass", "fail"):
                firsts.setdefault(s.serial, s.verdict)
    passed = sum(v == "pass" for v in firsts.values())
    page = web["quality"].get("/quality/yield?by=station&period=all").text
    assert f"{passed} of {len(firsts)} units" in page
    assert 'data-refresh-s="30"' in page and '<script src="/static/quality.js"></script>' in page
    script = web["quality"].get("/static/quality.js")
    assert script.status_code == 200 and "setInterval" in script.text


@pytest.mark.parametrize(("query", "says"), [
    ("by=operator", "Group yields by: expected one of"),
    ("period=yesterday", "period: expected all, today, Nd"),
    ("period=2026-02-30", "where a date YYYY-MM-DD belongs"),
    (f"period={HOSTILE}", "period: expected"),
])
def test_bad_parameters_are_an_error_page_in_words(web: dict[str, TestClient], query: str, says: str) -> None:
    reply = web["quality"].get(f"/quality/yield?{query}")
    assert reply.status_code == 400
    assert html.escape(says, quote=True) in reply.text or says in html.unescape(reply.text)
    assert "Traceback" not in reply.text and "<script>alert" not in reply.text


def test_a_units_history_shows_every_reading_with_its_limits_in_words(web: dict[str, TestClient], demo) -> None:
    run_id, serial = a_judged_run(demo[0])
    with open_store(demo[0]) as store:
        view = history_view(store, store.unit(serial))
    page = html.unescape(web["quality"].get(f"/unit/{serial}").text)
    for run in view.runs:
        assert f"Run {run.run_id}" in page
        for step in run.steps:
            assert f"{step.number}. {step.name}" in page
            for r in step.readings:
                assert r.what in page and r.reading in page and r.acceptance in page and r.tolerance in page
    assert "C1 integrator capacitor" in page and "c_integrator" not in page
    assert f'href="/run/{run_id}/certificate.pdf"' in page


def test_hostile_serials_and_lots_show_as_text(web: dict[str, TestClient]) -> None:
    runs = web["quality"].get("/quality/runs").text
    assert "&lt;script&gt;" in runs and "<script>alert" not in runs
    page = web["quality"].get("/unit/%3Cscript%3Ealert('x')%3C%2Fscript%3E")
    assert page.status_code == 200
    assert page.text.count("&lt;script&gt;alert") >= 3  # serial, lot and operator, all as text
    assert "<script>alert" not in page.text


def test_unknown_serials_and_runs_are_a_page_in_words(web: dict[str, TestClient]) -> None:
    reply = web["quality"].get("/unit/NO-SUCH-UNIT")
    assert reply.status_code == 404 and "No unit with serial NO-SUCH-UNIT has recorded runs" in reply.text
    assert web["quality"].get("/run/999999/certificate.html").status_code == 404
    bad = web["quality"].get("/unit/%E2%80%AEevil")  # a right-to-left override in a serial
    assert bad.status_code == 400 and "U+202E" in bad.text


def test_a_certificate_downloads_and_verifies_then_a_changed_file_does_not(web: dict[str, TestClient], demo) -> None:
    run_id, serial = a_judged_run(demo[0])
    client = web["quality"]
    verify_form = f'action="/run/{run_id}/verify"'
    assert verify_form not in client.get(f"/unit/{serial}").text  # nothing written yet to verify
    pdf = client.get(f"/run/{run_id}/certificate.pdf")
    assert pdf.status_code == 200 and pdf.content.startswith(b"%PDF-")
    assert pdf.headers["content-type"] == "application/pdf" and "attachment" in pdf.headers["content-disposition"]
    page = client.get(f"/run/{run_id}/certificate.html")
    assert b'id="knobline-record"' in page.content or b"knobline" in page.content
    unit_page = client.get(f"/unit/{serial}").text
    assert verify_form in unit_page
    token = csrf_token(unit_page)
    for kind in ("html", "pdf"):
        result = client.post(f"/run/{run_id}/verify", data={"csrf_token": token, "kind": kind})
        assert result.status_code == 200 and "VALID" in result.text and "DOES NOT VERIFY" not in result.text
    written = demo[1] / "certificates"
    certificate = next(written.glob(f"*-{run_id:06d}-*.html"))
    certificate.write_bytes(certificate.read_bytes().replace(b"Frequency", b"Frequencies", 1))
    result = client.post(f"/run/{run_id}/verify", data={"csrf_token": token, "kind": "html"})
    assert "DOES NOT VERIFY" in result.text
    assert "First failed check: Every byte of the file matches the seal" in result.text
    certificate.unlink()  # the next download writes it again, as signed


def test_certificates_go_to_the_folder_and_key_serve_was_given(demo, tmp_path: Path) -> None:
    from fixture.reporting.signing import station_key
    from fixture.web.certificate_service import verify_run_certificate

    folder, key = tmp_path / "line-certificates", tmp_path / "keys" / "line-key.pem"
    station_key(key, create_missing=True)
    run_id, _ = a_judged_run(demo[0])
    with clients(demo[0], certificates_dir=folder, key_path=key) as web:
        assert web["quality"].get(f"/run/{run_id}/certificate.pdf").status_code == 200
    assert len(list(folder.glob(f"*-{run_id:06d}-*.pdf"))) == 1
    with open_store(demo[0]) as store:
        assert verify_run_certificate(store, run_id, folder, key, "pdf").verified
        # not the key beside the demo database: the certificate was signed by the one given
        assert not verify_run_certificate(store, run_id, folder, demo[1] / "keys" / "station-key.pem", "pdf").verified


def test_verify_without_the_forms_token_is_refused(web: dict[str, TestClient], demo) -> None:
    run_id, _ = a_judged_run(demo[0])
    reply = web["quality"].post(f"/run/{run_id}/verify", data={"kind": "html"})
    assert reply.status_code == 403


def test_a_run_without_a_verdict_gets_no_certificate(web: dict[str, TestClient], demo) -> None:
    with open_store(demo[0]) as store:
        run_id = store.runs(limit=1, serial=FAULTED_SERIAL)[0].run_id
    reply = web["quality"].get(f"/run/{run_id}/certificate.pdf")
    assert reply.status_code == 400 and "verdict on the unit" in reply.text
    page = web["quality"].get(f"/unit/{FAULTED_SERIAL}").text
    assert "No certificate: the run ended station fault" in page


def test_lot_findings_name_the_planted_lot(web: dict[str, TestClient]) -> None:
    # The demo plants lot C1-2611A of C1 -8 % off nominal (README "Quick start").
    page = web["quality"].get("/quality/lots").text
    assert "C1-2611A" in page and "C1 integrator capacitor" in page


def test_the_batch_report_downloads(web: dict[str, TestClient]) -> None:
    reply = web["quality"].get("/quality/batch-report")
    assert reply.status_code == 200 and "attachment" in reply.headers["content-disposition"]
    assert "Batch and lot report" in reply.text


def test_the_engineer_page_shows_limits_the_rule_and_released_programs(web: dict[str, TestClient], demo) -> None:
    page = html.unescape(web["engineer"].get("/engineer").text)
    assert "Decision rule" in page and "ILAC-G8" in page and "guarded acceptance" in page
    assert "Frequency" in page and "A 0 %, B 50 %" in page and "frequency_hz" not in page
    with open_store(demo[0]) as store:
        states = [p.state for p in programs(store)]
        sequence_released = any(p.kind == "sequence" and p.state == "released" for p in programs(store))
    assert f"Released ({states.count('released')})" in page and "Waiting for approval (1)" in page
    assert f"{ENGINEER} on " in page and "waiting for a second person's approval" in page
    assert sequence_released and "tolerance limits sealed (computed by knobline " in page  # README "Sealed limits"
    plot = web["engineer"].get("/engineer/limits.svg")
    assert plot.status_code == 200 and plot.headers["content-type"].startswith("image/svg+xml")
    assert b"<svg" in plot.content[:2000]
    for query, says in (("method=psychic", "method: expected one of"), ("design=abc", "expected a design number"),
                        ("design=99999", "found no design number 99999")):
        reply = web["engineer"].get(f"/engineer?{query}")
        assert reply.status_code == 400 and says in html.unescape(reply.text)


def test_a_period_in_the_past_shows_no_units(web: dict[str, TestClient]) -> None:
    page = web["quality"].get("/quality/yield?by=lot&period=2001-01-01..2001-01-31").text
    assert "No unit was judged in this period." in page
    assert parse_period("2001-01-01..2001-01-31", dt.datetime.now(dt.UTC)).words in html.unescape(page)
