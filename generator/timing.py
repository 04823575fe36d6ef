"""Automatic pipelining: a delay model of the mapper and demapper steps on the iCE40 part.

`interface.target_mhz > 0` makes the generator choose the register stages: each logical step
of rtl.py (range, decide, competitor, select, residual, product, accumulate, scale, round, sign,
...) gets a delay from the widths it works on, the
register plan of `rtl.place_registers` for s stages groups the steps into register-to-register
segments, and the smallest s whose slowest segment meets the target wins. A target no plan
meets is refused with the best Fmax the model predicts.

The primitive delays (`CALIBRATION`) were measured with nextpnr-ice40 on the part of
`estimate.PART`, register-to-register inside the estimate's register wrapper. The per-step
formulas of the demapper's short steps (range .. sign) are built from those primitives, not
calibrated one by one; one check (2026-12-01, seed 1): the maxlog datapath alone (stage enables
tied to m_axis_tready) placed at 224 / 206 / 201 / 201 MHz for QPSK / 64 / 256 / 4096-QAM where
the model says 209 / 203 / 197 / 186 MHz. Not modelled: the stage-enable chain of the stream control
(ce_s = !valid_s | ce_s+1 from m_axis_tready, fanning out to every register of a stage, at times
through a global buffer), which measured 7.3 - 9.9 ns at 7 - 10 demapper stages and is then the
real limit; the model's Fmax is optimistic for deep demapper pipelines.
"""

from __future__ import annotations

import math
from typing import Any, Sequence

from .errors import SpecError

#: Measured 2026-12-01 on iCE40 HX8K CT256, Yosys 0.23 (7ce5011c24b) synth_ice40, nextpnr-ice40 0.4-1+b1,
#: seed 1, inside estimate's register wrapper (tests/benchmarks/bench_hardware.py --calibrate reruns it).
#: Registered adders: w = 4, 8, 12, 16, 24, 32 bits -> 2.234, 2.738, 3.438, 3.942, 5.146, 6.350 ns;
#: chains of n LUT4 levels: n = 1, 2, 4, 6 -> 1.90, 2.63, 5.45, 7.05 ns (seed 1);
#: signed a x b multipliers in LUTs: 3x12, 4x14, 5x16, 7x18, 8x20 -> 6.41, 8.30, 8.67, 10.40, 10.87 ns.
CALIBRATION: dict[str, Any] = {
    "part": "iCE40 HX8K CT256",
    "tools": "Yosys 0.23 (git sha1 7ce5011c24b); nextpnr-ice40 0.4-1+b1",
    "date": "2026-12-01",
    #: clock-to-out + setup + one route (ns): the delay of a register-to-register hop
    "register_ns": 0.80,
    #: one LUT4 level with its route (ns)
    "lut_ns": 1.07,
    #: an adder (carry chain) of w bits after the register hop: entry + per bit (ns)
    "add_entry_ns": 0.85,
    "add_bit_ns": 0.147,
    #: an a x b multiply in LUTs after the register hop: entry + per bit of the short and long operand (ns)
    "mul_entry_ns": 2.40,
    "mul_short_bit_ns": 0.62,
    "mul_long_bit_ns": 0.12,
}


def _add(w: int) -> float:
    c = CALIBRATION
    return c["add_entry_ns"] + c["add_bit_ns"] * w


def _lut(levels: int) -> float:
    return CALIBRATION["lut_ns"] * levels


def _mul(a: int, b: int) -> float:
    c = CALIBRATION
    short, long_ = sorted((a, b))
    return c["mul_entry_ns"] + c["mul_short_bit_ns"] * short + c["mul_long_bit_ns"] * long_


def _levels(inputs: int) -> int:
    """LUT4 levels of a function of `inputs` bits (a table lookup or a mux tree)."""
    return max(1, math.ceil(math.log(max(inputs, 2), 4)))


