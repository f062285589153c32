"""A person's Ed25519 key and the signed release of a test program."""

from __future__ import annotations

import dataclasses
import datetime as dt
import os
import stat
from pathlib import Path

import pytest
from cryptography.hazmat.primitives.asymmetric import ed25519

from fixture.errors import SoftwareFault, UserInputError
from fixture.reporting import release_signature
from fixture.reporting.person_keys import (
    generate_person_key,
    key_fingerprint,
    load_person_private_key,
    load_person_public_key,
    private_key_encrypted,
    public_key_path,
    public_key_pem,
    sign,
    signature_valid,
)
from fixture.reporting.release_signature import (
    RELEASED_FOR_PRODUCTION,
    approval_problem,
    registration_payload,
    registration_problem,
    release_payload,
    release_problem,
    release_format,
    sign_registration,
)
from fixture.store.programs import ApprovalRecord, PersonRecord, ProgramRecord
from tests.sealed import SEAL, sign_release

# RFC 8032 section 7.1, "TEST 1" (Ed25519, empty message): secret key, public key and signature.
RFC8032_T1_SECRET = bytes.fromhex("9d61b19deffd5a60ba844af492ec2cc44449c5697b326919703bac031cae7f60")
RFC8032_T1_PUBLIC = bytes.fromhex("d75a980182b10ab7d54bfed3c964073a0ee172f3daa62325af021a68f707511a")
RFC8032_T1_SIGNATURE = ("e5564300c360ac729086e2cc806e828a84877f1eb8e5d974d873e065224901555"
                        "fb8821590a33bacc61e39701cf9b46bd25bf5f0595bbe24655141438e7a100b")

NOW = dt.datetime(2026, 12, 4, 6, 30, 15, tzinfo=dt.UTC)
ERIN_KEY = ed25519.Ed25519PrivateKey.generate()


def test_signing_gives_rfc_8032_test_vector_1() -> None:
    key = ed25519.Ed25519PrivateKey.from_private_bytes(RFC8032_T1_SECRET)
    from cryptography.hazmat.primitives import serialization

    raw_public = key.public_key().public_bytes(serialization.Encoding.Raw, serialization.PublicFormat.Raw)
    assert raw_public == RFC8032_T1_PUBLIC
    assert sign(key, b"") == RFC8032_T1_SIGNATURE
    public = ed25519.Ed25519PublicKey.from_public_bytes(RFC8032_T1_PUBLIC)
    assert signature_valid(public, b"", RFC8032_T1_SIGNATURE)
    flipped = f"{int(RFC8032_T1_SIGNATURE[0], 16) ^ 1:x}" + RFC8032_T1_SIGNATURE[1:]
    assert not signature_valid(public, b"", flipped)
    assert not signature_valid(public, b"\x00", RFC8032_T1_SIGNATURE)  # another message
    assert not signature_valid(public, b"", "not hex")


def test_a_new_key_is_private_to_its_owner_never_overwritten_and_its_public_half_reads_back(tmp_path: Path) -> None:
    path = tmp_path / "ada.pem"
    key = generate_person_key(path)
    assert stat.S_IMODE(os.stat(path).st_mode) == 0o600
    assert key_fingerprint(load_person_public_key(public_key_path(path))) == key_fingerprint(key.public_key())
    assert not private_key_encrypted(path)
    with pytest.raises(UserInputError, match="never overwrites"):
        generate_person_key(path)
    with pytest.raises(UserInputError, match="found a private key"):
        load_person_public_key(path)


def test_a_passphrase_encrypted_key_needs_its_passphrase(tmp_path: Path) -> None:
    path = tmp_path / "bo.pem"
    key = generate_person_key(path, b"correct horse")
    assert private_key_encrypted(path)
    assert b"correct horse" not in path.read_bytes()
    loaded = load_person_private_key(path, b"correct horse")
    assert key_fingerprint(loaded.public_key()) == key_fingerprint(key.public_key())
    with pytest.raises(UserInputError, match="passphrase"):
        load_person_private_key(path, b"wrong")
    with pytest.raises(UserInputError, match="passphrase"):
        load_person_private_key(path, None)


