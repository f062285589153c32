"""The signed PDF certificate, checked with outside validators: poppler (pdfsig, pdftotext), pyHanko, pypdf.

The station key here is made with cryptography directly (ECDSA P-256, a
self-signed X.509 v3 certificate), not with knobline's key code, so the PDF
signature is checked against a key knobline did not make.
"""

from __future__ import annotations

import datetime as dt
import html as html_lib
import io
import os
import re
import shutil
import subprocess
from pathlib import Path

import pytest
from asn1crypto import x509 as asn1_x509
from click.testing import CliRunner
from cryptography import x509
from cryptography.hazmat.primitives import hashes, serialization
from cryptography.hazmat.primitives.asymmetric import ec
from cryptography.x509.oid import NameOID
from pyhanko.pdf_utils import generic
from pyhanko.pdf_utils.incremental_writer import IncrementalPdfFileWriter
from pyhanko.pdf_utils.reader import PdfFileReader
from pyhanko.sign.validation import validate_pdf_signature
from pyhanko.sign.validation.status import SignatureCoverageLevel
from pyhanko_certvalidator import ValidationContext

from fixture.cli import main
from fixture.commands.certificate import CertificateFiles, write_certificate
from fixture.reporting.certificate_file import read_certificate
from fixture.reporting.certificate_pdf import MARGIN_PT, certificate_pdf
from fixture.reporting.certificate_view import CertificateView, certificate_view
from fixture.reporting.pdf_check import MISMATCH, OK, verify_pdf_certificate
from fixture.reporting.pdf_signature import sign_certificate_pdf
from fixture.reporting.render import seal_facts
from fixture.reporting.signing import StationKey, certificate_pem, fingerprint, public_certificate_name
from fixture.safety import SAFETY_CAUTION
from fixture.store import open_store
from tests.reporting.conftest import HOSTILE

A4_PT = (595.276, 841.89)  # ISO 216: 210 mm x 297 mm at 72 pt per 25.4 mm
MIN_MARGIN_PT = 15 / 25.4 * 72  # the brief's floor: 15 mm


def _make_key(tmp_path: Path, name: str) -> StationKey:
    # RFC 5280 self-signed v3 certificate; digitalSignature + nonRepudiation as for a signing certificate.
    private_key = ec.generate_private_key(ec.SECP256R1())
    subject = x509.Name([x509.NameAttribute(NameOID.COMMON_NAME, name)])
    start = dt.datetime(2026, 1, 1, tzinfo=dt.UTC)
    certificate = (
        x509.CertificateBuilder().subject_name(subject).issuer_name(subject).public_key(private_key.public_key())
        .serial_number(x509.random_serial_number()).not_valid_before(start)
        .not_valid_after(start + dt.timedelta(days=3650))
        .add_extension(x509.BasicConstraints(ca=False, path_length=None), critical=True)
        .add_extension(x509.KeyUsage(digital_signature=True, content_commitment=True, key_encipherment=False,
                                     data_encipherment=False, key_agreement=False, key_cert_sign=False,
                                     crl_sign=False, encipher_only=False, decipher_only=False), critical=True)
        .sign(private_key, hashes.SHA256()))
    return StationKey(private_key=private_key, certificate=certificate, path=tmp_path / f"{name}.pem", created=True)


@pytest.fixture
def own_key(tmp_path: Path) -> StationKey:
    return _make_key(tmp_path, "test station key")


@pytest.fixture
def other_key(tmp_path: Path) -> StationKey:
    return _make_key(tmp_path, "another station key")


def _issue(db_url: str, run_id: int, out: Path, key: StationKey) -> CertificateFiles:
    with open_store(db_url) as store:
        return write_certificate(store, run_id, out, key, pdf=True)


@pytest.fixture
def failed(db_url: str, tmp_path: Path, own_key: StationKey) -> CertificateFiles:
    """Run 1 (PW22-000001, failed) issued as HTML and signed PDF."""
    return _issue(db_url, 1, tmp_path / "out", own_key)


def _pdf(files: CertificateFiles) -> bytes:
    assert files.pdf is not None
    return files.pdf.read_bytes()


