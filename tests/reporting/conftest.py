"""A results database with certifiable runs, filled through the Store API, and a station key per test."""

from __future__ import annotations

import datetime as dt
import hashlib
from pathlib import Path

import pytest

from fixture.reporting.signing import StationKey, station_key
from fixture.store import DB_ENV_VAR, DecoderConstants, MeasurementRecord, open_store

DESIGN_SHA = hashlib.sha256(b"a design file").hexdigest()
SEQUENCE_SHA = hashlib.sha256(b"a sequence file").hexdigest()
T0 = dt.datetime(2026, 3, 2, 8, 0, tzinfo=dt.UTC)
HOSTILE = "<script>alert(1)</script>"
#: the stored design's text: only what names the parts (invented)
DESIGN_TEXT = '[parts.c_integrator]\nref = "C1"\ndescription = "film"\n'

# Invented readings (demo-like data, never a reference value).
PERIOD = MeasurementRecord("period at A 25 %", "period", 3.1234567e-3, "s", "pass", knob_a_pct=25.0,
                           knob_b_pct=50.0, tolerance_low=2.9e-3, tolerance_high=3.4e-3, acceptance_low=2.91e-3,
                           acceptance_high=3.39e-3, expanded_uncertainty=2.0e-6, coverage_factor=2.0,
                           decision_rule="guarded acceptance, w = 1 x U")
DUTY = MeasurementRecord("duty at B 90 %", "duty", 0.9312, "1", "fail", knob_a_pct=50.0, knob_b_pct=90.0,
                         tolerance_high=0.92, acceptance_high=0.919, expanded_uncertainty=1e-3, coverage_factor=2.0,
                         decision_rule="guarded acceptance, w = 1 x U")
CURRENT = MeasurementRecord("supply current", "supply_current", 6.6e-3, "A", "pass", acceptance_low=2e-3,
                            acceptance_high=15e-3, decision_rule="simple acceptance")


@pytest.fixture(autouse=True)
def private_paths(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    # Never touch the developer's own database, key or templates.
    monkeypatch.delenv(DB_ENV_VAR, raising=False)
    monkeypatch.delenv("KNOBLINE_KEY", raising=False)
    monkeypatch.delenv("KNOBLINE_REPORTS", raising=False)
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "xdg"))


@pytest.fixture
def key(tmp_path: Path) -> StationKey:
    return station_key(tmp_path / "keys" / "station-key.pem", create_missing=True)


@pytest.fixture
def db_url(tmp_path: Path) -> str:
    """Run 1: PW22-000001 failed. Run 2: a unit whose serial, lot and operator are hostile HTML; it passed.

    Run 3: PW22-000003 still running.
    """
    url = f"sqlite:///{tmp_path / 'results.sqlite'}"
    with open_store(url) as store:
        store.record_design("PW-22", "C", "demo-panel.toml", DESIGN_SHA, DESIGN_TEXT)
        store.record_sequence("final test", "demo-sequence.toml", SEQUENCE_SHA)
        store.record_station("line-1", "hall 2", hashlib.sha256(b"a station").hexdigest(), "demo-station.toml")
        counter = store.record_instrument("counter", "Tessaly Instruments", "YQ-C83", "T31-0042", "1.04",
                                          calibration_certificate="CAL-26-0117",
                                          calibration_due=dt.date(2027, 1, 31), calibration_lab="in-house")
        supply = store.record_instrument("supply", "Tessaly Instruments", "YQ-P26", "P35-0007", "2.1",
                                         calibration_certificate="CAL-26-0201", calibration_due=dt.date(2027, 2, 28))

        first = store.begin_run("PW22-000001", {"c_integrator": "C1-2611A"}, "line-1", "ana", "0.1.0",
                                SEQUENCE_SHA, DESIGN_SHA, started_at=T0, instruments=[counter, supply])
        store.record_step(first, 0, "power up", "pass", T0, T0 + dt.timedelta(seconds=1), "", [CURRENT])
        store.record_step(first, 1, "knob stops", "fail", T0 + dt.timedelta(seconds=1),
                          T0 + dt.timedelta(seconds=4), "duty high at B 90 %", [PERIOD, DUTY])
        store.finish_run(first, "fail", ended_at=T0 + dt.timedelta(seconds=4.5))

        t1 = T0 + dt.timedelta(minutes=5)
        hostile = store.begin_run(HOSTILE, {"c_integrator": HOSTILE}, "line-1", HOSTILE, "0.1.0", SEQUENCE_SHA,
                                  DESIGN_SHA, started_at=t1, instruments=[counter])
        store.record_step(hostile, 0, "power up", "pass", t1, t1 + dt.timedelta(seconds=1), HOSTILE, [CURRENT])
        store.record_decoder_calibration(hostile, DecoderConstants(3.6e-3, 1.9e-3, 0.08, 0.93, "linear-in-period",
                                                                   "linear-in-duty", 1.25, 0.5))
        store.finish_run(hostile, "pass", ended_at=t1 + dt.timedelta(seconds=2))

        store.begin_run("PW22-000003", {}, "line-1", "ana", "0.1.0", SEQUENCE_SHA, DESIGN_SHA,
                        started_at=T0 + dt.timedelta(minutes=9))
    return url
