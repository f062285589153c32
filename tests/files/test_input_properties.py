"""Property-based input suite: mutated design, station and sequence files through `knobline check`.

Each example takes a shipped file, changes one value (or removes a key or a table),
writes it back as TOML and runs the command in-process. Whatever the mutation,
knobline must answer exit 0 (a file that is still sane) or exit 2 with one line per
problem, every line ``knobline: error: FILE: KEY: expected ..., found ...``; never a
traceback, an internal error, exit 3 or a hang (a 10 s alarm per example). Mutations
that are certainly wrong (nan, inf, 1e300, a table for a value, control characters,
over-long text, huge arrays) must be refused. Common practice, no source: the mutation
list follows what a hostile tester types; the expectations are the issue's rules.
"""

from __future__ import annotations

import copy
import signal
import tempfile
import tomllib
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import pytest
from click.testing import CliRunner
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fixture.cli import main
from tests.files.toml_text import toml_text

SHIPPED = Path(__file__).resolve().parents[2] / "sequences"
DOCS = {name: tomllib.loads((SHIPPED / f"{name}.toml").read_text(encoding="utf-8"))
        for name in ("demo-panel", "demo-station", "demo-sequence")}
ALARM_S = 10
# keys whose value is free text: a digit-led or "nan" string there is a legal name, not a unit slip
TEXT_KEYS = {"name", "revision", "ref", "label", "certificate", "lab", "notes", "site", "make", "model",
             "description", "maker"}


def _leaves(doc: Any, path: tuple = ()) -> list[tuple]:
    if isinstance(doc, dict):
        return [p for k, v in doc.items() for p in _leaves(v, (*path, k))]
    if isinstance(doc, list) and doc and all(isinstance(v, dict) for v in doc):
        return [p for i, v in enumerate(doc) for p in _leaves(v, (*path, i))]
    return [path] + ([(*path, i) for i in range(len(doc))] if isinstance(doc, list) else [])


def _tables(doc: Any, path: tuple = ()) -> list[tuple]:
    out = [path] if path and isinstance(doc, dict) else []
    if isinstance(doc, dict):
        out += [p for k, v in doc.items() for p in _tables(v, (*path, k))]
    elif isinstance(doc, list):
        out += [p for i, v in enumerate(doc) if isinstance(v, dict) for p in _tables(v, (*path, i))]
    return out


LEAVES = {name: _leaves(doc) for name, doc in DOCS.items()}
TABLES = {name: _tables(doc) for name, doc in DOCS.items()}

# (name, certainly wrong wherever it lands, new value from the old one)
WRONG: list[tuple[str, Callable[[Any], Any]]] = [
    ("nan", lambda v: float("nan")),
    ("inf", lambda v: float("inf")),
    ("-inf", lambda v: float("-inf")),
    ("1e300", lambda v: 1e300),
    ("-1e6", lambda v: -1e6),
    ("a table", lambda v: {"x": 1}),
    ("an escape sequence", lambda v: f"{v}\x1b[32m PASS" if isinstance(v, str) else "\x1b[2J"),
    ("NUL", lambda v: f"{v}\x00" if isinstance(v, str) else "\x00"),
    ("right-to-left override", lambda v: f"\u202e{v}" if isinstance(v, str) else "\u202e1"),
    ("C1 control", lambda v: f"{v}\x9b" if isinstance(v, str) else "\x9b"),
    ("20 000 characters", lambda v: "7" * 20_000),
    ("100 000 items", lambda v: [1] * 100_000),
]
# values that may or may not be wrong where they land: only the no-crash rules apply
MAYBE: list[tuple[str, Callable[[Any], Any]]] = [
    ("zero", lambda v: 0), ("-1", lambda v: -1), ("-300", lambda v: -300), ("0.5", lambda v: 0.5),
    ("true", lambda v: True), ("empty text", lambda v: ""), ("empty array", lambda v: []),
    ("4k7 F", lambda v: "4k7 F"), ("10 kΩ", lambda v: "10 kΩ"), ("1e9 s", lambda v: "1e9 s"),
    ("300%", lambda v: "300%"), ("nan%", lambda v: "nan%"), ("0 s", lambda v: "0 s"),
    ("(a|a)*b", lambda v: "(a|a)*b"), ("(a)\\1", lambda v: "(a)\\1"), ("@bogus", lambda v: "@bogus"),
    ("unknown", lambda v: "unknown"), ("2027-01-01", lambda v: "2027-01-01"),
]


@st.composite
def mutations(draw: st.DrawFn, name: str) -> tuple[str, tuple, str]:
    """What to do to shipped document ``name``: (action, key path, mutation name); small, so failures print well."""
    action = draw(st.sampled_from(["wrong", "wrong", "wrong", "maybe", "maybe", "delete", "empty table",
                                   "delete table"]))
    path = draw(st.sampled_from(TABLES[name] if action in ("empty table", "delete table") else LEAVES[name]))
    what = draw(st.sampled_from([w for w, _ in (WRONG if action == "wrong" else MAYBE)])) \
        if action in ("wrong", "maybe") else ""
    return action, path, what


def mutated(name: str, case: tuple[str, tuple, str]) -> tuple[dict[str, Any], str, bool]:
    """The mutated copy of shipped document ``name``: (document, what was done, certainly wrong)."""
    action, path, what = case
    doc = copy.deepcopy(DOCS[name])
    parent = doc
    for step in path[:-1]:
        parent = parent[step]
    if action in ("delete", "delete table"):
        del parent[path[-1]]
        return doc, f"delete {path}", False
    if action == "empty table":
        parent[path[-1]] = {}
        return doc, f"empty {path}", False
    change = dict(WRONG if action == "wrong" else MAYBE)[what]
    parent[path[-1]] = change(parent[path[-1]])
    return doc, f"{path} <- {what}", action == "wrong"


