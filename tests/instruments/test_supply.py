"""The supply driver on a scripted instrument: SCPI-1999 SOURce/OUTPut/MEASure, limits, events."""

from __future__ import annotations

import pytest

from fixture.errors import UserInputError
from fixture.instruments import Supply

from .fakes import FakeInstrument, scripted_session

PROFILE = "tessaly-yqp26"


def supply(replies=None) -> tuple[Supply, list[str]]:
    session, transport = scripted_session(PROFILE, FakeInstrument(replies))
    return Supply(session), transport.sent


def test_configure_output_and_measure_send_scpi_1999_commands() -> None:
    # SOURce:VOLTage, SOURce:CURRent, OUTPut:STATe, MEASure:CURRent? (SCPI-1999, from memory).
    s, sent = supply({"MEAS:CURR?": "+2.350000E-02", "MEAS:VOLT?": "+1.200000E+01"})
    s.configure(12.0, 0.1)
    s.output(True)
    assert s.measure_current() == 0.0235
    assert s.measure_voltage() == 12.0
    s.output(False)
    assert sent == ["SOUR:VOLT 12.0000", "SOUR:CURR 0.1000", "SYST:ERR?", "OUTP:STAT 1", "SYST:ERR?",
                    "MEAS:CURR?", "MEAS:VOLT?", "OUTP:STAT 0", "SYST:ERR?"]


@pytest.mark.parametrize("voltage_v, current_a, complaint", [
    (31.0, 0.1, "voltage: expected 0 to 30 V"),
    (-1.0, 0.1, "voltage"),
    (12.0, 0.0, "current limit: expected above 0 to 5 A"),
    (12.0, 6.0, "current limit"),
])
def test_settings_beyond_the_supply_are_refused_before_anything_is_sent(voltage_v, current_a, complaint) -> None:
    s, sent = supply()
    with pytest.raises(UserInputError, match=complaint):
        s.configure(voltage_v, current_a)
    assert sent == []


def test_events_tell_output_state_and_each_measurement() -> None:
    s, _ = supply({"MEAS:CURR?": "0.02"})
    got = []
    s.events.subscribe(got.append)
    s.configure(5.0, 0.5)
    s.output(True)
    s.measure_current()
    assert [(e.name, dict(e.info)) for e in got] == [
        ("configured", {"voltage_v": 5.0, "current_limit_a": 0.5}), ("output", {"on": True}),
        ("before_measure", {"quantity": "current"})]
