"""Start-up of a ``knobline`` call, with command modules imported on demand and, as before, all at once.

    python bench/startup.py [--runs N]

The last figure is a whole ``knobline test`` of one simulated unit (into a results
database already at head, as on a line after its first unit), the call a line that
runs one process per unit pays for every unit (goal, issue 13: under 1 s; ``--help``
under 0.3 s); the time it spends before testing is split out by ``python -X importtime``.

Each figure is the median wall time of N fresh interpreters on one core,
running this checkout's ``knobline`` with the given arguments. "All modules
first" imports every command module before the command line is parsed, as
knobline did before the command table (fixture/commands/__init__.py); "on
demand" is knobline now. "Python alone" is the floor: an interpreter that
imports nothing of knobline.
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from timing import pin_to_one_core

ROOT = Path(__file__).resolve().parent.parent

CALLS = (("--help",), ("verify", "--help"), ("keys", "show", "--help"), ("certificate", "--help"))

# The command line as the console script runs it; SystemExit carries click's exit code out.
_RUN = "from fixture.cli import main; main({args!r}, prog_name='knobline')"
_IMPORT_ALL = ("import importlib; from fixture.commands import COMMANDS; "
               "[importlib.import_module(entry.module) for entry in COMMANDS.values()]; ")


def median_ms(code: str, runs: int, ok: tuple[int, ...] = (0,)) -> float:
    """Median wall time of ``runs`` fresh interpreters running ``code`` against this checkout, in ms."""
    env = {**os.environ, "PYTHONPATH": str(ROOT)}  # this checkout, not an installed copy
    times = []
    for _ in range(runs):
        start = time.perf_counter()
        proc = subprocess.run([sys.executable, "-c", code], cwd=ROOT, env=env, stdout=subprocess.DEVNULL,
                              stderr=subprocess.PIPE, text=True, timeout=120)
        times.append(time.perf_counter() - start)
        if proc.returncode not in ok:
            raise SystemExit(f"{code}: exit {proc.returncode}\n{proc.stderr}")
    return statistics.median(times) * 1e3


def one_unit_ms(runs: int) -> float:
    """Median wall time of ``knobline test`` of one simulated demo unit, fresh interpreter each, in ms."""
    sys.path.insert(0, str(ROOT))
    from fixture.store import open_store
    from tests.demo_lots import LOT_OPTIONS

    with tempfile.TemporaryDirectory() as tmp:
        db = str(Path(tmp) / "results.sqlite")
        with open_store(db):
            pass  # at head: the first unit of a new database also creates the schema
        args = ["test", "--serial", "PW22-000001", *LOT_OPTIONS, "--db", db, "--operator", "bench"]
        env = {**os.environ, "KNOBLINE_LOG": str(Path(tmp) / "knobline.log")}
        os.environ.update(env)
        try:
            return median_ms(_RUN.format(args=args), runs, ok=(0, 1))
        finally:
            os.environ.pop("KNOBLINE_LOG", None)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=9, help="fresh interpreters per figure")
    args = parser.parse_args()
    pin_to_one_core()  # children inherit the affinity
    floor = median_ms("pass", args.runs)
    print(f"knobline start-up, one core, median of {args.runs} fresh interpreters (Python alone: {floor:.0f} ms):")
    print(f"  {'call':<32} {'all modules first':>18} {'on demand':>10} {'ratio':>6}")
    for call in CALLS:
        run = _RUN.format(args=list(call))
        before = median_ms(_IMPORT_ALL + run, args.runs)
        after = median_ms(run, args.runs)
        label = "knobline " + " ".join(call)
        print(f"  {label:<32} {before:15.0f} ms {after:7.0f} ms {before / after:5.1f}x")
    print(f"  {'knobline test (one simulated unit)':<32} {'':>18} {one_unit_ms(args.runs):7.0f} ms   (goal < 1000 ms)")


if __name__ == "__main__":
    main()
