"""What the web application costs: a password check, a station page, and a unit tested from the page.

    python bench/web_station.py [--units N]

Prints medians: argon2id hashing and checking (what a log-in costs the server, per try); drawing the
operator page (TestClient, in-process, no network); and one simulated demo unit tested through the
station desk (worker thread, events in words, no pacing) beside the same unit tested by the same code
without the desk (``commands/_unit_on_station.run_unit_on_station`` and the lot watch, as ``knobline test``
calls them),
alternating, on one fresh SQLite database each.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from fixture.commands._lot_watch import watch_lots_at  # noqa: E402
from fixture.commands._unit_on_station import run_unit_on_station  # noqa: E402
from fixture.runner.execute import SilentReporter  # noqa: E402
from fixture.store import open_store  # noqa: E402
from fixture.web.passwords import check_password, hash_password  # noqa: E402
from fixture.web.station_desk import StationDesk  # noqa: E402
from tests.web.serving import GOOD_SERIAL, USERS, _fresh_database, demo_station, served_app  # noqa: E402


def _median_s(work, runs: int) -> float:
    times = []
    for _ in range(runs):
        start = time.perf_counter()
        work()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--units", type=int, default=10)
    args = parser.parse_args()
    stored = hash_password("a password of a line")
    print(f"argon2id hash: {1e3 * _median_s(lambda: hash_password('a password of a line'), 5):.0f} ms, "
          f"check: {1e3 * _median_s(lambda: check_password(stored, 'a password of a line'), 5):.0f} ms (median of 5)")

    from starlette.testclient import TestClient

    from tests.web.clients import log_in

    with tempfile.TemporaryDirectory() as folder:
        app = served_app(Path(folder))
        with TestClient(app) as client:
            log_in(client, "operator")
            assert client.get("/station/1").status_code == 200
            page = _median_s(lambda: client.get("/station/1"), 20)
        print(f"operator page (logged in as {USERS['operator'][0]}): {1e3 * page:.1f} ms to draw (median of 20)")

    with tempfile.TemporaryDirectory() as folder:
        (Path(folder) / "web").mkdir()
        web_db = _fresh_database(Path(folder) / "web")
        direct_folder = Path(folder) / "direct"
        direct_folder.mkdir()
        direct_db = _fresh_database(direct_folder)
        web_station, direct = demo_station(web_db), demo_station(direct_db)
        desk = StationDesk(web_station)
        lots = web_station.check(GOOD_SERIAL, {})

        def through_desk() -> None:
            view = desk.start(GOOD_SERIAL, {}, "bench")
            while not view.finished:
                desk.wait_for_events(view, len(view.events), 1.0)
            assert view.end is not None and view.end["verdict"] == "pass"

        def without_desk() -> None:
            with open_store(direct_db) as store:
                done = run_unit_on_station(store, direct.config, direct.sequence, direct.plan, serial=GOOD_SERIAL,
                                           lots=lots, operator="bench", seed=1, planted=None,
                                           reporter=SilentReporter(), ask=None, say=lambda line: None)
            assert str(done.outcome.verdict) == "pass"
            watch_lots_at(direct_db, direct.sequence.design, done.outcome.run_id, lots)  # as knobline test does

        through_desk(), without_desk()  # warm both paths
        web, plain = [], []
        for _ in range(args.units):
            web.append(_median_s(through_desk, 1))
            plain.append(_median_s(without_desk, 1))
        print(f"one simulated unit: {statistics.median(web):.3f} s from the station page's desk, "
              f"{statistics.median(plain):.3f} s by the same code without it "
              f"({statistics.median(web) / statistics.median(plain):.2f}x; median of {args.units} each, alternating; "
              "both with the lot watch knobline test runs after its verdict)")


if __name__ == "__main__":
    main()
