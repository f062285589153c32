"""An ngspice netlist of the integrator-Schmitt panel circuit, run as the test reference.

The reference simulator is ngspice (Debian package ``ngspice`` 39) with its
XSPICE analog code models. The netlist is built from the same model inputs
the built-in model receives (``ProductDesign.model_inputs``), element for
element as ``fixture/model/circuits/integrator_schmitt.py`` describes the
circuit; nothing here evaluates the built-in model.

Op-amps are behavioural, so that the rails and the slew rate are physical
rather than formulas:

* U2 (Schmitt) and U3 (slicer): XSPICE ``limit`` (high gain, output clipped to
  ``opamp_low_v`` .. ``supply_v - opamp_headroom_v``), then, when
  ``opamp_delay_s > 0``, an ideal lossless transmission line driven by the
  limiter and terminated in its own impedance (a pure delay: nothing reflects
  from a matched load), then XSPICE ``slew`` (rising and falling slope both
  ``opamp_slew_v_per_s``). Model behaviour as in the ngspice manual's XSPICE
  code-model chapter, from memory: ``limit`` is ``gain * (in + in_offset)``
  clipped to the output limits with a small smoothing range; ``slew``
  follows its input with the output slope bounded by rise/fall_slope.
* U1 (integrator): a voltage-controlled voltage source of gain 1e6. Its ramp
  is orders below the slew rate and the triangle stays inside the rails (the
  run reports the triangle's extremes so a test can confirm that), so an
  unclipped near-ideal amplifier is the faithful and numerically quiet choice.
  A clipped XSPICE ``limit`` in this place was tried: with the capacitor open
  at DC it sits saturated, and the transient stopped at its first time point
  ("Timestep too small") in ngspice 39.
"""

from __future__ import annotations

import subprocess
import tempfile
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

import numpy as np

#: Open-loop gain of the behavioural op-amps: high enough that the input error
#: (swing / gain, about 0.1 mV at 1e5) is far below any level in the circuit.
COMPARATOR_GAIN = 1e5
INTEGRATOR_GAIN = 1e6

#: Characteristic impedance of the delay line. Any value works: the line is
#: driven by an ideal source and terminated in Z0, so only TD matters.
DELAY_LINE_Z0_OHM = 1e3

#: Smallest resistance written to the netlist; a pot at its end stop with
#: zero end resistance would otherwise give a 0-ohm resistor, which SPICE rejects.
MIN_RESISTANCE_OHM = 1e-3


class NgspiceError(RuntimeError):
    """ngspice failed to run the netlist or produced no usable waveform."""


@dataclass(frozen=True)
class SpiceResult:
    """What the simulated output wire did after start-up.

    :param frequency_hz: mean frequency over ``cycles`` full cycles.
    :param duty: mean high time over mean period, fraction 0..1, from the
        output crossing its mid-swing level.
    :param cycles: cycles the figures are averaged over.
    :param triangle_min_v: lowest integrator output seen after start-up.
    :param triangle_max_v: highest integrator output seen after start-up.
    :param netlist: the netlist that was run, for failure messages.
    """

    frequency_hz: float
    duty: float
    cycles: int
    triangle_min_v: float
    triangle_max_v: float
    netlist: str


def _num(value: float) -> str:
    """A number as SPICE reads it: plain exponent notation, no scale suffixes."""
    return f"{float(value):.12g}"


def _ohm(value: float) -> str:
    return _num(max(float(value), MIN_RESISTANCE_OHM))


def output_levels_v(inputs: Mapping[str, float]) -> tuple[float, float]:
    """The op-amp output low and high levels (V_OL, V_OH) of these inputs."""
    v_ol = float(inputs["opamp_low_v"])
    v_oh = float(inputs["supply_v"]) - float(inputs["opamp_headroom_v"])
    return v_ol, v_oh


def estimated_period_s(inputs: Mapping[str, float]) -> float:
    """A rough period, used only to size the simulation run and its time step.

    Ideal relaxation oscillator (textbook: triangle between the Schmitt levels
    at slopes (Vref - V_OL)/RC and (V_OH - Vref)/RC) plus two full slews and
    four delays, generous on purpose.
    """
    v_ol, v_oh = output_levels_v(inputs)
    vcc = float(inputs["supply_v"])
    v_ref = vcc * float(inputs["r_ref_bottom"]) / (float(inputs["r_ref_top"]) + float(inputs["r_ref_bottom"]))
    k = float(inputs["r_schmitt_in"]) / float(inputs["r_schmitt_fb"])
    span = (v_oh - v_ol) * k
    rc = (float(inputs["r_integrator"]) + float(inputs["knob_a_cw_ohm"])) * float(inputs["c_integrator"])
    t_ideal = span * rc / (v_ref - v_ol) + span * rc / (v_oh - v_ref)
    t_slew = (v_oh - v_ol) / float(inputs["opamp_slew_v_per_s"])
    return t_ideal + 2.0 * t_slew + 4.0 * float(inputs.get("opamp_delay_s", 0.0))


