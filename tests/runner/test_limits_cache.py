"""The computed-limits cache gives exactly the limits the tolerance analysis computes, or computes them.

The reference throughout is knobline's own computation with the cache turned off (``KNOBLINE_CACHE=off``):
a cache is right when it cannot be told apart from not having one (common practice, no source).
"""

from __future__ import annotations

import json
import logging
import os
import shutil
import subprocess
import sys
from dataclasses import replace
from pathlib import Path

import pytest

import fixture.runner.limits_cache as limits_cache
from fixture.files.design_file import load_design
from fixture.files.sequence_file import Sequence, load_sequence
from fixture.files.station_file import load_station
from fixture.runner.plan import compile_plan
from fixture.runner.plan_points import TestPlan
from tests.files.edits import edited_copy

ROOT = Path(__file__).resolve().parents[2]
SHIPPED = (ROOT / "sequences",)
STATION = load_station(ROOT / "sequences/demo-station.toml")
C1_BAND = 'value = "100n"\ntolerance = "5%"'  # the demo design's C1 integrator capacitor


def plan_of(sequence_path: Path) -> tuple[Sequence, TestPlan]:
    sequence = load_sequence(sequence_path, station=STATION, search_dirs=SHIPPED)
    return sequence, compile_plan(sequence, sequence.design, STATION)


def computed(sequence_path: Path, monkeypatch: pytest.MonkeyPatch) -> TestPlan:
    """The plan with the cache turned off: every limit from the tolerance analysis."""
    with monkeypatch.context() as patch:
        patch.setenv("KNOBLINE_CACHE", "off")
        return plan_of(sequence_path)[1]


def entries(folder: Path) -> list[Path]:
    return sorted(folder.glob("limits-*.json"))


def no_analysis(monkeypatch: pytest.MonkeyPatch) -> None:
    """From here on, any tolerance analysis fails the test: limits must come from the cache."""
    def refuse(*args: object, **kwargs: object) -> None:
        raise AssertionError("limits computed although a valid cache entry exists")

    monkeypatch.setattr(limits_cache, "compute_limits", refuse)