def test_the_signed_payload_is_the_documented_canonical_json() -> None:
    # Our own format (fixture/reporting/release_signature.py docstring): keys sorted, no whitespace, UTF-8.
    payload = release_payload("sequence", "ab" * 32, 3, RELEASED_FOR_PRODUCTION, "Rev C limits, ECO-17", "Ada Ö",
                              NOW)
    assert payload == ('{"approver":"Ada Ö","format":"knobline-release/1","kind":"sequence",'
                       '"meaning":"released for production","reason":"Rev C limits, ECO-17",'
                       f'"sha256":"{"ab" * 32}","signed_at":"2026-12-04T06:30:15Z","version":3}}').encode()


def program(**changes: object) -> ProgramRecord:
    """A program registered (and signed) by Erin, with ``changes`` made after signing."""
    registration = sign_registration(ERIN_KEY, "sequence", "s.toml", "cd" * 32, "Erin", now=NOW)
    base = ProgramRecord(program_id=1, kind="sequence", file_name="s.toml", sha256="cd" * 32, version=2,
                         state="draft", registered_by="Erin", registered_at=NOW, approval=None, retired_by=None,
                         retired_at=None, retire_reason=None,
                         registration_key_fingerprint=registration.key_fingerprint,
                         registration_signature_hex=registration.signature_hex)
    return dataclasses.replace(base, **changes)  # type: ignore[arg-type]


def approver(key: ed25519.Ed25519PrivateKey, name: str = "Ada", role: str = "approver") -> PersonRecord:
    return PersonRecord(name, role, public_key_pem(key.public_key()), key_fingerprint(key.public_key()), NOW)


ERIN = approver(ERIN_KEY, "Erin", "engineer")


def test_a_release_verifies_against_the_approvers_stored_key() -> None:
    key = ed25519.Ed25519PrivateKey.generate()
    approval = sign_release(key, program(), "Ada", "first release", now=NOW)
    released = program(state="released", approval=approval)
    assert approval.signed_at == NOW and approval.meaning == RELEASED_FOR_PRODUCTION
    assert release_problem(released, approver(key), ERIN) is None
    assert registration_problem(program(), ERIN) is None


@pytest.mark.parametrize("field, value", [
    ("registered_by", "Ada"), ("registered_at", NOW + dt.timedelta(seconds=1)), ("file_name", "t.toml"),
    ("sha256", "ce" * 32), ("registration_signature_hex", "00" * 64)])
def test_a_changed_registration_does_not_verify(field: str, value: object) -> None:
    # Naming another registrant afterwards (to approve one's own file) breaks the registrant's signature.
    key = ed25519.Ed25519PrivateKey.generate()
    changed = program(**{field: value})
    registrant = approver(ERIN_KEY, name=changed.registered_by, role="engineer")
    assert "registration signature does not verify" in (registration_problem(changed, registrant) or "")
    released = dataclasses.replace(changed, state="released",
                                   approval=sign_release(key, changed, "Ada", "ok", now=NOW))
    assert release_problem(released, approver(key), registrant) is not None


def test_the_registration_payload_is_the_documented_canonical_json() -> None:
    # Our own format (fixture/reporting/release_signature.py docstring).
    assert registration_payload("design", "d.toml", "ab" * 32, "Erin", NOW) == (
        '{"file_name":"d.toml","format":"knobline-registration/1","kind":"design",'
        f'"registered_at":"2026-12-04T06:30:15Z","registered_by":"Erin","sha256":"{"ab" * 32}"}}').encode()


@pytest.mark.parametrize("field, value", [
    ("reason", "another reason"), ("approver", "Bo"), ("meaning", "released for testing"),
    ("signed_at", NOW + dt.timedelta(seconds=1)), ("signature_hex", "00" * 64)])
def test_a_changed_approval_does_not_verify(field: str, value: object) -> None:
    key = ed25519.Ed25519PrivateKey.generate()
    approval = dataclasses.replace(sign_release(key, program(), "Ada", "first release", now=NOW),
                                   **{field: value})  # type: ignore[arg-type]
    who = approver(key, name=approval.approver)
    assert approval_problem(program(), approval, who) is not None


