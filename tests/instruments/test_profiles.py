"""Command profiles: the shipped ones load; a bad one is reported one clear line per problem."""

from __future__ import annotations

from importlib import resources
from pathlib import Path

import pytest

from fixture.errors import FileFormatError, UserInputError
from fixture.instruments import Counter, load_profile, shipped_profiles
from fixture.instruments.vocabulary import ROLES, commands_for
from tests.files.edits import edited_copy, only_problem

from .fakes import FakeInstrument, scripted_session


def shipped(name: str) -> Path:
    return Path(str(resources.files("fixture.instruments") / "profiles" / f"{name}.toml"))


def test_the_four_demo_profiles_ship_and_cover_every_role() -> None:
    assert shipped_profiles() == ["knobline-ka2", "tessaly-yqc83", "tessaly-yqp26", "tessaly-yqs47"]
    assert sorted(load_profile(n).role for n in shipped_profiles()) == sorted(ROLES)


@pytest.mark.parametrize("name", ["knobline-ka2", "tessaly-yqc83", "tessaly-yqp26", "tessaly-yqs47"])
def test_shipped_profiles_define_every_required_command(name: str) -> None:
    profile = load_profile(name)
    required = {c for c, spec in commands_for(profile.role).items() if spec.required}
    assert required <= set(profile.commands)


def test_counter_profile_uses_scpi_1999_headers() -> None:
    # SCPI-1999 CONFigure:PERiod, SENSe:FREQuency:APERture, FETCh:<function>? (short forms; from memory).
    p = load_profile("tessaly-yqc83")
    assert p.format("configure_period") == "CONF:PER"
    assert p.format("gate_time", gate_time_s=0.1) == "SENS:FREQ:APER 1.000000E-01"
    assert p.format("fetch_duty") == "FETC:DCYC?"


def test_a_profile_may_be_loaded_by_path(tmp_path: Path) -> None:
    path = edited_copy(shipped("tessaly-yqc83"), tmp_path, 'idn_model = "YQ-C83"', 'idn_model = ["YQ-C83", "YQ-C84"]')
    profile = load_profile(path)
    assert profile.idn_models == ("YQ-C83", "YQ-C84")
    assert profile.source == str(path)


def test_unknown_profile_name_lists_the_shipped_ones() -> None:
    with pytest.raises(UserInputError, match="tessaly-yqc83.*found 'tessaly-fc9999'"):
        load_profile("tessaly-fc9999")


def test_missing_profile_file_is_a_file_format_error(tmp_path: Path) -> None:
    with pytest.raises(FileFormatError, match="no such file"):
        load_profile(tmp_path / "nope.toml")


# One edit, one line: file, key, expected, found (the FileFormatError wording).
@pytest.mark.parametrize("name, old, new, line", [
    ("tessaly-yqc83", 'fetch_period = "FETC:PER?"\n', "",
     "commands.fetch_period: expected the SCPI text of the query fetching a period reading, found nothing"),
    ("tessaly-yqc83", "{gate_time_s:.6E}", "{gate_s:.6E}",
     "commands.gate_time: expected a template using only {gate_time_s}, found {gate_s} in"),
    ("tessaly-yqc83", "{gate_time_s:.6E}", "{gate_time_s:d}",
     "commands.gate_time: expected a template whose fields format as {gate_time_s}, found"),
    ("tessaly-yqc83", "{gate_time_s:.6E}", "{}",
     "commands.gate_time: expected a template using only {gate_time_s}, found {} in"),
    ("tessaly-yqc83", 'fetch_period = "FETC:PER?"', 'fetch_period = "FETC:PER"',
     "commands.fetch_period: expected a query (SCPI queries end their header with '?'), found 'FETC:PER'"),
    ("tessaly-yqc83", 'initiate = "INIT"', 'initiate = "INIT?"',
     "commands.initiate: expected a command that is not a query (no '?'), found 'INIT?'"),
    ("tessaly-yqc83", 'initiate = "INIT"', 'initiate = "INIT"\nfetch_everything = "FETC?"',
     "commands.fetch_everything: expected one of the keys"),
    ("tessaly-yqc83", 'initiate = "INIT"', "initiate = 7", "commands.initiate: expected one line of SCPI text, found 7"),
    ("tessaly-yqc83", 'role = "counter"', 'role = "multimeter"',
     "identity.role: expected one of counter, scope, supply, actuator, found 'multimeter'"),
    ("tessaly-yqc83", 'idn_model = "YQ-C83"', "idn_model = []",
     "identity.idn_model: expected the model *IDN? names, or a list of them, found []"),
    ("tessaly-yqc83", 'duty = "percent"', 'duty = "fraction"',
     "units.duty: expected one of percent, ratio, found 'fraction'"),
    ("tessaly-yqc83", "fetch_margin_s = 1.0", "fetch_margin_s = -1.0",
     "timing.fetch_margin_s: expected a positive number"),
    ("tessaly-yqc83", 'rising = "POS"', 'rising = "POS ITIVE"',
     "tokens.rising: expected one word the instrument understands, found 'POS ITIVE'"),
    ("tessaly-yqc83", "[units]", "max_deg = 3\n[units]", "limits.max_deg: expected one of the keys"),
    ("tessaly-yqc83", "max_frequency_hz = 350.0e6", "max_frequency_hz = 1.0e-4",
     "limits.max_frequency_hz: expected a frequency above limits.min_frequency_hz, found 0.0001"),
    ("tessaly-yqc83", "min_frequency_hz = 1.0e-3", "min_frequency_hz = 0",
     "limits.min_frequency_hz: expected a positive number"),
    ("knobline-ka2", "min_deg = 0.0", "", "limits.min_deg: expected the lowest shaft angle"),
    ("knobline-ka2", "travel_deg = 270.0", "travel_deg = 270.0\nzero = 1",
     "fixture.zero: expected one of the keys zero_deg, travel_deg, found an unknown key"),
    ("tessaly-yqs47", '"x_increment_s", ', "",
     "data.preamble_fields: expected a list naming at least x_increment_s and y_multiplier_v"),
    ("tessaly-yqs47", '"x_zero_s"', '"x_zero"', "data.preamble_fields: expected a list of points"),
])
def test_a_bad_profile_gives_one_clear_line(tmp_path: Path, name: str, old: str, new: str, line: str) -> None:
    path = edited_copy(shipped(name), tmp_path, old, new)
    problem = only_problem(load_profile, path)
    assert problem.startswith(f"{path}: {line}"), problem


def test_every_problem_in_a_profile_is_listed_at_once(tmp_path: Path) -> None:
    path = edited_copy(shipped("tessaly-yqc83"), tmp_path, 'initiate = "INIT"', 'initiate = "INIT?"')
    path.write_text(path.read_text(encoding="utf-8").replace('duty = "percent"', 'duty = "x"'), encoding="utf-8")
    with pytest.raises(UserInputError) as info:
        load_profile(path)
    assert len(str(info.value).splitlines()) == 2


def test_a_driver_refuses_a_profile_for_another_role() -> None:
    session, _ = scripted_session("tessaly-yqs47", FakeInstrument())
    with pytest.raises(UserInputError, match="profile tessaly-yqs47 is for a scope; the counter needs"):
        Counter(session)
