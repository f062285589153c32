"""``knobline keys``: make, show, export and rotate the station key; old certificates verify after a rotation."""

from __future__ import annotations

import json
from pathlib import Path

from click.testing import CliRunner
from cryptography import x509

from fixture.cli import main
from fixture.reporting.signing import fingerprint


def run(*args: str):
    return CliRunner().invoke(main, list(args), catch_exceptions=False)


def test_keys_new_makes_a_key_once_and_show_states_fingerprint_subject_and_validity(tmp_path: Path) -> None:
    made = run("keys", "new", "--json")
    assert made.exit_code == 0, made.stderr
    data = json.loads(made.stdout)
    assert data["key"] == str(tmp_path / "xdg" / "knobline" / "keys" / "station-key.pem")  # the default folder
    assert data["subject"] == f"CN=knobline station key {data['fingerprint'][:16]}"
    again = run("keys", "new")
    assert again.exit_code == 2 and "knobline keys rotate" in again.stderr
    shown = run("keys", "show")
    assert shown.exit_code == 0
    assert f"  fingerprint  {data['fingerprint']} (SHA-256 of the public key)" in shown.stdout.splitlines()
    assert data["valid_from"][:4] in shown.stdout and "station-key.crt.pem" in shown.stdout


def test_keys_export_writes_the_public_certificate_only(tmp_path: Path) -> None:
    data = json.loads(run("keys", "new", "--json").stdout)
    exported = json.loads(run("keys", "export", "--out", str(tmp_path / "pub"), "--json").stdout)
    written = Path(exported["written"])
    assert written == tmp_path / "pub" / f"station-key-{data['fingerprint'][:16]}.crt.pem"
    assert "PRIVATE" not in written.read_text()
    assert fingerprint(x509.load_pem_x509_certificate(written.read_bytes()).public_key()) == data["fingerprint"]


def test_a_rotated_key_keeps_old_certificates_verifiable(db_url, tmp_path: Path) -> None:
    old = json.loads(run("keys", "new", "--json").stdout)
    out = tmp_path / "certs"
    made = json.loads(run("certificate", "1", "--db", db_url, "--out", str(out), "--json").stdout)
    Path(made["public_key"]).unlink()  # the auditor's copy went missing: the archived key must do
    rotated = run("keys", "rotate", "--json")
    assert rotated.exit_code == 0, rotated.stderr
    new = json.loads(rotated.stdout)
    assert new["fingerprint"] != old["fingerprint"]
    archived = Path(old["key"]).with_name(f"station-key-{old['fingerprint'][:16]}.pem")
    assert new["archived"] == [str(archived)] and archived.with_name(archived.name[:-4] + ".crt.pem").exists()
    assert archived.stat().st_mode & 0o077 == 0  # the archived private key stays owner-only
    verified = run("verify", made["html"], "--db", db_url)
    assert verified.exit_code == 0, verified.stdout
    assert f"trusted key {old['fingerprint'][:16]} from {archived.with_name(archived.name[:-4] + '.crt.pem')})" \
        in verified.stdout
    newer = json.loads(run("certificate", "1", "--db", db_url, "--out", str(tmp_path / "new"), "--json").stdout)
    assert newer["fingerprint"] == new["fingerprint"]
    assert run("verify", newer["html"], "--db", db_url).exit_code == 0
