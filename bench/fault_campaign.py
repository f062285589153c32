"""The fault campaign on the full grid: every fault kind x role x persistent/once on every simulated unit.

Counts what issue 8 item 7 requires to be zero: runs stored PASS with missing steps, good
units judged FAIL, defective units judged PASS; and how many runs let an exception out of
``run_unit``. The CI test (tests/runner/test_fault_campaign.py) runs a sample of the same
grid through the same module.

    python bench/fault_campaign.py [--units good,wrong-part,...] [--verbose]
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


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--units", default=",".join(UNITS), help="comma-separated units: " + ", ".join(UNITS))
    parser.add_argument("--verbose", action="store_true", help="print every run's verdict")
    args = parser.parse_args()
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


if __name__ == "__main__":
    main()
