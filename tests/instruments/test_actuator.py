"""The knob actuators: percent to shaft angle, travel limits, busy polling, position check; the manual one."""

from __future__ import annotations

import re

import pytest

from fixture.errors import ActuatorNotInPosition, FixtureFault, UserInputError
from fixture.instruments import Actuator, KnobCalibration, ManualActuator

from .fakes import IDN, NO_ERROR, scripted_session

PROFILE = "knobline-ka2"


class FakeKA2:
    """A KA-2 controller: moves land ``miss_deg`` off target after ``busy_polls`` busy answers."""

    def __init__(self, busy_polls: int = 0, miss_deg: float = 0.0) -> None:
        self.angle = {"A": 0.0, "B": 0.0}
        self.busy_polls = busy_polls
        self.busy_left = 0
        self.miss_deg = miss_deg

    def __call__(self, text: str) -> str | None:
        if text == "SYST:ERR?":
            return NO_ERROR
        if text == "*IDN?":
            return IDN["knobline-ka2"]
        if text == "BUSY?":
            self.busy_left -= 1
            return "1" if self.busy_left >= 0 else "0"
        if m := re.fullmatch(r"KNOB:([AB]):MOVE (\S+)", text):
            self.angle[m[1]] = float(m[2]) + self.miss_deg
            self.busy_left = self.busy_polls
            return None
        if m := re.fullmatch(r"KNOB:([AB]):POS\?", text):
            return f"{self.angle[m[1]]:.3f}"
        if re.fullmatch(r"KNOB:[AB]:LIM\?", text):
            return "0.000,300.000"
        return None


class FakeClock:
    """A monotonic clock that moves only when someone sleeps."""

    def __init__(self) -> None:
        self.now = 0.0
        self.sleeps: list[float] = []

    def __call__(self) -> float:
        return self.now

    def sleep(self, seconds: float) -> None:
        self.sleeps.append(seconds)
        self.now += seconds


def actuator(fake: FakeKA2 | None = None, **options) -> tuple[Actuator, list[str], FakeClock]:
    clock = FakeClock()
    session, transport = scripted_session(PROFILE, fake or FakeKA2())
    return Actuator(session, sleep=clock.sleep, clock=clock, **options), transport.sent, clock


def test_position_in_percent_maps_linearly_to_the_shaft_angle() -> None:
    # Profile defaults: 0 % at 15 deg, 270 deg of travel; 25 % -> 15 + 0.25 * 270 = 82.5 deg (by hand).
    a, sent, _ = actuator()
    assert a.move("a", 25.0) == pytest.approx(25.0)
    assert sent == ["KNOB:A:MOVE 82.500", "BUSY?", "SYST:ERR?", "KNOB:A:POS?"]


def test_fixture_calibration_from_the_station_overrides_the_profile_default() -> None:
    a, sent, _ = actuator(calibration={"b": KnobCalibration(zero_deg=20.0, travel_deg=260.0)})
    a.move("b", 50.0)                          # 20 + 0.5 * 260 = 150 deg
    assert sent[0] == "KNOB:B:MOVE 150.000"


@pytest.mark.parametrize("knob, pct, complaint", [
    ("a", 100.5, "0 to 100 %"), ("b", -1.0, "0 to 100 %"), ("c", 50.0, "'a' or 'b'"), ("a", float("nan"), "0 to 100"),
])
def test_target_outside_the_travel_is_refused_before_anything_moves(knob, pct, complaint) -> None:
    a, sent, _ = actuator()
    with pytest.raises(UserInputError, match=complaint):
        a.move(knob, pct)
    assert sent == []


def test_a_stop_with_one_bad_knob_moves_neither() -> None:
    a, sent, _ = actuator()
    with pytest.raises(UserInputError):
        a.move_both(50.0, 120.0)
    assert sent == []


