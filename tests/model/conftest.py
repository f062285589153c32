"""Fixtures shared by the model tests."""

from __future__ import annotations

import os
import shutil

import pytest

#: Values of CI that mean "not in CI" (an explicitly disabled flag).
_CI_OFF = ("", "0", "false", "no")


def in_ci() -> bool:
    """Whether the environment says this is a CI run (CI runs with ``CI=true``)."""
    return os.environ.get("CI", "").strip().lower() not in _CI_OFF


@pytest.fixture(scope="session")
def ngspice() -> str:
    """Path of the ngspice executable, the circuit-simulator reference.

    Without ngspice on PATH a developer's run skips the cross-checks, but a CI
    run fails: CI must not pass while the reference silently went missing.
    """
    path = shutil.which("ngspice")
    if path is None:
        reason = ("ngspice is not on PATH (Debian package 'ngspice'); "
                  "the model-vs-ngspice cross-checks need it")
        if in_ci():
            pytest.fail(f"{reason}; CI is set, so a missing reference is a failure, not a skip",
                        pytrace=False)
        pytest.skip(reason)
    return path
