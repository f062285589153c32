"""A signal model written outside knobline plugs in without editing knobline."""

from __future__ import annotations

import math
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pytest

from fixture.errors import FileFormatError, UserInputError
from fixture.files.design_file import load_design
from fixture.files.toml_reader import FileProblems
from fixture.model.circuits import find_model, register_model, registered_models, unregister_model
from tests.model.plugin_555 import Timer555Model

PLUGIN_REF = "tests.model.plugin_555:Timer555Model"

#: Component values of the test panel, written into the TOML below.
R1_OHM, R2_OHM, C_F, POT_A_OHM, POT_B_OHM, END_OHM = 1.0e3, 4.7e3, 100e-9, 10e3, 5e3, 20.0


def design_toml(model: str, extra_parts: str = "", r1: str = "1k", supply: str = "9 V") -> str:
    return f"""
[product]
name = "555 plug-in test panel"
model = "{model}"

[parts]
r1 = "{r1}"
r2 = "4k7"
c_timing = "100n"
supply_v = "{supply}"
{extra_parts}

[knobs.a]
resistance = "10k"
end_resistance = "20"
stops = [0, 50, 100]

[knobs.b]
resistance = "5k"
end_resistance = "20"
stops = [0, 50, 100]
"""


def write(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "panel.toml"
    path.write_text(text, encoding="utf-8")
    return path


def cw_side_ohm(total_ohm: float, rotation_pct: float, end_ohm: float) -> float:
    """Wiper-to-CW resistance of a linear pot with full electrical travel.

    From the definition of end resistance (fixture/model/pot.py docstring): the
    track between the two end terminations is total - 2 end, and the wiper has
    covered the fraction rotation of it from the CCW end.
    """
    return end_ohm + (1.0 - rotation_pct / 100.0) * (total_ohm - 2.0 * end_ohm)


@pytest.fixture
def registered() -> Iterator[Timer555Model]:
    model = register_model(Timer555Model())
    try:
        yield model
    finally:
        unregister_model(model.name)


@pytest.mark.parametrize(("a_pct", "b_pct"), [(0.0, 0.0), (50.0, 50.0), (100.0, 25.0), (30.0, 100.0)])
def test_plugin_named_by_import_path_gives_the_ne555_astable_timing(tmp_path: Path, a_pct: float,
                                                                     b_pct: float) -> None:
    design = load_design(write(tmp_path, design_toml(PLUGIN_REF)))
    assert isinstance(design.model, Timer555Model)
    signal = design.signal(design.nominal_values(), a_pct, b_pct)
    # TI NE555 datasheet, astable operation (from memory): t_high = 0.693 (RA + RB) C,
    # t_low = 0.693 RB C, with 0.693 = ln 2.
    r_a = R1_OHM + cw_side_ohm(POT_A_OHM, a_pct, END_OHM)
    r_b = R2_OHM + cw_side_ohm(POT_B_OHM, b_pct, END_OHM)
    t_high = math.log(2.0) * (r_a + r_b) * C_F
    t_low = math.log(2.0) * r_b * C_F
    assert float(signal.frequency_hz) == pytest.approx(1.0 / (t_high + t_low), rel=1e-12)
    assert float(signal.duty) == pytest.approx(t_high / (t_high + t_low), rel=1e-12)
    # The same datasheet's rounded forms, f = 1.44 / ((RA + 2 RB) C) and
    # D = 1 - RB / (RA + 2 RB) for the high fraction, agree to the rounding of 1.44 (0.2 %).
    assert float(signal.frequency_hz) == pytest.approx(1.44 / ((r_a + 2.0 * r_b) * C_F), rel=2e-3)
    assert float(signal.duty) == pytest.approx(1.0 - r_b / (r_a + 2.0 * r_b), rel=1e-12)


def test_parts_the_plugin_does_not_have_are_rejected_on_one_line(tmp_path: Path) -> None:
    path = write(tmp_path, design_toml(PLUGIN_REF, extra_parts='r_integrator = "10k"'))
    with pytest.raises(FileProblems) as caught:
        load_design(path)
    [problem] = caught.value.problems
    assert isinstance(problem, FileFormatError)
    assert problem.key == "parts.r_integrator"
    assert problem.found == "an unknown part"
    assert "'astable-555'" in problem.expected and "r1, r2, c_timing, supply_v" in problem.expected
    assert "\n" not in problem.message and problem.message.startswith(f"{path}: parts.r_integrator: ")


def test_plugin_check_reports_a_design_that_cannot_work(tmp_path: Path) -> None:
    # R1 = 100 ohm with knob A at 100 % leaves R_A = 100 + 20 ohm across the supply when the
    # discharge pin conducts; a 20 V supply is outside the NE555's range (both rules in plugin_555).
    path = write(tmp_path, design_toml(PLUGIN_REF, r1="100", supply="20 V"))
    with pytest.raises(FileProblems) as caught:
        load_design(path)
    keys = sorted(p.key for p in caught.value.problems)
    assert keys == ["parts.r1 at knobs.a.stops (100 %)", "parts.supply_v at knobs.a.stops (0 %)"]


def test_registered_plugin_is_found_by_name(tmp_path: Path, registered: Timer555Model) -> None:
    assert find_model(registered.name) is registered
    assert registered_models()[registered.name] is registered
    design = load_design(write(tmp_path, design_toml(registered.name)))
    assert design.model is registered
    assert design.model_ref == "astable-555"


def test_a_second_different_model_under_a_taken_name_is_refused(registered: Timer555Model) -> None:
    register_model(registered)  # the same object again is harmless (a module imported twice)
    with pytest.raises(UserInputError, match="'astable-555' is already registered"):
        register_model(Timer555Model())
    assert find_model("astable-555") is registered
    replacement = register_model(Timer555Model(), replace=True)
    assert find_model("astable-555") is replacement


def test_an_unregistered_name_is_refused_listing_the_known_models() -> None:
    unregister_model("astable-555")
    with pytest.raises(UserInputError, match=r"registered signal model \(.*integrator-schmitt.*\)"):
        find_model("astable-555")


def test_find_model_refuses_an_object_that_is_not_a_model() -> None:
    with pytest.raises(UserInputError) as caught:
        find_model("tests.model.plugin_555:LN2")
    assert caught.value.message == ("expected 'tests.model.plugin_555:LN2' to be a signal model (name, "
                                    "description, parameters, evaluate(), check()), found float")
    with pytest.raises(UserInputError, match="expected a signal model .* found object"):
        register_model(object())  # type: ignore[arg-type]


def test_a_design_naming_a_missing_attribute_is_refused(tmp_path: Path) -> None:
    with pytest.raises(FileProblems) as caught:
        load_design(write(tmp_path, design_toml("tests.model.plugin_555:Timer556Model")))
    [problem] = caught.value.problems
    assert problem.key == "product.model"
    assert "Timer556Model" in problem.message


def test_plugin_evaluates_many_units_at_once() -> None:
    # Vectorised like every model: one period per unit (NE555 formula as above, summed).
    model = Timer555Model()
    r1 = np.array([1e3, 2e3, 3e3])
    values = {"r1": r1, "r2": np.full(3, 1e3), "c_timing": np.full(3, 1e-6), "supply_v": np.full(3, 5.0),
              "knob_a_ccw_ohm": np.zeros(3), "knob_a_cw_ohm": np.zeros(3),
              "knob_b_ccw_ohm": np.zeros(3), "knob_b_cw_ohm": np.zeros(3)}
    period = model.evaluate(values).period_s
    assert period == pytest.approx(math.log(2.0) * (r1 + 2e3) * 1e-6, rel=1e-12)


def test_a_plug_in_module_that_fails_to_import_is_a_user_error_naming_the_cause(tmp_path, monkeypatch) -> None:
    from fixture.errors import UserInputError
    from fixture.model.circuits import find_model

    (tmp_path / "broken_panel_model.py").write_text("def oops(:\n", encoding="utf-8")
    monkeypatch.syspath_prepend(str(tmp_path))
    with pytest.raises(UserInputError, match=r"expected an importable module 'broken_panel_model', "
                                             r"found SyntaxError"):
        find_model("broken_panel_model:Model")
