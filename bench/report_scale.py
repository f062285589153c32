"""`knobline report batch` for a year of a line: time per stage, peak memory and HTML size at 2,000 to 10^5 units.

The stores are built quickly, not tested unit by unit (tests/reporting/bulk_store.py): a real
``knobline demo`` batch of ``--template`` units (the demo design sequences/demo-panel.toml on the
simulated bench, lots as fixture/sim/batch.py plan_batch assigns them, one lot shifted, planted
defects) is replicated to each size by bulk inserts: every unit takes the lots of the template unit
at the same relative place in build order and the readings of a template unit drawn at random
among those built from the same lots, each reading times (1 + 0.1 % normal noise) and judged again;
runs spread over a year. A replica is a load test of the report, not a batch to study statistics on.

Each report is built in a fresh process so its peak RSS (resource.getrusage) is the report's own:
first with ``design=None`` (no per-unit diagnosis, no predicted yield: the main figure), then with
the recorded design, which adds the diagnosis and predicted-yield stages (printed separately; the
diagnosis is being replaced, see issue 10).

    python bench/report_scale.py [--sizes 2000,20000,100000] [--template 1000] [--work DIR] [--no-design]

Goal (issue 10 item 6): 10^5 units within 60 s and 1 GB, the HTML not growing with the units.
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))


def report_once(url: str, with_design: bool) -> dict[str, object]:
    """Build the report of ``url`` in this process; its figures as JSON-ready data."""
    from fixture._data import data_dir
    from fixture.commands.report import recorded_design
    from fixture.reporting.batch_report import build_batch_report
    from fixture.reporting.render import template_folders
    from fixture.store import open_store

    with open_store(url) as store:
        design = recorded_design(store) if with_design else None
        if with_design and design is None:
            raise SystemExit("the template's design file is gone or changed: run without --design")
        start = time.perf_counter()
        report = build_batch_report(store, design=design, title="Batch and lot report",
                                    templates=template_folders(data_dir("reports"), None))
        seconds = time.perf_counter() - start
    peak_kib = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss  # KiB on Linux
    return {"seconds": seconds, "stages": report.stage_seconds, "peak_mib": peak_kib / 1024,
            "html_bytes": len(report.html.encode("utf-8")), "units": report.units}


def in_child(url: str, with_design: bool) -> dict[str, object]:
    args = [sys.executable, __file__, "--child", url] + (["--design"] if with_design else [])
    done = subprocess.run(args, capture_output=True, text=True, check=False)
    if done.returncode != 0:
        raise SystemExit(f"report of {url} failed:\n{done.stderr[-2000:]}")
    return json.loads(done.stdout.strip().splitlines()[-1])


def show(size: int, label: str, figures: dict[str, object]) -> None:
    stages = ", ".join(f"{k} {v:.2f}" for k, v in figures["stages"].items())  # type: ignore[union-attr]
    print(f"{size:>7} units {label:<12} {figures['seconds']:7.1f} s  peak RSS {figures['peak_mib']:6.0f} MiB  "
          f"HTML {figures['html_bytes'] / 1024:7.0f} KiB   stages (s): {stages}", flush=True)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="2000,20000,100000", help="comma-separated unit counts")
    parser.add_argument("--template", type=int, default=1000, help="units of the real demo batch replicated")
    parser.add_argument("--work", type=Path, default=Path("/tmp/knobline-report-scale"),
                        help="folder for the template and the stores (kept between runs)")
    parser.add_argument("--no-design", action="store_true", help="skip the run with diagnosis and predicted yield")
    parser.add_argument("--child", help=argparse.SUPPRESS)
    parser.add_argument("--design", action="store_true", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        print(json.dumps(report_once(args.child, args.design)))
        return

    from tests.reporting.bulk_store import build_replica, make_template

    args.work.mkdir(parents=True, exist_ok=True)
    start = time.perf_counter()
    template = make_template(args.work / f"template-{args.template}", args.template)
    print(f"template: {args.template} units through the simulated bench in {time.perf_counter() - start:.0f} s "
          f"(kept in {args.work})", flush=True)
    for size in (int(s) for s in args.sizes.split(",")):
        db = args.work / f"replica-{size}-of-{args.template}.sqlite"
        if not db.exists():
            start = time.perf_counter()
            replica = build_replica(template, f"sqlite:///{db}", size)
            print(f"{size:>7} units stored: {replica.runs} runs, {replica.readings} readings in "
                  f"{time.perf_counter() - start:.0f} s ({db.stat().st_size / 2**20:.0f} MiB)", flush=True)
        show(size, "no design", in_child(f"sqlite:///{db}", False))
        if not args.no_design:
            show(size, "with design", in_child(f"sqlite:///{db}", True))


if __name__ == "__main__":
    main()
