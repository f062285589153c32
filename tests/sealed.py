"""Test helper: ``sign_release`` with sealed limits for a sequence, for tests about releases of sequences
whose content is not a real sequence file (the store and the signature do not read the limits text)."""

from __future__ import annotations

import datetime as dt
import hashlib

from cryptography.hazmat.primitives.asymmetric import ed25519

from fixture.reporting import release_signature
from fixture.store.programs import ApprovalRecord, LimitsSealRecord, ProgramRecord

#: Sealed limits in the canonical form of fixture/runner/limits_seal.py: one power-up row, 2 mA to 15 mA.
SEAL_TEXT = f"knobline-limits-seal/1\n0\tsupply_current_a\t-\t-\t{0.002.hex()}\t{0.015.hex()}\n"
SEAL = LimitsSealRecord(hashlib.sha256(SEAL_TEXT.encode()).hexdigest(), "knobline 0.1.0", SEAL_TEXT)


def sign_release(private_key: ed25519.Ed25519PrivateKey, program: ProgramRecord, approver: str, reason: str,
                 *, now: dt.datetime | None = None) -> ApprovalRecord:
    """The approval, sealing :data:`SEAL` when ``program`` is a sequence (as every sequence's release must)."""
    return release_signature.sign_release(private_key, program, approver, reason, now=now,
                                          limits=SEAL if program.kind == "sequence" else None)
