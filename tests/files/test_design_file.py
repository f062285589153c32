"""Reading product design files, and the one-line errors for bad ones."""

from __future__ import annotations

from pathlib import Path

import pytest

from fixture.errors import FileFormatError
from fixture.files.design_file import load_design
from fixture.files.toml_reader import FileProblems
from tests.files.edits import edited_copy
from tests.files.edits import only_problem as one_line

DEMO = Path("sequences/demo-panel.toml")


def variant(tmp_path: Path, old: str, new: str) -> Path:
    return edited_copy(DEMO, tmp_path, old, new)


def only_problem(path: Path) -> str:
    return one_line(load_design, path)


def test_demo_design_loads_with_every_part_and_both_knobs() -> None:
    design = load_design(DEMO)
    assert design.model.name == "integrator-schmitt"
    assert set(design.knobs) == {"a", "b"}
    assert design.part("c_integrator").nominal == pytest.approx(100e-9)
    assert design.part("knob_a_pot").ref == "RV1"
    assert len(design.content_sha256) == 64


def test_unknown_key_is_reported_with_its_key_path(tmp_path: Path) -> None:
    line = only_problem(variant(tmp_path, 'tolerance = "5%"', 'tolerence = "5%"'))
    assert line.startswith(f"{tmp_path / 'demo-panel.toml'}: parts.c_integrator.tolerence: expected one of the keys")
    assert line.endswith("found an unknown key")


def test_missing_part_alone_gives_one_line(tmp_path: Path) -> None:
    text = DEMO.read_text(encoding="utf-8")
    start = text.index("[parts.r_integrator]")
    end = text.index("[parts.c_integrator]")
    path = tmp_path / "missing.toml"
    path.write_text(text[:start] + text[end:], encoding="utf-8")
    line = only_problem(path)
    assert "parts.r_integrator: expected the integrator fixed resistor" in line
    assert line.endswith("found no such part")


@pytest.mark.parametrize("bad", ['"-10k"', '"0"', "0"])
def test_negative_or_zero_values_are_refused(tmp_path: Path, bad: str) -> None:
    line = only_problem(variant(tmp_path, 'value = "22k"', f"value = {bad}"))
    assert "parts.r_schmitt_fb.value: expected a value above zero" in line


def test_tolerance_of_one_hundred_percent_or_more_is_refused(tmp_path: Path) -> None:
    line = only_problem(variant(tmp_path, 'tolerance = "5%"', 'tolerance = "100%"'))
    assert "parts.c_integrator.tolerance: expected a tolerance below 100 % of the value, found '100%'" in line


def test_unreadable_value_names_the_key_and_the_text(tmp_path: Path) -> None:
    line = only_problem(variant(tmp_path, 'value = "100n"', 'value = "100 nH"'))
    assert "parts.c_integrator.value: expected a value in F" in line and "'100 nH'" in line


def test_threshold_outside_the_triangle_is_reported_as_duty_clipping(tmp_path: Path) -> None:
    with pytest.raises(FileProblems) as info:
        load_design(variant(tmp_path, 'value = "12k"', 'value = "30k"'))
    lines = str(info.value).splitlines()
    assert lines and all("duty clips" in ln for ln in lines)
    assert any("knobs.b.stops (0 %)" in ln for ln in lines)


@pytest.mark.parametrize("stops", ["[0, 10, 50, 90, 101]", "[-5, 50]"])
def test_stop_outside_the_rotation_is_refused(tmp_path: Path, stops: str) -> None:
    line = only_problem(variant(tmp_path, "stops = [0, 10, 50, 90, 100]", f"stops = {stops}"))
    assert "knobs.b.stops[" in line and "expected a stop between 0 and 100 % of rotation" in line


def test_not_toml_is_one_line_with_the_parser_position(tmp_path: Path) -> None:
    path = tmp_path / "broken.toml"
    path.write_text("[product\nname = 1\n", encoding="utf-8")
    with pytest.raises(FileFormatError) as info:
        load_design(path)
    assert str(info.value).startswith(f"{path}: expected valid TOML, found ")
    assert "line 1" in str(info.value)


def test_missing_file_is_one_line(tmp_path: Path) -> None:
    with pytest.raises(FileFormatError, match="expected an existing file, found no such file"):
        load_design(tmp_path / "nope.toml")


def test_every_problem_in_a_file_is_listed_one_per_line(tmp_path: Path) -> None:
    text = DEMO.read_text(encoding="utf-8").replace('tolerance = "5%"', 'tolerance = "150%"')
    text = text.replace("stops = [0, 25, 50, 75, 100]", "stops = [0, 25, 50, 75, 120]")
    path = tmp_path / "two.toml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(FileProblems) as info:
        load_design(path)
    assert len(info.value.problems) == 2


def test_spec_limit_must_sit_at_a_tested_stop(tmp_path: Path) -> None:
    line = only_problem(variant(tmp_path, "at = 0\nlow = \"225 Hz\"", "at = 33\nlow = \"225 Hz\""))
    assert "spec[0].at: expected one of knob a's stops" in line


def test_bare_value_is_an_exact_part(tmp_path: Path) -> None:
    text = DEMO.read_text(encoding="utf-8")
    start = text.index("[parts.r_ref_top]")
    end = text.index("[parts.r_ref_bottom]")
    # A bare value must precede the part tables in TOML, so add a [parts] table up front.
    text = (text[:start] + text[end:]).replace("[parts.supply_v]", '[parts]\nr_ref_top = "10k"\n\n[parts.supply_v]', 1)
    path = tmp_path / "bare.toml"
    path.write_text(text, encoding="utf-8")
    part = load_design(path).part("r_ref_top")
    assert part.nominal == 10e3 and part.tolerance == 0.0


def test_the_demo_design_marks_lot_tracked_the_parts_its_traveller_and_batch_give_lots_for() -> None:
    # Consistency of the shipped demo files (ours; common practice, no source): the parts the demo's
    # traveller has columns for and the simulated batch draws lots of are the ones the design marks.
    from fixture.files.traveller import read_traveller
    from fixture.sim.batch import DEFAULT_LOTTED_PARTS

    design = load_design(DEMO)
    travellers = read_traveller(Path("sequences/demo-traveller.csv"), design)
    assert set(design.lot_tracked_parts()) == set(DEFAULT_LOTTED_PARTS) == set(next(iter(travellers.values())))
    assert not design.part("supply_v").lot_tracked  # a part without the key is not lot-tracked


@pytest.mark.parametrize(("old", "new", "key", "found"), [
    ('description = "polyester film"\nlot_tracked = true', 'description = "polyester film"\nlot_tracked = "yes"',
     "parts.c_integrator.lot_tracked", "found 'yes'"),
    ("hold = 50\nlot_tracked = true", "hold = 50\nlot_tracked = 1", "knobs.a.lot_tracked", "found 1"),
])
def test_lot_tracked_takes_true_or_false_only(tmp_path: Path, old: str, new: str, key: str, found: str) -> None:
    # TOML 1.0 booleans are the bare words true and false; a string or a number is a slip, refused
    # with the file, the key, what was expected and what was found (DEVELOPERS.md "Check where it enters").
    line = only_problem(variant(tmp_path, old, new))
    assert line.startswith(f"{tmp_path / 'demo-panel.toml'}: {key}: expected true or false")
    assert line.endswith(found)