def test_calibration_reaching_beyond_the_travel_limits_is_refused() -> None:
    # 40 deg + 270 deg of travel ends at 310 deg, beyond the KA-2 profile's 300 deg.
    with pytest.raises(UserInputError, match=r"knob A calibration: .*\(40 to 310 deg\) inside the actuator.s travel 0 to 300"):
        actuator(calibration={"a": KnobCalibration(40.0, 270.0)})


def test_busy_is_polled_until_the_move_completes() -> None:
    a, sent, clock = actuator(FakeKA2(busy_polls=3))
    a.move("a", 0.0)
    assert sent.count("BUSY?") == 4
    assert clock.sleeps == [0.05, 0.05, 0.05]


def test_an_actuator_that_stays_busy_is_not_in_position_after_the_move_timeout() -> None:
    a, sent, clock = actuator(FakeKA2(busy_polls=10**9))
    with pytest.raises(ActuatorNotInPosition, match="still busy 20 s after moving knob A"):
        a.move("a", 10.0)
    assert clock.now == pytest.approx(20.0)
    assert sent.count("BUSY?") == 401          # 20 s / 0.05 s polls, plus the one at the deadline


def test_an_actuator_that_stops_off_target_is_not_in_position() -> None:
    a, _, _ = actuator(FakeKA2(miss_deg=0.5))  # tolerance in the profile: 0.2 deg
    with pytest.raises(ActuatorNotInPosition, match="sent to 150.000 deg .* reports 150.500 deg"):
        a.move("a", 50.0)


def test_a_move_within_tolerance_reports_where_the_knob_is() -> None:
    a, _, _ = actuator(FakeKA2(miss_deg=0.135))
    assert a.move("a", 50.0) == pytest.approx(50.05)    # (150.135 - 15) / 270 * 100


def test_moved_events_follow_each_verified_move() -> None:
    a, _, _ = actuator()
    got = []
    a.events.subscribe(got.append)
    a.home()
    a.move_both(0.0, 100.0)
    assert [e.name for e in got] == ["homed", "moved", "moved"]
    assert dict(got[2].info) == {"knob": "b", "position_pct": 100.0, "target_pct": 100.0, "angle_deg": 285.0}


def test_travel_limits_and_position_queries() -> None:
    a, _, _ = actuator()
    a.move("b", 100.0)
    assert a.position_pct("b") == pytest.approx(100.0)
    assert a.travel_limits("a") == (0.0, 300.0)


def test_manual_actuator_prompts_and_records_the_confirmed_position() -> None:
    prompts: list[str] = []
    m = ManualActuator(lambda text: prompts.append(text) or True,
                       calibration={"a": KnobCalibration(15.0, 270.0)})
    got = []
    m.events.subscribe(got.append)
    assert m.move("a", 25.0) == 25.0
    assert prompts == ["Turn knob A to 25 % of its rotation (the 82.5 deg mark), then confirm."]
    assert m.position_pct("a") == 25.0
    assert got[0].name == "moved" and got[0].info["position_pct"] == 25.0


def test_manual_actuator_asks_once_per_stop() -> None:
    prompts: list[str] = []
    m = ManualActuator(lambda text: prompts.append(text) or True)
    assert m.move_both(10.0, 90.0) == (10.0, 90.0)
    assert prompts == ["Turn knob A to 10 % of its rotation and knob B to 90 % of its rotation, then confirm."]


def test_operator_declining_is_a_fixture_fault() -> None:
    m = ManualActuator(lambda text: False)
    with pytest.raises(FixtureFault, match="did not confirm knob B to 50 %"):
        m.move("b", 50.0)
    with pytest.raises(FixtureFault, match="not known yet"):
        m.position_pct("b")


def test_manual_actuator_refuses_a_bad_target_without_asking() -> None:
    prompts: list[str] = []
    m = ManualActuator(lambda text: prompts.append(text) or True)
    with pytest.raises(UserInputError):
        m.move_both(50.0, 101.0)
    assert prompts == []
