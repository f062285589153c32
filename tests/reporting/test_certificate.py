"""Certificates: the record, escaping of outside text, template override, PDF, tamper detection."""

from __future__ import annotations

import io
import json
import re
from pathlib import Path

import pytest
from sqlalchemy import text

from fixture.commands.certificate import write_certificate
from fixture.commands.verify import MISMATCH, read_certificate_file, verify_certificate
from fixture.errors import UserInputError
from fixture.reporting.certificate import build_record, certificate_number
from fixture.reporting.render import read_certificate
from fixture.safety import SAFETY_CAUTION
from fixture.store import open_store
from tests.reporting.conftest import HOSTILE


def write(db_url: str, run_id: int, out: Path, key, **options):
    with open_store(db_url) as store:
        return write_certificate(store, run_id, out, key, **options)


def verify(db_url: str | None, path: Path, key):
    embedded = read_certificate_file(path)
    if db_url is None:
        return verify_certificate(embedded, key.private_key.public_key(), None)
    with open_store(db_url) as store:
        return verify_certificate(embedded, key.private_key.public_key(), store)


def mismatches(result) -> list[tuple[str, str]]:
    return [(f.check, f.detail) for f in result.findings if f.status == MISMATCH]


def test_record_states_everything_clause_7_8_asks_for(db_url: str) -> None:
    with open_store(db_url) as store:
        record = build_record(store, 1)
    # lots name each part by the stored design's designator and the circuit's role words (record format 2)
    assert record["unit"] == {"serial": "PW22-000001", "product": "PW-22", "revision": "C",
                              "lots": [{"part": "c_integrator", "designator": "C1",
                                        "label": "C1 integrator capacitor (film)", "lot": "C1-2611A"}]}
    run = record["run"]
    assert (run["station"], run["operator"], run["software_version"], run["verdict"]) == \
        ("line-1", "ana", "0.1.0", "fail")
    assert run["started_at"] == "2026-03-02T08:00:00+00:00"  # ISO 8601, UTC offset
    assert [i["serial"] for i in record["instruments"]] == ["T31-0042", "P35-0007"]
    assert record["instruments"][0]["calibration_certificate"] == "CAL-26-0117"
    assert record["instruments"][0]["calibration_due"] == "2027-01-31"
    duty = record["steps"][1]["measurements"][1]
    assert (duty["value"], duty["acceptance_high"], duty["expanded_uncertainty"], duty["coverage_factor"],
            duty["verdict"]) == (0.9312, 0.919, 1e-3, 2.0, "fail")
    assert duty["decision_rule"] == "guarded acceptance, w = 1 x U"


DB_A, DB_B = "0" * 32, "f" * 32  # two database identities (the store makes random ones; any 32 hex will do)


def test_certificate_number_is_deterministic_file_safe_and_differs_by_station_and_run() -> None:
    number = certificate_number("line-1", 42, DB_A)
    assert number == certificate_number("line-1", 42, DB_A)
    # 6 characters of Crockford's base32 alphabet (crockford.com/base32.html: no I, L, O, U)
    assert re.fullmatch(r"KL-LINE-1-000042-[0-9A-HJKMNP-TV-Z]{6}", number)
    assert number != certificate_number("line-1", 43, DB_A)
    assert certificate_number("line 1", 42, DB_A) != certificate_number("LINE-1", 42, DB_A)  # same slug
    # Letters and digits only, station part cut at 20 characters: safe as a file name.
    assert re.fullmatch(r"KL-SCRIPT-ALERT-1-SCRIP-000001-[0-9A-HJKMNP-TV-Z]{6}", certificate_number(HOSTILE, 1, DB_A))


def test_two_databases_give_different_numbers_for_the_same_station_and_run(db_url, tmp_path) -> None:
    assert certificate_number("line-1", 1, DB_A) != certificate_number("line-1", 1, DB_B)
    other_url = f"sqlite:///{tmp_path / 'other.sqlite'}"
    with open_store(db_url) as first, open_store(other_url) as second:
        assert re.fullmatch(r"[0-9a-f]{32}", first.database_id) and first.database_id != second.database_id
        assert certificate_number("line-1", 1, first.database_id) != \
            certificate_number("line-1", 1, second.database_id)
        assert build_record(first, 1)["run"]["database_id"] == first.database_id
    with open_store(db_url) as again:  # made once: reopening keeps the identity
        assert again.database_id == first.database_id


def test_crockford_base32_reads_bits_five_at_a_time() -> None:
    from fixture.reporting.certificate import crockford_base32

    # crockford.com/base32.html: symbols 0-9 A-H J K M N P-T V-Z for values 0..31 (from memory of the table).
    assert crockford_base32(bytes([0b00001_000, 0b10_00000_0]), 3) == "120"
    assert crockford_base32(b"\xff\xff", 3) == "ZZZ"


