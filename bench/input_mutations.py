"""Mutated design, station and sequence files through knobline's readers: what gets through.

Runs a fixed, seeded set of mutations of the shipped demo files (and a few hostile
paths and serials) through the code `knobline check`, `knobline station` and
`knobline test` use before a unit is touched, each case in-process with a time
limit, and prints four counts:

* accepted nonsense: a value that is certainly wrong (nan, inf, huge, a table for a
  number, a unit slip, control characters, ...) read without complaint (exit 0);
* internal errors: anything but a deliberate knobline error (what the CLI prints as
  "internal error ... please report", exit 3);
* hangs: a case over the time limit or exhausting memory;
* station-file mistakes reported as station faults (exit 3) instead of bad input.

Run it against any checkout: ``PYTHONPATH=/path/to/checkout python bench/input_mutations.py``.
Figures print; nothing is asserted (tests never time).
"""

from __future__ import annotations

import argparse
import copy
import datetime as dt
import json
import os
import random
import resource
import signal
import sys
import tempfile
import tomllib
from collections.abc import Callable
from pathlib import Path
from typing import Any

# the bench shares the tests' TOML writer (it imports nothing of fixture, so any checkout can be measured)
sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
from tests.files.toml_text import toml_text  # noqa: E402

LIMIT_S = 20
TEXT_KEYS = {"name", "revision", "ref", "label", "certificate", "lab", "notes", "site", "make", "model", "resource",
             "profile", "backend", "description", "call", "maker", "design", "kind", "quantity", "knob",
             "distribution", "taper", "instrument", "decision_rule", "method", "condition", "from", "scheme_a",
             "scheme_b", "serial_pattern", "requires", "measure"}


def leaves(doc: Any, path: tuple = ()) -> list[tuple]:
    """Paths to every non-table value (array items included)."""
    if isinstance(doc, dict):
        return [p for k, v in doc.items() for p in leaves(v, (*path, k))]
    if isinstance(doc, list) and doc and all(isinstance(v, dict) for v in doc):
        return [p for i, v in enumerate(doc) for p in leaves(v, (*path, i))]
    out = [path]
    if isinstance(doc, list):
        out += [(*path, i) for i in range(len(doc))]
    return out


def tables(doc: Any, path: tuple = ()) -> list[tuple]:
    out = []
    if isinstance(doc, dict):
        if path:
            out.append(path)
        for k, v in doc.items():
            out += tables(v, (*path, k))
    elif isinstance(doc, list):
        for i, v in enumerate(doc):
            if isinstance(v, dict):
                out += tables(v, (*path, i))
    return out


def put(doc: Any, path: tuple, value: Any) -> None:
    for p in path[:-1]:
        doc = doc[p]
    doc[path[-1]] = value


def get(doc: Any, path: tuple) -> Any:
    for p in path:
        doc = doc[p]
    return doc


def delete(doc: Any, path: tuple) -> None:
    for p in path[:-1]:
        doc = doc[p]
    del doc[path[-1]]


# (name, certainly wrong?, function(original value) -> new value)
VALUE_MUTATIONS: list[tuple[str, bool, Callable[[Any], Any]]] = [
    ("nan", True, lambda v: float("nan")),
    ("inf", True, lambda v: float("inf")),
    ("-inf", True, lambda v: -float("inf")),
    ("nan text", True, lambda v: "nan" if not isinstance(v, str) or not v[:1].isdigit() else "nan " + v),
    ("huge", True, lambda v: 1e300),
    ("huge negative", True, lambda v: -1e6),
    ("-300 degC", None, lambda v: -300),
    ("zero", None, lambda v: 0),
    ("negative one", None, lambda v: -1),
    ("a table", True, lambda v: {"x": 1}),
    ("escape", True, lambda v: f"{v}\x1b[32mPASS\x1b[0m" if isinstance(v, str) else "\x1b[2J"),
    ("NUL", True, lambda v: f"{v}\x00" if isinstance(v, str) else "\x00"),
    ("RLO", True, lambda v: f"\u202e{v}" if isinstance(v, str) else "\u202e1"),
    ("long text", True, lambda v: "x" * 20000),
    ("huge array", True, lambda v: list(range(100_000))),
    ("empty array", None, lambda v: []),
    ("empty text", None, lambda v: ""),
    ("true", None, lambda v: True),
]
UNIT_SLIPS = ["4k7 F", "10 F", "1e9 ohm", "5 kV", "1000 s", "300%", "0 s", "1e40", "47 nF/K"]


