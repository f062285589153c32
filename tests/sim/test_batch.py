"""Planned demo batches: reproducible, lots spread over the units, one shifted lot, every defect kind."""

from __future__ import annotations

import math
from collections import Counter

import numpy as np
import pytest

from fixture.errors import UserInputError
from fixture.files.design_file import load_design
from fixture.files.sequence_file import load_sequence
from fixture.sim.batch import DEFAULT_LOTTED_PARTS, defect_count, lotted_parts, plan_batch
from fixture.sim.dut import DEFECT_KINDS


@pytest.fixture(scope="module")
def design():
    return load_design("sequences/demo-panel.toml")


def test_the_same_seed_plans_the_same_batch_and_another_seed_another(design) -> None:
    a = plan_batch(design, units=80, seed=11)
    b = plan_batch(design, units=80, seed=11)
    c = plan_batch(design, units=80, seed=12)
    assert a == b
    assert a.as_dict() == b.as_dict()
    assert a.as_dict() != c.as_dict()
    unit = a.units[5]
    assert a.build(design, unit).values == b.build(design, b.units[5]).values


def test_serials_count_up_and_match_the_demo_sequences_serial_pattern(design) -> None:
    sequence = load_sequence("sequences/demo-sequence.toml")
    plan = plan_batch(design, units=50, seed=1, first_number=990)
    serials = [u.serial for u in plan.units]
    assert serials[0] == "PW22-000990" and serials[-1] == "PW22-001039"
    assert len(set(serials)) == 50
    assert all(sequence.serial_ok(s) for s in serials)


def test_the_serial_prefix_is_a_parameter(design) -> None:
    plan = plan_batch(design, units=3, seed=1, serial_prefix="PW22B-", digits=4)
    assert [u.serial for u in plan.units] == ["PW22B-0001", "PW22B-0002", "PW22B-0003"]


def test_every_lotted_part_has_its_lots_each_used_by_a_fair_share_of_units(design) -> None:
    units, lots = 120, 3
    plan = plan_batch(design, units=units, seed=5, lots_per_part=lots)
    assert set(plan.lots) == set(DEFAULT_LOTTED_PARTS)
    codes = [c for part_codes in plan.lots.values() for c in part_codes]
    assert len(codes) == len(set(codes)), "lot shifts are keyed by code, so codes must be unique"
    for part, part_codes in plan.lots.items():
        used = Counter(u.lots[part] for u in plan.units)
        assert set(used) == set(part_codes)
        # Documented in _lot_blocks: each block at least 40 % of an even share, less one for rounding;
        # the shifted part has `lots` lots, the others 2..lots+1 (documented in plan_batch).
        count = len(part_codes)
        assert (count == lots) if part == plan.shifted[0] else (2 <= count <= lots + 1)
        assert min(used.values()) >= math.floor(0.4 * units / count) - 1
    # Lots of different parts change at different units, so a lot analysis can tell them apart.
    changes = {part: tuple(i for i in range(1, units) if plan.units[i].lots[part] != plan.units[i - 1].lots[part])
               for part in plan.lots}
    assert len(set(changes.values())) > 1


def test_a_batch_smaller_than_the_lot_count_still_gives_every_unit_a_lot(design) -> None:
    plan = plan_batch(design, units=2, seed=3, lots_per_part=3)
    for part in plan.lots:
        assert len(plan.lots[part]) <= 2
        assert {u.lots[part] for u in plan.units} == set(plan.lots[part])


def test_the_shifted_lots_units_are_drawn_around_nominal_times_one_plus_shift(design) -> None:
    plan = plan_batch(design, units=300, seed=9)
    part_key, lot, shift = plan.shifted
    assert (part_key, shift) == ("c_integrator", -0.08)
    assert plan.lot_shifts == {lot: shift}
    part = design.part(part_key)

    def drawn(lot_code: str) -> np.ndarray:
        # A wrong-part defect replaces the drawn value; those units say nothing about the lot.
        return np.array([plan.build(design, u).values[part_key] for u in plan.units_of_lot(part_key, lot_code)
                         if not any(d.kind == "wrong-part" and d.part == part_key for d in u.defects)])

    # Standard error of a sample mean: sigma / sqrt(n) (GUM 4.2.3); part.sigma is tolerance / sigma_k
    # for a normal part. Bound: 4 standard errors (two-sided false alarm about 6e-5 for a normal mean).
    shifted = drawn(lot)
    assert shifted.size >= 30
    expected = part.nominal * (1.0 + shift) + part.lot_shift
    assert shifted.mean() == pytest.approx(expected, abs=4 * part.sigma / math.sqrt(shifted.size))
    for other in plan.lots[part_key]:
        if other != lot:
            values = drawn(other)
            assert values.mean() == pytest.approx(part.nominal + part.lot_shift,
                                                  abs=4 * part.sigma / math.sqrt(values.size))


