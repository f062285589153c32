"""``knobline test`` and the lot watch: an alert printed after the banner and stored with its run; a
watch that fails leaves the verdict and exit code alone."""

from __future__ import annotations

import functools
import json
from pathlib import Path

import pytest
from click.testing import CliRunner

import fixture.sim.dut
from fixture.cli import main
from fixture.store import open_store
from fixture.store.lot_watch import run_lot_watch
from tests.demo_lots import lot_options
from tests.json_keys import all_keys, documented_json_keys

LOTS = lot_options(c_integrator="C1-2611A", r_integrator="R5-2601A", knob_a_pot="RV1-2604A")


def run_test(db: Path, number: int, *args: str):
    return CliRunner().invoke(main, ["test", "--serial", f"PW22-{number:06d}", *LOTS, "--db", str(db),
                                     "--operator", "ana", "--seed", str(number), *args], catch_exceptions=False)


@pytest.fixture
def shifted_capacitor_lot(monkeypatch: pytest.MonkeyPatch) -> None:
    """The simulated bench builds every unit with lot C1-2611A 8 % low (a shifted lot on the line)."""
    monkeypatch.setattr(fixture.sim.dut, "build_unit",
                        functools.partial(fixture.sim.dut.build_unit, lot_shifts={"C1-2611A": -0.08}))


def test_an_alert_is_printed_after_the_banner_and_stored_with_its_run(tmp_path: Path, shifted_capacitor_lot) -> None:
    db = tmp_path / "r.sqlite"
    fired = None
    for number in range(1, 7):  # bench/lot_watch_rates.py: a -8 % capacitor lot alerts by its 5th unit in 9 of 10
        result = run_test(db, number, "--json")
        assert result.exit_code in (0, 1), result.stderr
        data = json.loads(result.stdout)
        if data["lot_alerts"]:
            fired = (number, data)
            break
    assert fired is not None, "no lot alert within 6 units of a -8 % capacitor lot"
    number, data = fired
    # without --certificates the certificate's own keys are absent (null)
    documented = documented_json_keys(CliRunner().invoke(main, ["test", "--help"]).stdout)
    assert all_keys(data) == documented - {"certificate_number", "html", "pdf"}
    alert = data["lot_alerts"][0]
    assert (alert["part"], alert["lot"], alert["side"]) == ("c_integrator", "C1-2611A", "low")
    assert "lot C1-2611A of C1 integrator capacitor reads low" in alert["text"]
    with open_store(str(db)) as store:
        assert alert["text"] in [e.alert for e in run_lot_watch(store, data["run_id"])]

    # The next unit on the terminal: the verdict banner first, then no new alert for the same lot.
    result = run_test(db, number + 1)
    lines = result.stdout.splitlines()
    assert any(w in result.stdout for w in ("PASS", "FAIL"))
    assert not [ln for ln in lines if ln.startswith("lot alert:")]  # latched: the lot is already alerted


def test_the_alert_line_follows_the_verdict_banner(tmp_path: Path, shifted_capacitor_lot) -> None:
    db = tmp_path / "r.sqlite"
    for number in range(1, 7):
        result = run_test(db, number)
        lines = result.stdout.splitlines()
        alert = [i for i, ln in enumerate(lines) if ln.startswith("lot alert:")]
        if alert:
            banner = max(i for i, ln in enumerate(lines) if "PASS" in ln or "FAIL" in ln)
            assert len(alert) == 1 and alert[0] > banner
            return
    pytest.fail("no lot alert within 6 units of a -8 % capacitor lot")


def test_a_crashing_lot_watch_keeps_the_verdict_and_exit_code(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    def broken(*args: object, **kwargs: object) -> None:
        raise RuntimeError("diagnosis exploded")

    monkeypatch.setattr("fixture.analytics.lot_watch_run.diagnose_unit", broken)
    result = run_test(tmp_path / "r.sqlite", 1, "--json")
    assert result.exit_code == 0  # the simulated unit passes (as without the watch)
    data = json.loads(result.stdout)
    assert data["verdict"] == "pass" and data["lot_alerts"] == []
    assert "diagnosis exploded" in data["lot_watch_warning"] and "the verdict stands" in data["lot_watch_warning"]
    assert "knobline: warning: lot watch of run" in result.stderr

    plain = run_test(tmp_path / "r.sqlite", 2)
    assert plain.exit_code == 0 and "PASS" in plain.stdout
    assert "knobline: warning: lot watch of run" in plain.stderr


def test_demo_reports_when_the_planted_lot_was_alerted_against_its_first_failure(tmp_path: Path) -> None:
    result = CliRunner().invoke(main, ["demo", "--units", "30", "--seed", "2026", "--out", str(tmp_path),
                                       "--no-reports", "--json"], catch_exceptions=False)
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    planted = (data["shifted_lot"]["part"], data["shifted_lot"]["lot"])
    naming = [a["unit"] for a in data["lot_alerts"]
              if planted in [(a["part"], a["lot"])] + [(o["part"], o["lot"]) for o in a["also"] + a["partners"]]]
    assert data["first_alert_unit"] == min(naming)
    assert data["runs"][data["first_failed_unit"] - 1]["verdict"] == "fail"
    text = CliRunner().invoke(main, ["demo", "--units", "30", "--seed", "2026", "--out", str(tmp_path / "t"),
                                     "--no-reports"], catch_exceptions=False)
    assert f"early warning on the planted lot: lot alert at unit {data['first_alert_unit']}" in text.stdout
