"""Canonical JSON: the exact bytes a record hash is taken over."""

from __future__ import annotations

import hashlib
import json

import pytest

from fixture.errors import SoftwareFault
from fixture.reporting.canonical import canonical_json, record_sha256, script_safe_json


def test_keys_are_sorted_and_there_is_no_whitespace() -> None:
    assert canonical_json({"b": [1, 2.5, None, True], "a": {"d": "x", "c": ""}}) == \
        b'{"a":{"c":"","d":"x"},"b":[1,2.5,null,true]}'


def test_floats_are_written_in_shortest_round_trip_form() -> None:
    # Python's float repr is the shortest string that reads back to the same double (Python docs,
    # "Floating Point Arithmetic"); json.loads must give the identical double back.
    values = [0.1, 3.1234567e-3, 1e-05, 25.0, 1e22, 2.0 ** -1074]
    text = canonical_json(values)
    assert text == b"[0.1,0.0031234567,1e-05,25.0,1e+22,5e-324]"
    assert json.loads(text) == values


def test_non_ascii_is_utf8_and_control_characters_are_escaped() -> None:
    assert canonical_json("Ω\n\x1f\"") == '"Ω\\n\\u001f\\""'.encode()


@pytest.mark.parametrize("bad", [float("nan"), float("inf"), (1, 2), {1: "x"}, b"bytes", "\ud800"])
def test_values_without_one_canonical_form_are_refused(bad: object) -> None:
    with pytest.raises(SoftwareFault):
        canonical_json({"x": bad})


def test_record_hash_is_sha256_of_the_canonical_bytes() -> None:
    # FIPS 180-4 SHA-256 as implemented by hashlib.
    assert record_sha256({"a": 1}) == hashlib.sha256(b'{"a":1}').hexdigest()


def test_script_safe_json_cannot_close_a_script_element_and_reads_back_the_same() -> None:
    value = {"s": "</script><script>alert(1)</script><!-- & \u2028"}
    text = script_safe_json(value)
    assert "<" not in text and ">" not in text and "&" not in text and "\u2028" not in text
    assert json.loads(text) == value
