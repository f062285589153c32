"""Text from data shown visibly: control, NUL, C1 and bidirectional-control characters never printed raw."""

from __future__ import annotations

import json
import unicodedata

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from fixture.reporting.safe_text import json_escape_hidden, visible

# C0 controls U+0000..U+001F, DEL U+007F and C1 controls U+0080..U+009F: Unicode 15, section 23.1
# ("Control Codes"), the ranges ISO/IEC 6429 (ECMA-48) assigns.
C0_DEL_C1 = [chr(c) for c in (*range(0x00, 0x20), 0x7F, *range(0x80, 0xA0))]
# The explicit directional formatting characters of UAX #9 (Unicode Bidirectional Algorithm), section 2:
# embeddings and overrides U+202A..U+202E, isolates U+2066..U+2069, marks U+200E, U+200F and U+061C.
BIDI_CONTROLS = [chr(c) for c in (*range(0x202A, 0x202F), *range(0x2066, 0x206A), 0x200E, 0x200F, 0x061C)]


def hidden(character: str) -> bool:
    # Categories per the Unicode Character Database (general categories Cc, Cf, Cs, Zl, Zp); ZWNJ/ZWJ kept.
    return unicodedata.category(character) in {"Cc", "Cf", "Cs", "Zl", "Zp"} and character not in "\u200c\u200d"


@pytest.mark.parametrize("character", C0_DEL_C1)
def test_every_c0_c1_and_del_character_is_written_as_a_python_style_hex_escape(character: str) -> None:
    shown = visible(f"a{character}b")
    assert character not in shown
    assert shown == f"a\\x{ord(character):02x}b"  # the form Python's repr writes them in (from memory)


@pytest.mark.parametrize("character", BIDI_CONTROLS)
def test_every_bidi_control_is_written_as_its_code_point(character: str) -> None:
    shown = visible(f"PW22{character}0001")
    assert character not in shown
    assert shown == f"PW22<U+{ord(character):04X}>0001"


def test_an_ansi_fake_pass_is_shown_as_text_not_obeyed() -> None:
    # ECMA-48: ESC [ 2 J erases the screen, ESC [ 1 ; 4 2 m is bold on green.
    assert visible("\x1b[2J\x1b[1;42m PASS \x1b[0m") == "\\x1b[2J\\x1b[1;42m PASS \\x1b[0m"


def test_line_and_paragraph_separators_and_the_byte_order_mark_are_shown() -> None:
    # U+2028/U+2029 are categories Zl/Zp, U+FEFF is Cf (Unicode Character Database).
    assert visible("a\u2028b\u2029c\ufeffd") == "a<U+2028>b<U+2029>c<U+FEFF>d"


def test_printable_text_in_any_script_passes_unchanged() -> None:
    # Persian needs the zero-width non-joiner, emoji sequences the zero-width joiner (Unicode 15 section 23.2).
    for text in ("PW22-000001", "Zoë Łukasiewicz", "می\u200cخواهم", "\U0001F469\u200d\U0001F527",
                 "<script>alert(1)</script>", "25 °C ± 2 %", "\u00a0non-breaking"):
        assert visible(text) == text


def test_keep_leaves_named_characters_alone() -> None:
    assert visible("line 1\nline 2\x1b", keep="\n") == "line 1\nline 2\\x1b"
    assert visible("line 1\nline 2") == "line 1\\x0aline 2"


def test_anything_not_text_is_shown_as_its_text() -> None:
    assert visible(12.5) == "12.5" and visible(None) == "None"


@settings(max_examples=200, deadline=None, derandomize=True)
@given(st.text(alphabet=st.characters(codec="utf-8"), max_size=40) | st.text(max_size=40))
def test_no_hidden_character_survives_and_clean_text_is_untouched(text: str) -> None:
    shown = visible(text)
    assert not any(hidden(c) for c in shown)
    if not any(hidden(c) for c in text):
        assert shown == text


@settings(max_examples=150, deadline=None, derandomize=True)
@given(st.dictionaries(st.text(max_size=8), st.text(max_size=20), max_size=4))
def test_json_with_hidden_characters_escaped_reads_back_the_same_data(data: dict[str, str]) -> None:
    text = json.dumps(data, ensure_ascii=False)
    try:
        text.encode("utf-8")
    except UnicodeEncodeError:
        return  # lone surrogates: canonical JSON refuses them before this point
    escaped = json_escape_hidden(text)
    assert json.loads(escaped) == data  # RFC 8259 section 7: \uXXXX escapes any character in a string
    assert not any(hidden(c) for c in escaped)


def test_a_character_beyond_the_bmp_is_escaped_as_a_surrogate_pair() -> None:
    # U+E0001 LANGUAGE TAG (category Cf) is U+DB40 U+DC01 in UTF-16 (RFC 2781 section 2.1).
    assert json_escape_hidden('"a\U000e0001"') == '"a\\udb40\\udc01"'
