"""`knobline test` of one unit imports only what testing a unit needs (a line runs one process per unit).

Pinned by what a fresh interpreter has imported, never by wall time (bench/startup.py prints the times;
common practice, no source). Each heavy module named here has a place that imports it lazily:
scipy.stats (analytics/diagnosis.py takes the chi-square tail from scipy.special; analytics/__init__.py
imports its modules on first use), Alembic (store/migrate.py when the schema is not at head), jinja2,
reportlab, pyHanko and the certificate and signing modules (commands/test.py, only with --certificates).
scipy.optimize and scipy.special load only when the lot watch fits a unit (analytics/part_fit.py and
diagnosis.py import them inside the fit), so a retest, which the charts do not take again, loads no scipy.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

from fixture.store import open_store
from tests.demo_lots import LOT_OPTIONS

ROOT = Path(__file__).resolve().parents[2]

# Never on the path of testing one unit without --certificates, with what imports it instead.
LAZY = {
    "scipy.stats": "analytics/diagnosis.py (scipy.special) and analytics/__init__.py (names on first use)",
    "alembic": "store/migrate.py, only for a database not at head",
    "jinja2": "reporting/templating.py, only for a certificate or report",
    "reportlab": "reporting/certificate_pdf.py, only with --pdf",
    "pyhanko": "reporting/pdf_signature.py, only with --pdf",
    "matplotlib": "reporting/charts.py, only for a report",
    "fixture.commands._issuing": "commands/test.py, only with --certificates",
    "fixture.reporting.signing": "commands/test.py, only with --certificates",
    "fixture.reporting.render": "commands/_issuing.py",
    "fixture.analytics.lots": "analytics/__init__.py (on first use)",
    "starlette": "commands/serve.py, only for knobline serve",
    "uvicorn": "commands/serve.py, only for knobline serve",
    "argon2": "web/passwords.py, only for knobline serve and knobline user",
    "fixture.web.app": "commands/serve.py, only for knobline serve",
}

# Only when the lot watch fits the unit (a new unit with lots), never to test it or for a retest.
FIT_ONLY = {
    "scipy": "analytics/part_fit.py (PartFit.fit) and analytics/diagnosis.py (diagnose_unit), inside the fit",
}

PROBE = """\
import json, sys
from fixture.cli import main
try:
    main(sys.argv[1:], prog_name="knobline")
    code = 0
except SystemExit as exc:
    code = exc.code or 0
print(json.dumps({"exit": code, "modules": sorted(sys.modules)}))
"""


def imported(code: str, *args: str, cwd: Path = ROOT) -> dict:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    proc = subprocess.run([sys.executable, "-c", code, *args], cwd=cwd, env=env, capture_output=True, text=True,
                          timeout=300)
    assert proc.returncode == 0, proc.stderr
    return json.loads(proc.stdout.strip().splitlines()[-1])


def loaded_lazy(modules: list[str], lazy: dict[str, str] = LAZY) -> dict[str, str]:
    """The lazy modules (or their submodules) among ``modules``, each with where it should be imported."""
    return {name: where for name, where in lazy.items()
            if any(m == name or m.startswith(name + ".") for m in modules)}


def test_importing_the_test_command_loads_none_of_the_lazy_modules() -> None:
    probe = imported("import json, sys; import fixture.commands.test; "
                     "print(json.dumps({'modules': sorted(sys.modules)}))")
    assert loaded_lazy(probe["modules"], {**LAZY, **FIT_ONLY}) == {}


def test_testing_one_simulated_unit_loads_none_of_the_lazy_modules(tmp_path) -> None:
    db = tmp_path / "results.sqlite"
    with open_store(str(db)):
        pass  # a database at head, as on a line after its first unit
    probe = imported(PROBE, "test", "--serial", "PW22-000001", *LOT_OPTIONS, "--db", str(db), "--operator", "t",
                     cwd=tmp_path)
    assert probe["exit"] == 0  # the demo unit PW22-000001 passes on the simulated bench
    assert "fixture.runner.execute" in probe["modules"]  # the unit was tested in this interpreter
    assert loaded_lazy(probe["modules"]) == {}


def test_a_retest_loads_no_scipy_and_a_new_unit_only_for_its_lot_watch_fit(tmp_path) -> None:
    db = tmp_path / "results.sqlite"
    with open_store(str(db)):
        pass
    args = ("test", "--serial", "PW22-000001", *LOT_OPTIONS, "--db", str(db), "--operator", "t")
    first = imported(PROBE, *args, cwd=tmp_path)
    retest = imported(PROBE, *args, cwd=tmp_path)
    assert first["exit"] == 0 and retest["exit"] == 0
    assert "fixture.analytics.lot_watch_run" in retest["modules"]  # the watch ran, and saw a retest
    assert loaded_lazy(first["modules"], FIT_ONLY) == FIT_ONLY  # the new unit was fitted: this test can fail
    assert loaded_lazy(retest["modules"], {**LAZY, **FIT_ONLY}) == {}
