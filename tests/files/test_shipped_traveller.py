"""The shipped example traveller reads cleanly against the demo design and gives every lotted part a lot."""

from __future__ import annotations

from pathlib import Path

from fixture.files.design_file import load_design
from fixture.files.traveller import lots_for, read_traveller
from fixture.sim.batch import DEFAULT_LOTTED_PARTS

ROOT = Path(__file__).resolve().parents[2]


def test_the_example_traveller_lists_a_lot_of_every_lotted_part_for_each_unit() -> None:
    design = load_design(ROOT / "sequences" / "demo-panel.toml")
    travellers = read_traveller(ROOT / "sequences" / "demo-traveller.csv", design)
    assert list(travellers) == [f"PW22-{n:06d}" for n in range(901, 906)]
    lots = lots_for(ROOT / "sequences" / "demo-traveller.csv", "PW22-000903", design)
    assert set(lots) == set(DEFAULT_LOTTED_PARTS)
    assert lots["c_integrator"].startswith("C1-")
