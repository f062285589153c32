"""Certificates from the quality pages: written once by the certificate rule, verified as `knobline verify` does."""

from __future__ import annotations

from pathlib import Path

import pytest

from fixture.errors import UserInputError
from fixture.reporting.signing import station_key
from fixture.store import Store, open_store
from fixture.store.audit import audit_trail
from fixture.web.certificate_service import CertificatePlaces, certificate_places, ensure_certificate, \
    verify_run_certificate
from tests.quality_demo import ENGINEERING_SERIAL, FAULTED_SERIAL, demo_database


@pytest.fixture(scope="module")
def demo_url(tmp_path_factory: pytest.TempPathFactory) -> str:
    return demo_database(tmp_path_factory.mktemp("demo"), units=4)


@pytest.fixture
def store(demo_url: str):
    with open_store(demo_url) as opened:
        yield opened


@pytest.fixture
def key_path(tmp_path: Path) -> Path:
    return station_key(tmp_path / "keys" / "station-key.pem", create_missing=True).path


def first_run(store: Store, serial: str) -> int:
    return store.runs(limit=1, serial=serial)[0].run_id


def judged_run(store: Store) -> int:
    return next(s.run_id for s in store.runs(limit=100) if s.verdict in ("pass", "fail") and not s.not_for_shipment)


def test_a_certificate_is_written_once_and_verifies_as_html_and_pdf(store: Store, tmp_path: Path,
                                                                    key_path: Path) -> None:
    run_id = judged_run(store)
    before = len(audit_trail(store))
    files = ensure_certificate(store, run_id, tmp_path / "certs", key_path, issued_by="quality engineer")
    assert files.html.is_file() and files.pdf.is_file() and files.number in files.html.name
    written = files.html.stat().st_mtime_ns
    again = ensure_certificate(store, run_id, tmp_path / "certs", key_path, issued_by="quality engineer")
    assert again == files and files.html.stat().st_mtime_ns == written  # served, not written again
    issues = audit_trail(store)[before:]  # one issue on the audit trail, in the person's name
    assert [(e.subject, e.who) for e in issues] == [(files.number, "quality engineer")]
    for kind in ("html", "pdf"):
        view = verify_run_certificate(store, run_id, tmp_path / "certs", key_path, kind)
        assert view.verified and view.headline.startswith("Valid") and view.first_failure == ""
        assert all(line.passed for line in view.lines) and len(view.lines) >= 8


def test_a_changed_byte_does_not_verify_and_the_failed_check_is_named(store: Store, tmp_path: Path,
                                                                      key_path: Path) -> None:
    run_id = judged_run(store)
    files = ensure_certificate(store, run_id, tmp_path / "certs", key_path, issued_by=None)
    text = files.html.read_text(encoding="utf-8")
    files.html.write_text(text.replace("Frequency", "Frequencies", 1), encoding="utf-8")
    view = verify_run_certificate(store, run_id, tmp_path / "certs", key_path, "html")
    assert not view.verified and view.headline.startswith("Does not verify")
    assert view.first_failure.startswith("Every byte of the file matches the seal")
    assert "changed after signing" in view.first_failure


def test_another_key_does_not_verify(store: Store, tmp_path: Path, key_path: Path) -> None:
    run_id = judged_run(store)
    ensure_certificate(store, run_id, tmp_path / "certs", key_path, issued_by=None)
    other = station_key(tmp_path / "other" / "station-key.pem", create_missing=True).path
    view = verify_run_certificate(store, run_id, tmp_path / "certs", other, "pdf")
    assert not view.verified and not all(line.passed for line in view.lines)


@pytest.mark.parametrize(("serial", "says"), [(FAULTED_SERIAL, "expected a run ended with a verdict on the unit"),
                                              (ENGINEERING_SERIAL, "not for shipment")])
def test_runs_without_a_verdict_or_not_for_shipment_get_no_certificate(store: Store, tmp_path: Path, key_path: Path,
                                                                      serial: str, says: str) -> None:
    with pytest.raises(UserInputError, match=says):
        ensure_certificate(store, first_run(store, serial), tmp_path / "certs", key_path, issued_by=None)
    assert not (tmp_path / "certs").exists() or not any((tmp_path / "certs").glob("*.html"))


def test_verifying_before_a_certificate_exists_says_so(store: Store, tmp_path: Path, key_path: Path) -> None:
    with pytest.raises(UserInputError, match="no certificate written yet"):
        verify_run_certificate(store, judged_run(store), tmp_path / "certs", key_path, "html")
    with pytest.raises(UserInputError, match="expected html or pdf"):
        verify_run_certificate(store, judged_run(store), tmp_path / "certs", key_path, "<svg>")


def test_certificates_go_beside_a_sqlite_database_signed_by_its_key(store: Store, demo_url: str, tmp_path: Path,
                                                                    monkeypatch: pytest.MonkeyPatch) -> None:
    folder = Path(demo_url.removeprefix("sqlite:///")).parent
    places = certificate_places(store)
    assert (places.folder, places.key_path) == (folder / "certificates", folder / "keys" / "station-key.pem")
    # Without a key beside the database: the station key knobline certificate uses ($KNOBLINE_KEY here).
    monkeypatch.setenv("KNOBLINE_KEY", str(tmp_path / "elsewhere" / "station-key.pem"))
    with open_store(f"sqlite:///{tmp_path / 'other.sqlite'}") as other:
        places = certificate_places(other)
    assert places == CertificatePlaces(folder=tmp_path / "certificates",
                                       key_path=tmp_path / "elsewhere" / "station-key.pem")
