"""Serials made from a sequence's serial pattern: every one matches, none repeats, a second batch continues."""

from __future__ import annotations

import itertools
import re

import pytest

from fixture.errors import UserInputError
from fixture.files.serial_numbers import SerialNumbering
from fixture.files.serial_pattern import compile_serial_pattern


def numbering(pattern: str) -> SerialNumbering:
    return SerialNumbering(compile_serial_pattern(pattern))


@pytest.mark.parametrize("pattern", ["PW22-[0-9]{6}", "AB-[0-9]{4}", "AB-[0-9]+", "[A-Z]{2}[0-9]{5}",
                                     r"SN(-|/)\d{3}[a-c]?", r"(PW|QX)-\w{2}", "x.{3}", "^LOT[0-9]{2,3}$"])
def test_every_serial_made_matches_the_pattern_as_python_re_reads_it_and_none_repeats(pattern: str) -> None:
    # reference: Python's own re.fullmatch with re.ASCII, which serial_pattern.py promises to agree with
    made = numbering(pattern).serials(1, 300)
    assert all(re.fullmatch(pattern, s, re.ASCII) for s in made)
    assert len(set(made)) == 300
    assert len({len(s) for s in made}) == 1
    assert made == sorted(made), "numbered in character order"


def test_the_demo_pattern_keeps_its_numbering_from_one() -> None:
    assert numbering("PW22-[0-9]{6}").serials(1, 3) == ["PW22-000001", "PW22-000002", "PW22-000003"]
    assert numbering("AB-[0-9]{4}").serial(9999) == "AB-9999"


@pytest.mark.parametrize(("pattern", "length"), [("AB-[0-9]{4}", 7), ("[A-C][0-9]{2}", 3), ("Q[0-9]?[A-B]", 3),
                                                 (r"SN(-|/)\d{3}[a-c]?", 7)])
def test_the_count_is_every_string_of_that_length_the_pattern_accepts(pattern: str, length: int) -> None:
    # reference: brute force over the generating alphabet (digits, upper case, the pattern's own characters),
    # each candidate judged by Python's re.fullmatch
    counted = numbering(pattern)
    assert counted.length == length
    alphabet = counted.alphabet
    brute = sum(1 for chars in itertools.product(alphabet, repeat=length)
                if re.fullmatch(pattern, "".join(chars), re.ASCII)) if len(alphabet) ** length <= 2e5 else None
    expected = {"AB-[0-9]{4}": 10**4, r"SN(-|/)\d{3}[a-c]?": 2 * 10**3 * 3}  # product rule of counting
    assert counted.count == (brute if brute is not None else expected[pattern])


def test_a_second_batch_continues_after_the_highest_serial_of_the_pattern_and_ignores_others() -> None:
    serials = numbering("AB-[0-9]{4}")
    stored = ["AB-0007", "AB-0012", "AB-0003", "AB-00120", "ZZ-9999", "AB-12345", "PW22-000999"]
    assert serials.next_number(stored) == 13
    assert serials.serials(serials.next_number(stored), 2) == ["AB-0013", "AB-0014"]
    assert serials.next_number([]) == 1


def test_a_serial_typed_by_hand_outside_the_generated_characters_is_still_never_repeated() -> None:
    serials = numbering("x.{3}")
    nxt = serials.serials(serials.next_number(["x00~"]), 1)[0]
    assert nxt > "x00~" and re.fullmatch("x.{3}", nxt)


@pytest.mark.parametrize(("pattern", "units"), [("AB-[0-9]", 10), ("ABC", 1), ("AB-[0-9]{2}", 100)])
def test_a_pattern_with_too_few_serials_is_one_line_saying_how_many_it_can_make(pattern: str, units: int) -> None:
    with pytest.raises(UserInputError) as caught:
        numbering(pattern).serials(1, units)
    message = str(caught.value)
    assert "\n" not in message and pattern in message and f"for {units} more unit" in message
    assert "can make none" in message if pattern == "ABC" else "can make " in message


def test_the_prefix_every_serial_starts_with_narrows_the_database_query() -> None:
    assert numbering("PW22-[0-9]{6}").prefix() == "PW22-"
    assert numbering("[A-Z]{2}[0-9]{5}").prefix() == ""