def test_only_runs_with_a_verdict_on_the_unit_get_a_certificate(db_url: str) -> None:
    with open_store(db_url) as store, pytest.raises(UserInputError, match="run 3: .* found running"):
        build_record(store, 3)


def test_html_states_verdict_serial_instruments_limits_rule_and_safety_caution(db_url, key, tmp_path) -> None:
    files = write(db_url, 1, tmp_path / "out", key)
    html = files.html.read_text(encoding="utf-8")
    assert files.html.name == f"{files.number}.html"
    # 3.1234567 ms with U = 2.0 µs prints to U's last place, 0.1 µs (JCGM 100 7.2.6); duty 0.9312 with
    # U = 0.0010 (0.10 %) prints 93.12 %.
    for expected in ("FAIL", "PW22-000001", "PW-22", "YQ-C83", "T31-0042", "CAL-26-0117", "2027-01-31",
                     "guarded acceptance, w = 1 x U", SAFETY_CAUTION, files.seal.record_sha256,
                     files.seal.fingerprint, f"station-key-{files.seal.fingerprint[:16]}.crt.pem beside this file", "3.1235 ms", "93.12 %", "(k = 2)"):
        assert expected in html, expected
    assert "<svg" in html  # the QR code, inline


def test_rendering_twice_gives_identical_files(db_url, key, tmp_path) -> None:
    first = write(db_url, 1, tmp_path / "a", key).html.read_bytes()
    assert write(db_url, 1, tmp_path / "b", key).html.read_bytes() == first  # RFC 6979 ECDSA is deterministic


def test_hostile_serial_lot_and_operator_print_as_text(db_url, key, tmp_path) -> None:
    files = write(db_url, 2, tmp_path, key)
    html = files.html.read_text(encoding="utf-8")
    # Outside the embedded JSON elements, the raw tag never appears, only its escaped text.
    outside = re.sub(r'<script type="application/json" id="knobline-(record|seal)">.*?</script>', "", html,
                     flags=re.S)
    assert "<script" not in outside and "alert(1)</script>" not in outside
    assert outside.count("&lt;script&gt;alert(1)&lt;/script&gt;") >= 4  # serial, lot, operator, step message
    # The JSON elements: exactly one closing tag each, and the data reads back exactly.
    assert html.count("</script>") == 2
    embedded = read_certificate(html)
    assert embedded.record["unit"]["serial"] == HOSTILE
    assert [entry["lot"] for entry in embedded.record["unit"]["lots"]] == [HOSTILE]
    assert embedded.record["run"]["operator"] == HOSTILE


def test_pdf_renders_and_its_text_has_the_verdict_and_serial(db_url, key, tmp_path) -> None:
    pypdf = pytest.importorskip("pypdf")
    files = write(db_url, 1, tmp_path, key, pdf=True)
    assert files.pdf is not None and files.pdf.read_bytes().startswith(b"%PDF-")
    reader = pypdf.PdfReader(io.BytesIO(files.pdf.read_bytes()))
    words = " ".join(page.extract_text() for page in reader.pages)
    assert "FAIL" in words and "PW22-000001" in words and files.number in words


def test_a_user_template_folder_is_used_before_the_shipped_one(db_url, key, tmp_path) -> None:
    mine = tmp_path / "company"
    mine.mkdir()
    (mine / "certificate.html.j2").write_text(
        "<html><body><h1>ACME Panels certificate {{ record.certificate_number }}</h1>"
        "<p>{{ record.unit.serial }}</p>{% include '_tamper_evidence.html.j2' %}</body></html>", encoding="utf-8")
    files = write(db_url, 2, tmp_path / "out", key, templates=mine)
    html = files.html.read_text(encoding="utf-8")
    assert "ACME Panels certificate" in html and "Tamper evidence" not in html
    assert "<p>&lt;script&gt;alert(1)&lt;/script&gt;</p>" in html  # autoescape is on in user templates too
    assert verify(db_url, files.html, key).verified


def test_environment_names_the_user_template_folder(db_url, key, tmp_path, monkeypatch) -> None:
    mine = tmp_path / "company"
    mine.mkdir()
    (mine / "certificate.html.j2").write_text("ENV {% include '_tamper_evidence.html.j2' %}", encoding="utf-8")
    monkeypatch.setenv("KNOBLINE_REPORTS", str(mine))
    assert write(db_url, 1, tmp_path, key).html.read_text(encoding="utf-8").startswith("ENV ")


