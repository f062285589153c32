"""Test helpers: people and released test programs in a results database, made through the store API.

The people are invented (an engineer who registers and an approver, each with an Ed25519 key made
for the test); registration and release are signed exactly as ``knobline program`` signs them.
"""

from __future__ import annotations

import hashlib
from pathlib import Path

from fixture._data import data_dir
from fixture.reporting.person_keys import generate_person_key, key_fingerprint, load_person_private_key, \
    public_key_pem
from fixture.reporting.release_signature import sign_registration, sign_release
from fixture.store import Store, open_store
from fixture.store.programs import add_person, person, record_release, register_program

SHIPPED = data_dir("sequences")
DEMO_FILES = {"station": SHIPPED / "demo-station.toml", "sequence": SHIPPED / "demo-sequence.toml",
              "design": SHIPPED / "demo-panel.toml"}
ENGINEER, APPROVER = "Erin Engineer", "Avery Approver"


def add_people(store: Store, key_dir: Path) -> tuple[Path, Path]:
    """The engineer and the approver (once per database); their private key files (engineer, approver)."""
    paths = (key_dir / "engineer.pem", key_dir / "approver.pem")
    for name, role, key_path in ((ENGINEER, "engineer", paths[0]), (APPROVER, "approver", paths[1])):
        if person(store, name) is None:
            key = generate_person_key(key_path)
            add_person(store, name, role, public_key_pem=public_key_pem(key.public_key()),
                       key_fingerprint=key_fingerprint(key.public_key()))
    return paths


def release_file(store: Store, kind: str, path: Path, key_dir: Path, reason: str = "released for the test") -> None:
    """Register ``path`` as ``kind`` by the engineer and release it with the approver's signature."""
    engineer_key, approver_key = add_people(store, key_dir)
    raw = path.read_bytes()
    sha = hashlib.sha256(raw).hexdigest()
    registration = sign_registration(load_person_private_key(engineer_key), kind, path.name, sha, ENGINEER)
    program, _ = register_program(store, kind, path.name, sha, raw.decode("utf-8"), registration)
    if program.state == "draft":
        limits = None
        if kind == "sequence":  # a sequence's release seals its limits, as knobline program release does
            from fixture.files.sequence_file import load_sequence
            from fixture.runner.limits_seal import seal_of

            limits = seal_of(load_sequence(path, search_dirs=(SHIPPED,)))
        record_release(store, program.program_id,
                       sign_release(load_person_private_key(approver_key), program, APPROVER, reason, limits=limits))


def release_demo_programs(db_url: str, key_dir: Path, files: dict[str, Path] | None = None) -> None:
    """Release the demo station, sequence and design (or ``files``, kind -> path) in ``db_url``."""
    with open_store(db_url) as store:
        for kind, path in (files or DEMO_FILES).items():
            release_file(store, kind, path, key_dir)