def _comparator(name: str, plus: str, minus: str, out: str, delay_s: float) -> list[str]:
    """Limiter, optional pure delay, slew limiter: one comparator op-amp."""
    lines = [f"A{name}LIM %vd({plus} {minus}) {name}_lim opamp_lim"]
    slew_in = f"{name}_lim"
    if delay_s > 0.0:
        z0 = _num(DELAY_LINE_Z0_OHM)
        lines += [f"T{name} {name}_lim 0 {name}_del 0 Z0={z0} TD={_num(delay_s)}",
                  f"R{name}TERM {name}_del 0 {z0}"]
        slew_in = f"{name}_del"
    lines.append(f"A{name}SLEW {slew_in} {out} opamp_slew")
    return lines


def build_netlist(inputs: Mapping[str, float], stop_time_s: float, max_step_s: float, data_file: str) -> str:
    """The ngspice netlist of the circuit for ``inputs`` (one scalar per model input).

    The run writes time, output wire and triangle to ``data_file`` with ``wrdata``.
    """
    v_ol, v_oh = output_levels_v(inputs)
    delay_s = float(inputs.get("opamp_delay_s", 0.0))
    slew = _num(inputs["opamp_slew_v_per_s"])
    lines = [
        "* knobline: integrator + Schmitt relaxation oscillator, triangle sliced by knob B",
        f"VCC vcc 0 DC {_num(inputs['supply_v'])}",
        "* reference divider",
        f"RREFT vcc vref {_ohm(inputs['r_ref_top'])}",
        f"RREFB vref 0 {_ohm(inputs['r_ref_bottom'])}",
        "* U1 integrator: R = r_integrator + knob A wiper-to-CW (rheostat), C from -in to output",
        f"RINT sq u1_a {_ohm(inputs['r_integrator'])}",
        f"RVACW u1_a u1_inm {_ohm(inputs['knob_a_cw_ohm'])}",
        # Start with the capacitor empty: the triangle starts at Vref, inside the
        # hysteresis band, so the oscillator starts without a DC operating point.
        f"CINT u1_inm tri {_num(inputs['c_integrator'])} IC=0",
        f"EU1 tri 0 vref u1_inm {_num(INTEGRATOR_GAIN)}",
        "* U2 non-inverting Schmitt about Vref",
        f"RSIN tri u2_inp {_ohm(inputs['r_schmitt_in'])}",
        f"RSFB sq u2_inp {_ohm(inputs['r_schmitt_fb'])}",
        *_comparator("U2", "u2_inp", "vref", "sq", delay_s),
        "* U3 slicer: +in triangle, -in knob B wiper in supply-R6-RV2(ccw|cw)-R7-ground",
        f"RTHT vcc rv2_ccw {_ohm(inputs['r_threshold_top'])}",
        f"RVBCCW rv2_ccw rv2_wiper {_ohm(inputs['knob_b_ccw_ohm'])}",
        f"RVBCW rv2_wiper rv2_cw {_ohm(inputs['knob_b_cw_ohm'])}",
        f"RTHB rv2_cw 0 {_ohm(inputs['r_threshold_bottom'])}",
        *_comparator("U3", "tri", "rv2_wiper", "out", delay_s),
        f".model opamp_lim limit(gain={_num(COMPARATOR_GAIN)} out_lower_limit={_num(v_ol)} "
        f"out_upper_limit={_num(v_oh)})",
        f".model opamp_slew slew(rise_slope={slew} fall_slope={slew})",
        f".tran {_num(max_step_s)} {_num(stop_time_s)} 0 {_num(max_step_s)} uic",
        ".control",
        "set wr_singlescale",
        "set wr_vecnames",
        "run",
        f"wrdata {data_file} v(out) v(tri)",
        # Without an explicit quit, batch mode exits 1 even after a good run.
        "quit",
        ".endc",
        ".end",
    ]
    return "\n".join(lines) + "\n"


