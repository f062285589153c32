"""Promises the repository makes about itself: README, CI, packaging, layering."""

from __future__ import annotations

import ast
import re
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent


def quick_start_lines() -> list[str]:
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    section = readme.split("## Quick start", 1)[1]
    block = re.search(r"```[^\n]*\n(.*?)```", section, re.S)
    assert block, "README Quick start has no fenced block"
    return [ln for ln in block.group(1).splitlines() if ln.strip()]


def test_readme_quick_start_is_exactly_two_command_lines() -> None:
    lines = quick_start_lines()
    assert len(lines) == 2
    assert "knobline" in lines[0] and "pytest" in lines[1]


def test_ci_runs_the_readme_test_command_verbatim() -> None:
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8").splitlines()
    assert quick_start_lines()[1] in [ln.strip() for ln in ci]


def test_ci_type_checks_the_package_before_the_tests() -> None:
    # DEVELOPERS.md promises CI runs mypy on fixture/ (pyproject [tool.mypy]) before the suite.
    ci = [ln.strip() for ln in (ROOT / ".ci" / "run").read_text(encoding="utf-8").splitlines()]
    mypy = [i for i, ln in enumerate(ci) if not ln.startswith("#") and "python -m mypy" in ln]
    assert mypy and mypy[0] < ci.index(quick_start_lines()[1])


def test_readme_states_the_safety_caution() -> None:
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    assert "does not verify electrical safety or isolation" in readme


# Rooms import downward only (DEVELOPERS.md): errors < model < files < instruments < sim < store
# < runner < analytics < reporting < commands. model/ is pure: numpy, stdlib, errors.
ALLOWED = {
    "analytics": {"fixture.analytics", "fixture.store", "fixture.model", "fixture.errors"},
    "model": {"fixture.model", "fixture.errors"},
    "files": {"fixture.files", "fixture.model", "fixture.errors"},
    # files/ for the design file stored with a run, read again to name its parts on certificates
    "reporting": {"fixture.reporting", "fixture.analytics", "fixture.runner", "fixture.store", "fixture.files",
                  "fixture.model", "fixture.errors"},
    "instruments": {"fixture.instruments", "fixture.files", "fixture.model", "fixture.errors"},
    "sim": {"fixture.sim", "fixture.instruments", "fixture.files", "fixture.model", "fixture.errors"},
    "store": {"fixture.store", "fixture.model", "fixture.errors"},
    # never fixture.sim: the runner opens the same drivers on a real and a simulated bench
    "runner": {"fixture.runner", "fixture.store", "fixture.instruments", "fixture.files",
               "fixture.model", "fixture.errors", "fixture._version"},
    # the web pages read the store and analytics and word things with reporting/; they test a unit only
    # through the station commands/serve.py hands them, so never fixture.sim or fixture.commands; the
    # certificates they issue state the safety caution (fixture.safety: its text, no imports of its own)
    "web": {"fixture.web", "fixture.reporting", "fixture.analytics", "fixture.runner", "fixture.store",
            "fixture.files", "fixture.model", "fixture.errors", "fixture._data", "fixture._version",
            "fixture.safety"},
}


def imported_modules(path: Path, tree: ast.AST) -> list[str]:
    """Every module a file imports, relative imports (``from ..sim import x``, ``from . import y``) made absolute.

    ``from PKG import NAME`` counts as importing ``PKG.NAME`` too, since NAME may be a submodule
    (Python reference, "The import system", 5.7 package relative imports; ``from fixture import sim`` alike).
    """
    parts = list(path.relative_to(ROOT).with_suffix("").parts)
    package = parts[:-1]  # a module's package; for __init__.py that is the package itself
    names: list[str] = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names += [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level == 0:
                base = node.module or ""
            else:
                up = package[:len(package) - (node.level - 1)]
                base = ".".join(up + ([node.module] if node.module else []))
            names.append(base)
            names += [f"{base}.{a.name}" for a in node.names if a.name != "*"]
    return names


def test_layering_reads_relative_imports_as_the_modules_they_name() -> None:
    # Python reference, "The import system" 5.7: one dot is the module's own package, each more dot one up.
    source = "from ..sim import world\nfrom . import plan\nfrom .readings import x\nfrom fixture import sim\n"
    path = ROOT / "fixture" / "runner" / "spot.py"
    names = imported_modules(path, ast.parse(source))
    assert {"fixture.sim", "fixture.sim.world", "fixture.runner.plan", "fixture.runner.readings"} <= set(names)
    init = ROOT / "fixture" / "runner" / "__init__.py"  # in a package's __init__, "." is the package itself
    assert "fixture.runner.plan" in imported_modules(init, ast.parse("from . import plan\n"))


@pytest.mark.parametrize("room", sorted(ALLOWED))
def test_rooms_import_only_downward(room: str) -> None:
    offenders = []
    folder = ROOT / "fixture" / room
    if not folder.is_dir():
        pytest.skip(f"fixture/{room} does not exist yet")
    for path in folder.rglob("*.py"):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for name in imported_modules(path, tree):
            if name.startswith("fixture.") and not any(name == a or name.startswith(a + ".") for a in ALLOWED[room]):
                offenders.append(f"{path.relative_to(ROOT)} imports {name}")
            if room == "model" and name.split(".")[0] in {"scipy", "pyvisa", "sqlalchemy", "jinja2",
                                                          "matplotlib", "click"}:
                offenders.append(f"{path.relative_to(ROOT)} imports {name} (model/ is numpy + stdlib)")
    assert offenders == []


def test_wheel_carries_the_shipped_designs_and_report_templates(tmp_path: Path) -> None:
    pytest.importorskip("hatchling")
    subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation", "-q",
                    "-w", str(tmp_path), str(ROOT)], check=True, timeout=300)
    wheel = next(tmp_path.glob("knobline-*.whl"))
    names = zipfile.ZipFile(wheel).namelist()
    assert "fixture/_data/sequences/demo-panel.toml" in names
    assert any(n.startswith("fixture/_data/reports/") for n in names)
    assert "fixture/cli.py" in names
    assert "fixture/sim/devices/bench.yaml" in names
    assert "fixture/instruments/profiles/tessaly-yqc83.toml" in names
    assert "fixture/store/migrations/versions/0001_initial.py" in names


def test_code_passes_the_linter() -> None:
    pytest.importorskip("ruff")
    proc = subprocess.run([sys.executable, "-m", "ruff", "check", "fixture", "tests", "bench"], cwd=ROOT,
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stdout + proc.stderr