def mutate(doc: dict[str, Any], rng: random.Random) -> tuple[dict[str, Any], str, bool | None]:
    """One mutation of ``doc``: (new doc, description, certainly wrong or None when it depends)."""
    new = copy.deepcopy(doc)
    choice = rng.random()
    if choice < 0.1:
        path = rng.choice(tables(new))
        delete(new, path)
        return new, f"delete table {path}", None
    if choice < 0.15:
        path = rng.choice(tables(new))
        put(new, path, {})
        return new, f"empty table {path}", None
    path = rng.choice(leaves(new))
    if choice < 0.25:
        delete(new, path)
        return new, f"delete {path}", None
    old = get(new, path)
    if choice < 0.4 and isinstance(old, str) and old[:1] in "0123456789-±+." and path[-1] not in TEXT_KEYS:
        slip = rng.choice(UNIT_SLIPS)
        put(new, path, slip)
        return new, f"{path} = {slip!r}", None if slip in ("1000 s", "1e9 ohm") else True
    name, wrong, fn = rng.choice(VALUE_MUTATIONS)
    put(new, path, fn(old))
    if name in ("nan text",) and path[-1] in TEXT_KEYS:
        wrong = None
    return new, f"{path} <- {name}", wrong


def classify(run: Callable[[], Any]) -> tuple[int, str]:
    """Exit code the CLI would give and a word: ok, input, station, internal, hang."""
    from fixture.errors import KnoblineError, StationFault

    def alarm(signum: int, frame: Any) -> None:
        raise TimeoutError("case over the time limit")

    old = signal.signal(signal.SIGALRM, alarm)
    try:
        signal.alarm(LIMIT_S)
        try:
            run()
            return 0, "ok"
        finally:
            signal.alarm(0)
    except (TimeoutError, MemoryError):  # the alarm may ring while a huge read is being freed
        return -1, "hang"
    except StationFault as exc:
        return 3, f"station: {exc.message[:120]}"
    except KnoblineError as exc:
        return exc.exit_code, "input"
    except Exception as exc:  # what the CLI turns into "internal error"
        return 3, f"internal {type(exc).__name__}: {str(exc)[:120]}"
    finally:
        signal.signal(signal.SIGALRM, old)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cases", type=int, default=240, help="mutations per file kind (default 240)")
    parser.add_argument("--seed", type=int, default=8)
    parser.add_argument("--verbose", action="store_true")
    args = parser.parse_args()
    resource.setrlimit(resource.RLIMIT_AS, (6 << 30, 6 << 30))  # /dev/zero must not take the machine

    import fixture
    from fixture.files.design_file import load_design
    from fixture.files.sequence_file import load_sequence
    from fixture.files.station_file import load_station
    from fixture.runner.plan import compile_plan
    from fixture.runner.station import open_station
    from fixture.runner.unit_run import check_serial

    shipped = Path(fixture.__file__).resolve().parent.parent / "sequences"
    work = Path(tempfile.mkdtemp(prefix="knobline-mutations-"))
    for name in ("demo-panel.toml", "demo-station.toml", "demo-sequence.toml"):
        (work / name).write_bytes((shipped / name).read_bytes())
    station = load_station(shipped / "demo-station.toml")
    rng = random.Random(args.seed)

    def design_case(path: Path) -> None:
        load_design(path)

    def station_case(path: Path) -> None:
        config = load_station(path)
        with open_station(config, today=dt.date(2026, 12, 1), ask=lambda text: True):
            pass

    def sequence_case(path: Path) -> None:
        seq = load_sequence(path, station=station, search_dirs=(shipped,))
        compile_plan(seq, seq.design, station)

    counts = {"cases": 0, "nonsense": 0, "internal": 0, "hang": 0, "station_exit3": 0}

    def record(kind: str, what: str, wrong: bool | None, run: Callable[[], Any]) -> None:
        code, word = classify(run)
        counts["cases"] += 1
        flag = ""
        if code == 0 and wrong:
            counts["nonsense"] += 1
            flag = "ACCEPTED NONSENSE"
        elif word.startswith("internal"):
            counts["internal"] += 1
            flag = "INTERNAL"
        elif word == "hang":
            counts["hang"] += 1
            flag = "HANG"
        elif kind == "station" and code == 3:
            counts["station_exit3"] += 1
            flag = "STATION MISTAKE AS EXIT 3"
        if args.verbose or flag:
            print(f"  {kind:<8} {flag:<26} {what[:110]!s} -> {code} {word[:100]}", file=sys.stderr)

    runners = {"design": design_case, "station": station_case, "sequence": sequence_case}
    files = {"design": "demo-panel.toml", "station": "demo-station.toml", "sequence": "demo-sequence.toml"}
    for kind, run in runners.items():
        original = tomllib.loads((shipped / files[kind]).read_text(encoding="utf-8"))
        for i in range(args.cases):
            doc, what, wrong = mutate(original, rng)
            case_dir = work / f"{kind}-{i}"
            case_dir.mkdir()
            path = case_dir / files[kind]
            path.write_text(toml_text(doc), encoding="utf-8")
            record(kind, what, wrong, lambda p=path, r=run: r(p))
        # whole-file mistakes: duplicated table, hostile paths, a file too big
        text = (shipped / files[kind]).read_text(encoding="utf-8")
        first_table = next(line for line in text.splitlines() if line.startswith("["))
        dup = work / f"{kind}-dup" / files[kind]
        dup.parent.mkdir()
        dup.write_text(text + "\n" + first_table + "\n", encoding="utf-8")
        record(kind, "duplicated table", True, lambda p=dup, r=run: r(p))
        big = work / f"{kind}-big" / files[kind]
        big.parent.mkdir()
        big.write_text(text + ("# padding\n" * 300_000), encoding="utf-8")
        record(kind, "3 MB file", True, lambda p=big, r=run: r(p))
        fifo = work / f"{kind}-fifo.toml"
        os.mkfifo(fifo)
        record(kind, "a FIFO", True, lambda p=fifo, r=run: r(p))
        record(kind, "a directory", True, lambda r=run: r(work))
        record(kind, "/dev/zero", True, lambda r=run: r(Path("/dev/zero")))
    many = tomllib.loads((shipped / "demo-panel.toml").read_text(encoding="utf-8"))
    many["knobs"]["a"]["stops"] = [i / 1000 for i in range(100_000)]
    path = work / "many-stops.toml"
    path.write_text(toml_text(many), encoding="utf-8")
    record("design", "100k stops", True, lambda: load_design(path))

    # serials and serial patterns, as `knobline test` checks them before anything runs
    seq_text = (shipped / "demo-sequence.toml").read_text(encoding="utf-8")
    cases = [("(a|a)*b", "a" * 40, None), ("(a+)+$", "a" * 40 + "!", None), ("(x+x+)+y", "x" * 40, None),
             ("PW22-.+", "PW22-1\x1b[32m PASS", True), ("PW22-.+", "PW22-1\x00", True),
             ("PW22-.+", "PW22-\u202e100", True), ("PW22-.*", "PW22-" + "9" * 100_000, True),
             ("PW22-[0-9]{6}", "PW22-000001\n", True), ("(?P<x>a)(?P=x)", "aa", None), ("a{1000000}", "a", None)]
    for i, (pattern, serial, wrong) in enumerate(cases):
        case_dir = work / f"serial-{i}"
        case_dir.mkdir()
        path = case_dir / "demo-sequence.toml"
        path.write_text(seq_text.replace('"PW22-[0-9]{6}"', json.dumps(pattern)), encoding="utf-8")

        def serial_case(p: Path = path, s: str = serial) -> None:
            seq = load_sequence(p, station=station, search_dirs=(shipped,))
            check_serial(compile_plan(seq, seq.design, station), s)

        record("serial", f"pattern {pattern!r}, serial {serial[:30]!r}", wrong, serial_case)

    print(f"knobline input mutations from {shipped.parent} (seed {args.seed}, {counts['cases']} cases, "
          f"limit {LIMIT_S} s each)")
    print(f"  accepted nonsense:                       {counts['nonsense']}")
    print(f"  internal errors (exit 3, please report): {counts['internal']}")
    print(f"  hangs (over {LIMIT_S} s or out of memory):     {counts['hang']}")
    print(f"  station-file mistakes as exit 3:         {counts['station_exit3']}")


if __name__ == "__main__":
    main()
