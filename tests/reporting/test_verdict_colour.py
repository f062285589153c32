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


def test_a_failed_reading_is_shown_in_words_with_its_units_and_a_long_list_is_counted() -> None:
    # What a person reads (the guide: words, never identifiers; lists never cut without saying so).
    import io

    from fixture.reporting.operator_view import FAILED_READINGS_SHOWN, TerminalReporter
    from tests.runner.conftest import ROOT
    from fixture.files.sequence_file import load_sequence
    from fixture.files.station_file import load_station
    from fixture.runner.plan import compile_plan

    config = load_station(ROOT / "sequences/demo-station.toml")
    sequence = load_sequence(ROOT / "sequences/demo-sequence.toml", station=config)
    step = next(s for s in compile_plan(sequence, sequence.design, config).steps if len(s.points) > FAILED_READINGS_SHOWN)
    out = io.StringIO()
    reporter = TerminalReporter(out)
    reporter.step_started(step, 5)
    for point in step.points:
        reporter.point_done(step, point, 1e-9, "fail")
    reporter.step_finished(step, "fail", "ignored when readings failed")
    text = out.getvalue()
    assert "_hz" not in text and "_pct" not in text and "_s " not in text
    first = step.points[0]
    assert f"at knob A {first.knob_a_pct:g} %" in text and ", outside " in text
    assert f"and {len(step.points) - FAILED_READINGS_SHOWN} more failed reading" in text
