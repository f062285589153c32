"""A signal model that lives outside knobline: an astable 555-style timer.

It exists to prove that a user can plug a model in without editing knobline,
either by import path in the design file (``model = "tests.model.plugin_555:Timer555Model"``)
or with :func:`fixture.model.circuits.register_model`.

Circuit (the classic astable connection)::

    VCC - R1 - RV_A (rheostat, wiper..CW) - DIS - R2 - RV_B (rheostat, wiper..CW) - THR/TRIG - C - GND

so R_A = r1 + knob A's CW side and R_B = r2 + knob B's CW side. Turning
either knob clockwise shortens the CW side. The timing is the astable
formulas of the Texas Instruments NE555 datasheet (astable operation; quoted
from memory)::

    t_high = ln(2) (R_A + R_B) C,    t_low = ln(2) R_B C

Knob A sets the frequency; knob B raises the duty towards 100 % as R_B falls
(and, this being a plain 555, moves the frequency as well: a limitation of the
circuit, not of the plug-in mechanism).
"""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np

from fixture.model.circuits.base import DesignProblem, ParameterSpec, Signal, cw_key

#: The 555's charge/discharge constant: the capacitor runs between 1/3 and 2/3 of
#: the supply, ln((1 - 1/3)/(1 - 2/3)) = ln 2. Deliberately *not* a signal model,
#: so tests can point ``find_model`` at it.
LN2 = math.log(2.0)

#: NE555 recommended supply range (TI NE555 datasheet, recommended operating
#: conditions; from memory).
SUPPLY_RANGE_V = (4.5, 16.0)

#: Smallest R_A we accept: with the discharge transistor on, R_A alone sits
#: across the supply (common practice to keep that current to a few mA; from memory).
MIN_R_A_OHM = 1e3


class Timer555Model:
    """Astable 555: knob A a rheostat in series with R1, knob B a rheostat in series with R2."""

    name = "astable-555"
    description = ("Astable 555-style timer: knob A (wiper..CW) in series with R1, knob B (wiper..CW) "
                   "in series with R2; t_high = ln2 (R_A + R_B) C, t_low = ln2 R_B C.")
    parameters = (
        ParameterSpec("r1", "ohm", "timing resistor R1, supply to the discharge pin, in series with knob A"),
        ParameterSpec("r2", "ohm", "timing resistor R2, discharge pin to the capacitor, in series with knob B"),
        ParameterSpec("c_timing", "F", "timing capacitor"),
        ParameterSpec("supply_v", "V", "timer supply", default=5.0),
    )

    def resistances(self, values: Mapping[str, np.ndarray]) -> tuple[np.ndarray, np.ndarray]:
        """(R_A, R_B): each fixed resistor plus its knob's CW side."""
        r_a = np.asarray(values["r1"], dtype=float) + values[cw_key("a")]
        r_b = np.asarray(values["r2"], dtype=float) + values[cw_key("b")]
        return r_a, r_b

    def evaluate(self, values: Mapping[str, np.ndarray]) -> Signal:
        r_a, r_b = self.resistances(values)
        c = np.asarray(values["c_timing"], dtype=float)
        high = LN2 * (r_a + r_b) * c
        low = LN2 * r_b * c
        return Signal(period_s=np.asarray(high + low, dtype=float), high_s=np.asarray(high, dtype=float),
                      internals={"r_a_ohm": r_a, "r_b_ohm": r_b})

    def check(self, values: Mapping[str, np.ndarray]) -> list[DesignProblem]:
        problems: list[DesignProblem] = []
        supply = float(np.asarray(values["supply_v"]))
        low, high = SUPPLY_RANGE_V
        if not low <= supply <= high:
            problems.append(DesignProblem("parts.supply_v", f"a supply within {low:g}..{high:g} V",
                                          f"{supply:g} V"))
        r_a = float(np.asarray(self.resistances(values)[0]))
        if r_a < MIN_R_A_OHM:
            problems.append(DesignProblem("parts.r1", f"R1 plus knob A at least {MIN_R_A_OHM:g} ohm",
                                          f"{r_a:g} ohm (the discharge pin would short the supply)"))
        return problems
