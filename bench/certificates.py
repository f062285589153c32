"""Certificate rendering per unit: record from the store, seal, HTML, and PDF.

    python bench/certificates.py [--units N]
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

from click.testing import CliRunner
from timing import pin_to_one_core

from fixture.cli import main as cli
from fixture.commands.certificate import write_certificate
from fixture.reporting.signing import station_key
from fixture.store import open_store


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--units", type=int, default=10)
    args = parser.parse_args()
    pin_to_one_core()
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp)
        result = CliRunner().invoke(cli, ["demo", "--units", str(args.units), "--out", str(out), "--no-reports"])
        if result.exit_code != 0:
            raise SystemExit(result.stderr)
        key = station_key(out / "key.pem", create_missing=True)
        with open_store(str(out / "results.sqlite")) as store:
            run_ids = [r.run_id for r in store.runs(limit=args.units)]
            write_certificate(store, run_ids[0], out / "warm", key, pdf=True)  # fonts, templates, caches
            start = time.perf_counter()
            for run_id in run_ids:
                write_certificate(store, run_id, out / "html", key)
            html_s = (time.perf_counter() - start) / len(run_ids)
            start = time.perf_counter()
            for run_id in run_ids[:3]:
                write_certificate(store, run_id, out / "pdf", key, pdf=True)
            pdf_s = (time.perf_counter() - start) / 3
    print(f"certificate per unit, one core ({len(run_ids)} units):")
    print(f"  record + seal + HTML:        {html_s * 1e3:8.0f} ms")
    print(f"  record + seal + HTML + PDF:  {pdf_s * 1e3:8.0f} ms")


if __name__ == "__main__":
    main()