def _view_of(files: CertificateFiles) -> tuple[CertificateView, dict]:
    embedded = read_certificate(files.html.read_bytes().decode("utf-8"))
    seal = embedded.seal
    view = certificate_view(embedded.record, seal_facts(seal["record_sha256"], seal["fingerprint"]),
                            safety_caution=SAFETY_CAUTION, issuer=seal["issuer"])
    return view, embedded.record


def _tool(name: str) -> str:
    path = shutil.which(name)
    if path is None:
        if os.environ.get("CI") == "true":  # CI installs poppler-utils (.ci/run): missing there is a failure
            pytest.fail(f"{name} (poppler-utils) is missing under CI")
        pytest.skip(f"{name} (poppler-utils) is not installed")
    return path


def _pdfsig(path: Path) -> str:
    run = subprocess.run([_tool("pdfsig"), str(path)], capture_output=True, text=True, timeout=60)
    return run.stdout + run.stderr


def _pyhanko_status(pdf: bytes, certificate: x509.Certificate):
    reader = PdfFileReader(io.BytesIO(pdf), strict=False)
    assert len(reader.embedded_signatures) == 1
    root = asn1_x509.Certificate.load(certificate.public_bytes(serialization.Encoding.DER))
    return validate_pdf_signature(reader.embedded_signatures[0],
                                  signer_validation_context=ValidationContext(trust_roots=[root]))


def _flip_byte_in_first_page_content(pdf: bytes) -> bytes:
    pypdf = pytest.importorskip("pypdf")
    contents = pypdf.PdfReader(io.BytesIO(pdf)).pages[0].get("/Contents")
    number = contents.idnum  # reportlab writes one content stream per page, by reference
    start = re.search(rb"(?<![0-9])%d 0 obj" % number, pdf).start()
    at = pdf.index(b"stream", start) + len(b"stream\r\n") + 40
    return pdf[:at] + bytes([pdf[at] ^ 0x01]) + pdf[at + 1:]


def test_pdfsig_finds_a_valid_signature_over_the_whole_document(failed: CertificateFiles) -> None:
    # poppler pdfsig(1) output: "Signature Validation: Signature is Valid." and "Total document signed".
    out = _pdfsig(failed.pdf)
    assert "Signature #1:" in out and "Signature #2:" not in out
    assert "Signature Validation: Signature is Valid." in out
    assert "Total document signed" in out
    assert "Signature Type: ETSI.CAdES.detached" in out  # PAdES subfilter, ETSI EN 319 142-1 section 5.3


def test_pyhanko_validator_accepts_the_signature_chained_to_the_station_certificate(
        failed: CertificateFiles, own_key: StationKey) -> None:
    status = _pyhanko_status(_pdf(failed), own_key.certificate)
    assert status.intact and status.valid and status.trusted
    assert status.coverage == SignatureCoverageLevel.ENTIRE_FILE
    assert status.signing_cert.dump() == own_key.certificate.public_bytes(serialization.Encoding.DER)


def test_verify_pdf_certificate_passes_an_untouched_pdf(failed: CertificateFiles, own_key: StationKey) -> None:
    check = verify_pdf_certificate(_pdf(failed), own_key.certificate, safety_caution=SAFETY_CAUTION)
    assert check.ok, check.findings
    assert [c for c, _, _ in check.findings] == ["PDF signature", "signer", "signature intact", "whole file signed",
                                                 "attached certificate", "pages"]
    # Trusting only the public key (a verifier holding the key, not the certificate) gives the same answer.
    assert verify_pdf_certificate(_pdf(failed), own_key.private_key.public_key(), safety_caution=SAFETY_CAUTION).ok


def test_one_byte_changed_in_the_page_content_is_reported_by_pdfsig_pyhanko_and_verify(
        failed: CertificateFiles, own_key: StationKey, tmp_path: Path) -> None:
    tampered = _flip_byte_in_first_page_content(_pdf(failed))
    path = tmp_path / "tampered.pdf"
    path.write_bytes(tampered)
    assert "Signature Validation: Signature is Valid." not in _pdfsig(path)  # poppler reports it invalid
    status = _pyhanko_status(tampered, own_key.certificate)
    assert not status.intact
    check = verify_pdf_certificate(tampered, own_key.certificate, safety_caution=SAFETY_CAUTION)
    assert ("signature intact", MISMATCH) in [(c, s) for c, s, _ in check.findings]
    assert ("pages", MISMATCH) in [(c, s) for c, s, _ in check.findings]