@pytest.fixture
def cache(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    folder = tmp_path / "cache"
    monkeypatch.setenv("KNOBLINE_CACHE", str(folder))
    monkeypatch.setattr(limits_cache, "_said_corrupt", False)
    return folder


def demo_copy(tmp_path: Path, old: str = C1_BAND, new: str = C1_BAND) -> Path:
    """The demo sequence beside a copy of its design with ``old`` replaced by ``new``; the sequence's path."""
    folder = tmp_path / "files"
    folder.mkdir(parents=True, exist_ok=True)
    edited_copy(ROOT / "sequences/demo-panel.toml", folder, old, new)
    shutil.copy(ROOT / "sequences/demo-sequence.toml", folder)
    return folder / "demo-sequence.toml"


def test_a_plan_from_the_cache_equals_the_plan_computed_without_it(cache: Path, tmp_path: Path,
                                                                 monkeypatch: pytest.MonkeyPatch) -> None:
    sequence_path = demo_copy(tmp_path)
    reference = computed(sequence_path, monkeypatch)
    first = plan_of(sequence_path)[1]  # computes and writes the entries
    assert entries(cache)
    no_analysis(monkeypatch)
    second = plan_of(sequence_path)[1]
    assert first == reference and second == reference
    assert repr(second) == repr(reference)  # the same numbers to the last digit, and of the same types


def test_changing_one_tolerance_in_the_design_file_is_a_cache_miss_with_other_limits(
        cache: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    plan_of(demo_copy(tmp_path / "a"))
    before = entries(cache)
    narrower = demo_copy(tmp_path / "b", new=C1_BAND.replace("5%", "4%"))
    reference = computed(narrower, monkeypatch)
    plan = plan_of(narrower)[1]
    assert set(entries(cache)) > set(before)  # new entries: the old ones were not taken
    assert plan == reference
    frequency_limits = {p.limits for s in plan.steps for p in s.points if p.quantity == "frequency_hz"}
    old_plan = plan_of(demo_copy(tmp_path / "a"))[1]
    old_limits = {p.limits for s in old_plan.steps for p in s.points if p.quantity == "frequency_hz"}
    assert frequency_limits != old_limits  # C1 sets the frequency: its band moves every frequency limit


def test_the_key_ignores_where_the_design_file_lies_but_not_its_values(tmp_path: Path) -> None:
    a = load_design(demo_copy(tmp_path / "x").parent / "demo-panel.toml")
    b = load_design(demo_copy(tmp_path / "y", new=C1_BAND + "  # a comment").parent / "demo-panel.toml")
    assert a.source != b.source and a.content_sha256 != b.content_sha256
    c = replace(b, parts=tuple(replace(p, tolerance=p.tolerance * 1.01) if p.key == "c_integrator" else p
                               for p in b.parts))
    args = ("worst-case", "production", [], {"a": ("frequency_hz",), "b": ()})
    assert limits_cache.limits_key(a, *args) == limits_cache.limits_key(b, *args)
    assert limits_cache.limits_key(a, *args) != limits_cache.limits_key(c, *args)
    assert limits_cache.limits_key(a, *args) != limits_cache.limits_key(a, "rss", *args[1:])


def test_the_key_is_the_same_in_another_process(tmp_path: Path) -> None:
    # one process per unit: a key holding anything process-bound (an object's address) would never hit
    code = ("from fixture.files.design_file import load_design; from fixture.model.tolerance.space import "
            "knob_settings; from fixture.runner.limits_cache import limits_key; "
            "d = load_design('sequences/demo-panel.toml'); "
            "print(limits_key(d, 'worst-case', 'production', knob_settings(d), {'a': ('frequency_hz',), 'b': ()}))")
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    keys = {subprocess.run([sys.executable, "-c", code], cwd=ROOT, env=env, capture_output=True, text=True,
                           check=True).stdout.strip() for _ in range(2)}
    assert len(keys) == 1 and len(next(iter(keys))) == 64


def tamper(path: Path, change) -> None:
    entry = json.loads(path.read_text())
    change(entry)
    path.write_text(json.dumps(entry))


def widen_first_row(entry: dict) -> None:
    entry["rows"][0]["low"] = entry["rows"][0]["low"] * 0.5  # a wider limit would pass bad units


def swap_rows_and_rehash(entry: dict) -> None:
    entry["rows"][0], entry["rows"][1] = entry["rows"][1], entry["rows"][0]
    entry["rows_sha256"] = limits_cache._rows_sha256(entry["rows"])


def truncate(path: Path) -> None:
    path.write_bytes(path.read_bytes()[:100])


def other_key(entry: dict) -> None:
    entry["key"] = "0" * 64


@pytest.mark.parametrize("damage", ["edited limit", "rows swapped, hash recomputed", "truncated", "other key"])
def test_a_damaged_cache_entry_is_not_used_and_is_said_once(damage: str, cache: Path, tmp_path: Path,
                                                           monkeypatch: pytest.MonkeyPatch,
                                                           caplog: pytest.LogCaptureFixture) -> None:
    sequence_path = demo_copy(tmp_path)
    reference = computed(sequence_path, monkeypatch)
    plan_of(sequence_path)
    for path in entries(cache):
        if damage == "truncated":
            truncate(path)
        else:
            tamper(path, {"edited limit": widen_first_row, "rows swapped, hash recomputed": swap_rows_and_rehash,
                          "other key": other_key}[damage])
    with caplog.at_level(logging.WARNING, logger="knobline.limits_cache"):
        plan = plan_of(sequence_path)[1]
    assert plan == reference
    said = [r for r in caplog.records if r.name == "knobline.limits_cache"]
    assert len(said) == 1 and "not used" in said[0].getMessage()  # two damaged entries, one line
    no_analysis(monkeypatch)
    assert plan_of(sequence_path)[1] == reference  # written again, whole: used from now on


def test_a_plug_in_model_is_always_computed(cache: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # its code may import modules the key cannot see, so no entry may stand for it
    from tests.model.plugin_555 import Timer555Model

    demo = load_design(ROOT / "sequences/demo-panel.toml")
    assert limits_cache.cacheable(demo)
    assert not limits_cache.cacheable(replace(demo, model=Timer555Model()))


def test_an_unwritable_cache_folder_only_costs_the_computation(tmp_path: Path, monkeypatch: pytest.MonkeyPatch
                                                             ) -> None:
    blocker = tmp_path / "not-a-folder"
    blocker.write_text("")
    monkeypatch.setenv("KNOBLINE_CACHE", str(blocker / "cache"))
    sequence_path = demo_copy(tmp_path)
    assert plan_of(sequence_path)[1] == computed(sequence_path, monkeypatch)


def test_a_half_written_entry_left_by_a_killed_process_is_swept_once_an_hour_old(tmp_path: Path) -> None:
    # common practice, no source: a temporary file younger than the sweep age may be another writer's
    from fixture.runner.limits_cache import LEFTOVER_AFTER_S, sweep_leftovers

    old, young, entry = tmp_path / ".limits-old.tmp", tmp_path / ".limits-young.tmp", tmp_path / "limits-ab.json"
    for path in (old, young, entry):
        path.write_text("{", encoding="utf-8")
    now = 1_800_000_000.0
    os.utime(old, (now - LEFTOVER_AFTER_S - 1, now - LEFTOVER_AFTER_S - 1))
    os.utime(young, (now - 60, now - 60))
    os.utime(entry, (now - 10 * LEFTOVER_AFTER_S, now - 10 * LEFTOVER_AFTER_S))
    assert sweep_leftovers(tmp_path, now_s=now) == 1
    assert not old.exists() and young.exists() and entry.exists()
