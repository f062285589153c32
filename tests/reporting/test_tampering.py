"""Every tampering of a certificate an auditor could meet fails `verify` with a named finding.

The cases are the ones issue 9 lists (visible verdict, a reading, the serial, the
start time, another unit's record and seal pasted in, the genuine record hidden
in a comment, a file holding another run, record / signature / hash edited, a
wrong key) plus one per kind of visible field, a hidden style and an added
element. The untouched certificate verifies.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest

from fixture.commands.certificate import write_certificate
from fixture.commands.verify import MISMATCH, read_certificate_file, verify_certificate
from fixture.reporting.signing import station_key
from fixture.store import open_store

JSON_ELEMENT = '<script type="application/json"'


@pytest.fixture
def made(db_url, key, tmp_path) -> dict[int, Path]:
    with open_store(db_url) as store:
        return {run_id: write_certificate(store, run_id, tmp_path / "out", key).html for run_id in (1, 2)}


def check(db_url: str | None, path: Path, key, **options):
    embedded = read_certificate_file(path)
    public = key.private_key.public_key()
    if db_url is None:
        return verify_certificate(embedded, public, None, **options)
    with open_store(db_url) as store:
        return verify_certificate(embedded, public, store, **options)


def failures(result) -> dict[str, str]:
    """check -> detail of the first mismatch of each check."""
    out: dict[str, str] = {}
    for f in result.findings:
        if f.status == MISMATCH:
            out.setdefault(f.check, f.detail)
    return out


def edit_text_node(html: str, old: str, new: str) -> str:
    """Change the first text node that reads exactly ``old`` (what a forger with a text editor does)."""
    visible, rest = html.split(JSON_ELEMENT, 1)
    pattern = re.compile(r">(\s*)" + re.escape(old) + r"(\s*)<")
    if not pattern.search(visible):
        raise AssertionError(f"no text node {old!r} on the page")
    return pattern.sub(lambda m: f">{m.group(1)}{new}{m.group(2)}<", visible, count=1) + JSON_ELEMENT + rest


def json_elements(html: str) -> list[re.Match[str]]:
    return list(re.finditer(r'<script type="application/json" id="knobline-(record|seal)">(.*?)</script>', html,
                            re.S))


def test_the_untouched_certificate_verifies_with_and_without_the_database(db_url, key, made) -> None:
    for url in (db_url, None):
        result = check(url, made[1], key)
        assert result.verified and failures(result) == {}


# (what is changed, text node on the page, forged text); the values are conftest's invented run 1.
VISIBLE_FIELDS = [
    ("overall verdict FAIL -> PASS", "FAIL", "PASS"),
    ("a reading", "3.1235 ms", "3.1236 ms"),
    ("the serial", "PW22-000001", "PW22-000009"),
    ("the start time", "2026-03-02 08:00:00 UTC", "2026-03-02 07:00:00 UTC"),
    ("the end time", "2026-03-02 08:00:04 UTC", "2026-03-02 08:00:03 UTC"),
    ("the product", "PW-22", "PX-22"),
    ("a component lot", "C1-2611A", "C1-2611B"),
    ("the station", "line-1", "line-2"),
    ("the operator", "ana", "bob"),
    ("an instrument serial", "T31-0042", "T31-0043"),
    ("a calibration due date", "2027-01-31", "2028-01-31"),
    ("an acceptance limit", "2.91 to 3.39 ms", "2.91 to 3.49 ms"),
    ("an expanded uncertainty U", "2.0 µs", "1.0 µs"),
    ("a decision rule", "Rule 2: guarded acceptance, w = 1 x U", "Rule 2: simple acceptance"),
    ("a step verdict", "PASS", "FAIL"),
]


@pytest.mark.parametrize("field, old, new", VISIBLE_FIELDS, ids=[f[0] for f in VISIBLE_FIELDS])
def test_a_changed_visible_field_is_named_with_what_the_record_says(db_url, key, made, field, old, new) -> None:
    made[1].write_bytes(edit_text_node(made[1].read_text(encoding="utf-8"), old, new).encode("utf-8"))
    for url in (db_url, None):
        found = failures(check(url, made[1], key))
        assert set(found) == {"document", "visible"}, found
        assert "the file was changed after signing" in found["document"]
        assert found["visible"].startswith("visible text differs from the signed record")
        # names the forged words and the record's words (only the differing words are quoted)
        forged = [w for w in new.split() if w not in old.split()]
        genuine = [w for w in old.split() if w not in new.split()]
        assert all(w in found["visible"].split("record says")[0] for w in forged), found["visible"]
        assert all(w in found["visible"].split("record says")[1] for w in genuine), found["visible"]


def test_the_verdict_finding_reads_as_a_person_would_say_it(db_url, key, made) -> None:
    made[1].write_bytes(edit_text_node(made[1].read_text(encoding="utf-8"), "FAIL", "PASS").encode("utf-8"))
    assert failures(check(None, made[1], key))["visible"] == \
        "visible text differs from the signed record at 'Overall verdict': file says 'PASS', record says 'FAIL'"


def test_a_style_that_hides_text_is_named(db_url, key, made) -> None:
    html = made[1].read_text(encoding="utf-8")
    made[1].write_bytes(html.replace("</head>", "<style>table { display: none; }</style>\n</head>", 1).encode())
    found = failures(check(db_url, made[1], key))
    assert set(found) == {"document", "visible"}
    assert "styles or elements" in found["visible"] and "display: none" in found["visible"]


def test_an_added_element_is_named(db_url, key, made) -> None:
    html = made[1].read_text(encoding="utf-8")
    made[1].write_bytes(html.replace("<body>", "<body>\n<p>Approved by QA</p>", 1).encode())
    found = failures(check(db_url, made[1], key))
    assert set(found) == {"document", "visible"}
    assert "Approved by QA" in found["visible"]


def test_another_units_record_and_seal_pasted_in_fails(db_url, key, made) -> None:
    mine, theirs = made[1].read_text(encoding="utf-8"), made[2].read_text(encoding="utf-8")
    pasted = mine
    for own, other in reversed(list(zip(json_elements(mine), json_elements(theirs), strict=True))):
        pasted = pasted[:own.start()] + other.group(0) + pasted[own.end():]
    made[1].write_bytes(pasted.encode("utf-8"))
    found = failures(check(None, made[1], key))
    # the signature and record hash are genuine (run 2's), the page around them is run 1's
    assert set(found) == {"document", "visible"}
    assert found["visible"] == ("visible text differs from the signed record at 'Test certificate': file says "
                                f"'{made[1].stem}', record says '{made[2].stem}'")


def test_the_genuine_record_hidden_in_a_comment_is_named(db_url, key, made) -> None:
    genuine = "".join(m.group(0) for m in json_elements(made[1].read_text(encoding="utf-8")))
    other = made[2].read_text(encoding="utf-8")
    made[1].write_bytes(other.replace("</body>", f"<!-- {genuine} -->\n</body>", 1).encode("utf-8"))
    found = failures(check(None, made[1], key))
    assert "record" in found and "inside an HTML comment" in found["record"]


@pytest.mark.parametrize("wrapper", ["<template>{}</template>", "<noscript>{}</noscript>", "{}",
                                     "<div title='{}'></div>"])
def test_a_second_record_anywhere_in_the_file_is_named(db_url, key, made, wrapper) -> None:
    html = made[1].read_text(encoding="utf-8")
    record = json_elements(html)[0].group(0).replace("'", "&#39;")
    made[1].write_bytes(html.replace("</body>", wrapper.format(record) + "\n</body>", 1).encode("utf-8"))
    found = failures(check(None, made[1], key))
    assert "record" in found and "knobline-record" in found["record"]


def test_a_file_that_holds_another_run_is_named(db_url, key, made) -> None:
    found = failures(check(db_url, made[1], key, expected_run=2))
    assert found == {"run": "expected the certificate of run 2, the file holds run 1 (unit PW22-000001)"}


def test_an_edited_record_fails_hash_document_and_visible(db_url, key, made) -> None:
    html = made[1].read_text(encoding="utf-8")
    made[1].write_bytes(html.replace('"value":0.9312', '"value":0.9112', 1).encode("utf-8"))
    found = failures(check(None, made[1], key))
    assert set(found) == {"hash", "document", "visible"}
    assert "the record was edited after signing" in found["hash"]
    assert found["visible"].endswith("file says '93.12', record says '91.12'")


@pytest.mark.parametrize("field", ["signature", "record_sha256", "document_sha256"])
def test_an_edited_seal_field_breaks_the_signature(db_url, key, made, field) -> None:
    html = made[1].read_text(encoding="utf-8")
    seal_element = json_elements(html)[1]
    seal = json.loads(seal_element.group(2))
    seal[field] = ("0" if seal[field][0] != "0" else "1") + seal[field][1:]
    made[1].write_bytes((html[:seal_element.start(2)] + json.dumps(seal) + html[seal_element.end(2):]).encode())
    found = failures(check(db_url, made[1], key))
    assert "signature" in found and "the seal was changed after signing" in found["signature"]


def test_a_wrong_key_is_one_line_not_a_pile_of_mismatches(db_url, key, made, tmp_path) -> None:
    other = station_key(tmp_path / "other" / "station-key.pem", create_missing=True)
    result = check(db_url, made[1], other)
    assert failures(result) == {"key": f"signed by key {key.fingerprint[:16]}, checked against key "
                                       f"{other.fingerprint[:16]}: wrong --key/--public-key?"}
    assert [f.check for f in result.findings if f.status == MISMATCH] == ["key"]


def test_a_wrong_database_is_one_line(db_url, key, made, tmp_path) -> None:
    other_url = f"sqlite:///{tmp_path / 'other.sqlite'}"
    with open_store(other_url) as store:
        other_id = store.database_id
    result = check(other_url, made[1], key)
    with open_store(db_url) as store:
        mine = store.database_id
    assert [(f.check, f.detail) for f in result.findings if f.status == MISMATCH] == [
        ("database", f"this certificate comes from database {mine}, this is the database ({other_id}): wrong --db?")]


def test_a_run_of_another_unit_in_the_same_database_is_one_line(db_url, key, made) -> None:
    from sqlalchemy import text

    with open_store(db_url) as store, store.engine.begin() as connection:
        connection.execute(text("UPDATE unit SET serial = 'PW22-000010' WHERE serial = 'PW22-000001'"))
    found = [(f.check, f.detail) for f in check(db_url, made[1], key).findings if f.status == MISMATCH]
    assert found == [("database", "run 1 in this database is unit PW22-000010, not PW22-000001: wrong --db?")]


def test_a_seal_carrying_another_keys_certificate_is_named(db_url, key, made, tmp_path) -> None:
    from fixture.reporting.signing import certificate_pem

    other = station_key(tmp_path / "other" / "station-key.pem", create_missing=True)
    html = made[1].read_text(encoding="utf-8")
    seal_element = json_elements(html)[1]
    seal = json.loads(seal_element.group(2))
    seal["certificate"] = certificate_pem(other.certificate)
    made[1].write_bytes((html[:seal_element.start(2)] + json.dumps(seal) + html[seal_element.end(2):]).encode())
    assert failures(check(None, made[1], key)) == {
        "seal": f"the X.509 certificate in the seal is of key {other.fingerprint[:16]}, the seal names key "
                f"{key.fingerprint[:16]}"}
