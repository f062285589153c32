"""Released test programs in the store: versions, the second-person rule, retirement, the run's mark.

The rules are ours (README "Released test programs"); the second-person rule is common practice
for approving what a regulated line builds with (EU GMP Annex 11 section 14 on electronic signatures
and its principle of a second check, from memory).
"""

from __future__ import annotations

import datetime as dt
import hashlib
from pathlib import Path

import pytest
from cryptography.hazmat.primitives.asymmetric import ed25519

from fixture.errors import UserInputError
from fixture.reporting.person_keys import key_fingerprint, public_key_pem
from fixture.reporting.release_signature import sign_registration
from tests.sealed import sign_release
from fixture.store import Store
from fixture.store.programs import (
    add_person,
    person,
    program_by_hash,
    programs,
    record_release,
    register_program,
    retire_program,
    run_not_for_shipment,
)
from tests.store.conftest import begin

A_KEY = ed25519.Ed25519PrivateKey.generate()
B_KEY = ed25519.Ed25519PrivateKey.generate()
E_KEY = ed25519.Ed25519PrivateKey.generate()
KEYS = {"Ada": A_KEY, "Bo": B_KEY, "Erin": E_KEY, "Olu": ed25519.Ed25519PrivateKey.generate()}


def sha(text: str) -> str:
    return hashlib.sha256(text.encode()).hexdigest()


def register(store: Store, kind: str, file_name: str, content: str, by: str, key=None):
    """Register ``content`` signed by ``by`` (with ``key``, default their own)."""
    registration = sign_registration(key or KEYS.get(by, A_KEY), kind, file_name, sha(content), by)
    return register_program(store, kind, file_name, sha(content), content, registration)


def people(store: Store) -> None:
    add_person(store, "Erin", "engineer", public_key_pem=public_key_pem(E_KEY.public_key()),
               key_fingerprint=key_fingerprint(E_KEY.public_key()))
    add_person(store, "Ada", "approver", public_key_pem=public_key_pem(A_KEY.public_key()),
               key_fingerprint=key_fingerprint(A_KEY.public_key()))
    add_person(store, "Bo", "approver", public_key_pem=public_key_pem(B_KEY.public_key()),
               key_fingerprint=key_fingerprint(B_KEY.public_key()))
    add_person(store, "Olu", "operator")


def test_versions_count_up_per_kind_and_file_name_and_the_same_content_is_the_same_program(store: Store) -> None:
    people(store)
    first, new = register(store, "sequence", "final.toml", "v1", "Erin")
    assert new and first.version == 1 and first.state == "draft" and first.registered_by == "Erin"
    second, _ = register(store, "sequence", "final.toml", "v2", "Ada")
    other_name, _ = register(store, "sequence", "other.toml", "v3", "Erin")
    other_kind, _ = register(store, "design", "final.toml", "v4", "Erin")
    again, new_again = register(store, "sequence", "final.toml", "v1", "Bo")
    assert (second.version, other_name.version, other_kind.version) == (2, 1, 1)
    assert not new_again and again.program_id == first.program_id and again.registered_by == "Erin"
    assert [(p.kind, p.file_name, p.version) for p in programs(store)] == [
        ("design", "final.toml", 1), ("sequence", "final.toml", 1), ("sequence", "final.toml", 2),
        ("sequence", "other.toml", 1)]


def test_an_operator_or_a_stranger_cannot_register(store: Store) -> None:
    people(store)
    with pytest.raises(UserInputError, match="role engineer or approver"):
        register(store, "sequence", "s.toml", "x", "Olu")
    with pytest.raises(UserInputError, match="found nobody"):
        register(store, "sequence", "s.toml", "x", "Mallory")
    assert programs(store) == []


def test_engineers_and_approvers_need_a_key_and_names_are_unique(store: Store) -> None:
    with pytest.raises(UserInputError, match="public key"):
        add_person(store, "Ada", "approver")
    with pytest.raises(UserInputError, match="public key"):
        add_person(store, "Erin", "engineer")
    people(store)
    with pytest.raises(UserInputError, match="not yet in this database"):
        add_person(store, "Ada", "operator")
    assert person(store, "Ada") is not None and person(store, "Ada").role == "approver"  # type: ignore[union-attr]


def test_one_key_belongs_to_one_person(store: Store) -> None:
    # Else Ada could register as Ada and release as "Cy" with her own key: the second-person rule undone.
    people(store)
    with pytest.raises(UserInputError, match="the key of Ada"):
        add_person(store, "Cy", "approver", public_key_pem=public_key_pem(A_KEY.public_key()),
                   key_fingerprint=key_fingerprint(A_KEY.public_key()))
    assert person(store, "Cy") is None


