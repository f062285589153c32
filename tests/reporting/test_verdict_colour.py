"""The final verdict is in colour on a terminal, and says the same in words and frame without it."""

from __future__ import annotations

import click

from fixture.model.verdicts import Verdict
from fixture.reporting.operator_view import final_banner


def test_the_coloured_banner_is_the_plain_banner_once_the_colour_is_removed() -> None:
    for verdict in (Verdict.PASS, Verdict.FAIL, Verdict.STATION_FAULT, Verdict.ABORTED):
        coloured = final_banner(verdict, "PW22-000001", 3, colour=True)
        assert "\x1b[" in coloured  # ANSI SGR sequences (ECMA-48), as click.style writes them
        # without the colour (click.unstyle, what a pipe or log receives) the same words and frame remain
        plain = final_banner(verdict, "PW22-000001", 3)
        assert click.unstyle(coloured).split() == plain.split()


def test_pass_and_fail_differ_in_words_and_colour() -> None:
    passed = final_banner(Verdict.PASS, "S", 1, colour=True)
    failed = final_banner(Verdict.FAIL, "S", 1, colour=True)
    assert "PASS" in passed and "FAIL" in failed
    assert "\x1b[42m" in passed and "\x1b[41m" in failed  # green and red background (ECMA-48 SGR 42, 41)
