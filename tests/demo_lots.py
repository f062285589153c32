"""Component lots for tests that run ``knobline test`` on the demo sequence, which requires a lot of
every part the demo design marks ``lot_tracked`` (sequences/README.md, ``required_lots``).

The codes are the shipped traveller's first unit (sequences/demo-traveller.csv, PW22-000901): invented
demo data, never a reference value. Lot codes do not move a simulated unit's part values (only a
planted lot shift does, fixture/sim/dut.py), so a test's unit is the same with or without them.
"""

from __future__ import annotations

DEMO_LOTS = {
    "c_integrator": "C1-2611A", "r_integrator": "R5-2621A", "r_schmitt_in": "R3-2603A", "r_schmitt_fb": "R4-2622A",
    "r_ref_top": "R1-2609A", "r_ref_bottom": "R2-2605A", "r_threshold_top": "R6-2615A",
    "r_threshold_bottom": "R7-2604A", "knob_a_pot": "RV1-2609A", "knob_b_pot": "RV2-2610A",
}


def lot_options(**lots: str) -> tuple[str, ...]:
    """``--lot PART=LOT`` options for every demo lot, with ``lots`` (part key = lot code) replacing some."""
    merged = {**DEMO_LOTS, **lots}
    return tuple(arg for part, lot in merged.items() for arg in ("--lot", f"{part}={lot}"))


#: ``--lot`` options for all of the demo design's lot-tracked parts.
LOT_OPTIONS = lot_options()
