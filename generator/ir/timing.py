"""A delay model of the datapath, per operation, for choosing register stages (`interface.target_mhz`).

Each operation gets a delay from its kind and widths (an adder's carry chain grows with its width,
a table lookup costs LUT levels that grow with its key, wiring costs nothing); the delay of a
register-to-register segment is the longest path through the operations between two register
stages, plus a register hop. `stages_for` picks the fewest register stages whose slowest segment
meets the target clock, or refuses with the best clock the model predicts.

The primitive delays (`CALIBRATION`) were measured with nextpnr-ice40 on iCE40 HX8K CT256,
register-to-register inside the cost flow's register wrapper (tests/benchmarks/bench_hardware.py
--calibrate reruns it). Not modelled: routing congestion and the stage-enable fan-out of the
stream control, so the model's Fmax is optimistic for large designs.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

from ..errors import SpecError
from .core import (Add, Bits, Compare, Concat, Const, Datapath, FlipIf, Gate, Logic, Lookup, Mul, Mux, Op, Reduce,
                   Resize, Signal, Sub)
from .pipeline import place_registers


@dataclass(frozen=True)
class Calibration:
    """Primitive delays of one FPGA family (ns), measured register to register."""

    part: str
    tools: str
    date: str
    #: clock-to-out + setup + one route: the delay of a register-to-register hop
    register_ns: float
    #: one LUT level with its route
    lut_ns: float
    #: an adder (carry chain) of w bits: entry + per bit
    add_entry_ns: float
    add_bit_ns: float
    #: an a x b multiply in LUTs: entry + per bit of the short and of the long operand
    mul_entry_ns: float
    mul_short_bit_ns: float
    mul_long_bit_ns: float


#: Measured 2026-12-01 on iCE40 HX8K CT256, Yosys 0.23 (7ce5011c24b) synth_ice40, nextpnr-ice40 0.4-1+b1,
#: seed 1. Registered adders: w = 4, 8, 12, 16, 24, 32 bits -> 2.234, 2.738, 3.438, 3.942, 5.146, 6.350 ns;
#: chains of n LUT4 levels: n = 1, 2, 4, 6 -> 1.90, 2.63, 5.45, 7.05 ns;
#: signed a x b multipliers in LUTs: 3x12, 4x14, 5x16, 7x18, 8x20 -> 6.41, 8.30, 8.67, 10.40, 10.87 ns.
ICE40 = Calibration(part="iCE40 HX8K CT256", tools="Yosys 0.23 (git sha1 7ce5011c24b); nextpnr-ice40 0.4-1+b1",
                    date="2026-12-01", register_ns=0.80, lut_ns=1.07, add_entry_ns=0.85, add_bit_ns=0.147,
                    mul_entry_ns=2.40, mul_short_bit_ns=0.62, mul_long_bit_ns=0.12)

FAMILIES: dict[str, Calibration] = {"ice40": ICE40}


def _levels(inputs: int) -> int:
    """LUT4 levels of a function of `inputs` bits (a table lookup or a mux tree)."""
    return max(1, math.ceil(math.log(max(inputs, 2), 4)))


def op_delay(op: Op, dst: Signal, cal: Calibration = ICE40) -> float:
    """Combinational delay (ns) of one operation producing `dst`."""
    if isinstance(op, (Resize, Concat)):
        return 0.0
    if isinstance(op, (Add, Sub)):
        return cal.add_entry_ns + cal.add_bit_ns * dst.width
    if isinstance(op, Compare):
        return cal.add_entry_ns + cal.add_bit_ns * (max(op.a.width, op.b.width) + 1)
    if isinstance(op, Mul):
        consts = [x for x in (op.a, op.b) if isinstance(x, Const)]
        widths = sorted(x.width for x in (op.a, op.b) if not isinstance(x, Const))
        if consts and widths:                      # a constant multiply: a few shifted adds
            short, long_ = min(widths[0], consts[0].value.bit_length()), dst.width
        elif not widths:
            return 0.0
        else:
            short, long_ = widths[0], widths[-1]
        return cal.mul_entry_ns + cal.mul_short_bit_ns * short + cal.mul_long_bit_ns * long_
    if isinstance(op, (Mux, Gate, FlipIf, Logic)):
        return cal.lut_ns
    if isinstance(op, Lookup):
        return cal.lut_ns * _levels(op.key.width)
    if isinstance(op, Reduce):
        return cal.lut_ns * _levels(op.a.width)
    raise TypeError(f"no delay for {type(op).__name__}")


def step_delays(dp: Datapath, cal: Calibration = ICE40) -> list[float]:
    """Longest path (ns) through each step alone (its inputs from registers)."""
    return [segments(dp, [1] * len(dp.steps), cal, hop=False)[b] for b in range(len(dp.steps))]


def segments(dp: Datapath, plan: Sequence[int], cal: Calibration = ICE40, *, hop: bool = True) -> list[float]:
    """Register-to-register delays (ns) of a register plan: the longest path into each register stage."""
    arrival: dict[str, float] = {}
    out: list[float] = []
    worst = 0.0
    for st, regs in zip(dp.steps, plan):
        for a in st.assigns:
            start = max((arrival.get(x.name, 0.0) for x in a.op.operands() if isinstance(x, (Signal, Bits))),
                        default=0.0)
            arrival[a.dst.name] = start + op_delay(a.op, a.dst, cal)
            worst = max(worst, arrival[a.dst.name])
        if regs:
            out.append(worst + (cal.register_ns if hop else 0.0))
            arrival = {}
            worst = 0.0
    if worst:
        out.append(worst + (cal.register_ns if hop else 0.0))
    return out


def predicted_fmax(dp: Datapath, stages: int, cal: Calibration = ICE40) -> float:
    """The model's Fmax (MHz) with `stages` register stages (0: one per step)."""
    return 1000.0 / max(segments(dp, place_registers(len(dp.steps), stages), cal))


def stages_for(dp: Datapath, role: str, target_mhz: float, cal: Calibration = ICE40) -> int:
    """Fewest register stages whose predicted Fmax meets target_mhz (SpecError naming the best clock if none)."""
    best = 0.0
    for stages in range(1, len(dp.steps) + 1):
        fmax = predicted_fmax(dp, stages, cal)
        best = max(best, fmax)
        if fmax >= target_mhz:
            return stages
    delays = step_delays(dp, cal)
    slow = max(range(len(delays)), key=delays.__getitem__)
    raise SpecError("interface.target_mhz", target_mhz,
                    f"at most {math.floor(best)} MHz for this design on {cal.part} "
                    f"(the {role} step '{dp.steps[slow].name}' alone takes {delays[slow] + cal.register_ns:.1f} ns)")


__all__ = ["CALIBRATION", "FAMILIES", "ICE40", "Calibration", "op_delay", "predicted_fmax", "segments",
           "stages_for", "step_delays"]

#: the calibration of the part the cost flow places on (kept under its earlier name)
CALIBRATION = ICE40