def test_a_user_template_without_the_embedded_record_is_refused(db_url, key, tmp_path) -> None:
    mine = tmp_path / "company"
    mine.mkdir()
    (mine / "certificate.html.j2").write_text("<p>{{ record.unit.serial }}</p>", encoding="utf-8")
    with pytest.raises(UserInputError, match="_tamper_evidence.html.j2"):
        write(db_url, 1, tmp_path / "out", key, templates=mine)


def test_an_untouched_certificate_verifies_against_key_and_database(db_url, key, tmp_path) -> None:
    files = write(db_url, 1, tmp_path, key)
    result = verify(db_url, files.html, key)
    assert result.verified and mismatches(result) == []
    assert [f.check for f in result.findings] == ["key", "signature", "hash", "number", "document", "visible",
                                                  "database"]
    assert all(f.status == "ok" for f in result.findings)


def test_a_measurement_changed_in_the_database_is_named(db_url, key, tmp_path) -> None:
    files = write(db_url, 1, tmp_path, key)
    with open_store(db_url) as store, store.engine.begin() as connection:
        connection.execute(text("UPDATE measurement SET value = 0.9112 WHERE name = 'duty at B 90 %'"))
    result = verify(db_url, files.html, key)
    assert not result.verified
    assert mismatches(result) == [("database", "step 1 'knob stops', measurement 'duty at B 90 %', value: "
                                               "certificate 0.9312, database 0.9112")]


def test_one_byte_changed_in_the_embedded_record_breaks_the_hash(db_url, key, tmp_path) -> None:
    files = write(db_url, 1, tmp_path, key)
    html = files.html.read_text(encoding="utf-8")
    edited = html.replace('"value":0.9312', '"value":0.9112', 1)
    assert len(edited) == len(html) and edited != html
    files.html.write_text(edited, encoding="utf-8")
    result = verify(db_url, files.html, key)
    found = mismatches(result)
    assert [check for check, _ in found] == ["hash", "document", "visible", "database"]
    assert "the record was edited after signing" in found[0][1]
    assert "visible text differs from the signed record" in found[2][1]
    assert "certificate 0.9112, database 0.9312" in found[3][1]
    assert verify(None, files.html, key).verified is False  # caught without the database too


def test_a_byte_that_breaks_the_embedded_json_is_tampering_not_bad_input(db_url, key, tmp_path) -> None:
    files = write(db_url, 1, tmp_path, key)
    html = files.html.read_text(encoding="utf-8")
    files.html.write_text(html.replace('"format":', '"format";', 1), encoding="utf-8")
    result = verify(db_url, files.html, key)
    assert not result.verified and mismatches(result)[0][0] == "record"


def test_a_changed_signature_is_invalid(db_url, key, tmp_path) -> None:
    files = write(db_url, 1, tmp_path, key)
    html = files.html.read_text(encoding="utf-8")
    sig = files.seal.signature
    other = sig[:-1] + ("0" if sig[-1] != "0" else "1")
    seal_element = re.search(r'id="knobline-seal">(.*?)</script>', html, re.S)
    assert seal_element and sig in seal_element.group(1)
    files.html.write_text(html.replace(seal_element.group(1), seal_element.group(1).replace(sig, other)),
                          encoding="utf-8")
    result = verify(db_url, files.html, key)
    assert [check for check, _ in mismatches(result)] == ["signature"]  # the seal element is outside the document hash


def test_a_certificate_re_signed_with_another_key_is_caught(db_url, key, tmp_path) -> None:
    from fixture.reporting.signing import station_key

    files = write(db_url, 1, tmp_path, station_key(tmp_path / "rogue.pem", create_missing=True))
    result = verify(db_url, files.html, key)
    found = mismatches(result)
    assert [check for check, _ in found] == ["key"]  # one line, not a pile of mismatches
    assert re.fullmatch(r"signed by key [0-9a-f]{16}, checked against key [0-9a-f]{16}: wrong --key/--public-key\?",
                        found[0][1])
    assert json.loads(json.dumps(result.as_dict()))["verified"] is False


def test_readings_print_with_si_prefixes_but_percent_never_gets_one() -> None:
    from fixture.reporting.render import format_limits, format_reading

    # SI prefixes per the SI Brochure (BIPM, 9th ed., table 7): m = 1e-3, µ = 1e-6, k = 1e3.
    assert format_reading(3.1234567e-3, "s") == "3.12346 ms"
    assert format_reading(317.195e-6, "Hz") == "317.195 µHz"
    assert format_reading(2e-3, "A") == "2 mA"
    assert format_reading(0.00245583, "%") == "0.00245583 %"  # not "2.45583 m%"
    assert format_reading(0.9312, "1", "duty") == "93.12 %"
    assert format_limits(None, 0.919, "1", "duty") == "≤ 91.9 %"
    assert format_limits(None, None, "s") == "none"
