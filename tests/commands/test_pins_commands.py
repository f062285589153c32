"""What a station does with what a released file names outside itself (README "Released test programs").

A custom step's module is code a release does not cover unless the file pins its SHA-256: a
production station refuses it unpinned, every station refuses a pin that no longer matches, an
engineering station marks a run with an unpinned one not for shipment. Controlled test programs on
a regulated line: EU GMP Annex 11 (from memory); hashes checked against hashlib (FIPS 180-4).
"""

from __future__ import annotations

import hashlib
import json
import uuid
from pathlib import Path

import pytest

from fixture.files.pins import pin_line
from fixture.reporting.signing import station_key
from fixture.store import open_store
from tests.commands.test_program_commands import invoke, no_power, production_station, run_unit  # noqa: F401
from tests.programs import DEMO_FILES, release_demo_programs

ROOT = Path(__file__).resolve().parents[2]
STEPS_MODULE = "tests.runner.custom_steps"
STEPS_FILE = ROOT / "tests" / "runner" / "custom_steps.py"


def sha256_of(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def sequence_with_custom_step(tmp_path: Path, module: str, pins: str = "") -> Path:
    """The demo sequence (its design by absolute path, so the released demo design is the one read) with
    one custom step from ``module`` and ``pins`` appended."""
    text = DEMO_FILES["sequence"].read_text(encoding="utf-8")
    text = text.replace('design = "demo-panel.toml"', f'design = "{DEMO_FILES["design"]}"')
    text += f'\n[[steps]]\nkind = "custom"\nname = "volume check"\ncall = "{module}:always"\n{pins}'
    path = tmp_path / "pinned-sequence.toml"
    path.write_text(text, encoding="utf-8")
    return path


def own_steps_module(tmp_path: Path, monkeypatch) -> tuple[str, Path]:
    """A copy of tests/runner/custom_steps.py under a name of its own, importable, that a test may edit."""
    name = f"line_steps_{uuid.uuid4().hex}"
    path = tmp_path / f"{name}.py"
    path.write_bytes(STEPS_FILE.read_bytes())
    monkeypatch.syspath_prepend(str(tmp_path))
    return name, path


def release(database_url: str, tmp_path: Path, station: Path, sequence: Path) -> None:
    release_demo_programs(database_url, tmp_path / "people",
                          {"station": station, "design": DEMO_FILES["design"], "sequence": sequence})


def test_a_production_station_refuses_an_unpinned_custom_step_naming_its_sha_and_the_pin_line(
        database_url: str, tmp_path: Path, no_power) -> None:  # noqa: F811
    station = production_station(tmp_path)
    sequence = sequence_with_custom_step(tmp_path, STEPS_MODULE)
    release(database_url, tmp_path, station, sequence)  # all three files released: only the pin is missing
    result = run_unit(database_url, str(sequence), "--station", str(station))
    assert result.exit_code == 2
    [line] = [x for x in result.stderr.splitlines() if x.startswith("knobline: error:")]
    assert line.startswith("knobline: error: production station 'PW-22 end-of-line bench 2': sequence ")
    assert f"custom step module '{STEPS_MODULE}'" in line and "with no pin" in line
    assert f"add the line {pin_line(STEPS_MODULE, sha256_of(STEPS_FILE))} to the sequence file's [pins]" in line
    assert no_power == []
    with open_store(database_url) as store:
        assert store.runs() == []


def test_a_released_sequence_with_a_pinned_custom_step_tests_and_gets_a_certificate(
        database_url: str, tmp_path: Path) -> None:
    station = production_station(tmp_path)
    sequence = sequence_with_custom_step(tmp_path, STEPS_MODULE,
                                         f"[pins]\n{pin_line(STEPS_MODULE, sha256_of(STEPS_FILE))}\n")
    release(database_url, tmp_path, station, sequence)
    key = station_key(tmp_path / "keys" / "station-key.pem", create_missing=True)
    result = run_unit(database_url, str(sequence), "--station", str(station), "--certificates",
                      str(tmp_path / "certs"), "--key", str(key.path), "--json")
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    assert data["verdict"] == "pass" and data["not_for_shipment"] is False and data["certificate"] is not None
    assert "volume check" in [s["name"] for s in data["steps"]]


@pytest.mark.parametrize("mode", ['"production"', '"engineering"'])
def test_a_pin_that_no_longer_matches_its_module_is_refused_on_every_station(
        database_url: str, tmp_path: Path, monkeypatch, no_power, mode: str) -> None:  # noqa: F811
    module, path = own_steps_module(tmp_path, monkeypatch)
    pinned = sha256_of(path)
    station = production_station(tmp_path, mode)
    sequence = sequence_with_custom_step(tmp_path, module, f"[pins]\n{pin_line(module, pinned)}\n")
    release(database_url, tmp_path, station, sequence)
    path.write_text(path.read_text(encoding="utf-8").replace('"pass"', '"fail"'), encoding="utf-8")  # edited later
    result = run_unit(database_url, str(sequence), "--station", str(station))
    assert result.exit_code == 2
    [line] = [x for x in result.stderr.splitlines() if x.startswith("knobline: error:")]
    assert f"released sequence {sequence} pins custom step module '{module}'" in line
    assert f"expected sha256 {pinned}, found sha256 {sha256_of(path)}" in line
    assert "restore that file, or update the pin" in line
    assert no_power == []


def test_an_engineering_run_with_an_unpinned_custom_step_is_not_for_shipment(
        database_url: str, tmp_path: Path) -> None:
    station = production_station(tmp_path, '"engineering"')
    sequence = sequence_with_custom_step(tmp_path, STEPS_MODULE)
    release(database_url, tmp_path, station, sequence)  # every file released: the missing pin alone marks it
    key = station_key(tmp_path / "keys" / "station-key.pem", create_missing=True)
    result = run_unit(database_url, str(sequence), "--station", str(station), "--certificates",
                      str(tmp_path / "certs"), "--key", str(key.path), "--json")
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    assert data["verdict"] == "pass" and data["not_for_shipment"] is True and data["certificate"] is None
    assert f"not pinned: custom step module '{STEPS_MODULE}' of sequence {sequence}" in result.stderr
    assert "not released" not in result.stderr


def test_check_reports_a_pin_that_does_not_match_and_notes_an_unpinned_module(tmp_path: Path, monkeypatch) -> None:
    module, path = own_steps_module(tmp_path, monkeypatch)
    unpinned = invoke("check", str(sequence_with_custom_step(tmp_path, module)), "--json")
    assert unpinned.exit_code == 0, unpinned.stderr
    [note] = json.loads(unpinned.stdout)["unpinned"]
    assert (note["reference"], note["sha256"], note["pin"]) == (module, sha256_of(path),
                                                                 pin_line(module, sha256_of(path)))
    text = invoke("check", str(sequence_with_custom_step(tmp_path, module)))
    assert "note: custom step module" in text.stdout and "has no pin" in text.stdout
    pinned = sha256_of(path)
    sequence = sequence_with_custom_step(tmp_path, module, f"[pins]\n{pin_line(module, pinned)}\n")
    assert invoke("check", str(sequence)).exit_code == 0
    path.write_bytes(path.read_bytes() + b"\n# edited after pinning\n")
    changed = invoke("check", str(sequence))
    assert changed.exit_code == 2
    assert f'pins."{module}": expected the pinned content of custom step module {path} (sha256 {pinned}), ' \
           f"found sha256 {sha256_of(path)}" in changed.stderr


def test_a_production_station_refuses_an_unpinned_profile_path_and_a_plugin_model_of_its_design(
        database_url: str, tmp_path: Path) -> None:
    from fixture.commands._program_check import check_programs
    from fixture.errors import UserInputError
    from fixture.files.sequence_file import load_sequence
    from fixture.files.station_file import load_station
    from fixture.runner.plan import compile_plan
    from tests.model.test_plugin_model import PLUGIN_REF, design_toml

    profile = tmp_path / "our-counter.toml"
    profile.write_bytes((ROOT / "fixture" / "instruments" / "profiles" / "tessaly-yqc83.toml").read_bytes())
    station_path = production_station(tmp_path)
    station_path.write_text(station_path.read_text(encoding="utf-8").replace('"tessaly-yqc83"', f'"{profile}"'),
                            encoding="utf-8")
    design = tmp_path / "panel-555.toml"
    design.write_text(design_toml(PLUGIN_REF), encoding="utf-8")
    sequence = tmp_path / "power-only.toml"
    sequence.write_text(f'[sequence]\nname = "555 power"\ndesign = "{design}"\nserial_pattern = "PW22-[0-9]{{6}}"\n'
                        '[[steps]]\nkind = "power-up"\nname = "power up"\ncurrent_limit = "100 mA"\n'
                        'current_low = "2 mA"\ncurrent_high = "15 mA"\n', encoding="utf-8")
    config, seq = load_station(station_path), load_sequence(sequence)
    release_demo_programs(database_url, tmp_path / "people",
                          {"station": station_path, "sequence": sequence, "design": design})
    with open_store(database_url) as store:
        with pytest.raises(UserInputError) as refused:
            check_programs(store, config, seq, compile_plan(seq, seq.design, config))
    lines = str(refused.value).splitlines()
    plugin = ROOT / "tests" / "model" / "plugin_555.py"
    assert len(lines) == 2  # every file released: the two unpinned dependencies are all that is refused
    assert f"station {station_path} uses instrument profile '{profile}'" in lines[0]
    assert pin_line(str(profile), sha256_of(profile)) in lines[0]
    assert f"design {design} uses signal model module 'tests.model.plugin_555'" in lines[1]
    assert pin_line("tests.model.plugin_555", sha256_of(plugin)) in lines[1]


def test_registering_a_file_whose_pin_no_longer_matches_is_refused(
        database_url: str, tmp_path: Path, monkeypatch) -> None:
    module, path = own_steps_module(tmp_path, monkeypatch)
    pinned = sha256_of(path)
    sequence = sequence_with_custom_step(tmp_path, module, f"[pins]\n{pin_line(module, pinned)}\n")
    path.write_bytes(path.read_bytes() + b"\n# edited after pinning\n")
    result = invoke("program", "register", str(sequence), "--by", "Erin Engineer", "--key",
                    str(tmp_path / "engineer.pem"), "--db", database_url)
    assert result.exit_code == 2
    assert f"expected sha256 {pinned}, found sha256 {sha256_of(path)}" in result.stderr
    assert json.loads(invoke("program", "list", "--json", "--db", database_url).stdout)["programs"] == []