def test_pdf_text_holds_serial_verdict_and_every_reading_with_its_uncertainty_limits_and_verdict(
        failed: CertificateFiles) -> None:
    # pdftotext -raw keeps the content stream's order: each table cell's lines in a row, row by row.
    run = subprocess.run([_tool("pdftotext"), "-raw", str(failed.pdf), "-"], capture_output=True, text=True,
                         timeout=60, check=True)
    text = " ".join(run.stdout.split())
    view, record = _view_of(failed)
    assert record["unit"]["serial"] == "PW22-000001" and view.verdict == "FAIL"
    assert f"Overall verdict {view.verdict}" in text
    assert f"Serial number {record['unit']['serial']}" in text
    rows = [row for step in view.steps for row in step.rows]
    assert len(rows) == 3
    for row in rows:
        cells = (row.measurement, row.setting, row.reading, row.uncertainty, row.acceptance, row.tolerance, row.verdict)
        assert " ".join(" ".join(c.split()) for c in cells) in text
    assert "≤" in text  # a one-sided limit: the sign survives font embedding and text extraction
    assert " ".join(SAFETY_CAUTION.split()) in text


def test_every_page_is_a4_and_every_word_lies_inside_the_margins(failed: CertificateFiles) -> None:
    run = subprocess.run([_tool("pdftotext"), "-bbox", str(failed.pdf), "-"], capture_output=True, text=True,
                         timeout=60, check=True)
    pages = re.findall(r'<page width="([\d.]+)" height="([\d.]+)">(.*?)</page>', run.stdout, re.S)
    assert pages
    words = 0
    for width, height, body in pages:
        assert (float(width), float(height)) == pytest.approx(A4_PT, abs=0.5)
        for x0, y0, x1, y1, word in re.findall(
                r'<word xMin="([\d.]+)" yMin="([\d.]+)" xMax="([\d.]+)" yMax="([\d.]+)">(.*?)</word>', body):
            words += 1
            assert float(x0) >= MIN_MARGIN_PT and float(x1) <= float(width) - MIN_MARGIN_PT, html_lib.unescape(word)
            assert float(y0) >= MIN_MARGIN_PT and float(y1) <= float(height) - MIN_MARGIN_PT, html_lib.unescape(word)
    assert words > 200
    assert MARGIN_PT >= MIN_MARGIN_PT


def test_the_attachment_is_the_sealed_html_certificate_byte_for_byte(failed: CertificateFiles) -> None:
    pypdf = pytest.importorskip("pypdf")
    attachments = pypdf.PdfReader(io.BytesIO(_pdf(failed))).attachments
    assert attachments == {f"{failed.number}.html": [failed.html.read_bytes()]}


def test_a_pdf_signed_by_another_key_names_both_keys(failed: CertificateFiles, own_key: StationKey,
                                                     other_key: StationKey) -> None:
    view, record = _view_of(failed)
    resigned = sign_certificate_pdf(certificate_pdf(view, record), failed.html.read_text(encoding="utf-8"),
                                    failed.number, other_key)
    check = verify_pdf_certificate(resigned, own_key.certificate, safety_caution=SAFETY_CAUTION)
    assert not check.ok
    signer = [d for c, s, d in check.findings if c == "signer" and s == MISMATCH]
    assert signer == [f"signed by key {fingerprint(other_key.private_key.public_key())}, checked against key "
                      f"{fingerprint(own_key.private_key.public_key())}"]


