"""Every input checked where it enters: regular files of bounded size, printable text, plausible values.

Sources: control and bidirectional characters from Unicode 15.0 chapter 23 and UAX #9
section 2; serial-pattern semantics against Python's own ``re.fullmatch`` (the
reference implementation of the syntax); physical bounds are common practice, no source.
"""

from __future__ import annotations

import os
import re
from pathlib import Path

import pytest
from click.testing import CliRunner
from hypothesis import given, settings
from hypothesis import strategies as st

from fixture.cli import main
from fixture.errors import FileFormatError, UsageError
from fixture.files.design_file import load_design
from fixture.files.serial_pattern import MAX_SERIAL_CHARS, PatternError, compile_serial_pattern
from fixture.files.station_file import load_station
from fixture.files.text import check_printable, text_problem
from fixture.files.toml_reader import MAX_INPUT_BYTES, FileProblems, read_input_bytes
from fixture.files.traveller import read_traveller
from tests.files.edits import edited_copy, only_problem

SHIPPED = Path(__file__).resolve().parents[2] / "sequences"
DESIGN, STATION, SEQUENCE = (SHIPPED / f"demo-{n}.toml" for n in ("panel", "station", "sequence"))


@pytest.mark.parametrize(("char", "code", "kind"), [
    ("\x00", "U+0000", "NUL"), ("\x1b", "U+001B", "a control character"), ("\x7f", "U+007F", "a control character"),
    ("\x9b", "U+009B", "a control character"), ("\u202e", "U+202E", "a bidirectional formatting character"),
    ("\u2066", "U+2066", "a bidirectional formatting character"),
    ("\u200f", "U+200F", "a bidirectional formatting character"), ("\u2028", "U+2028", "a line separator"),
])
def test_text_with_a_control_or_bidi_character_is_refused_naming_the_code_point(char, code, kind) -> None:
    with pytest.raises(UsageError) as info:
        check_printable(f"PW22{char}000001", "--serial")
    assert info.value.message.startswith("--serial: expected printable text")
    assert info.value.message.endswith(f"found {code} ({kind}) at character 5")


def test_printable_text_in_any_script_is_accepted() -> None:
    # letters, digits and symbols of other scripts are printable (Unicode general categories L, N, S)
    assert text_problem("Jürgen Łukasz 山田 Ωμέγα-4.7kΩ ±1 %") is None


def test_a_fifo_a_directory_and_dev_zero_are_refused_before_reading(tmp_path: Path) -> None:
    fifo = tmp_path / "pipe.toml"
    os.mkfifo(fifo)  # nobody writes: a blocking open would never return
    for path, found in ((fifo, "a FIFO (named pipe)"), (tmp_path, "a directory"),
                        (Path("/dev/zero"), "a character device")):
        with pytest.raises(FileFormatError) as info:
            read_input_bytes(path)
        assert info.value.message == f"{path}: expected a regular file, found {found}"


def test_a_file_over_the_size_limit_is_refused_with_the_limit_in_the_message(tmp_path: Path) -> None:
    path = tmp_path / "big.toml"
    path.write_bytes(b"#" * (MAX_INPUT_BYTES + 1))
    with pytest.raises(FileFormatError) as info:
        read_input_bytes(path)
    assert info.value.message == f"{path}: expected a file of at most 1048576 bytes (1024 KiB), found 1048577 bytes"


@pytest.mark.parametrize(("old", "new", "line_end"), [
    ('value = "100n"', 'value = "4k7 F"',
     "parts.c_integrator.value: expected a value in F from 1 fF to 1 F (a sensible part value), found '4k7 F'"),
    ("sigma_k = 3", "sigma_k = nan",
     "parts.c_integrator.sigma_k: expected a number above 0 and at most 10 (tolerance = sigma_k x sigma), found nan"),
    ("test_temp_c = [20, 30]", "test_temp_c = [-300, 30]",
     "conditions.test_temp_c: expected [low, high] in °C with low <= high, each within -55..150 °C "
     "(the component temperature range), found [-300, 30]"),
    ('ageing = "1%"', 'ageing = "300%"',
     "parts.c_integrator.ageing: expected an ageing drift of at most 20 % of the value, found '300%'"),
    ("at = 100\nlow = 80", "at = 100\nlow = 200", "spec[3].low: expected a limit 0 to 100 %, found 200"),
    ('tempco = "200 ppm/K"', 'tempco = "nan ppm/K"',
     "parts.c_integrator.tempco: expected a temperature coefficient such as '100 ppm/K', found 'nan ppm/K'"),
    ('quantity = "duty_pct"', "quantity = []",
     "spec[2].quantity: expected one of frequency_hz, period_s, duty_pct, high_time_s, found []"),
    ('label = "rate"', 'label = "rate\\u001b[2J"',
     "knobs.a.label: expected printable text of at most 200 characters, without control or bidirectional "
     "characters, found U+001B (a control character) at character 5"),
])
def test_impossible_design_values_are_one_line_with_key_expectation_and_value(tmp_path, old, new, line_end) -> None:
    line = only_problem(load_design, edited_copy(DESIGN, tmp_path, old, new))
    assert line.endswith(line_end), line


