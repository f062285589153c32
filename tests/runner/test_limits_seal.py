"""The canonical text and SHA-256 of a sequence's tolerance limits (fixture/runner/limits_seal.py).

References: SHA-256 per FIPS 180-2 appendix B.1 (message "abc"); the ``e`` presentation type of Python's
format specification mini-language (``format(310.0, '.8e')`` is ``3.10000000e+02``); IEEE 754 binary64 (the
next double above 310 is 310 + 2**-44). The rest is our own format.
"""

from __future__ import annotations

import dataclasses

import pytest

from fixture._data import data_dir
from fixture.files.sequence_file import load_sequence
from fixture.files.station_file import load_station
from fixture.runner.limits_seal import (
    SEAL_FORMAT,
    SealRow,
    first_difference,
    parse_seal_text,
    plan_rows,
    seal_sha256,
    seal_text,
    sequence_rows,
)
from fixture.runner.plan import compile_plan

SHIPPED = data_dir("sequences")


def test_the_seal_hash_is_sha256_of_the_texts_utf8_bytes() -> None:
    # FIPS 180-2 appendix B.1: SHA-256("abc")
    assert seal_sha256("abc") == "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"


def test_numbers_are_kept_to_nine_figures_so_a_last_place_difference_between_machines_is_the_same_seal() -> None:
    row = SealRow(1, "frequency_hz", 25.0, 50.0, 225.0, 310.0)
    text = seal_text([row])
    # Python's format mini-language, presentation type "e" with precision 8: nine significant figures
    assert text == f"{SEAL_FORMAT}\n1\tfrequency_hz\t2.50000000e+01\t5.00000000e+01\t2.25000000e+02\t3.10000000e+02\n"
    nudged = dataclasses.replace(row, high=310.0 + 2 ** -44)  # the next double above 310 (ulp 2**-44 at 2**8)
    assert seal_text([nudged]) == text
    changed = dataclasses.replace(row, high=310.00001)  # a change in the eighth figure is another seal
    assert seal_sha256(seal_text([changed])) != seal_sha256(text)


def test_a_sealed_text_reads_back_to_its_rows_and_anything_else_is_refused() -> None:
    rows = (SealRow(0, "supply_current_a", None, None, 0.002, 0.015), SealRow(1, "duty_pct", 50.0, 0.0, 2.0, 20.0))
    text = seal_text(rows)
    assert parse_seal_text(text) == rows
    for bad in (text.replace(SEAL_FORMAT, "knobline-limits-seal/9"), text[:-1], text.replace("\t", " ", 1),
                text.replace("2.00000000e+01", "20.0")):  # a number not in the canonical form
        with pytest.raises(ValueError):
            parse_seal_text(bad)


def test_the_rows_a_release_seals_are_the_rows_a_compiled_plan_judges_by() -> None:
    # The release computes them without a station and without the cache; the run takes them from its plan.
    config = load_station(SHIPPED / "demo-station.toml")
    seq = load_sequence(SHIPPED / "demo-sequence.toml", station=config, search_dirs=(SHIPPED,))
    plan = compile_plan(seq, seq.design, config)
    judged = [p for s in plan.steps for p in s.points if p.limits is not None]
    assert plan_rows(plan) == sequence_rows(seq) and len(plan_rows(plan)) == len(judged) > 1


def test_the_first_difference_names_the_stop_quantity_and_both_limits_in_words() -> None:
    released = (SealRow(1, "frequency_hz", 25.0, 50.0, 225.0, 310.0),)
    assert first_difference(released, (SealRow(1, "frequency_hz", 25.0, 50.0, 224.9, 310.1),)) == (
        "Frequency at knob A 25 %, B 50 % (step 2): released 225.000 Hz to 310.000 Hz, computed now 224.900 Hz to "
        "310.100 Hz")
    tiny = first_difference(released, (SealRow(1, "frequency_hz", 25.0, 50.0, 225.0, 310.00001),))
    assert "released 225.0 to 310.0 Hz, computed now 225.0 to 310.00001 Hz" in tiny
    assert first_difference(released, (SealRow(1, "frequency_hz", 25.0, 50.0, 225.0, 310.0 + 2 ** -44),)) == \
        "no row differs"
    assert "was released but is not read now" in first_difference(released, ())
