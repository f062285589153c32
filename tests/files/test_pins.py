"""``[pins]`` in design, station and sequence files: read, checked, and resolved to the files they pin.

The behaviour is ours (README "Released test programs", "Pins"): each reference as written maps to
the SHA-256 of the file it resolves to. Hashes are checked against hashlib (FIPS 180-4) and against
the published SHA-256 examples of FIPS 180-2, Appendix B.
"""

from __future__ import annotations

import hashlib
import importlib.util
import uuid
from pathlib import Path

import pytest

from fixture.files.design_file import design_dependencies, load_design
from fixture.files.pins import (
    Dependency,
    DependencyKind,
    file_sha256,
    pin_line,
    pin_statuses,
    resolve,
)
from fixture.files.sequence_file import load_sequence
from fixture.files.station_file import load_station
from fixture.files.toml_reader import FileProblems
from tests.files.edits import only_problem

ROOT = Path(__file__).resolve().parents[2]
SHIPPED = ROOT / "sequences"
STEPS_MODULE = "tests.runner.custom_steps"
STEPS_FILE = ROOT / "tests" / "runner" / "custom_steps.py"
PLUGIN_FILE = ROOT / "tests" / "model" / "plugin_555.py"


def sequence_with(tmp_path: Path, extra: str, call: str = f"{STEPS_MODULE}:always") -> Path:
    """The demo sequence (its design by absolute path) with one custom step and ``extra`` appended."""
    text = (SHIPPED / "demo-sequence.toml").read_text(encoding="utf-8")
    text = text.replace('design = "demo-panel.toml"', f'design = "{SHIPPED / "demo-panel.toml"}"')
    text += f'\n[[steps]]\nkind = "custom"\nname = "volume check"\ncall = "{call}"\n{extra}'
    path = tmp_path / "pinned-sequence.toml"
    path.write_text(text, encoding="utf-8")
    return path


def load(path: Path):
    return load_sequence(path, search_dirs=(SHIPPED,))


