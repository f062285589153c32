"""Simulated units: seeded, built from their lots, carrying their defects."""

from __future__ import annotations

import numpy as np
import pytest

from fixture.errors import UserInputError
from fixture.files.design_file import load_design
from fixture.sim.dut import Defect, build_unit


@pytest.fixture(scope="module")
def design():
    return load_design("sequences/demo-panel.toml")


def test_same_serial_and_seed_give_the_same_unit_and_other_serials_differ(design) -> None:
    a = build_unit(design, "PW22-0001", seed=3)
    b = build_unit(design, "PW22-0001", seed=3)
    c = build_unit(design, "PW22-0002", seed=3)
    assert a.values == b.values and a.values != c.values


def test_parts_stay_within_tolerance_for_uniform_parts(design) -> None:
    for i in range(200):
        unit = build_unit(design, f"S{i}", seed=1)
        for part in design.parts:
            if part.distribution == "uniform":
                assert abs(unit.values[part.key] - part.nominal) <= part.tolerance * (1 + 1e-12)


def test_a_shifted_lot_moves_the_mean_of_its_parts(design) -> None:
    # Sample mean of a uniform band: standard error = tol / sqrt(3 n) (GUM 4.3.7 with n samples).
    cap = design.part("c_integrator")
    values = np.array([build_unit(design, f"L{i}", seed=2, lots={"c_integrator": "C-LOT-9"},
                                  lot_shifts={"C-LOT-9": -0.08}).values["c_integrator"] for i in range(400)])
    sigma = cap.tolerance / cap.sigma_k
    assert values.mean() == pytest.approx(0.92 * cap.nominal, abs=4 * sigma / np.sqrt(400))


def test_true_wave_follows_the_design_model(design) -> None:
    unit = build_unit(design, "M1", seed=4, ambient_c=design.reference_temp_c)
    expected = design.signal(unit.values, 25.0, 90.0)
    wave = unit.wave(25.0, 90.0)
    assert wave.period_s == pytest.approx(float(expected.period_s), rel=1e-12)
    assert wave.duty == pytest.approx(float(expected.duty), rel=1e-12)
    assert wave.present


def test_a_ten_times_integrator_resistor_lowers_the_frequency(design) -> None:
    good = build_unit(design, "W1", seed=5)
    bad = build_unit(design, "W1", seed=5, defects=[Defect("wrong-part", part="r_integrator", factor=10.0)])
    assert bad.wave(100.0, 50.0).period_s > 5 * good.wave(100.0, 50.0).period_s


@pytest.mark.parametrize(("defect", "stuck"), [(Defect("open-wiper", part="a"), "low"),
                                               (Defect("stuck-output", level="high"), "high")])
def test_open_wiper_and_stuck_output_stop_the_wave(design, defect, stuck) -> None:
    assert build_unit(design, "D1", seed=6, defects=[defect]).wave(50.0, 50.0).stuck == stuck


def test_a_noisy_pot_scatters_successive_readings_and_a_clean_one_does_not(design) -> None:
    clean = build_unit(design, "N1", seed=7)
    noisy = build_unit(design, "N1", seed=7, defects=[Defect("noisy-pot", part="b", noise_pct=2.0)])
    assert len({clean.wave(50.0, 50.0).high_s for _ in range(5)}) == 1
    assert len({noisy.wave(50.0, 50.0).high_s for _ in range(5)}) == 5


def test_excess_supply_current_is_added(design) -> None:
    good = build_unit(design, "I1", seed=8)
    leaky = build_unit(design, "I1", seed=8, defects=[Defect("supply-current", current_a=0.05)])
    assert leaky.supply_current_a() - good.supply_current_a() == pytest.approx(0.05, rel=0.02)


def test_unknown_defect_or_part_is_a_user_error(design) -> None:
    with pytest.raises(UserInputError):
        Defect("melted")
    with pytest.raises(UserInputError):
        build_unit(design, "U1", defects=[Defect("wrong-part", part="r_nonexistent", factor=2.0)])
