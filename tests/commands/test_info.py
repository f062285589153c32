"""``knobline info`` lists every package knobline needs to run, with its installed version."""

from __future__ import annotations

import json
import re
import tomllib
from pathlib import Path

from click.testing import CliRunner

from fixture.cli import main

ROOT = Path(__file__).resolve().parents[2]


def test_info_lists_every_runtime_dependency_of_the_project_file_and_no_test_extra() -> None:
    # the reference is the project's own pyproject.toml (what pip installs), read with tomllib
    project = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["project"]
    runtime = {re.split(r"[\s<>=!~;\[(]", r, maxsplit=1)[0].lower() for r in project["dependencies"]}
    extras = {re.split(r"[\s<>=!~;\[(]", r, maxsplit=1)[0].lower() for r in project["optional-dependencies"]["test"]}
    result = CliRunner().invoke(main, ["info", "--json"], catch_exceptions=False)
    assert result.exit_code == 0
    packages = {k.lower(): v for k, v in json.loads(result.stdout)["packages"].items()}
    assert set(packages) == runtime
    assert not (set(packages) & (extras - runtime))
    assert all(v != "not installed" for v in packages.values())