@pytest.mark.parametrize("field, value", [("sha256", "ce" * 32), ("version", 3), ("kind", "design")])
def test_a_release_of_other_content_or_version_does_not_verify(field: str, value: object) -> None:
    # A changed file has another hash: the approval of the old content does not release it.
    key = ed25519.Ed25519PrivateKey.generate()
    approval = sign_release(key, program(), "Ada", "first release", now=NOW)
    assert approval_problem(program(**{field: value}), approval, approver(key)) is not None


def test_a_release_signed_by_another_key_or_approved_by_its_registrant_does_not_verify() -> None:
    key, other = ed25519.Ed25519PrivateKey.generate(), ed25519.Ed25519PrivateKey.generate()
    approval = sign_release(other, program(), "Ada", "first release", now=NOW)
    assert "does not verify" in (approval_problem(program(), approval, approver(key)) or "")
    own = sign_release(ERIN_KEY, program(), "Ada", "mine", now=NOW)  # the registrant's key under another name
    assert "key that registered it" in (approval_problem(program(), own, approver(ERIN_KEY)) or "")
    assert "key that registered it" in (approval_problem(program(registered_by="Ada"), approval,
                                                         approver(other)) or "")
    assert "role engineer" in (approval_problem(program(), sign_release(key, program(), "Ada", "x", now=NOW),
                                                approver(key, role="engineer")) or "")
    assert release_problem(program(state="draft"), approver(key), ERIN) == "it is draft"


def test_a_sequences_release_signs_format_2_with_the_limits_hash_and_the_knobline_that_computed_them() -> None:
    # Our own format (fixture/reporting/release_signature.py docstring): format 1's fields plus two.
    payload = release_payload("sequence", "ab" * 32, 3, RELEASED_FOR_PRODUCTION, "Rev C", "Ada", NOW, SEAL)
    assert payload == ('{"approver":"Ada","computed_by":"knobline 0.1.0","format":"knobline-release/2",'
                       '"kind":"sequence",'
                       f'"limits_sha256":"{SEAL.sha256}","meaning":"released for production","reason":"Rev C",'
                       f'"sha256":"{"ab" * 32}","signed_at":"2026-12-04T06:30:15Z","version":3}}').encode()
    key = ed25519.Ed25519PrivateKey.generate()
    approval = sign_release(key, program(), "Ada", "first release", now=NOW)
    assert approval.limits == SEAL and approval_problem(program(), approval, approver(key)) is None


@pytest.mark.parametrize("seal_change", [
    {"sha256": "00" * 32}, {"computed_by": "knobline 0.2.0"}, {"rows_text": SEAL.rows_text + "\n"}, None])
def test_a_changed_or_erased_seal_does_not_verify(seal_change: dict[str, str] | None) -> None:
    # None: the seal erased, which must not read as a release in format 1 (the signature covers the format)
    key = ed25519.Ed25519PrivateKey.generate()
    approval = sign_release(key, program(), "Ada", "first release", now=NOW)
    limits = None if seal_change is None else dataclasses.replace(SEAL, **seal_change)
    assert approval_problem(program(), dataclasses.replace(approval, limits=limits), approver(key)) is not None


def test_a_format_1_release_of_a_sequence_made_before_seals_still_verifies() -> None:
    # An old database: the approver signed the format-1 payload, and no seal is stored beside it.
    key = ed25519.Ed25519PrivateKey.generate()
    payload = release_payload("sequence", "cd" * 32, 2, RELEASED_FOR_PRODUCTION, "old", "Ada", NOW)
    approval = ApprovalRecord("Ada", RELEASED_FOR_PRODUCTION, "old", NOW, key_fingerprint(key.public_key()),
                              sign(key, payload))
    assert approval_problem(program(), approval, approver(key)) is None
    assert release_format(approval) == "knobline-release/1"
    with pytest.raises(SoftwareFault, match="sealed limits"):  # a new release of a sequence always seals
        release_signature.sign_release(key, program(), "Ada", "new", now=NOW)
