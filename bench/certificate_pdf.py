"""PDF certificate per unit: reportlab layout, PAdES signing, checking; and the old weasyprint print for comparison.

    python bench/certificate_pdf.py [--units N] [--repeat R]

Medians over the demo batch's units on one core. The weasyprint figure (the
HTML printed through Pango, as knobline did before) is printed only when
weasyprint is still importable; knobline no longer depends on it.
"""

from __future__ import annotations

import argparse
import statistics
import tempfile
import time
import warnings
from pathlib import Path

from click.testing import CliRunner
from timing import pin_to_one_core

from fixture import __version__
from fixture.cli import main as cli
from fixture.commands.certificate import write_certificate
from fixture.reporting.certificate_file import read_certificate
from fixture.reporting.certificate_pdf import certificate_pdf
from fixture.reporting.certificate_view import certificate_view
from fixture.reporting.pdf_check import verify_pdf_certificate
from fixture.reporting.pdf_signature import sign_certificate_pdf
from fixture.reporting.render import seal_facts
from fixture.reporting.signing import station_key
from fixture.safety import SAFETY_CAUTION
from fixture.store import open_store


def _median_ms(samples: list[float]) -> float:
    return statistics.median(samples) * 1e3


def _weasyprint_ms(htmls: list[str]) -> float | None:
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            import weasyprint
    except Exception:  # noqa: BLE001 - missing module or missing system libraries: no comparison then
        return None
    weasyprint.HTML(string=htmls[0]).write_pdf()  # fonts and caches, as for the others
    samples = []
    for html in htmls:
        start = time.perf_counter()
        weasyprint.HTML(string=html).write_pdf()
        samples.append(time.perf_counter() - start)
    return _median_ms(samples)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--units", type=int, default=10)
    parser.add_argument("--repeat", type=int, default=3, help="rounds over the units")
    args = parser.parse_args()
    pin_to_one_core()
    layout, signing, checking, sizes = [], [], [], []
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp)
        result = CliRunner().invoke(cli, ["demo", "--units", str(args.units), "--out", str(out), "--no-reports"])
        if result.exit_code != 0:
            raise SystemExit(result.output)
        key = station_key(out / "key.pem", create_missing=True)
        with open_store(str(out / "results.sqlite")) as store:
            files = [write_certificate(store, r.run_id, out / "certs", key) for r in store.runs(limit=args.units)]
        htmls = [f.html.read_bytes().decode("utf-8") for f in files]
        issuer = f"knobline {__version__}"
        for _ in range(args.repeat):
            for html, f in zip(htmls, files, strict=True):
                record = read_certificate(html).record
                start = time.perf_counter()
                view = certificate_view(record, seal_facts(f.seal.record_sha256, f.seal.fingerprint),
                                        safety_caution=SAFETY_CAUTION, issuer=issuer)
                unsigned = certificate_pdf(view, record)
                layout.append(time.perf_counter() - start)
                start = time.perf_counter()
                signed = sign_certificate_pdf(unsigned, html, f.number, key)
                signing.append(time.perf_counter() - start)
                start = time.perf_counter()
                check = verify_pdf_certificate(signed, key.certificate, safety_caution=SAFETY_CAUTION)
                checking.append(time.perf_counter() - start)
                if not check.ok:
                    raise SystemExit(f"{f.number}: does not verify: {check.findings}")
                sizes.append(len(signed))
        weasy = _weasyprint_ms(htmls)
    print(f"PDF certificate per unit, one core, median of {len(layout)} ({len(files)} units x {args.repeat}):")
    print(f"  layout (view + reportlab):       {_median_ms(layout):7.0f} ms")
    print(f"  sign (attach HTML + PAdES):      {_median_ms(signing):7.0f} ms")
    print(f"  verify (pyHanko + fresh layout): {_median_ms(checking):7.0f} ms")
    print(f"  file size:                       {statistics.median(sizes) / 1024:7.0f} KiB")
    if weasy is None:
        print("  weasyprint (HTML printed, unsigned): not importable here")
    else:
        print(f"  weasyprint (HTML printed, unsigned): {weasy:5.0f} ms")


if __name__ == "__main__":
    main()