def test_an_empty_knob_table_lists_the_knobs_missing_keys(tmp_path: Path) -> None:
    text = DESIGN.read_text(encoding="utf-8")
    start, end = text.index("[knobs.b]"), text.index("# ---- product specification")
    path = tmp_path / "demo-panel.toml"
    path.write_text(text[:start] + "[knobs.b]\n\n" + text[end:], encoding="utf-8")
    with pytest.raises(FileProblems) as info:
        load_design(path)
    assert [p.key for p in info.value.problems] == ["knobs.b.resistance", "knobs.b.stops"]


def test_a_hundred_thousand_stops_are_refused_with_the_limit(tmp_path: Path) -> None:
    stops = ", ".join(str(i / 1000) for i in range(100_000))
    line = only_problem(load_design, edited_copy(DESIGN, tmp_path, "stops = [0, 25, 50, 75, 100]", f"stops = [{stops}]"))
    assert line.endswith("knobs.a.stops: expected at most 101 knob stops, found 100000 stops")


@pytest.mark.parametrize(("old", "new", "line_end"), [
    ('# gate_time = "100 ms"', 'gate_time = "0 s"',
     "measurement.gate_time: expected a value above 0 and at most 100 s, found '0 s'"),
    ('backend = "@sim"\ntimeout', 'backend = "@bogus"\ntimeout',
     "instruments.counter.backend: expected a VISA backend: '' (the system VISA library), '@py' (pyvisa-py), "
     "'@sim' (knobline's simulated bench), 'FILE.yaml@sim' or 'LIBRARY@ivi', found '@bogus'"),
    ('timebase_error = "1 ppm"', "timebase_error = inf", "instruments.counter.accuracy.timebase_error: expected "),
    ("target_tur = 4", "target_tur = nan", "measurement.target_tur: expected a number above 0 and at most 100, "
     "found nan"),
])
def test_impossible_station_values_are_one_line(tmp_path, old, new, line_end) -> None:
    line = only_problem(load_station, edited_copy(STATION, tmp_path, old, new))
    assert line_end in line, line


@pytest.mark.parametrize(("old", "new", "line_end"), [
    ('profile = "tessaly-yqc83"', 'profile = "no-such-profile"', "instruments.counter.profile: expected one of the "
     "shipped profiles"),
    ('profile = "tessaly-yqc83"', 'profile = "tessaly-yqp26"', "instruments.counter.profile: expected a profile "
     "for a counter, found 'tessaly-yqp26' (a supply profile)"),
    ('resource = "TCPIP0::sim-counter::inst0::INSTR"', 'resource = "not a resource"',
     "instruments.counter.resource: expected a VISA resource string"),
    ('backend = "@sim"\ntimeout', 'backend = "@bogus"\ntimeout', "instruments.counter.backend: expected a VISA "),
])
def test_station_file_mistakes_are_bad_input_before_any_instrument_opens(tmp_path, old, new, line_end) -> None:
    path = edited_copy(STATION, tmp_path, old, new)
    result = CliRunner().invoke(main, ["station", str(path)])
    assert result.exit_code == 2, result.stderr
    problems = [line for line in result.stderr.splitlines() if line.startswith("knobline:")]
    assert len(problems) == 1 and problems[0].startswith(f"knobline: error: {path}: {line_end}"), result.stderr


def test_a_backend_this_computer_cannot_load_is_the_station_files_mistake(tmp_path: Path) -> None:
    pyvisa_highlevel = pytest.importorskip("pyvisa.highlevel")
    try:
        pyvisa_highlevel.open_visa_library("")
        pytest.skip("this computer has a system VISA library")
    except (ValueError, OSError):
        pass
    path = edited_copy(STATION, tmp_path, 'backend = "@sim"\ntimeout', 'backend = ""\ntimeout')
    result = CliRunner().invoke(main, ["station", str(path)])
    assert result.exit_code == 2, result.stderr
    assert f"knobline: error: {path}: instruments.counter.backend: expected a VISA backend installed" in result.stderr


