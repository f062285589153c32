"""Start-up of a ``knobline`` call, with command modules imported on demand and, as before, all at once.

    python bench/startup.py [--runs N] [--before DIR] [--unit-only]

The last figures are a whole ``knobline test`` of one simulated unit (into a results
database already at head, as on a line after its first unit), the call a line that
runs one process per unit pays for every unit (goal, issue 13: under 1 s; ``--help``
under 0.3 s): a new serial each time (its lots' charts take a diagnosis fit, as on a
line), with the computed limits from knobline's cache (fixture/runner/limits_cache.py)
and with the cache off in the same run, and a retest (not fed to the charts again, so
no fit). Each gives the time until the verdict banner (the operator's answer; the lot
watch runs after it), until the process ends, and its CPU time. With ``--before DIR``
(another copy of knobline, such as ``git archive COMMIT | tar -x -C DIR``) the same
calls of that copy run interleaved with this one's, for before/after ratios measured
in one run (a copy without the cache computes its limits in both new-unit cases).
``python -X importtime`` splits out what the time before testing goes to.

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
import resource
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


def _unit_run(code: str, env: dict[str, str], cwd: str) -> tuple[float, float, float]:
    """One fresh interpreter running ``code``: seconds until its first line on stdout (the verdict banner;
    click flushes each line), until it ends, and the CPU seconds it used (user + system)."""
    cpu_before = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    proc = subprocess.Popen([sys.executable, "-c", code], cwd=cwd, env=env, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    assert proc.stdout is not None
    proc.stdout.readline()
    banner = time.perf_counter() - start
    _, err = proc.communicate(timeout=120)
    end = time.perf_counter() - start
    cpu_after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if proc.returncode not in (0, 1):  # pass or fail: a unit judged
        raise SystemExit(f"{code}: exit {proc.returncode}\n{err}")
    cpu = (cpu_after.ru_utime - cpu_before.ru_utime) + (cpu_after.ru_stime - cpu_before.ru_stime)
    return banner, end, cpu


#: The ``knobline test`` cases: a new unit (its lots' charts take a diagnosis fit) with the limits from
#: the cache and computed (cache off), and a retest (the charts do not take it again: no fit).
CASES = {"warm": "new unit, limits from the cache", "off": "new unit, limits computed (KNOBLINE_CACHE=off)",
         "retest": "retest (no lot-watch fit), limits from the cache"}


def one_unit_ms(runs: int, roots: dict[str, Path]) -> dict[tuple[str, str], tuple[float, float, float]]:
    """``knobline test`` of one simulated demo unit, fresh interpreter each, for every case (:data:`CASES`)
    and checkout in ``roots``: medians of ms to the verdict, ms to the end and CPU ms."""
    sys.path.insert(0, str(ROOT))
    from fixture.store import open_store
    from tests.demo_lots import LOT_OPTIONS

    figures: dict[tuple[str, str], list[tuple[float, float, float]]] = {
        (root, case): [] for root in roots for case in CASES}
    with tempfile.TemporaryDirectory() as tmp:
        serials = iter(range(100, 10**6))

        def setting(root: str) -> tuple[str, dict[str, str]]:
            folder = Path(tmp) / root
            folder.mkdir()
            db = str(folder / "results.sqlite")
            with open_store(db):
                pass  # at head: the first unit of a new database also creates the schema
            return db, {**os.environ, "PYTHONPATH": str(roots[root]), "KNOBLINE_LOG": str(folder / "knobline.log"),
                        "KNOBLINE_CACHE": str(folder / "cache")}

        where = {root: setting(root) for root in roots}

        def run(root: str, serial: str, cache: str | None = None) -> tuple[float, float, float]:
            db, env = where[root]
            args = ["test", "--serial", serial, *LOT_OPTIONS, "--db", db, "--operator", "bench"]
            return _unit_run(_RUN.format(args=args), env if cache is None else {**env, "KNOBLINE_CACHE": cache},
                             str(roots[root]))

        for root in roots:
            run(root, "PW22-000001")  # fills the cache, and puts PW22-000001 on the charts
        for _ in range(runs):  # interleaved, so a change of load on the machine touches every figure alike
            for root in roots:
                figures[(root, "warm")].append(run(root, f"PW22-{next(serials):06d}"))
                figures[(root, "off")].append(run(root, f"PW22-{next(serials):06d}", cache="off"))
                figures[(root, "retest")].append(run(root, "PW22-000001"))
    return {key: tuple(statistics.median(v[i] for v in values) * 1e3 for i in range(3))  # type: ignore[misc]
            for key, values in figures.items()}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=9, help="fresh interpreters per figure")
    parser.add_argument("--before", type=Path, metavar="DIR",
                        help="another copy of knobline (git archive COMMIT | tar -x -C DIR) whose `knobline test` "
                             "is timed alongside, interleaved, for before/after ratios in one run")
    parser.add_argument("--unit-only", action="store_true", help="only the knobline test figures")
    args = parser.parse_args()
    pin_to_one_core()  # children inherit the affinity
    floor = median_ms("pass", args.runs)
    print(f"knobline start-up, one core, median of {args.runs} fresh interpreters (Python alone: {floor:.0f} ms):")
    if not args.unit_only:
        print(f"  {'call':<32} {'all modules first':>18} {'on demand':>10} {'ratio':>6}")
        for call in CALLS:
            code = _RUN.format(args=list(call))
            before = median_ms(_IMPORT_ALL + code, args.runs)
            after = median_ms(code, args.runs)
            label = "knobline " + " ".join(call)
            print(f"  {label:<32} {before:15.0f} ms {after:7.0f} ms {before / after:5.1f}x")
    roots = {"this": ROOT, **({"before": args.before.resolve()} if args.before else {})}
    unit = one_unit_ms(args.runs, roots)
    print("knobline test of one simulated unit (goal, issue 13: under 1000 ms), median ms to the verdict banner, "
          "to the end, and CPU:")
    for root in roots:
        label = "" if len(roots) == 1 else f"{root} ({roots[root]}) "
        for case, words in CASES.items():
            banner, end, cpu = unit[(root, case)]
            print(f"  {label}{words:<50} {banner:6.0f} / {end:6.0f} ms, CPU {cpu:5.0f} ms")
    this = unit
    print(f"  limits from the cache against computed: {this[('this', 'off')][1] / this[('this', 'warm')][1]:.2f}x "
          f"to the end, {this[('this', 'off')][0] / this[('this', 'warm')][0]:.2f}x to the verdict")
    if "before" in roots:
        for case, words in CASES.items():
            b, a = unit[("before", case)], unit[("this", case)]
            print(f"  {words}: before/this {b[1] / a[1]:.2f}x to the end, {b[0] / a[0]:.2f}x to the verdict, "
                  f"{b[2] / a[2]:.2f}x CPU")


if __name__ == "__main__":
    main()
