"""Per-query overhead of knobline's drivers over bare pyvisa-sim, on one core.

Prints microseconds per query and ratios measured in this one run (machines are noisy,
so compare ratios, not microseconds across runs). Issue 3 asks for the overhead of our
drivers over the bare pyvisa-sim ``query()`` for the same SCPI text. Layers timed:

* bare pyvisa ``resource.query("FETC:PER?")`` on the shipped device file;
* the same through :class:`VisaTransport` (fault translation);
* :meth:`Session.query_float` (profile text, retry bookkeeping, SCPI number and overflow checks);
* a full :meth:`Counter.read` (``INIT`` + ``FETC:PER?`` + event hook) against bare ``write`` + ``query``;
* the session layer alone over a :class:`ScriptedTransport` (no VISA at all), to show our own cost.

    python bench/drivers.py [--queries N]
"""

from __future__ import annotations

import argparse
import os
import shutil
import tempfile
import time
from collections.abc import Callable
from importlib.metadata import version
from pathlib import Path

import pyvisa

from fixture.instruments import (
    Counter,
    CounterSettings,
    ScriptedTransport,
    Session,
    VisaTransport,
    load_profile,
)
from fixture.sim.devices import RESOURCES, device_file


def per_call_us(n: int, repeats: int, variants: dict[str, Callable[[], object]]) -> dict[str, float]:
    """Best of ``repeats`` rounds of ``n`` calls per variant, in microseconds per call.

    The variants take turns within each round, so a neighbour's load on the shared cores
    slows them alike instead of biasing whichever happened to run during it.
    """
    best = dict.fromkeys(variants, float("inf"))
    for _ in range(repeats):
        for name, fn in variants.items():
            t = time.perf_counter()
            for _ in range(n):
                fn()
            best[name] = min(best[name], time.perf_counter() - t)
    return {name: seconds / n * 1e6 for name, seconds in best.items()}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--queries", type=int, default=2000)
    parser.add_argument("--repeats", type=int, default=7)
    args = parser.parse_args()
    if hasattr(os, "sched_setaffinity"):
        os.sched_setaffinity(0, {sorted(os.sched_getaffinity(0))[0]})
    n, r = args.queries, args.repeats
    profile = load_profile("tessaly-yqc83")
    resource = RESOURCES["counter"]

    with tempfile.TemporaryDirectory() as tmp, device_file() as shipped:
        backend = f"{shutil.copyfile(shipped, Path(tmp) / 'bench.yaml')}@sim"
        manager = pyvisa.ResourceManager(backend)
        bare = manager.open_resource(resource, read_termination="\n", write_termination="\n")
        bare.timeout = 2000
        bare.write("SIM:PER 1.234E-03")          # a reading to fetch (the device starts at overflow)
        transport = VisaTransport(resource, backend, resource_manager=manager)
        session = Session(VisaTransport(resource, backend, resource_manager=manager), profile)
        counter = Counter(Session(VisaTransport(resource, backend, resource_manager=manager), profile))
        counter.configure(CounterSettings(function="period", gate_time_s=0.01))

        def bare_read() -> None:
            bare.write("INIT")
            bare.query("FETC:PER?")

        t = per_call_us(n, r, {"bare": lambda: bare.query("FETC:PER?"),
                               "transport": lambda: transport.query("FETC:PER?"),
                               "session": lambda: session.query_float("fetch_period"),
                               "bare_read": bare_read, "read": counter.read})
        for closable in (transport, session, counter):
            closable.close()
        bare.close()
        manager.close()

    scripted = ScriptedTransport(lambda text: "1.234E-03")
    scripted_session = Session(ScriptedTransport(lambda text: "1.234E-03"), profile)
    t |= per_call_us(n, r, {"scripted": lambda: scripted.query("FETC:PER?"),
                            "scripted_session": lambda: scripted_session.query_float("fetch_period")})

    print(f"counter FETC:PER? on pyvisa {pyvisa.__version__} + pyvisa-sim {version('pyvisa-sim')}, "
          f"{n} queries per round, best of {r} rounds, one core")
    print(f"  bare pyvisa resource.query:                {t['bare']:7.1f} us/query")
    print(f"  VisaTransport.query:                       {t['transport']:7.1f} us/query    "
          f"{t['transport'] / t['bare']:.2f}x bare")
    print(f"  Session.query_float (the drivers' path):   {t['session']:7.1f} us/query    "
          f"{t['session'] / t['bare']:.2f}x bare, {t['session'] - t['bare']:+.1f} us")
    print(f"  bare write INIT + query FETC:PER?:         {t['bare_read']:7.1f} us/reading")
    print(f"  Counter.read (INIT, event, FETC:PER?):     {t['read']:7.1f} us/reading  "
          f"{t['read'] / t['bare_read']:.2f}x bare, {t['read'] - t['bare_read']:+.1f} us")
    print(f"  no VISA: ScriptedTransport.query           {t['scripted']:7.1f} us/query")
    print(f"  no VISA: Session.query_float               {t['scripted_session']:7.1f} us/query    "
          f"(the session layer's own cost: {t['scripted_session'] - t['scripted']:+.1f} us)")


if __name__ == "__main__":
    main()
