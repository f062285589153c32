"""Traveller CSV files: lots per serial, and one line per problem naming line and column."""

from __future__ import annotations

from pathlib import Path

import pytest

from fixture.errors import FileFormatError
from fixture.files.design_file import load_design
from fixture.files.toml_reader import FileProblems
from fixture.files.traveller import lots_for, read_traveller, write_traveller

GOOD = """serial,c_integrator,knob_a_pot,knob_b_pot
PW22-000001,C1-2611A,RV1-2604A,RV2-2609A
PW22-000002,C1-2611A,RV1-2604A,RV2-2609B

PW22-000003, C1-2614B ,RV1-2604A,RV2-2609B
"""


@pytest.fixture(scope="module")
def design():
    return load_design("sequences/demo-panel.toml")


def write(tmp_path: Path, text: str, encoding: str = "utf-8", name: str = "traveller.csv") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding=encoding, newline="")
    return path


def problems_of(path: Path, **kwargs) -> list[str]:
    with pytest.raises(FileProblems) as caught:
        read_traveller(path, **kwargs)
    return [p.message for p in caught.value.problems]


def test_a_good_traveller_reads_into_lots_per_serial_in_file_order(tmp_path: Path, design) -> None:
    path = write(tmp_path, GOOD)
    travellers = read_traveller(path, design)
    assert list(travellers) == ["PW22-000001", "PW22-000002", "PW22-000003"]
    assert travellers["PW22-000003"] == {"c_integrator": "C1-2614B", "knob_a_pot": "RV1-2604A",
                                         "knob_b_pot": "RV2-2609B"}
    assert lots_for(path, "PW22-000002") == {"c_integrator": "C1-2611A", "knob_a_pot": "RV1-2604A",
                                             "knob_b_pot": "RV2-2609B"}


def test_a_spreadsheet_export_with_byte_order_mark_and_crlf_reads_the_same(tmp_path: Path) -> None:
    # Excel's "CSV UTF-8" writes a BOM and CRLF line ends (RFC 4180 uses CRLF; from memory).
    path = write(tmp_path, GOOD.replace("\n", "\r\n"), encoding="utf-8-sig")
    assert read_traveller(path) == read_traveller(write(tmp_path, GOOD, name="plain.csv"))


def test_duplicate_serial_names_both_lines(tmp_path: Path) -> None:
    path = write(tmp_path, GOOD + "PW22-000001,C1-2611A,RV1-2604A,RV2-2609A\n")
    assert problems_of(path) == [f"{path}: line 6, column 1 (serial): expected each serial once, "
                                 "found 'PW22-000001' again (first on line 2)"]


def test_empty_lot_names_line_column_and_part(tmp_path: Path) -> None:
    path = write(tmp_path, GOOD.replace("RV1-2604A,RV2-2609B\n\n", ",RV2-2609B\n\n"))
    assert problems_of(path) == [f"{path}: line 3, column 3 (knob_a_pot): expected a lot code, "
                                 "found an empty cell"]


def test_unknown_column_is_reported_only_against_a_design(tmp_path: Path, design) -> None:
    path = write(tmp_path, GOOD.replace("knob_b_pot", "knob_c_pot"))
    assert "knob_c_pot" in read_traveller(path)["PW22-000001"]
    (line,) = problems_of(path, design=design)
    assert line.startswith(f"{path}: line 1, column 4 (knob_c_pot): expected a part key of {design.name}: ")
    assert line.endswith("found 'knob_c_pot'")


def test_serial_not_found_is_one_line(tmp_path: Path) -> None:
    path = write(tmp_path, GOOD)
    with pytest.raises(FileFormatError) as caught:
        lots_for(path, "PW22-000009")
    assert caught.value.message == f"{path}: serial: expected a row for serial 'PW22-000009', found none among 3 rows"


def test_every_problem_in_a_file_is_reported_at_once(tmp_path: Path) -> None:
    text = ("serial,c_integrator,c_integrator\n"
            ",C1-1,C1-1\n"
            "PW22-000001,C1-1\n"
            "PW22-000002,,C1-1\n")
    path = write(tmp_path, text)
    assert problems_of(path) == [
        f"{path}: line 1, column 3 (c_integrator): expected each column once, found it again (first in column 2)",
        f"{path}: line 2, column 1 (serial): expected a serial number, found an empty cell",
        f"{path}: line 3: expected 3 cells (serial and 2 lots) as in the header, found 2",
        f"{path}: line 4, column 2 (c_integrator): expected a lot code, found an empty cell",
    ]


def test_header_must_start_with_serial(tmp_path: Path) -> None:
    path = write(tmp_path, "unit,c_integrator\nPW22-000001,C1-1\n")
    assert problems_of(path) == [f"{path}: line 1, column 1: expected the column name 'serial', found 'unit'"]


def test_empty_file_asks_for_a_header(tmp_path: Path) -> None:
    path = write(tmp_path, "\n")
    assert problems_of(path) == [f"{path}: line 1: expected a header line serial,<part>,<part>,..., "
                                 "found an empty file"]


def test_serials_are_checked_against_the_products_pattern_when_given(tmp_path: Path) -> None:
    path = write(tmp_path, GOOD.replace("PW22-000002", "PW22-2"))
    assert problems_of(path, serial_pattern=r"PW22-[0-9]{6}") == [
        f"{path}: line 3, column 1 (serial): expected a serial matching PW22-[0-9]{{6}}, found 'PW22-2'"]


def test_missing_and_non_utf8_files_are_one_line_each(tmp_path: Path) -> None:
    with pytest.raises(FileFormatError, match="expected an existing file, found no such file"):
        read_traveller(tmp_path / "nope.csv")
    bad = tmp_path / "latin1.csv"
    bad.write_bytes("serial,c_integrator\nPW22-000001,C1-\u00e9\n".encode("latin-1"))
    with pytest.raises(FileFormatError, match="expected UTF-8 text"):
        read_traveller(bad)


def test_broken_quoting_names_the_line(tmp_path: Path) -> None:
    # Text after a closing quote is not CSV (RFC 4180 section 2, from memory); Python's csv module in
    # strict mode refuses it. The reader's complaint must arrive as one FileFormatError naming the line.
    path = write(tmp_path, 'serial,c_integrator\nPW22-000001,"C1-1"x\n')
    with pytest.raises(FileFormatError) as caught:
        read_traveller(path)
    assert caught.value.key == "line 2" and caught.value.expected == "CSV text"


def test_written_traveller_reads_back(tmp_path: Path, design) -> None:
    from fixture.sim.batch import lots_table, plan_batch

    plan = plan_batch(design, units=12, seed=3)
    path = tmp_path / "batch.csv"
    write_traveller(path, lots_table(plan))
    assert read_traveller(path, design) == dict(lots_table(plan))
