"""What the sealed-limits check adds to ``knobline test`` of one unit (README "Sealed limits").

    python bench/limits_seal.py [--repeat N]

Prints, for the demo sequence on the demo bench: the number of sealed rows, the time to hash the limits
of a compiled plan (``plan_rows`` + ``seal_text`` + SHA-256, what every run does), the whole comparison
``seal_status`` against a matching release (the same plus reading the release), and, for scale, the time
to compile the plan from the computed-limits cache and without it, and the release-time computation
(``seal_of``: the limits computed without the cache). Medians of N repeats.
"""

from __future__ import annotations

import argparse
import os
import statistics
import tempfile
import time
from collections.abc import Callable
from pathlib import Path


def _median_s(work: Callable[[], object], repeat: int) -> float:
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        work()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=200)
    args = parser.parse_args()
    os.environ["KNOBLINE_CACHE"] = tempfile.mkdtemp(prefix="knobline-bench-cache-")
    from fixture._data import data_dir
    from fixture.commands._program_check import seal_status
    from fixture.files.sequence_file import load_sequence
    from fixture.files.station_file import load_station
    from fixture.runner.limits_seal import plan_rows, seal_of, seal_sha256, seal_text
    from fixture.runner.plan import compile_plan
    from fixture.store.programs import ApprovalRecord, ProgramRecord

    shipped = Path(data_dir("sequences"))
    config = load_station(shipped / "demo-station.toml")
    seq = load_sequence(shipped / "demo-sequence.toml", station=config, search_dirs=(shipped,))
    plan = compile_plan(seq, seq.design, config)  # fills the cache
    seal = seal_of(seq)
    import datetime as dt

    now = dt.datetime.now(dt.UTC)
    program = ProgramRecord(1, "sequence", "demo-sequence.toml", seq.content_sha256, 1, "released", "E", now,
                            ApprovalRecord("A", "released for production", "bench", now, "", "", seal),
                            None, None, None)
    assert seal_status(program, plan, seq.source).match
    hashing = _median_s(lambda: seal_sha256(seal_text(plan_rows(plan))), args.repeat)
    status = _median_s(lambda: seal_status(program, plan, seq.source), args.repeat)
    cached = _median_s(lambda: compile_plan(seq, seq.design, config), max(3, args.repeat // 20))
    os.environ["KNOBLINE_CACHE"] = "off"
    uncached = _median_s(lambda: compile_plan(seq, seq.design, config), 3)
    release = _median_s(lambda: seal_of(seq), 3)
    print(f"sealed rows of the demo sequence: {len(plan_rows(plan))}")
    print(f"hash of a plan's limits (every run):      {hashing * 1e6:8.1f} us")
    print(f"seal_status against a matching release:   {status * 1e6:8.1f} us")
    print(f"compile_plan, limits from the cache:      {cached * 1e3:8.1f} ms")
    print(f"compile_plan, cache off:                  {uncached * 1e3:8.1f} ms")
    print(f"seal_of at release (no cache):            {release * 1e3:8.1f} ms")


if __name__ == "__main__":
    main()
