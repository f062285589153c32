"""IEEE 488.2 arbitrary blocks on hand-built bytes.

Source for the block format: IEEE 488.2 §8.7.9 (definite length: '#', one digit d = number of
length digits, d digits of length, payload) and §8.7.10 (indefinite: '#0', payload, NL^END);
from memory. pyvisa-sim cannot carry bytes >= 0x80, so these bytes are written out by hand.
"""

from __future__ import annotations

import numpy as np
import pytest

from fixture.errors import UnparsableReply
from fixture.instruments.ieee4882 import build_block, decode_samples, header_digit_count, parse_block


def test_definite_block_with_one_length_digit_carries_its_payload() -> None:
    # '#', 1 length digit, length 5, then the 5 payload bytes.
    assert parse_block(b"#15hello") == b"hello"


def test_definite_block_may_be_followed_by_the_message_terminator() -> None:
    assert parse_block(b"#15hello\n") == b"hello"


def test_definite_block_with_two_length_digits_and_binary_payload() -> None:
    payload = bytes([0x00, 0x0A, 0xFF, 0x80, 0x0A, 0x23, 0x30, 0x7F, 0x0D, 0x01])  # newlines and '#' inside
    assert parse_block(b"#210" + payload + b"\n") == payload


def test_length_digits_may_have_leading_zeros() -> None:
    # Leading zeros are allowed in the length field (fixed-width headers are common practice, no source).
    assert parse_block(b"#4000312a") == b"12a"


def test_definite_block_of_zero_length_is_empty() -> None:
    assert parse_block(b"#10") == b""


def test_indefinite_block_runs_to_the_final_newline() -> None:
    assert parse_block(b"#0ab\ncd\n") == b"ab\ncd"


@pytest.mark.parametrize("data, complaint", [
    (b"15hello", "starting '#<digit>'"),                 # no '#'
    (b"#x5hello", "digit after '#'"),                    # header digit is not a digit
    (b"#25hello", "payload length"),                     # 2 length digits announced, '5h' is not a number
    (b"#3", "3 length digits"),                          # header cut short
    (b"#16hello", "announces 6 bytes, found only 5"),    # short payload
    (b"#13helloXX", "nothing after"),                    # trailing garbage
    (b"#15hello\nX", "nothing after"),                   # something after the terminator
    (b"#0abc", "end with a newline"),                    # indefinite block without its terminator
    (b"", "starting '#<digit>'"),
])
def test_malformed_blocks_are_unparsable(data: bytes, complaint: str) -> None:
    with pytest.raises(UnparsableReply, match=complaint):
        parse_block(data)


def test_header_digit_count_reads_the_digit_after_the_hash() -> None:
    assert header_digit_count(b"#9") == 9
    assert header_digit_count(b"#0") == 0


def test_build_block_writes_the_header_by_the_rule() -> None:
    # 12 bytes -> length "12" has 2 digits -> "#212"; by the §8.7.9 rule, worked by hand.
    assert build_block(b"abcdefghijkl") == b"#212abcdefghijkl"
    assert build_block(b"") == b"#10"


def test_int16_big_and_little_endian_decode_twos_complement() -> None:
    # Two's complement 16-bit: 1 = 00 01, -2 = FF FE, 32767 = 7F FF, -32768 = 80 00 (by definition).
    big = bytes([0x00, 0x01, 0xFF, 0xFE, 0x7F, 0xFF, 0x80, 0x00])
    little = bytes([0x01, 0x00, 0xFE, 0xFF, 0xFF, 0x7F, 0x00, 0x80])
    expected = [1, -2, 32767, -32768]
    assert decode_samples(big, "int16", "big").tolist() == expected
    assert decode_samples(little, "int16", "little").tolist() == expected


def test_int8_decodes_signed_bytes() -> None:
    assert decode_samples(bytes([0x00, 0x7F, 0x80, 0xFF]), "int8").tolist() == [0, 127, -128, -1]


def test_float32_decodes_ieee754_single_precision() -> None:
    # IEEE 754 binary32: 1.0 = 3F800000, -2.5 = C0200000, 0.15625 = 3E200000 (from memory, checkable by hand).
    big = bytes.fromhex("3F800000C02000003E200000")
    little = bytes.fromhex("0000803F000020C00000203E")
    assert decode_samples(big, "float32", "big").tolist() == [1.0, -2.5, 0.15625]
    assert decode_samples(little, "float32", "little").tolist() == [1.0, -2.5, 0.15625]


def test_decoded_samples_are_native_order_arrays() -> None:
    samples = decode_samples(bytes([0x01, 0x02]), "int16", "big")
    assert samples.dtype == np.dtype("int16") and samples.dtype.isnative
    assert samples.tolist() == [0x0102]


def test_payload_that_is_not_whole_samples_is_unparsable() -> None:
    with pytest.raises(UnparsableReply, match="multiple of 2 bytes"):
        decode_samples(b"\x00\x01\x02", "int16")
