"""Reading a station file's [self_check] section: the reference, what it must read, how long a pass lasts."""

from __future__ import annotations

from pathlib import Path

import pytest

from fixture.errors import FileFormatError, QuantityError
from fixture.files.self_check_config import parse_duration_s
from fixture.files.station_file import load_station
from fixture.files.toml_reader import FileProblems
from tests.files.edits import edited_copy
from tests.files.edits import only_problem as one_line

DEMO = Path("sequences/demo-station.toml")


def variant(tmp_path: Path, old: str, new: str) -> Path:
    return edited_copy(DEMO, tmp_path, old, new)


def only_problem(path: Path) -> str:
    return one_line(load_station, path)


def test_the_demo_station_names_its_golden_unit_and_two_settings() -> None:
    spec = load_station(DEMO).self_check
    assert spec is not None and not spec.required
    assert spec.golden_serial == "PW22-GOLDEN-01" and len(spec.points) == 2
    assert spec.valid_for_s == 8 * 3600  # 1 h = 3600 s (SI Brochure, non-SI units accepted; from memory)
    point = spec.points[0]
    # A relative tolerance is a fraction of the expected frequency: 1 % of 353.6 Hz.
    assert point.limits("frequency") == pytest.approx((353.6 - 3.536, 353.6 + 3.536))
    # Duty tolerance is in percentage points of duty.
    assert point.limits("duty") == pytest.approx((48.22, 50.22))
    assert spec.design_path() == DEMO.parent / "demo-panel.toml"  # relative to the station file


def test_an_absolute_frequency_tolerance_is_taken_in_hertz(tmp_path: Path) -> None:
    spec = load_station(variant(tmp_path, 'frequency_tolerance = "1 %"', 'frequency_tolerance = "3 Hz"')).self_check
    assert spec is not None and spec.points[0].limits("frequency") == pytest.approx((350.6, 356.6))


def test_a_station_file_without_the_section_has_no_self_check(tmp_path: Path) -> None:
    text = DEMO.read_text(encoding="utf-8")
    path = tmp_path / "plain.toml"
    path.write_text(text[:text.index("# Station self-check")], encoding="utf-8")
    assert load_station(path).self_check is None


@pytest.mark.parametrize(("text", "seconds"), [("8 h", 28800.0), ("30 min", 1800.0), ("1 d", 86400.0),
                                               ("90 s", 90.0), (600, 600.0)])
def test_a_validity_is_read_in_seconds(text: object, seconds: float) -> None:
    # 1 min = 60 s, 1 h = 3600 s, 1 d = 86400 s (SI Brochure table of non-SI units; from memory).
    assert parse_duration_s(text) == seconds


@pytest.mark.parametrize("text", ["0 h", "-1 h", "8 weeks", "nan", float("nan"), "8 d", True, "", "h"])
def test_a_nonsense_validity_is_refused(text: object) -> None:
    with pytest.raises(QuantityError):
        parse_duration_s(text)


@pytest.mark.parametrize(("old", "new", "key"), [
    ("knob_a = 50\n", "knob_a = 150\n", "self_check.points[0].knob_a"),
    ('frequency = "353.6 Hz"', 'frequency = "-3 Hz"', "self_check.points[0].frequency"),
    ('frequency = "353.6 Hz"', 'frequency = "353.6 F"', "self_check.points[0].frequency"),
    ('duty = "49.22 %"', 'duty = "120 %"', "self_check.points[0].duty"),
    ('frequency_tolerance = "1 %"', 'frequency_tolerance = "0 %"', "self_check.points[0].frequency_tolerance"),
    ('duty_tolerance = "1 %"            #', 'duty_tolerance = "nan %"  #', "self_check.points[0].duty_tolerance"),
    ("required = false ", 'required = "no" ', "self_check.required"),
    ('valid_for = "8 h"', 'valid_for = "8 weeks"', "self_check.valid_for"),
    ('golden_serial = "PW22-GOLDEN-01"', 'golden_serial = "PW22\\u001b[32mPASS"', "self_check.golden_serial"),
    ('design = "demo-panel.toml"        #', 'desing = "demo-panel.toml"        #', "self_check.desing"),
])
def test_each_mistake_in_the_section_is_one_line_naming_the_key(tmp_path: Path, old: str, new: str,
                                                                   key: str) -> None:
    line = only_problem(variant(tmp_path, old, new)) if key != "self_check.desing" else \
        _problems(variant(tmp_path, old, new))
    assert f": {key}: expected " in line


def _problems(path: Path) -> str:
    with pytest.raises(FileProblems) as info:
        load_station(path)
    return str(info.value)  # a misspelt key: the unknown key and the missing design, two lines


def test_a_golden_unit_design_is_found_beside_the_station_file_or_among_the_shipped_files(tmp_path: Path) -> None:
    spec = load_station(variant(tmp_path, "required = false", "required = true")).self_check
    assert spec is not None
    with pytest.raises(FileFormatError):
        spec.design_path()  # the copy in tmp_path has no design beside it
    assert spec.design_path((DEMO.parent,)) == DEMO.parent / "demo-panel.toml"
    spec = load_station(variant(tmp_path, 'design = "demo-panel.toml"', 'design = "gone.toml"')).self_check
    assert spec is not None
    with pytest.raises(FileFormatError, match="self_check.design: expected the reference unit's design file"):
        spec.design_path()
