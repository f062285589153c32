"""A sequence's release seals its tolerance limits; a production station refuses limits that differ.

The behaviour is ours (README "Released test programs"): the limits a unit is judged by are computed by
knobline, so the sequence's release signs the SHA-256 of them as the releasing knobline computed them,
and a run compares that with the limits of the plan it will use (after the computed-limits cache).
Common practice for controlled test limits (from memory), no numeric reference; the hash and signature
primitives are pinned to FIPS 180-2 and RFC 8032 in tests/runner/test_limits_seal.py and
tests/reporting/test_release_signature.py.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import math
import hashlib
import json
from pathlib import Path

import pytest

from fixture.commands._program_check import check_programs
from fixture.files.sequence_file import load_sequence
from fixture.files.station_file import load_station
from fixture.reporting.person_keys import key_fingerprint, load_person_private_key, sign
from fixture.reporting.release_signature import RELEASED_FOR_PRODUCTION, release_payload, sign_registration
from fixture.runner import limits_cache
from fixture.runner.limits_seal import sealed
from fixture.runner.plan import compile_plan
from fixture.store import open_store
from fixture.store.program_models import PersonRow, ProgramApprovalRow, ProgramRow
from fixture.store.programs import program_by_hash, register_program, run_not_for_shipment
from tests.demo_lots import LOT_OPTIONS
from tests.commands.test_program_commands import invoke, no_power, production_station, run_unit  # noqa: F401
from tests.programs import APPROVER, DEMO_FILES, SHIPPED, add_people, release_demo_programs, release_file


def _release_all(database_url: str, tmp_path: Path, station: Path) -> None:
    release_demo_programs(database_url, tmp_path / "people", {"station": station, "design": DEMO_FILES["design"],
                                                              "sequence": DEMO_FILES["sequence"]})


def _plant(folder: Path, shift_hz: float) -> str:
    """Raise the first frequency row's lower spec limit (225 Hz at knob A 0 %, B 50 % in the demo design) by
    ``shift_hz`` in every cache entry that has one, with the entry's SHA-256 recomputed as whoever plants it
    would; the planted limit, as written."""
    planted = ""
    for path in folder.glob("limits-*.json"):
        entry = json.loads(path.read_bytes())
        row = next((r for r in entry["rows"] if r["quantity"] == "frequency_hz"), None)
        if row is None:
            continue
        row["spec_low"] += shift_hz
        planted = repr(row["spec_low"])
        entry["rows_sha256"] = limits_cache._rows_sha256(entry["rows"])
        path.write_text(json.dumps(entry, sort_keys=True, separators=(",", ":")), encoding="utf-8")
    assert planted, "no cache entry with a frequency row was written"
    return planted


def test_a_production_station_refuses_limits_from_a_planted_cache_entry(
        database_url: str, tmp_path: Path, monkeypatch, no_power) -> None:  # noqa: F811
    cache = tmp_path / "cache"
    monkeypatch.setenv("KNOBLINE_CACHE", str(cache))
    station = production_station(tmp_path)
    _release_all(database_url, tmp_path, station)
    config = load_station(station)
    seq = load_sequence(DEMO_FILES["sequence"], station=config, search_dirs=(SHIPPED,))
    compile_plan(seq, seq.design, config)  # fills the cache, as the line's first unit would
    monkeypatch.setattr(limits_cache, "_said_corrupt", False)
    _plant(cache, 0.1)
    refused = run_unit(database_url, "--station", str(station))
    assert refused.exit_code == 2, refused.stderr
    assert no_power == []  # refused before the station was opened: nothing powered
    said = refused.stderr
    assert "expected the tolerance limits sealed by its release, found other limits compiled now" in said
    # the first differing stop and quantity in words, released and now (the demo's step 1, first row)
    assert "Frequency at knob A 0 %, B 50 % (step 2): released 225.000 Hz to 310.000 Hz, computed now 225.100 Hz " \
        "to 310.000 Hz" in said
    assert "the same knobline version (knobline " in said and "computed-limits cache entry" in said
    assert "knobline limits" in said and "release the sequence again" in said


def _upgrade(monkeypatch) -> None:
    """Another knobline version whose model widens every duty limit by a hundredth of a point."""
    monkeypatch.setattr("fixture.__version__", "0.2.0")
    real = limits_cache.compute_limits

    def wider(*args, **kwargs):
        table = real(*args, **kwargs)
        rows = tuple(dataclasses.replace(r, low=r.low - 0.01, high=r.high + 0.01) if r.quantity == "duty_pct" else r
                     for r in table.rows)
        return dataclasses.replace(table, rows=rows)
    monkeypatch.setattr(limits_cache, "compute_limits", wider)


def test_a_production_station_refuses_limits_another_knobline_computes(
        database_url: str, tmp_path: Path, monkeypatch, no_power) -> None:  # noqa: F811
    station = production_station(tmp_path)
    _release_all(database_url, tmp_path, station)
    _upgrade(monkeypatch)
    refused = run_unit(database_url, "--station", str(station))
    assert refused.exit_code == 2, refused.stderr
    assert no_power == []
    assert "this knobline (knobline 0.2.0) computes other limits than the one that released them (knobline " \
        in refused.stderr
    assert "Duty cycle at knob A 50 %, B 0 % (step 3): released " in refused.stderr


def test_a_new_revision_of_the_sequence_released_seals_the_new_limits(
        database_url: str, tmp_path: Path, monkeypatch) -> None:
    # What the refusal says to do, done: a new revision of the sequence, released, seals the limits computed now.
    station = production_station(tmp_path)
    _release_all(database_url, tmp_path, station)
    _upgrade(monkeypatch)
    assert run_unit(database_url, "--station", str(station)).exit_code == 2
    revised = tmp_path / "new" / "demo-sequence.toml"
    revised.parent.mkdir()
    revised.write_text(DEMO_FILES["sequence"].read_text(encoding="utf-8").replace(
        'design = "demo-panel.toml"', f'design = "{DEMO_FILES["design"]}"') + "# limits reviewed for 0.2.0\n",
        encoding="utf-8")
    with open_store(database_url) as store:
        release_file(store, "sequence", revised, tmp_path / "people")
    passed = run_unit(database_url, str(revised), "--station", str(station), "--json")
    assert passed.exit_code == 0, passed.stderr
    listed = invoke("program", "list", "--db", database_url).stdout
    assert "sequence demo-sequence.toml version 2: released" in listed and "computed by knobline 0.2.0" in listed


def test_a_production_station_tests_when_the_limits_are_as_sealed(database_url: str, tmp_path: Path) -> None:
    station = production_station(tmp_path)
    _release_all(database_url, tmp_path, station)
    for serial in ("PW22-000911", "PW22-000912"):  # the second from the cache the first wrote
        passed = invoke("test", "--serial", serial, "--db", database_url, "--operator", "olu", "--station",
                        str(station), "--json", *LOT_OPTIONS)
        assert passed.exit_code == 0, passed.stderr
        assert json.loads(passed.stdout)["not_for_shipment"] is False
        assert "limits" not in passed.stderr


def test_an_engineering_station_marks_a_run_whose_limits_are_not_as_sealed(
        database_url: str, tmp_path: Path, monkeypatch) -> None:
    cache = tmp_path / "cache"
    monkeypatch.setenv("KNOBLINE_CACHE", str(cache))
    station = production_station(tmp_path, '"engineering"')
    _release_all(database_url, tmp_path, station)
    assert run_unit(database_url, "--station", str(station)).exit_code == 0
    monkeypatch.setattr(limits_cache, "_said_corrupt", False)
    _plant(cache, 0.1)
    marked = run_unit(database_url, "--station", str(station), "--json")
    assert marked.exit_code == 0, marked.stderr
    data = json.loads(marked.stdout)
    assert data["not_for_shipment"] is True
    with open_store(database_url) as store:
        assert run_not_for_shipment(store, data["run_id"]) is True
    lines = [line for line in marked.stderr.splitlines() if "limits not as released" in line]
    assert len(lines) == 1 and "marked not for shipment" in lines[0] and "Frequency at knob A 0 %, B 50 %" in lines[0]


def _release_in_format_1(database_url: str, tmp_path: Path, station: Path) -> None:
    """The station and design released as now; the sequence released as knobline did before limits were
    sealed (format knobline-release/1, no seal columns), as an old database holds it."""
    with open_store(database_url) as store:
        release_file(store, "station", station, tmp_path / "people")
        release_file(store, "design", DEMO_FILES["design"], tmp_path / "people")
        _, approver_key = add_people(store, tmp_path / "people")
        key = load_person_private_key(approver_key)
        raw = DEMO_FILES["sequence"].read_bytes()
        sha = hashlib.sha256(raw).hexdigest()
        engineer_key = load_person_private_key(tmp_path / "people" / "engineer.pem")
        program, _ = register_program(store, "sequence", DEMO_FILES["sequence"].name, sha, raw.decode(),
                                      sign_registration(engineer_key, "sequence", DEMO_FILES["sequence"].name, sha,
                                                        "Erin Engineer"))
        at = dt.datetime.now(dt.UTC).replace(microsecond=0)
        payload = release_payload("sequence", sha, program.version, RELEASED_FOR_PRODUCTION, "old release",
                                  APPROVER, at)
        assert b'"format":"knobline-release/1"' in payload

        def work(s):
            row = s.get(ProgramRow, program.program_id)
            approver_id = s.query(PersonRow.id).filter(PersonRow.name == APPROVER).scalar()
            s.add(ProgramApprovalRow(program_id=row.id, approver_id=approver_id, meaning=RELEASED_FOR_PRODUCTION,
                                     reason="old release", signed_at=at,
                                     key_fingerprint=key_fingerprint(key.public_key()), signature=sign(key, payload)))
            row.state = "released"
        store._commit(work)


def test_a_format_1_release_still_verifies_and_runs_on_a_production_station_with_a_warning(
        database_url: str, tmp_path: Path) -> None:
    station = production_station(tmp_path)
    _release_in_format_1(database_url, tmp_path, station)
    passed = run_unit(database_url, "--station", str(station), "--json")
    assert passed.exit_code == 0, passed.stderr
    assert json.loads(passed.stdout)["not_for_shipment"] is False
    warnings = [line for line in passed.stderr.splitlines() if "knobline-release/1" in line]
    assert len(warnings) == 1 and "warning" in warnings[0] and "checked against no approval" in warnings[0]
    listed = invoke("program", "list", "--db", database_url)
    assert "tolerance limits not sealed (knobline-release/1" in listed.stdout
    sequence = next(p for p in json.loads(invoke("program", "list", "--json", "--db", database_url).stdout)["programs"]
                    if p["kind"] == "sequence")
    assert sequence["approval"]["verified"] is True and sequence["approval"]["format"] == "knobline-release/1"
    assert sequence["approval"]["limits"] is None


def test_program_release_of_a_sequence_seals_its_limits_and_list_shows_them(database_url: str, tmp_path: Path) -> None:
    from fixture.runner.limits_seal import plan_rows, seal_sha256, seal_text

    with open_store(database_url) as store:
        add_people(store, tmp_path / "people")
    registered = invoke("program", "register", "demo-sequence", "--by", "Erin Engineer", "--key",
                        str(tmp_path / "people" / "engineer.pem"), "--db", database_url)
    assert registered.exit_code == 0, registered.stderr
    released = invoke("program", "release", "demo-sequence", "--approver", APPROVER, "--key",
                      str(tmp_path / "people" / "approver.pem"), "--reason", "limits reviewed", "--db", database_url,
                      "--json")
    assert released.exit_code == 0, released.stderr
    approval = json.loads(released.stdout)["approval"]
    config = load_station(DEMO_FILES["station"])
    seq = load_sequence(DEMO_FILES["sequence"], station=config, search_dirs=(SHIPPED,))
    plan = compile_plan(seq, seq.design, config)
    # the seal is the SHA-256 of the rows the plan judges by (the same rows, computed without the cache)
    assert approval["format"] == "knobline-release/2" and approval["verified"] is True
    assert approval["limits"]["sha256"] == seal_sha256(seal_text(plan_rows(plan)))
    assert approval["limits"]["computed_by"].startswith("knobline ")
    assert "tolerance limits sealed: sha256 " + approval["limits"]["sha256"][:16] in \
        invoke("program", "list", "--db", database_url).stdout
    audit = invoke("audit", "--action", "approval", "--json", "--db", database_url)
    assert approval["limits"]["sha256"] in audit.stdout
    with open_store(database_url) as store:
        program = program_by_hash(store, "sequence", seq.content_sha256)
        assert program is not None and program.approval is not None and program.approval.limits is not None


def test_check_programs_compares_the_plan_it_is_given(database_url: str, tmp_path: Path) -> None:
    # The plan the run will use is what is compared: a row changed in it (as the cache could) is refused.
    station = production_station(tmp_path)
    _release_all(database_url, tmp_path, station)
    config = load_station(station)
    seq = load_sequence(DEMO_FILES["sequence"], station=config, search_dirs=(SHIPPED,))
    plan = compile_plan(seq, seq.design, config)
    with open_store(database_url) as store:
        assert check_programs(store, config, seq, plan).not_for_shipment is False
        step = plan.steps[1]
        point = step.points[0]
        assert point.limits is not None
        moved = dataclasses.replace(point, limits=dataclasses.replace(point.limits,
                                                                      tolerance_high=point.limits.tolerance_high
                                                                      * (1 + 1e-6)))
        changed = dataclasses.replace(plan, steps=(plan.steps[0], dataclasses.replace(step, points=(
            moved, *step.points[1:])), *plan.steps[2:]))
        with pytest.raises(Exception, match="found other limits compiled now") as refused:
            check_programs(store, config, seq, changed)
    # a part in a million: past the six figures people read, so both numbers are written in full
    assert repr(sealed(point.limits.tolerance_high)) in str(refused.value)


def test_a_limit_a_unit_in_the_last_place_apart_is_the_released_one(database_url: str, tmp_path: Path) -> None:
    # numpy's exp and log differ in the last place between CPUs (SIMD code paths): not a change of limits
    station = production_station(tmp_path)
    _release_all(database_url, tmp_path, station)
    config = load_station(station)
    seq = load_sequence(DEMO_FILES["sequence"], station=config, search_dirs=(SHIPPED,))
    plan = compile_plan(seq, seq.design, config)
    step = plan.steps[1]
    point = step.points[0]
    assert point.limits is not None
    nudged = dataclasses.replace(point, limits=dataclasses.replace(
        point.limits, tolerance_high=math.nextafter(point.limits.tolerance_high, math.inf)))
    plan = dataclasses.replace(plan, steps=(plan.steps[0], dataclasses.replace(step, points=(
        nudged, *step.points[1:])), *plan.steps[2:]))
    with open_store(database_url) as store:
        assert check_programs(store, config, seq, plan).not_for_shipment is False



def test_check_with_db_reports_the_seal_status_of_a_sequence(database_url: str, tmp_path: Path, monkeypatch) -> None:
    cache = tmp_path / "cache"
    monkeypatch.setenv("KNOBLINE_CACHE", str(cache))
    station = production_station(tmp_path)
    unknown = invoke("check", "--sequence", "demo-sequence", "--db", database_url, "--json")
    assert unknown.exit_code == 0 and json.loads(unknown.stdout)["sequence"]["release"] is None
    _release_all(database_url, tmp_path, station)
    sealed = invoke("check", "--station", str(station), "--sequence", "demo-sequence", "--db", database_url)
    assert sealed.exit_code == 0, sealed.stderr
    assert "version 1, released (knobline-release/2): tolerance limits as sealed by knobline " in sealed.stdout
    monkeypatch.setattr(limits_cache, "_said_corrupt", False)
    _plant(cache, 0.1)
    differ = invoke("check", "--station", str(station), "--sequence", "demo-sequence", "--db", database_url, "--json")
    release = json.loads(differ.stdout)["sequence"]["release"]
    assert release["limits"] == "differ" and release["format"] == "knobline-release/2"
    assert release["difference"].startswith("Frequency at knob A 0 %, B 50 % (step 2): released 225.000 Hz")
    # without a station: computed without the cache, so the planted entry is not what is compared
    assert json.loads(invoke("check", "--sequence", "demo-sequence", "--db", database_url, "--json").stdout)[
        "sequence"]["release"]["limits"] == "as-sealed"


def test_check_with_db_reports_a_format_1_release_as_not_sealed(database_url: str, tmp_path: Path) -> None:
    _release_in_format_1(database_url, tmp_path, production_station(tmp_path))
    checked = invoke("check", "--sequence", "demo-sequence", "--db", database_url, "--json")
    release = json.loads(checked.stdout)["sequence"]["release"]
    assert (release["limits"], release["format"]) == ("not-sealed", "knobline-release/1")