@pytest.mark.parametrize(("option", "value", "code"), [
    ("--serial", "PW22-000001\x1b[32m PASS", "U+001B"), ("--operator", "ann\u202enimda", "U+202E"),
    ("--lot", "c_integrator=C1\x00", "U+0000"), ("--serial", "PW22-\u2067000001", "U+2067"),
])
def test_test_command_refuses_control_characters_in_serial_operator_and_lot(tmp_path, option, value, code) -> None:
    args = ["test", "--db", str(tmp_path / "r.sqlite"), "--serial", "PW22-000001", option, value]
    result = CliRunner().invoke(main, args)
    assert result.exit_code == 2, result.stderr
    limit = 64 if option == "--serial" else 200  # a serial is at most 64 characters (MAX_SERIAL_CHARS)
    assert f"knobline: error: {option.lstrip('-')}: expected printable text of at most {limit} characters, without " \
           f"control or bidirectional characters, found {code}" in result.stderr.replace("--lot", "lot") \
           .replace("--operator", "operator"), result.stderr
    assert not (tmp_path / "r.sqlite").exists()  # refused before the results database is touched


def test_a_traveller_lot_with_an_escape_sequence_is_a_problem_line(tmp_path: Path) -> None:
    path = tmp_path / "t.csv"
    path.write_text("serial,c_integrator\nPW22-000001,C1\x1b[31m\n", encoding="utf-8")
    with pytest.raises(Exception) as info:
        read_traveller(path)
    assert str(info.value) == (f"{path}: line 2, column 2 (c_integrator): expected a lot code of at most 200 "
                               "characters, without control or bidirectional characters, found U+001B (a control "
                               "character) at character 3")


# --- serial patterns: the safe subset means what Python's re means, and never backtracks
_ATOMS = st.sampled_from(["a", "b", "7", "-", r"\d", r"\w", ".", "[ab]", "[^a]", "[0-9]", r"\.", "(a|b)", "(?:ab)",
                          "(a|)"])
_QUANTS = st.sampled_from(["", "", "?", "*", "+", "{2}", "{0,3}", "{1,}"])


@st.composite
def safe_patterns(draw: st.DrawFn) -> str:
    pieces = draw(st.lists(st.tuples(_ATOMS, _QUANTS), min_size=1, max_size=5))
    body = "".join(a + q for a, q in pieces)
    if draw(st.booleans()):
        body = f"({body}){draw(_QUANTS)}"
    return body + (f"|{draw(_ATOMS)}" if draw(st.booleans()) else "")


@settings(max_examples=150, deadline=None, derandomize=True)
@given(pattern=safe_patterns(), serial=st.text(alphabet="ab7-.x\n", max_size=12))
def test_a_safe_serial_pattern_matches_exactly_what_re_fullmatch_matches(pattern: str, serial: str) -> None:
    expected = re.fullmatch(pattern, serial, flags=re.ASCII) is not None  # reference: CPython's re
    assert compile_serial_pattern(pattern).matches(serial) == expected, (pattern, serial)


@pytest.mark.parametrize("pattern", [r"(a)\1", "(?=a)a", "(?P<x>a)", "a{1000000}", "a**", "a*?", "[a", "(a", "x" * 201,
                                     "((((((((((((a))))))))))))"])
def test_patterns_outside_the_safe_subset_are_refused(pattern: str) -> None:
    with pytest.raises(PatternError):
        compile_serial_pattern(pattern)


@pytest.mark.parametrize("pattern", ["(a|a)*b", "(a+)+$", "(x+x+)+y", "(a*)*b"])
def test_catastrophic_backtracking_patterns_answer_on_the_longest_serial(pattern: str) -> None:
    # these take 2^n steps in a backtracking engine on n letters (Cox, "Regular Expression Matching
    # Can Be Simple And Fast", 2007); the automaton answers at once (the suite would hang otherwise)
    serial = pattern[1] * (MAX_SERIAL_CHARS - 1) + "!"
    assert compile_serial_pattern(pattern).matches(serial) is False
    assert compile_serial_pattern(pattern).matches(pattern[1] * 10_000) is False  # beyond the length limit


@pytest.mark.parametrize(("command", "option", "value"), [
    ("limits", "--gate-time", "nan"), ("limits", "--gate-time", "0"), ("limits", "--guard-multiple", "nan"),
    ("limits", "--target-tur", "nan"), ("measure", "--gate-time", "nan"), ("limits", "--gate-time", "1e9"),
])
def test_command_line_gate_times_and_multiples_must_be_finite_and_in_range(command, option, value) -> None:
    # IEEE 754: nan compares false with everything, so a plain range check lets it through
    result = CliRunner().invoke(main, [command, option, value])
    assert result.exit_code == 2, result.output
    assert f"Invalid value for '{option}'" in result.stderr