@contextmanager
def alarm(seconds: int) -> Iterator[None]:
    """Fail the example instead of hanging the suite."""
    def ring(signum: int, frame: Any) -> None:
        raise AssertionError(f"no answer within {seconds} s: knobline hung on this input")

    previous = signal.signal(signal.SIGALRM, ring)
    signal.alarm(seconds)
    try:
        yield
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, previous)


def run_check(tmp: Path, args: list[str]) -> tuple[int, str]:
    with alarm(ALARM_S):
        result = CliRunner().invoke(main, ["check", *args])
    assert result.exception is None or isinstance(result.exception, SystemExit), repr(result.exception)
    return result.exit_code, result.stderr


def assert_clean_answer(code: int, stderr: str, what: str, certainly_wrong: bool) -> None:
    lines = [line for line in stderr.splitlines() if not line.startswith("knobline 0") and
             not line.startswith("knobline ") or line.startswith("knobline:")]
    problems = [line for line in stderr.splitlines() if line.startswith("knobline:")]
    assert code in (0, 2), f"{what}: exit {code}\n{stderr}"
    assert "Traceback" not in stderr and "internal error" not in stderr, f"{what}\n{stderr}"
    if certainly_wrong:
        assert code == 2, f"{what}: accepted"
    if code == 2:
        assert problems, f"{what}: exit 2 without a problem line"
        assert all(line.startswith("knobline: error: ") and ": expected " in line for line in problems), stderr
        # one problem per line: every printed line is a problem line (the banner aside)
        assert len(lines) == len(problems), stderr
        assert all(ch.isprintable() for line in problems for ch in line), f"{what}: raw control characters"


def _write(tmp_path: Path, name: str, doc: dict[str, Any]) -> Path:
    folder = Path(tempfile.mkdtemp(dir=tmp_path))
    path = folder / f"{name}.toml"
    path.write_text(toml_text(doc), encoding="utf-8")
    return path


PROPERTY = settings(max_examples=130, deadline=None, derandomize=True,
                    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow,
                                           HealthCheck.data_too_large])


@PROPERTY
@given(case=mutations("demo-panel"))
def test_a_mutated_design_file_is_accepted_sane_or_refused_one_line_per_problem(tmp_path: Path, case) -> None:
    doc, what, wrong = mutated("demo-panel", case)
    path = _write(tmp_path, "demo-panel", doc)
    code, stderr = run_check(tmp_path, [str(path)])
    assert_clean_answer(code, stderr, what, wrong)


@PROPERTY
@given(case=mutations("demo-station"))
def test_a_mutated_station_file_is_accepted_sane_or_refused_before_anything_opens(tmp_path: Path, case) -> None:
    doc, what, wrong = mutated("demo-station", case)
    path = _write(tmp_path, "demo-station", doc)
    code, stderr = run_check(tmp_path, ["--station", str(path)])
    assert_clean_answer(code, stderr, what, wrong)


@settings(PROPERTY, max_examples=110)
@given(case=mutations("demo-sequence"))
def test_a_mutated_sequence_file_is_accepted_sane_or_refused_one_line_per_problem(tmp_path: Path, case) -> None:
    doc, what, wrong = mutated("demo-sequence", case)
    path = _write(tmp_path, "demo-sequence", doc)
    (path.parent / "demo-panel.toml").write_bytes((SHIPPED / "demo-panel.toml").read_bytes())
    code, stderr = run_check(tmp_path, ["--sequence", str(path)])
    assert_clean_answer(code, stderr, what, wrong)


@settings(PROPERTY, max_examples=12)
@given(case=mutations("demo-sequence"))
def test_a_mutated_sequence_compiles_against_the_station_or_is_refused(tmp_path: Path, case) -> None:
    doc, what, wrong = mutated("demo-sequence", case)
    path = _write(tmp_path, "demo-sequence", doc)
    (path.parent / "demo-panel.toml").write_bytes((SHIPPED / "demo-panel.toml").read_bytes())
    code, stderr = run_check(tmp_path, ["--sequence", str(path), "--station", "demo-station"])
    assert_clean_answer(code, stderr, what, wrong)


@pytest.mark.parametrize("name", ["demo-panel", "demo-station", "demo-sequence"])
def test_every_leaf_set_to_nan_is_refused_naming_its_key(tmp_path: Path, name: str) -> None:
    # exhaustive over the shipped files' values: nan is never a physical value (IEEE 754 quiet NaN)
    option = {"demo-panel": [], "demo-station": ["--station"], "demo-sequence": ["--sequence"]}[name]
    for path in (p for p in LEAVES[name] if p):
        doc = copy.deepcopy(DOCS[name])
        parent = doc
        for step in path[:-1]:
            parent = parent[step]
        parent[path[-1]] = float("nan")
        file = _write(tmp_path, name, doc)
        if name == "demo-sequence":
            (file.parent / "demo-panel.toml").write_bytes((SHIPPED / "demo-panel.toml").read_bytes())
        code, stderr = run_check(tmp_path, [*option, str(file)])
        assert_clean_answer(code, stderr, f"{path} <- nan", True)
        last = next(p for p in reversed(path) if isinstance(p, str))
        naming = [line for line in stderr.splitlines() if f".{last}" in line or f"{last}:" in line]
        assert len(naming) == 1, f"{path}: one line naming the key expected\n{stderr}"