def _crossings(time_s: np.ndarray, v: np.ndarray, level_v: float, rising: bool) -> np.ndarray:
    """Times where ``v`` crosses ``level_v`` upward (or downward), linearly interpolated."""
    above = v > level_v
    idx = np.flatnonzero(above[1:] != above[:-1])
    idx = idx[above[idx + 1] == rising]
    t0, t1, v0, v1 = time_s[idx], time_s[idx + 1], v[idx], v[idx + 1]
    return t0 + (level_v - v0) * (t1 - t0) / (v1 - v0)


def measure_wire(time_s: np.ndarray, out_v: np.ndarray, level_v: float, skip_cycles: int,
                 cycles: int) -> tuple[float, float, float]:
    """Frequency, duty and the start time of the measured window from the output waveform.

    Frequency is ``cycles`` over the time between rising edge ``skip_cycles``
    and rising edge ``skip_cycles + cycles``; duty is the mean high time of
    those cycles over their mean period.
    """
    rises = _crossings(time_s, out_v, level_v, rising=True)
    falls = _crossings(time_s, out_v, level_v, rising=False)
    if len(rises) < skip_cycles + cycles + 1:
        raise NgspiceError(f"expected at least {skip_cycles + cycles + 1} rising edges at {level_v:.4g} V, "
                           f"found {len(rises)}")
    window = rises[skip_cycles: skip_cycles + cycles + 1]
    period_s = (window[-1] - window[0]) / cycles
    highs = []
    for start in window[:-1]:
        later = falls[falls > start]
        if len(later) == 0:
            raise NgspiceError(f"no falling edge after the rising edge at {start:.6g} s")
        highs.append(later[0] - start)
    return 1.0 / period_s, float(np.mean(highs)) / period_s, float(window[0])


def simulate(inputs: Mapping[str, float], ngspice: str, *, cycles: int = 6, skip_cycles: int = 3,
             steps_per_period: int = 4000, timeout_s: float = 60.0) -> SpiceResult:
    """Run the circuit for ``inputs`` in ngspice and measure the output wire.

    :param inputs: every model input as a scalar (``ProductDesign.model_inputs``).
    :param ngspice: path of the ngspice executable.
    :param cycles: cycles averaged over, after ``skip_cycles`` start-up cycles.
    :param steps_per_period: bounds ngspice's time step to period / this; at
        4000 the simulated period has converged to about 0.1 % (checked
        against 16000, where the result moves by less than that).
    :raises NgspiceError: ngspice fails, or the wire does not oscillate.
    """
    scalars = {k: float(np.asarray(v)) for k, v in inputs.items()}
    period_s = estimated_period_s(scalars)
    # Half a period of margin on top of the cycles needed for the last falling edge.
    stop_time_s = (skip_cycles + cycles + 1.5) * period_s * 1.1
    max_step_s = period_s / steps_per_period
    v_ol, v_oh = output_levels_v(scalars)
    with tempfile.TemporaryDirectory(prefix="knobline-spice-") as tmp:
        netlist = build_netlist(scalars, stop_time_s, max_step_s, "wave.txt")
        (Path(tmp) / "circuit.cir").write_text(netlist)
        try:
            proc = subprocess.run([ngspice, "-b", "circuit.cir"], cwd=tmp, capture_output=True, text=True,
                                  timeout=timeout_s, check=False)
        except subprocess.TimeoutExpired as exc:
            raise NgspiceError(f"ngspice did not finish within {timeout_s} s\n{netlist}") from exc
        data_path = Path(tmp) / "wave.txt"
        log = proc.stdout + proc.stderr
        if proc.returncode != 0 or not data_path.exists() or "aborted" in log or "Error" in log:
            raise NgspiceError(f"ngspice failed (exit {proc.returncode}):\n{proc.stdout[-3000:]}\n"
                               f"{proc.stderr[-3000:]}\nnetlist:\n{netlist}")
        data = np.loadtxt(data_path, skiprows=1)
    time_s, out_v, tri_v = data[:, 0], data[:, 1], data[:, 2]
    try:
        freq, duty, window_start_s = measure_wire(time_s, out_v, 0.5 * (v_ol + v_oh), skip_cycles, cycles)
    except NgspiceError as exc:
        raise NgspiceError(f"{exc}\nnetlist:\n{netlist}") from exc
    settled = time_s >= window_start_s
    return SpiceResult(frequency_hz=freq, duty=duty, cycles=cycles,
                       triangle_min_v=float(tri_v[settled].min()), triangle_max_v=float(tri_v[settled].max()),
                       netlist=netlist)


__all__ = ["NgspiceError", "SpiceResult", "build_netlist", "estimated_period_s", "measure_wire",
           "output_levels_v", "simulate"]
