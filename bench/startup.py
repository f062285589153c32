"""Start-up of a ``knobline`` call, with command modules imported on demand and, as before, all at once.

    python bench/startup.py [--runs N]

The last figures are a whole ``knobline test`` of one simulated unit (into a results
database already at head, as on a line after its first unit), the call a line that
runs one process per unit pays for every unit (goal, issue 13: under 1 s; ``--help``
under 0.3 s): a new serial each time (its lots' charts take a diagnosis fit, as on a
line), with the computed limits from knobline's cache (fixture/runner/limits_cache.py)
and with the cache off in the same run, and a retest (not fed to the charts again, so
no fit). Each gives the time until the verdict banner (the operator's answer; the lot
watch runs after it) and until the process ends. ``python -X importtime`` splits out
what the time before testing goes to.

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


def _unit_run(code: str, env: dict[str, str], cwd: str) -> tuple[float, float]:
    """One fresh interpreter running ``code``: seconds until its first line on stdout (the verdict banner;
    click flushes each line) and until it ends."""
    start = time.perf_counter()
    proc = subprocess.Popen([sys.executable, "-c", code], cwd=cwd, env=env, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    assert proc.stdout is not None
    proc.stdout.readline()
    banner = time.perf_counter() - start
    _, err = proc.communicate(timeout=120)
    end = time.perf_counter() - start
    if proc.returncode not in (0, 1):  # pass or fail: a unit judged
        raise SystemExit(f"{code}: exit {proc.returncode}\n{err}")
    return banner, end


def one_unit_ms(runs: int) -> dict[str, tuple[float, float]]:
    """``knobline test`` of one simulated demo unit, fresh interpreter each: median ms to the verdict and to
    the end, for a new unit with the computed limits from the cache ("warm") and without it ("off"), and
    for a retest of a unit already on its lots' charts (no lot-watch fit, so no scipy)."""
    sys.path.insert(0, str(ROOT))
    from fixture.store import open_store
    from tests.demo_lots import LOT_OPTIONS

    figures: dict[str, list[tuple[float, float]]] = {"off": [], "warm": [], "retest": []}
    with tempfile.TemporaryDirectory() as tmp:
        db = str(Path(tmp) / "results.sqlite")
        with open_store(db):
            pass  # at head: the first unit of a new database also creates the schema
        env = {**os.environ, "PYTHONPATH": str(ROOT), "KNOBLINE_LOG": str(Path(tmp) / "knobline.log"),
               "KNOBLINE_CACHE": str(Path(tmp) / "cache")}

        def code(serial: str) -> str:
            args = ["test", "--serial", serial, *LOT_OPTIONS, "--db", db, "--operator", "bench"]
            return _RUN.format(args=args)

        _unit_run(code("PW22-000001"), env, tmp)  # fills the cache, and puts PW22-000001 on the charts
        for i in range(runs):  # interleaved, so a change of load on the machine touches all three alike
            figures["off"].append(_unit_run(code(f"PW22-{100 + 2 * i:06d}"), {**env, "KNOBLINE_CACHE": "off"}, tmp))
            figures["warm"].append(_unit_run(code(f"PW22-{101 + 2 * i:06d}"), env, tmp))
            figures["retest"].append(_unit_run(code("PW22-000001"), env, tmp))
    return {name: (statistics.median(b for b, _ in values) * 1e3, statistics.median(e for _, e in values) * 1e3)
            for name, values in figures.items()}


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
    unit = one_unit_ms(args.runs)
    print("knobline test of one simulated unit (goal, issue 13: under 1000 ms), median ms to the verdict "
          "banner / to the end:")
    words = {"off": "new unit, limits computed (KNOBLINE_CACHE=off)", "warm": "new unit, limits from the cache",
             "retest": "retest (no lot-watch fit), limits from the cache"}
    for name, (banner, end) in unit.items():
        print(f"  {words[name]:<50} {banner:6.0f} / {end:6.0f} ms")
    print(f"  computed limits from the cache: {unit['off'][1] / unit['warm'][1]:.2f}x faster to the end, "
          f"{unit['off'][0] / unit['warm'][0]:.2f}x to the verdict")


if __name__ == "__main__":
    main()
