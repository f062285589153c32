"""The fault campaign on the full grid: every fault kind x role x persistent/once on every simulated unit.

Counts what issue 8 item 7 requires to be zero: runs stored PASS with missing steps, good
units judged FAIL, defective units judged PASS; and how many runs let an exception out of
``run_unit``. The CI test (tests/runner/test_fault_campaign.py) runs a sample of the same
grid through the same module.

    python bench/fault_campaign.py [--units good,wrong-part,...] [--verbose]
    python bench/fault_campaign.py --bench tcp   # socket faults on the bench server, over pyvisa-py

With ``--bench tcp`` the faults are on the wire (tests/runner/socket_campaign.py): a reply past the
timeout, split across packets, dropped mid-way, an instrument reboot, garbage bytes, the reply to
another query, on the counter, supply and actuator, once or on every reading query; it also prints
how many runs judged their unit despite the fault (recovered) and the longest run.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

from timing import pin_to_one_core

# The campaign module lives with the tests that share it; the repository root makes it importable.
sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from tests.runner.fault_campaign import UNITS, full_grid, run_campaign  # noqa: E402
from tests.runner import socket_campaign  # noqa: E402


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--units", default=",".join(UNITS), help="comma-separated units: " + ", ".join(UNITS))
    parser.add_argument("--verbose", action="store_true", help="print every run's verdict")
    parser.add_argument("--bench", choices=("sim", "tcp"), default="sim",
                        help="sim: faults inside the process on pyvisa-sim; tcp: faults on the bench server's sockets")
    args = parser.parse_args()
    if args.bench == "tcp":
        _tcp([u.strip() for u in args.units.split(",") if u.strip()], args.verbose)
        return
    pin_to_one_core()
    cases = full_grid([u.strip() for u in args.units.split(",") if u.strip()])

    def show(i: int, r) -> None:
        if args.verbose:
            print(f"{i + 1:4d} {r.case.label}: {r.verdict}, {r.steps_stored} steps {r.escaped}", flush=True)

    start = time.perf_counter()
    result = run_campaign(cases, progress=show)
    elapsed = time.perf_counter() - start
    print(result.summary())
    print(f"  {len(cases)} runs in {elapsed:.0f} s on one core")


def _tcp(units: list[str], verbose: bool) -> None:
    """The socket grid; not pinned to one core (the server's threads share the process)."""
    cases = socket_campaign.full_grid(units)

    def show(i: int, r, seconds: float) -> None:
        if verbose:
            print(f"{i + 1:4d} {r.case.label}: {r.verdict}, {r.steps_stored} steps, {seconds:.2f} s {r.escaped}",
                  flush=True)

    start = time.perf_counter()
    result = socket_campaign.run_socket_campaign(cases, progress=show)
    elapsed = time.perf_counter() - start
    print(result.summary())
    once = [r for r in result.results if r.case.mode == "once"]
    print(f"  recovered (unit judged despite the fault): {len(result.recovered())} of {len(result.results)}; "
          f"once: {sum(r.verdict in ('pass', 'fail') for r in once)} of {len(once)}")
    print(f"  longest run {max(result.seconds):.2f} s, median {sorted(result.seconds)[len(result.seconds) // 2]:.2f} s "
          f"(read timeout {socket_campaign.TIMEOUT_S} s)")
    print(f"  {len(cases)} runs in {elapsed:.0f} s")


if __name__ == "__main__":
    main()