def sha256_of(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_a_pin_is_read_and_matches_the_module_source_hashed_by_hashlib(tmp_path: Path) -> None:
    pin = sha256_of(STEPS_FILE)
    sequence = load(sequence_with(tmp_path, f'[pins]\n"{STEPS_MODULE}" = "{pin}"\n'))
    assert sequence.pins == {STEPS_MODULE: pin}
    [status] = pin_statuses(sequence.source, sequence.pins, sequence.dependencies())
    # the module's source file, as importlib finds it (importlib.util.find_spec(...).origin)
    assert Path(status.resolved.path or "") == STEPS_FILE
    assert status.resolved.sha256 == pin and not status.mismatched


@pytest.mark.parametrize("value", [
    "'" + "A" * 64 + "'",                   # upper case: the hex digest hashlib gives is lower case
    "'" + "a" * 63 + "'",                   # one digit short
    "'sha256:" + "a" * 64 + "'",            # a prefix
    "'" + "g" * 64 + "'",                   # not hexadecimal
    "42",                                   # not text
])
def test_a_pin_that_is_not_64_lowercase_hex_digits_is_one_problem_line(tmp_path: Path, value: str) -> None:
    line = only_problem(load, sequence_with(tmp_path, f'[pins]\n"{STEPS_MODULE}" = {value}\n'))
    assert f'pins."{STEPS_MODULE}": expected a SHA-256 of the file as 64 lowercase hexadecimal digits' in line


def test_a_dotted_reference_without_quotes_is_named_as_a_table(tmp_path: Path) -> None:
    line = only_problem(load, sequence_with(tmp_path, f'[pins]\n{STEPS_MODULE} = "{"a" * 64}"\n'))
    assert 'pins."tests"' in line and "with the reference in quotes" in line and "found a table" in line


def test_a_pin_for_nothing_the_file_uses_is_one_problem_line(tmp_path: Path) -> None:
    line = only_problem(load, sequence_with(tmp_path, f'[pins]\n"tests.runner.custom_stepz" = "{"a" * 64}"\n'))
    assert 'pins."tests.runner.custom_stepz"' in line
    assert f"this file uses outside knobline ('{STEPS_MODULE}')" in line and "a pin for nothing this file uses" in line


def test_a_pin_for_a_shipped_module_or_profile_is_a_problem_line(tmp_path: Path) -> None:
    design = tmp_path / "panel.toml"
    design.write_text((SHIPPED / "demo-panel.toml").read_text(encoding="utf-8")
                      + f'\n[pins]\n"fixture.model.circuits.integrator_schmitt" = "{"a" * 64}"\n', encoding="utf-8")
    line = only_problem(load_design, design)
    assert "a part of knobline, which the software version covers" in line
    station = tmp_path / "station.toml"
    station.write_text((SHIPPED / "demo-station.toml").read_text(encoding="utf-8")
                       + f'\n[pins]\n"tessaly-yqc83" = "{"a" * 64}"\n', encoding="utf-8")
    assert "a part of knobline" in only_problem(load_station, station)


def test_shipped_files_need_no_pin(tmp_path: Path) -> None:
    station = load_station(SHIPPED / "demo-station.toml")
    sequence = load(sequence_with(tmp_path, "", call="fixture.files.text:shown"))  # a step from knobline itself
    for source, pins, deps in ((station.source, station.pins, station.dependencies()),
                               (sequence.source, sequence.pins, sequence.dependencies()),
                               (sequence.design.source, sequence.design.pins, design_dependencies(sequence.design))):
        assert deps and all(d.shipped for d in deps)
        assert pin_statuses(source, pins, deps) == []


def test_a_plugin_model_and_a_profile_path_are_dependencies_with_their_file_hash(tmp_path: Path) -> None:
    from tests.model.test_plugin_model import PLUGIN_REF, design_toml

    design = tmp_path / "panel.toml"
    design.write_text(design_toml(PLUGIN_REF), encoding="utf-8")
    [status] = pin_statuses(str(design), {}, design_dependencies(load_design(design)))
    assert status.resolved.dependency.kind is DependencyKind.SIGNAL_MODEL
    assert (Path(status.resolved.path or ""), status.resolved.sha256) == (PLUGIN_FILE, sha256_of(PLUGIN_FILE))
    assert status.pin is None and not status.mismatched

    profile = tmp_path / "our-counter.toml"
    profile.write_bytes((ROOT / "fixture" / "instruments" / "profiles" / "tessaly-yqc83.toml").read_bytes())
    text = (SHIPPED / "demo-station.toml").read_text(encoding="utf-8").replace('"tessaly-yqc83"', f'"{profile}"')
    station_path = tmp_path / "station.toml"
    station_path.write_text(text + f'\n[pins]\n"{profile}" = "{sha256_of(profile)}"\n', encoding="utf-8")
    station = load_station(station_path)
    [pinned] = pin_statuses(station.source, station.pins, station.dependencies())
    assert pinned.resolved.dependency.kind is DependencyKind.PROFILE and not pinned.mismatched
    profile.write_bytes(profile.read_bytes() + b"\n# edited after pinning\n")
    [changed] = pin_statuses(station.source, station.pins, station.dependencies())
    assert changed.mismatched and changed.resolved.sha256 == sha256_of(profile)


def test_a_package_pins_its_init_and_a_reexported_function_adds_its_defining_module(
        tmp_path: Path, monkeypatch) -> None:
    package = f"pinned_{uuid.uuid4().hex}"
    (tmp_path / package).mkdir()
    (tmp_path / package / "__init__.py").write_text("from .steps import check\n", encoding="utf-8")
    (tmp_path / package / "steps.py").write_text("def check(context, parameters):\n    return 'pass'\n",
                                                 encoding="utf-8")
    monkeypatch.syspath_prepend(str(tmp_path))
    sequence = load(sequence_with(tmp_path, "", call=f"{package}:check"))
    statuses = pin_statuses(sequence.source, sequence.pins, sequence.dependencies())
    assert [(s.resolved.dependency.reference, Path(s.resolved.path or "").name) for s in statuses] == [
        (package, "__init__.py"), (f"{package}.steps", "steps.py")]


def test_a_module_without_a_source_file_cannot_be_pinned_and_says_so(tmp_path: Path, monkeypatch) -> None:
    namespace = f"pinned_ns_{uuid.uuid4().hex}"  # a folder without __init__.py: a namespace package
    (tmp_path / namespace).mkdir()
    monkeypatch.syspath_prepend(str(tmp_path))
    importlib.invalidate_caches()
    sequence = load(sequence_with(tmp_path, "", call="math:floor"))  # math: built in or a compiled extension
    [math_status] = pin_statuses(sequence.source, sequence.pins, sequence.dependencies())
    assert math_status.resolved.sha256 is None and "no Python source file" in (math_status.resolved.unpinnable or "")
    ns = resolve(Dependency(DependencyKind.CUSTOM_STEP, namespace, "a test"))
    assert importlib.util.find_spec(namespace) is not None and ns.sha256 is None
    assert "no Python source file" in (ns.unpinnable or "")


@pytest.mark.parametrize("content, digest", [
    # FIPS 180-2, Appendix B.1 (one-block message "abc") and B.3 (one million "a": many read chunks)
    (b"abc", "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"),
    (b"a" * 1_000_000, "cdc76e5c9914fb9281a1c7e284d73e67f1809a48a497200e046d39ccc7112cd0"),
])
def test_a_file_is_hashed_to_the_published_sha256(tmp_path: Path, content: bytes, digest: str) -> None:
    path = tmp_path / "module.py"
    path.write_bytes(content)
    assert file_sha256(path) == digest == hashlib.sha256(content).hexdigest()


def test_the_pin_line_to_add_reads_back_as_the_same_pin(tmp_path: Path) -> None:
    pin = sha256_of(STEPS_FILE)
    sequence = load(sequence_with(tmp_path, f"[pins]\n{pin_line(STEPS_MODULE, pin)}\n"))
    assert sequence.pins == {STEPS_MODULE: pin}
    with pytest.raises(FileProblems):  # and the same line for a reference the file does not use is refused
        load(sequence_with(tmp_path, f"[pins]\n{pin_line('tests.runner.other', pin)}\n"))