def step_delay(design: Any, role: str, step: str) -> float:
    """Combinational delay (ns) of one logical step of rtl.py, from the widths it works on."""
    spec = design.spec
    w = design.widths
    if role == "mapper":
        k = design.bits
        wout = design.mapper_format.width
        if step == "lookup":
            return _lut(_levels(max(k // 2, 1)) + 1)
        if step == "decode":
            return _lut(_levels(k // 2))
        if step == "level":
            return _mul(max(k // 2, 1), wout) + _add(wout)
        raise ValueError(f"unknown mapper step {step!r}")
    d = spec.demapper
    iw = d.input_width
    m = max((ad.axis.bits for ad in design.axes), default=design.bits)
    mag = w.get("magnitude", (iw + 1, False))[0]
    res = w.get("residual", (iw + 1, False))[0]
    if step == "range":
        # y + (L << f), y - (L << f) and y +- ((L-1) << f): constant adders side by side
        return _add(iw + 2)
    if step == "decide":
        # the clamp muxes of n_hat and e (no adder)
        return _lut(2)
    if step == "competitor":
        # the |dn|, side and gate case tables of (n_hat, sign e)
        return _lut(_levels(m + 1))
    if step == "select":
        # -sign(dn) * e and its gated copies: one LUT level
        return _lut(1)
    if step == "residual":
        # u = (|dn| << f) - sign(dn) * e: one adder
        return _add(res + m + 1)
    if step in ("product", "accumulate"):
        # one level of the adder tree over the partial products u << i
        return _add(mag)
    if step == "fold":
        return m * (_add(iw + 1) + _lut(1))
    if step == "scale":
        sw = design.scale_format.width if design.scale_format else 1
        return _mul(sw, mag)
    if step == "round":
        # the rounding add and the saturation compare (a constant add; its carry out leaves
        # the chain through one LUT) side by side
        pw = w.get("product", (mag, False))[0]
        return _add(pw + 2) + _lut(1)
    if step == "sign":
        # saturation mux and XOR with the sign in one LUT level, then x + neg
        return _lut(1) + _add(d.llr_width)
    if step == "label":
        return _lut(_levels(m))
    if step == "distance":
        return _mul(iw + 1, iw + 1) + _add(w.get("distance", (2 * iw, False))[0])
    if step in ("minimum", "argmin"):
        dist = w.get("distance", (2 * iw, False))[0]
        return math.ceil(math.log2(max(design.constellation.order, 2))) * (_add(dist) + _lut(1))
    raise ValueError(f"unknown demapper step {step!r}")


def segments(delays: Sequence[float], plan: Sequence[int]) -> list[float]:
    """Register-to-register delays (ns) of a register plan (registers after each step)."""
    out, acc = [], 0.0
    for dly, regs in zip(delays, plan):
        acc += dly
        if regs:
            out.append(acc + CALIBRATION["register_ns"])
            acc = 0.0
    if acc:
        out.append(acc + CALIBRATION["register_ns"])
    return out


def predicted_fmax(design: Any, role: str, steps: Sequence[str], stages: int) -> float:
    """The model's Fmax (MHz) of a module with `stages` registers (0: one per step)."""
    from .rtl import place_registers  # noqa: PLC0415 (rtl imports this module lazily too)
    delays = [step_delay(design, role, s) for s in steps]
    return 1000.0 / max(segments(delays, place_registers(len(steps), stages)))


def stages_for(design: Any, role: str, steps: Sequence[str]) -> int:
    """Fewest register stages whose predicted Fmax meets interface.target_mhz (SpecError if none)."""
    target = float(design.spec.interface.target_mhz)
    best = 0.0
    for stages in range(1, len(steps) + 1):
        fmax = predicted_fmax(design, role, steps, stages)
        best = max(best, fmax)
        if fmax >= target:
            return stages
    delays = {s: step_delay(design, role, s) for s in steps}
    slow = max(delays, key=delays.get)
    raise SpecError("interface.target_mhz", design.spec.interface.target_mhz,
                    f"at most {math.floor(best)} MHz for this design on {CALIBRATION['part']} "
                    f"(the {role} step '{slow}' alone takes {delays[slow] + CALIBRATION['register_ns']:.1f} ns)")


def choose_stages(design: Any) -> tuple[int, int]:
    """(mapper_stages, demapper_stages) for interface.target_mhz (SpecError when unreachable)."""
    from .rtl import contexts  # noqa: PLC0415
    ctx = contexts(design)
    return tuple(stages_for(design, role, [st.name for st in ctx[role]["steps"]])  # type: ignore[return-value]
                 for role in ("mapper", "demapper"))


__all__ = ["CALIBRATION", "step_delay", "segments", "predicted_fmax", "stages_for", "choose_stages"]