def test_an_incremental_update_after_signing_that_paints_a_new_verdict_is_caught(
        failed: CertificateFiles, own_key: StationKey, tmp_path: Path) -> None:
    # Paint a white box over the verdict and "PASS" on it, appended as an incremental update (ISO 32000-1 7.5.6).
    writer = IncrementalPdfFileWriter(io.BytesIO(_pdf(failed)))
    font = generic.DictionaryObject({generic.NameObject("/Type"): generic.NameObject("/Font"),
                                     generic.NameObject("/Subtype"): generic.NameObject("/Type1"),
                                     generic.NameObject("/BaseFont"): generic.NameObject("/Helvetica")})
    paint = generic.StreamObject(stream_data=b"q 1 g 51 735 125 45 re f Q BT 0 g /Fx 26 Tf 80 750 Td (PASS) Tj ET")
    writer.add_stream_to_page(0, writer.add_object(paint), resources=generic.DictionaryObject(
        {generic.NameObject("/Font"): generic.DictionaryObject({generic.NameObject("/Fx"): font})}))
    out = io.BytesIO()
    writer.write(out)
    changed = out.getvalue()
    path = tmp_path / "repainted.pdf"
    path.write_bytes(changed)
    assert "Total document signed" not in _pdfsig(path)
    assert _pyhanko_status(changed, own_key.certificate).coverage != SignatureCoverageLevel.ENTIRE_FILE
    check = verify_pdf_certificate(changed, own_key.certificate, safety_caution=SAFETY_CAUTION)
    assert ("whole file signed", MISMATCH) in [(c, s) for c, s, _ in check.findings]


def test_pages_that_differ_from_the_attached_record_are_named_even_when_signed_by_the_station(
        failed: CertificateFiles, own_key: StationKey) -> None:
    view, record = _view_of(failed)
    assert view.verdict == "FAIL"
    lying = certificate_pdf(CertificateView(**{**view.__dict__, "verdict": "PASS", "verdict_key": "pass"}), record)
    signed = sign_certificate_pdf(lying, failed.html.read_text(encoding="utf-8"), failed.number, own_key)
    check = verify_pdf_certificate(signed, own_key.certificate, safety_caution=SAFETY_CAUTION)
    assert [(c, s) for c, s, _ in check.findings if s != OK] == [("pages", MISMATCH)]


def test_the_same_record_draws_the_same_unsigned_bytes(failed: CertificateFiles) -> None:
    view, record = _view_of(failed)
    first = certificate_pdf(view, record)
    assert certificate_pdf(view, record) == first
    assert _pdf(failed).startswith(first)  # the signed file keeps the drawing as its first revision


def test_knobline_verify_takes_a_pdf_and_fails_a_tampered_one(failed: CertificateFiles, own_key: StationKey,
                                                              db_url: str, tmp_path: Path) -> None:
    published = failed.pdf.parent / public_certificate_name(own_key.fingerprint)
    assert published.read_text(encoding="ascii") == certificate_pem(own_key.certificate)
    good = CliRunner().invoke(main, ["verify", str(failed.pdf), "--db", db_url])
    assert good.exit_code == 0, good.output
    assert "ok       pdf: whole file signed" in good.output and "VERIFIED" in good.output
    tampered = failed.pdf.parent / "tampered.pdf"
    tampered.write_bytes(_flip_byte_in_first_page_content(_pdf(failed)))
    bad = CliRunner().invoke(main, ["verify", str(tampered), "--no-db"])
    assert bad.exit_code == 1, bad.output
    assert "mismatch pdf: signature intact" in bad.output


def test_outside_text_prints_literally_and_the_creation_date_is_the_run_end(db_url: str, tmp_path: Path,
                                                                            own_key: StationKey) -> None:
    hostile = _issue(db_url, 2, tmp_path / "out", own_key)  # serial, lot and operator are "<script>..." text
    run = subprocess.run([_tool("pdftotext"), "-raw", str(hostile.pdf), "-"], capture_output=True, text=True,
                         timeout=60, check=True)
    assert f"Serial number {HOSTILE}" in " ".join(run.stdout.split())
    pypdf = pytest.importorskip("pypdf")
    info = pypdf.PdfReader(io.BytesIO(_pdf(hostile))).metadata
    # conftest: run 2 started T0 + 5 min and ended 2 s later (ISO 32000-1 7.9.4 date string).
    assert info["/CreationDate"] == "D:20260302080502+00'00'"
    assert verify_pdf_certificate(_pdf(hostile), own_key.certificate, safety_caution=SAFETY_CAUTION).ok