def test_release_needs_a_second_approver_and_a_draft(store: Store) -> None:
    people(store)
    own, _ = register(store, "design", "d.toml", "d", "Ada")
    with pytest.raises(UserInputError, match="second person"):
        record_release(store, own.program_id, sign_release(A_KEY, own, "Ada", "mine"))
    with pytest.raises(UserInputError, match="role approver"):
        record_release(store, own.program_id, sign_release(A_KEY, own, "Erin", "not an approver"))
    assert program_by_hash(store, "design", sha("d")).state == "draft"  # type: ignore[union-attr]
    released = record_release(store, own.program_id, sign_release(B_KEY, own, "Bo", "checked the limits"))
    assert released.state == "released" and released.approval is not None
    assert released.approval.approver == "Bo" and released.approval.reason == "checked the limits"
    with pytest.raises(UserInputError, match="expected a draft"):
        record_release(store, own.program_id, sign_release(B_KEY, own, "Bo", "again"))


def test_a_registration_signed_with_someone_elses_key_is_refused(store: Store) -> None:
    # Ada may not register in Erin's name: "not the registrant" must mean another key.
    people(store)
    with pytest.raises(UserInputError, match="signed by Erin's key"):
        register(store, "design", "d.toml", "d", "Erin", key=A_KEY)
    assert programs(store) == []


def test_a_release_signed_with_a_key_not_the_approvers_is_refused(store: Store) -> None:
    people(store)
    draft, _ = register(store, "station", "st.toml", "st", "Erin")
    with pytest.raises(UserInputError, match="key"):
        record_release(store, draft.program_id, sign_release(A_KEY, draft, "Bo", "Ada's key, Bo's name"))
    assert program_by_hash(store, "station", sha("st")).state == "draft"  # type: ignore[union-attr]


def test_a_retired_program_stays_retired(store: Store) -> None:
    people(store)
    draft, _ = register(store, "sequence", "s.toml", "s", "Erin")
    record_release(store, draft.program_id, sign_release(A_KEY, draft, "Ada", "ok"))
    retired = retire_program(store, draft.program_id, "Erin", "superseded by version 2")
    assert retired.state == "retired" and retired.retired_by == "Erin" and retired.approval is not None
    with pytest.raises(UserInputError, match="retired already"):
        retire_program(store, draft.program_id, "Ada", "again")
    with pytest.raises(UserInputError, match="expected a draft"):
        record_release(store, draft.program_id, sign_release(B_KEY, draft, "Bo", "bring it back"))
    with pytest.raises(UserInputError, match="role engineer or approver"):
        retire_program(store, register(store, "design", "d.toml", "d", "Erin")[0].program_id,
                       "Olu", "operators do not retire programs")


def test_a_run_keeps_its_not_for_shipment_mark(store: Store) -> None:
    marked = begin(store, "PW22-000001", not_for_shipment=True)
    plain = begin(store, "PW22-000002")
    assert run_not_for_shipment(store, marked) is True
    assert run_not_for_shipment(store, plain) is False


def test_signed_at_keeps_its_second_across_the_database(store: Store, tmp_path: Path) -> None:
    # The signature covers the time to the second: the stored time must read back exactly.
    people(store)
    draft, _ = register(store, "design", "d.toml", "t", "Erin")
    at = dt.datetime(2026, 12, 4, 6, 59, 59, 999_999, tzinfo=dt.UTC)
    record_release(store, draft.program_id, sign_release(A_KEY, draft, "Ada", "ok", now=at))
    stored = program_by_hash(store, "design", sha("t"))
    assert stored is not None and stored.approval is not None
    assert stored.approval.signed_at == dt.datetime(2026, 12, 4, 6, 59, 59, tzinfo=dt.UTC)


def test_releases_approvals_limit_changes_and_retirements_are_on_the_audit_trail(store: Store) -> None:
    # Issue 12: every release, approval, limit change and retirement is an audit entry (who, what, the
    # file hashes before and after), written in the change's own transaction; the chain stays intact.
    from fixture.store.audit import audit_trail
    from fixture.store.audit_chain import verify_audit_chain

    people(store)
    first, _ = register(store, "sequence", "s.toml", "s v1", "Erin")
    record_release(store, first.program_id, sign_release(A_KEY, first, "Ada", "first release"))
    second, _ = register(store, "sequence", "s.toml", "s v2", "Erin")
    with pytest.raises(UserInputError):  # a refused release leaves no entry
        record_release(store, second.program_id, sign_release(A_KEY, second, "Erin", "not an approver"))
    record_release(store, second.program_id, sign_release(B_KEY, second, "Bo", "wider duty limits"))
    retire_program(store, first.program_id, "Erin", "superseded by version 2")
    trail = [(e.action, e.who, e.subject, e.before_sha256, e.after_sha256) for e in audit_trail(store)]
    assert trail == [
        ("approval", "Ada", "sequence s.toml version 1", None, sha("s v1")),
        ("release", "Ada", "sequence s.toml version 1", None, sha("s v1")),
        ("approval", "Bo", "sequence s.toml version 2", None, sha("s v2")),
        ("release", "Bo", "sequence s.toml version 2", sha("s v1"), sha("s v2")),
        ("limit-change", "Bo", "sequence s.toml version 2", sha("s v1"), sha("s v2")),
        ("retirement", "Erin", "sequence s.toml version 1", sha("s v1"), None),
    ]
    assert verify_audit_chain(store) is None
