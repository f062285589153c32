"""Certificates at line rate: per certificate on one core, and a whole batch re-issued on every core.

    python bench/certificates.py [--units N] [--calls N] [--jobs N ...]

Prints, from one run (ratios are what to compare; the machine is shared):
* per certificate on one core, in this process: record + seal + HTML, and + signed PDF;
* one ``knobline certificate RUN --pdf`` process per unit (how a line script
  without batch issuing pays start-up each time);
* ``knobline certificate --all --pdf`` with --jobs 1 and with every core,
  and the time 10,000 HTML+PDF certificates take at that rate (goal: 30 min).
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from click.testing import CliRunner
from timing import pin_to_one_core

from fixture.cli import main as cli
from fixture.commands._issuing import write_certificate
from fixture.commands.certificate import default_jobs
from fixture.reporting.signing import station_key
from fixture.store import open_store

GOAL_UNITS, GOAL_MINUTES = 10_000, 30.0


def knobline(*args: str) -> float:
    """Seconds one fresh ``knobline`` process takes, start-up included."""
    start = time.perf_counter()
    subprocess.run([sys.executable, "-m", "fixture.cli", *args], check=True, capture_output=True)
    return time.perf_counter() - start


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--units", type=int, default=200, help="units in the batch re-issued")
    parser.add_argument("--calls", type=int, default=5, help="one-process-per-certificate calls timed")
    parser.add_argument("--jobs", type=int, action="append",
                        help="--jobs of the batch runs timed (repeatable; default 1 and every core)")
    args = parser.parse_args()
    cores = default_jobs()
    job_counts = sorted(set(args.jobs or (1, cores)))
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp)
        result = CliRunner().invoke(cli, ["demo", "--units", str(args.units), "--out", str(out), "--no-reports"])
        if result.exit_code != 0:
            raise SystemExit(result.stderr)
        db = str(out / "results.sqlite")
        key = station_key(out / "key.pem", create_missing=True)
        with open_store(db) as store:
            run_ids = [r.run_id for r in store.runs(limit=args.units) if r.verdict in ("pass", "fail")]
        # In this process, on one core.
        affinity = os.sched_getaffinity(0)
        pin_to_one_core()
        with open_store(db) as store:
            write_certificate(store, run_ids[0], out / "warm", key, pdf=True)  # fonts, templates, caches
            sample = run_ids[:20]
            start = time.perf_counter()
            for run_id in sample:
                write_certificate(store, run_id, out / "html", key)
            html_s = (time.perf_counter() - start) / len(sample)
            start = time.perf_counter()
            for run_id in sample:
                write_certificate(store, run_id, out / "pdf", key, pdf=True)
            pdf_s = (time.perf_counter() - start) / len(sample)
        os.sched_setaffinity(0, affinity)
        # One process per certificate (start-up paid each time).
        per_call = [knobline("certificate", f"run:{r}", "--pdf", "--db", db, "--key", str(key.path),
                             "--out", str(out / "calls")) for r in run_ids[:args.calls]]
        per_call_s = sorted(per_call)[len(per_call) // 2]
        # The whole batch, one worker and every core.
        batch = {jobs: knobline("certificate", "--all", "--pdf", "--jobs", str(jobs), "--db", db, "--key",
                                str(key.path), "--out", str(out / f"all-{jobs}"))
                 for jobs in job_counts}
    n = len(run_ids)
    print(f"certificates of {n} judged units (demo batch), HTML + signed PDF unless said")
    print("per certificate, one core, in one process:")
    print(f"  record + seal + HTML:                 {html_s * 1e3:7.0f} ms")
    print(f"  record + seal + HTML + signed PDF:    {pdf_s * 1e3:7.0f} ms")
    print(f"one `knobline certificate RUN --pdf` process per unit (median of {len(per_call)}):"
          f" {per_call_s:5.2f} s -> {GOAL_UNITS} in {GOAL_UNITS * per_call_s / 60:5.1f} min")
    for jobs, seconds in batch.items():
        rate = n / seconds
        print(f"`knobline certificate --all --pdf --jobs {jobs}`: {n} in {seconds:5.1f} s, {rate:5.1f} per s "
              f"-> {GOAL_UNITS} in {GOAL_UNITS / rate / 60:5.1f} min (goal {GOAL_MINUTES:.0f} min)")
    if 1 in batch and cores in batch and cores > 1:
        print(f"speed-up of {cores} workers over 1: {batch[1] / batch[cores]:.2f}x")


if __name__ == "__main__":
    main()