@pytest.mark.parametrize("units", [40, 41, 100, 250])
def test_every_defect_kind_appears_from_forty_units(design, units: int) -> None:
    plan = plan_batch(design, units=units, seed=units)
    kinds = Counter(d.kind for u in plan.defective() for d in u.defects)
    assert set(kinds) == set(DEFECT_KINDS)
    assert all(len(u.defects) == 1 for u in plan.defective())


@pytest.mark.parametrize(("units", "fraction"), [(10, 0.04), (39, 0.04), (40, 0.04), (200, 0.04), (500, 0.03)])
def test_defective_share_is_the_fraction_rounded_with_one_of_each_kind_from_forty(design, units: int,
                                                                                  fraction: float) -> None:
    plan = plan_batch(design, units=units, seed=2, defect_fraction=fraction)
    found = len(plan.defective())
    # Stated bound: round(fraction x units) defective units, at least one per kind from 40 units; so the share
    # is within half a unit of the fraction, or exactly one unit per kind when that is more.
    floor_count = len(DEFECT_KINDS) if units >= 40 else 0
    assert found == defect_count(units, fraction)
    assert abs(found - fraction * units) <= 0.5 or found == floor_count


def test_built_units_carry_their_planned_lots_and_defects(design) -> None:
    plan = plan_batch(design, units=60, seed=4)
    broken = plan.defective()[0]
    unit = plan.build(design, broken)
    assert unit.serial == broken.serial
    assert unit.lots == broken.lots
    assert unit.defects == broken.defects
    assert plan.unit(broken.serial) is broken


def test_a_leaky_unit_draws_more_than_the_demo_sequences_current_limit(design) -> None:
    # The demo sequence's power-up step allows 2..15 mA (sequences/demo-sequence.toml, our own demo
    # limit): the defect must be one the line can see.
    plan = plan_batch(design, units=200, seed=8)
    leaky = [u for u in plan.defective() if u.defects[0].kind == "supply-current"]
    assert leaky
    for planned in leaky:
        assert plan.build(design, planned).supply_current_a() > 15e-3


@pytest.mark.parametrize("kwargs", [{"units": 0}, {"shifted_part": "supply_v"}, {"parts": ("no_such_part",)},
                                    {"shift": -1.5}, {"units": 5, "first_number": 999_998}])
def test_impossible_plans_are_refused_with_a_user_error(design, kwargs) -> None:
    args = {"units": 10, "seed": 1, **kwargs}
    with pytest.raises(UserInputError):
        plan_batch(design, **args)


#: A design of another signal model (the 555 plug-in of tests/model): none of the demo panel's part keys.
TIMER_555 = """
[product]
name = "555 rehearsal panel"
model = "tests.model.plugin_555:Timer555Model"

[parts.r1]
ref = "R11"
value = "1k"
tolerance = "1%"

[parts.r2]
ref = "R12"
value = "4k7"
tolerance = "1%"

[parts.c_timing]
ref = "C4"
value = "100n"
tolerance = "5%"

[parts.supply_v]
ref = "U3 (regulator)"
value = "9 V"
tolerance = "2%"

[knobs.a]
ref = "RV1"
resistance = "10k"
tolerance = "20%"
end_resistance = "20"
stops = [0, 50, 100]

[knobs.b]
ref = "RV2"
resistance = "5k"
tolerance = "20%"
end_resistance = "20"
stops = [0, 50, 100]
"""


def test_a_design_of_another_model_gets_lots_for_its_own_resistors_capacitor_and_pots(tmp_path) -> None:
    path = tmp_path / "timer.toml"
    path.write_text(TIMER_555, encoding="utf-8")
    timer = load_design(path)
    assert lotted_parts(timer) == ("r1", "r2", "c_timing", "knob_a_pot", "knob_b_pot")  # the regulator has no reel
    plan = plan_batch(timer, units=40, seed=3)
    assert plan.shifted[0] == "c_timing", "the capacitor's lot is planted by default, as C1's is in the demo"
    assert {code.split("-")[0] for codes in plan.lots.values() for code in codes} == {"R11", "R12", "C4", "RV1", "RV2"}
    wrong = [d for u in plan.defective() for d in u.defects if d.kind == "wrong-part"]
    assert wrong and all(d.part in lotted_parts(timer) for d in wrong)


def test_the_demo_panel_keeps_its_lotted_parts(design) -> None:
    assert lotted_parts(design) == DEFAULT_LOTTED_PARTS


def test_serials_given_by_the_caller_are_the_units_serials_and_must_be_distinct(design) -> None:
    plan = plan_batch(design, units=3, seed=1, serials=["AB-0004", "AB-0005", "AB-0006"])
    assert [u.serial for u in plan.units] == ["AB-0004", "AB-0005", "AB-0006"] and plan.serial_prefix == "AB-000"
    with pytest.raises(UserInputError, match="3 distinct serials, found 2"):
        plan_batch(design, units=3, seed=1, serials=["AB-0004", "AB-0004", "AB-0006"])
