"""The command table: ``knobline --help`` from the table alone, each command's module imported only when asked for.

Pure behaviour pins (common practice, no source): the listing must read as click
would print it with every command imported, and laziness is pinned by what a
fresh interpreter has imported, never by wall time (bench/startup.py prints that).
"""

from __future__ import annotations

import importlib
import json
import pkgutil
import subprocess
import sys
from pathlib import Path

import click
import pytest
from click.testing import CliRunner

import fixture.commands
from fixture.cli import main
from fixture.commands import COMMANDS, CommandEntry

ROOT = Path(__file__).resolve().parents[2]

# What made `knobline --help` take seconds when every command module was imported at start-up.
HEAVY = ("numpy", "scipy", "sqlalchemy", "pyhanko", "reportlab", "jinja2")

# Runs the command line in a fresh interpreter and reports its exit code and every module it imported.
PROBE = """\
import json, sys
from fixture.cli import main
try:
    main({args!r}, prog_name="knobline")
    code = 0
except SystemExit as exc:
    code = exc.code or 0
print(json.dumps({{"exit": code, "modules": sorted(sys.modules)}}))
"""


def fresh_interpreter(code: str) -> dict:
    proc = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    return json.loads(proc.stdout.strip().splitlines()[-1])


def command_modules(modules: list[str]) -> set[str]:
    return {name for name in modules if name.startswith("fixture.commands.")}


@pytest.mark.parametrize("name", sorted(COMMANDS))
def test_table_entry_resolves_to_the_command_of_that_name_with_the_same_short_help(name: str) -> None:
    command = COMMANDS[name].load()
    assert isinstance(command, click.Command)
    assert command.name == name
    # Unabridged on both sides: the listing shortens the table's text to the terminal's width with
    # click's own rule, so equal full texts give equal listings at every width (next test).
    assert COMMANDS[name].short_help == command.get_short_help_str(limit=sys.maxsize)


@pytest.mark.parametrize("width", [50, 80, 200])
def test_help_listing_reads_as_click_prints_it_with_every_command_imported(width: int) -> None:
    eager = click.Group("knobline", commands=[entry.load() for entry in COMMANDS.values()])
    listings = []
    for group in (main, eager):
        ctx = click.Context(group, info_name="knobline", terminal_width=width)
        formatter = ctx.make_formatter()
        group.format_commands(ctx, formatter)
        listings.append(formatter.getvalue())
    assert listings[0] == listings[1]
    assert all(f"  {name} " in listings[0] for name in COMMANDS)


def test_every_click_command_in_the_commands_package_is_in_the_table() -> None:
    # A command left out of the table would never be reachable from `knobline`.
    defined = set()
    for info in pkgutil.iter_modules(fixture.commands.__path__, prefix="fixture.commands."):
        module = importlib.import_module(info.name)
        objects = {attr: obj for attr, obj in vars(module).items() if isinstance(obj, click.Command)
                   and getattr(obj.callback, "__module__", None) == module.__name__}
        nested = {id(sub) for obj in objects.values() if isinstance(obj, click.Group) for sub in obj.commands.values()}
        defined |= {(module.__name__, attr) for attr, obj in objects.items() if id(obj) not in nested}
    assert defined == {(entry.module, entry.attribute) for entry in COMMANDS.values()}


def test_table_is_in_the_order_click_lists_commands() -> None:
    assert list(COMMANDS) == sorted(COMMANDS)


def test_help_imports_no_command_module_and_none_of_the_heavy_libraries() -> None:
    probe = fresh_interpreter(PROBE.format(args=["--help"]))
    assert probe["exit"] == 0
    assert command_modules(probe["modules"]) == set()
    assert {name.split(".")[0] for name in probe["modules"]} & set(HEAVY) == set()


def test_a_commands_own_help_imports_its_module_and_what_that_module_imports_only() -> None:
    probe = fresh_interpreter(PROBE.format(args=["keys", "show", "--help"]))
    imported_alone = fresh_interpreter("import json, sys; import fixture.commands.keys; "
                                       "print(json.dumps({'modules': sorted(sys.modules)}))")
    assert probe["exit"] == 0
    assert "fixture.commands.keys" in probe["modules"]
    assert command_modules(probe["modules"]) == command_modules(imported_alone["modules"])


def test_a_commands_help_exits_0_and_an_unknown_command_is_a_usage_error() -> None:
    runner = CliRunner()
    verify_help = runner.invoke(main, ["verify", "--help"], prog_name="knobline", catch_exceptions=False)
    assert verify_help.exit_code == 0
    assert verify_help.stdout.startswith("Usage: knobline verify")
    unknown = runner.invoke(main, ["verifyy"], catch_exceptions=False)
    assert unknown.exit_code == 2
    assert unknown.stderr.startswith("knobline: error: No such command 'verifyy'")


def test_a_command_that_cannot_be_imported_is_a_station_fault_of_that_command_alone(monkeypatch) -> None:
    # A station missing one command's library can still list and run the others.
    broken = {**COMMANDS, "info": CommandEntry("fixture.commands.no_such_module", "info", COMMANDS["info"].short_help)}
    monkeypatch.setattr("fixture.cli.COMMANDS", broken)
    runner = CliRunner()
    result = runner.invoke(main, ["info"], catch_exceptions=False)
    assert result.exit_code == 3
    assert "knobline: station fault: internal error ModuleNotFoundError" in result.stderr
    assert "Traceback" not in result.stderr
    assert runner.invoke(main, ["--help"], catch_exceptions=False).exit_code == 0
    assert runner.invoke(main, ["runs", "--help"], catch_exceptions=False).exit_code == 0
