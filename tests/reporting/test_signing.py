"""Ed25519 station keys: RFC 8032 test vector, PEM files, signing record hashes."""

from __future__ import annotations

from pathlib import Path

import pytest
from cryptography.hazmat.primitives import serialization
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

from fixture.errors import UserInputError
from fixture.reporting.canonical import record_sha256
from fixture.reporting.signing import (
    PUBLIC_KEY_FILE_NAME,
    load_private_key,
    load_public_key,
    public_key_hex,
    seal_record,
    sign_digest,
    signature_valid,
    station_key,
)

# RFC 8032 section 7.1, TEST 1 (empty message). Hex copied from the RFC text as remembered; the
# cryptography library (an independent Ed25519 implementation) must reproduce every byte.
RFC_SECRET = "9d61b19deffd5a60ba844af492ec2cc44449c5697b326919703bac031cae7f60"
RFC_PUBLIC = "d75a980182b10ab7d54bfed3c964073a0ee172f3daa62325af021a68f707511a"
RFC_SIGNATURE = ("e5564300c360ac729086e2cc806e828a84877f1eb8e5d974d873e065"
                 "224901555fb8821590a33bacc61e39701cf9b46bd25bf5f0595bbe24655141438e7a100b")


def rfc_key_file(tmp_path: Path) -> Path:
    key = Ed25519PrivateKey.from_private_bytes(bytes.fromhex(RFC_SECRET))
    path = tmp_path / "rfc.pem"
    path.write_bytes(key.private_bytes(serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8,
                                       serialization.NoEncryption()))
    return path


def test_rfc8032_test1_signature_is_reproduced_byte_for_byte_from_a_pem_key(tmp_path: Path) -> None:
    key = load_private_key(rfc_key_file(tmp_path))
    assert public_key_hex(key.public_key()) == RFC_PUBLIC
    # sign_digest signs the bytes the hex stands for: "" is the RFC's empty message.
    assert sign_digest(key, "") == RFC_SIGNATURE


def test_rfc8032_test1_signature_verifies_and_a_flipped_bit_does_not(tmp_path: Path) -> None:
    public = load_public_key(rfc_key_file(tmp_path))  # a private key file gives its public half
    assert signature_valid(public, "", RFC_SIGNATURE)
    flipped = f"{int(RFC_SIGNATURE[:2], 16) ^ 0x01:02x}" + RFC_SIGNATURE[2:]
    assert not signature_valid(public, "", flipped)
    assert not signature_valid(public, "00", RFC_SIGNATURE)  # another message
    assert not signature_valid(public, "", "not hex")


def test_seal_signs_the_sha256_of_the_canonical_record(key) -> None:
    record = {"b": 1, "a": [0.1, "x"]}
    seal = seal_record(record, key.private_key)
    assert seal.record_sha256 == record_sha256(record)
    assert signature_valid(key.private_key.public_key(), seal.record_sha256, seal.signature)
    assert seal.public_key == public_key_hex(key.private_key.public_key())


def test_default_key_is_made_once_with_owner_only_access_and_its_public_half_beside_it(tmp_path: Path) -> None:
    made = station_key()
    assert made.created and made.path == tmp_path / "xdg" / "knobline" / "keys" / "station-ed25519.pem"
    assert made.path.stat().st_mode & 0o077 == 0
    again = station_key()
    assert not again.created and again.fingerprint == made.fingerprint
    public = load_public_key(made.path.parent / PUBLIC_KEY_FILE_NAME)
    assert public_key_hex(public) == public_key_hex(made.private_key.public_key())


def test_key_named_by_environment_must_exist(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    monkeypatch.setenv("KNOBLINE_KEY", str(tmp_path / "typo.pem"))
    with pytest.raises(UserInputError, match="typo.pem: expected an Ed25519 PEM private key, found no file"):
        station_key()
    assert not (tmp_path / "typo.pem").exists()
    monkeypatch.setenv("KNOBLINE_KEY", str(rfc_key_file(tmp_path)))
    assert public_key_hex(station_key().private_key.public_key()) == RFC_PUBLIC
