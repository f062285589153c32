"""What the quality and engineer pages cost to answer, on a demo batch.

    python bench/quality_pages.py [--units N] [--repeat R]

Tests a demo batch of N units (``knobline demo``, simulated bench) into a fresh SQLite database,
then asks each page R times through Starlette's TestClient (in-process, no network) as a logged-in
quality engineer and prints each answer's wall time (the first apart: the engineer page and its plot
are cached after it). Then the first download of a run's certificate (HTML and signed PDF written),
a second one (served), and verifying the HTML and the PDF.
"""

from __future__ import annotations

import argparse
import re
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from fixture.store import open_store  # noqa: E402
from fixture.web.app import WebSettings, build_app  # noqa: E402
from tests.quality_demo import demo_database  # noqa: E402
from tests.web.pages import add_users, log_in  # noqa: E402

PAGES = ["/quality/yield?by=lot&period=all", "/quality/yield?by=day&period=7d", "/quality/lots", "/quality/runs",
         "/unit/{serial}", "/engineer", "/engineer/limits.svg", "/quality/batch-report"]


def timed(call: Callable[..., Any], *args: Any, **kwargs: Any) -> float:
    """Seconds ``call(*args, **kwargs)`` took to answer 200."""
    start = time.perf_counter()
    reply = call(*args, **kwargs)
    took = time.perf_counter() - start
    assert reply.status_code == 200, (reply.status_code, reply.text[:300])
    return took


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--units", type=int, default=60)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    from starlette.testclient import TestClient

    with tempfile.TemporaryDirectory(prefix="knobline-bench-quality-") as folder:
        url = demo_database(Path(folder), units=args.units)
        add_users(url)
        with open_store(url) as store:
            runs = [s for s in store.runs(limit=10) if s.verdict in ("pass", "fail") and s.serial.startswith("PW22-0")]
        serial, run_id = runs[0].serial, runs[0].run_id
        print(f"{args.units} demo units; times in ms, first answer then the next {args.repeat - 1}")
        with TestClient(build_app(WebSettings(db_url=url, login_first_delay_s=0.0))) as client:
            log_in(client, "quality")
            for page in PAGES:
                path = page.format(serial=serial)
                times = [timed(client.get, path) for _ in range(args.repeat)]
                print(f"  {path:<40} " + ", ".join(f"{1000 * t:.0f}" for t in times))
            certificate = f"/run/{run_id}/certificate.pdf"
            print(f"  certificate, first download (HTML and PDF written and signed): "
                  f"{1000 * timed(client.get, certificate):.0f}")
            print(f"  certificate, second download: {1000 * timed(client.get, certificate):.0f}")
            token = re.search(r'name="csrf_token" value="([^"]+)"', client.get(f"/unit/{serial}").text)
            assert token is not None
            for kind in ("html", "pdf"):
                took = timed(client.post, f"/run/{run_id}/verify", data={"csrf_token": token.group(1), "kind": kind})
                print(f"  verify {kind.upper()}: {1000 * took:.0f}")


if __name__ == "__main__":
    main()
