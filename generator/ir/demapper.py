"""Demapper datapaths: the model's steps (`qamsmith.model.steps`) written as IR, operation for operation.

Per-axis designs (every named labeling) trace each axis' signals over every input code, so each
width is the exact range the model gives; the steps of both axes run side by side:

* maxlog: range (the adders of y and constants), decide (the clamp muxes: n_hat and the residual
  e), competitor (tables of the decided level: the competitor's distance |dn| and side, the gates
  of the partial products, the sign), select (-sign(dn) e and the gated copies), residual
  (u = |(dn << f) - e|, one adder), product / accumulate (the shift-add tree of R = |dn| u over the
  bits of |dn| that can be 1);
* folded: fold (t0 = y, tj = 2^(m-j) 2^f - |t(j-1)|);
* hard: range, decide, label.

The 2-D search (tables that are not products) computes a squared distance to every point and
minimum trees. Every soft algorithm ends in the same output stage: scale (the reliability
multiply), round (the rounding add and the saturation compare beside it), sign.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..model import AxisDemap, Design, OutputStage, decide
from . import cross
from .build import Builder
from .core import Const, Datapath, Field, Operand, Signal, width_for
from .modes import mode_input, mode_of_code, mode_select


@dataclass
class _Axis:
    """One axis while it is being built: its input and the signals later steps read."""

    c: str                      # 'i' or 'q'
    ad: AxisDemap
    y: Signal
    s: dict[str, Signal] = field(default_factory=dict)

    @property
    def levels(self) -> int:
        return self.ad.levels

    @property
    def bits(self) -> int:
        return self.ad.bits


@dataclass
class SoftBit:
    """One soft output before the output stage: its magnitude and sign (or, two levels per axis, the signed
    value v whose LLR is +v or -v), and its output field."""

    ident: str
    mag: Signal | None
    neg: Signal | None
    lsb: int
    linear: Signal | None = None
    negate: bool = False


def demapper_datapath(design: Design) -> Datapath:
    """The demapper's datapath: input {S, Q, I}, output k LLR fields (b0 most significant) or k hard bits."""
    if design.cross is not None:              # Smith's cross: ir.cross, then the same output stage
        if design.spec.demapper.algorithm == "hard":
            return cross.hard_datapath(design)
        soft = cross.soft_bits(design)
        llrs = [SoftBit(ident, mag, neg, lsb) for ident, mag, neg, lsb in soft.bits]
        outs = output_stage(soft.builder, design.output_stage, llrs, soft.scale, design.spec.demapper.llr_width)
        return soft.builder.build([Field(sig, lsb) for sig, lsb in outs], soft.out_width, soft.in_width)
    d = design.spec.demapper
    W, k = d.input_width, design.bits
    hard = d.algorithm == "hard"
    sw = design.scale_format.width if design.scale_format else 0
    b = Builder()
    codes = design.input_codes
    if design.modes:                            # every input code paired with every mode code
        codes = np.tile(codes, 1 << design.mode_width)
    if design.per_axis:
        axes = [_Axis(c, ad, b.input(f"y_{c}", W, True, n * W, doc=f"equalized {c.upper()} input code",
                                     domain=c, values=codes))
                for n, (c, ad) in enumerate(zip("iq", design.axes))]
    else:
        axes = []
        yi = b.input("y_i", W, True, 0, doc="equalized I input code")
        yq = b.input("y_q", W, True, W, doc="equalized Q input code")
    scale = (b.input("scale", sw, False, 2 * W, doc="unsigned reliability code", domain="scale",
                     values=np.arange(1 << sw)) if sw and not hard else None)
    lw = d.llr_width
    in_width = 2 * W + sw
    if design.modes:
        mode = mode_input(b, design, in_width, {a.c: design.input_codes.size for a in axes})
        return _modes_datapath(b, design, axes, scale, mode, in_width + design.mode_width)
    if design.per_axis and all(a.levels == 2 for a in axes):
        # two levels per axis: the max-log (and folded) LLR is +-y itself, the hard decision y's sign
        if hard:
            return b.build(_linear_hard(b, axes, k), k, in_width)
        llrs = [SoftBit(f"{a.c}0", None, None, (k - 1 - a.ad.axis.label_bits[0]) * lw, linear=a.y,
                        negate=bool(a.ad.label_bit_of_level(0)[1])) for a in axes]
    elif design.per_axis:
        f = d.input_fraction
        if d.algorithm == "folded":
            llrs = _folded(b, design, axes, f)
        else:
            _range_step(b, axes, f, residual=d.algorithm == "maxlog")
            _decide_step(b, axes, f, residual=d.algorithm == "maxlog")
            if hard:
                return b.build(_label_step(b, axes, k), k, in_width)
            llrs = _maxlog(b, design, axes, f)
    else:
        dist = _distances(b, design, yi, yq)
        if hard:
            return b.build(_argmin(b, dist, k), k, in_width)
        llrs = _search_soft(b, design, dist)
    outs = output_stage(b, design.output_stage, llrs, scale, lw)
    return b.build([Field(sig, lsb) for sig, lsb in outs], k * lw, in_width)


# --------------------------------------------------------------------------- decide


def _range_step(b: Builder, axes: list[_Axis], f: int, residual: bool) -> None:
    b.step("range", "per axis: y + (L << f), whose bits give n_hat, and the compares of the clamps; "
                    "the adders side by side")
    for a in axes:
        L, m, y, c = a.levels, a.bits, a.y, a.c
        total = b.add(f"sum_{c}", y, L << f)
        a.s["nm"] = b.resize(f"nm_{c}", total[f + m:f + 1], m, False,
                             note=f"{c.upper()} axis ({L} levels): n = clamp((y + (L << {f})) >>> {f + 1}, 0, {L - 1})")
        if total.lo < 0:
            a.s["lo"] = b.resize(f"lo_{c}", total.msb, 1, False, note="y below the lowest decision region")
        if (total.hi >> (f + 1)) > L - 1:
            hsum = b.add(f"hsum_{c}", y, -(L << f))
            a.s["hs"] = b.resize(f"hs_{c}", hsum.msb, 1, False, note=f"y < L << {f}: no high clamp")
        if residual:
            a.s["yl"] = b.resize(f"yl_{c}", y[f:0], f + 1, False,
                                 note=f"the low {f + 1} bits of y: the residual inside the levels is yl - 2^{f}")
            width = _residual_width(a, f, b)
            if "lo" in a.s:
                a.s["elo"] = b.add(f"elo_{c}", y, (L - 1) << f, width=width, signed=True,
                                   note="residual at the lowest level, y + (L-1) << f")
            if "hs" in a.s:
                a.s["ehi"] = b.sub(f"ehi_{c}", y, (L - 1) << f, width=width, signed=True,
                                   note="residual at the highest level, y - (L-1) << f")


def _residual_width(a: _Axis, f: int, b: Builder) -> int:
    """Width of the residual e = y - a_hat over every input code (the model's own decide step)."""
    e = decide(a.ad, b.values(a.y), f)[1]
    return width_for(int(e.min()), int(e.max()))[0]


def _decide_step(b: Builder, axes: list[_Axis], f: int, residual: bool) -> None:
    b.step("decide", "per axis: the clamp muxes of n_hat" + (" and of the residual e" if residual else ""))
    for a in axes:
        c, L = a.c, a.levels
        hi, lo = a.s.get("hs"), a.s.get("lo")
        n = a.s["nm"]
        if hi is not None:
            n = b.mux(f"nh_{c}" if lo is not None else f"n_{c}", hi, n, L - 1, note="the high clamp")
        if lo is not None:
            n = b.mux(f"n_{c}", lo, 0, n, note="the low clamp")
        a.s["n"] = n
        if not residual:
            continue
        width = _residual_width(a, f, b)
        last = "hs" if lo is None else "lo"
        e = b.logic(f"e_{c}" if hi is None and lo is None else f"emid_{c}", "xor", a.s["yl"], Const(1 << f, f + 1),
                    width=f + 1, signed=True, note=f"yl - 2^{f}: the residual inside the levels (top bit flipped)")
        if hi is not None:
            e = b.mux(f"e_{c}" if last == "hs" else f"eh_{c}", hi, e, a.s["ehi"], width=width, signed=True)
        if lo is not None:
            e = b.mux(f"e_{c}", lo, a.s["elo"], e, width=width, signed=True)
        a.s["e"] = e


def _linear_hard(b: Builder, axes: list[_Axis], k: int) -> list[Field]:
    """hard, two levels per axis: the label bit of the decided level is y's sign bit or its inverse."""
    b.step("label", "per axis: the decided level's label bit from y's sign")
    outs = []
    for a in axes:
        lb = a.ad.axis.label_bits[0]
        upper = int(a.ad.label_bit_of_level(0)[1])          # the bit of the level at +1 (y >= 0)
        bit = (b.invert(f"hard_{a.c}0", a.y.msb, note=f"label bit b{lb}: y >= 0") if upper
               else b.resize(f"hard_{a.c}0", a.y.msb, 1, False, note=f"label bit b{lb}: y < 0"))
        outs.append(Field(bit, k - 1 - lb))
    return outs


def _label_step(b: Builder, axes: list[_Axis], k: int) -> list[Field]:
    """hard: the label bits of the decided level (one-bit tables)."""
    b.step("label", "per axis: the label bits of the decided level")
    outs = []
    for a in axes:
        for j, lb in enumerate(a.ad.axis.label_bits):
            bit = b.lookup(f"hard_{a.c}{j}", a.s["n"], a.ad.label_bit_of_level(j),
                           note=f"label bit b{lb} ({a.c.upper()} axis bit {j})")
            outs.append(Field(bit, k - 1 - lb))
    return outs


# --------------------------------------------------------------------------- maxlog


@dataclass
class _Bit:
    """Static structure of one axis bit's metric R = |dn| u from its competitor table."""

    ident: str
    j: int
    uses_sign: bool
    #: the table entries, keyed by n (or (n << 1) | sign of e)
    dn: np.ndarray
    leaves: list[tuple[int, bool]]          # (i, gated): partial products u << i
    need_u: bool
    dp_var: bool
    pos_var: bool
    pos_always: bool
    #: (|dn| << f) + (dn > 0) of each table entry
    dshp: np.ndarray

    @property
    def gated(self) -> list[int]:
        return [i for i, g in self.leaves if g]


def _bit_structure(a: _Axis, j: int, f: int) -> _Bit:
    comp = a.ad.competitor[j]
    uses_sign = a.ad.uses_sign[j]
    table = comp.reshape(-1) if uses_sign else comp[:, 0]
    adn = np.abs(table)
    if np.any(adn == 0):
        raise ValueError("a competitor offset of zero levels")
    or_bits = int(np.bitwise_or.reduce(adn))
    and_bits = int(np.bitwise_and.reduce(adn))
    leaves = [(i, not (and_bits >> i) & 1) for i in range(int(adn.max()).bit_length()) if (or_bits >> i) & 1]
    if len(leaves) == 1 and leaves[0][1]:
        raise ValueError("a single gated partial product")
    need_u = any(not g for _, g in leaves)
    pos = table > 0
    return _Bit(f"{a.c}{j}", j, uses_sign, table, leaves, need_u,
                dp_var=len(set(_dshp(table, f).tolist())) > 1, pos_var=bool(pos.any() and not pos.all()),
                pos_always=bool(pos.all()), dshp=_dshp(table, f))


def _mode_bit_structure(a: _Axis, c: int, j: int, f: int, design: Design) -> _Bit:
    """One axis bit of an adaptive core: tables keyed by {mode code, n_hat} (model.modes).

    Mode m decides n_m = n_hat >> s; its competitor offset in the largest order's levels is D = dn_m << s, and
    its residual e_m = e + 2^f o with o = 2 (n_hat mod 2^s) + 1 - 2^s, so u = |(D << f) - e_m| =
    ((|D| - sign(D) o) << f) + (D > 0 ? ~e + 1 : e): the offset goes into the table, e stays the largest order's.
    A mode without this bit copies the largest mode's entries (its LLR field is zero at the output).
    """
    L = a.levels
    dn_tab, dp_tab = [], []
    top = design.modes[-1]
    for code in range(1 << design.mode_width):
        m = design.modes[mode_of_code(design, code)]
        if c >= len(m.axes) or j >= m.axes[c].bits:
            m = top
        ad, sh = m.axes[c], m.shift
        if ad.uses_sign[j]:
            raise ValueError("an adaptive core needs competitors that do not depend on the residual's sign")
        n = np.arange(L)
        dn = ad.competitor[j, n >> sh, 0] << sh
        o = 2 * (n & ((1 << sh) - 1)) + 1 - (1 << sh)
        dn_tab.append(dn)
        dp_tab.append(((np.abs(dn) - np.sign(dn) * o) << f) + (dn > 0))
    table, dshp = np.concatenate(dn_tab), np.concatenate(dp_tab)
    adn = np.abs(table)
    or_bits = int(np.bitwise_or.reduce(adn))
    and_bits = int(np.bitwise_and.reduce(adn))
    leaves = [(i, not (and_bits >> i) & 1) for i in range(int(adn.max()).bit_length()) if (or_bits >> i) & 1]
    pos = table > 0
    return _Bit(f"{a.c}{j}", j, False, table, leaves, any(not g for _, g in leaves),
                dp_var=len(set(dshp.tolist())) > 1, pos_var=bool(pos.any() and not pos.all()),
                pos_always=bool(pos.all()), dshp=dshp)


def _mode_sources(design: Design, code: int) -> dict[int, str]:
    """Label bit -> the ident ('i0', 'q2', ...) of the axis bit that carries it, in the mode of `code`."""
    m = design.modes[mode_of_code(design, code)]
    return {lb: f"{'iq'[c]}{j}" for c, ad in enumerate(m.axes) for j, lb in enumerate(ad.axis.label_bits)}


def _route(b: Builder, design: Design, mode: Signal, sources: dict[str, Signal], width: int,
           signed: bool, what: str) -> list[Signal | Const]:
    """Per label bit of the largest order: the signal of the axis bit that carries it in the symbol's mode, or zero."""
    out = []
    codes = range(1 << mode.width)
    for lb in range(design.bits):
        has = [lb in _mode_sources(design, code) for code in codes]
        top = sources[_mode_sources(design, len(design.modes) - 1)[lb]]
        # a mode without this bit selects any source (the largest mode's), then a gate zeroes it: printed as an
        # AND, so synthesis infers no register reset from a mode decode (a slow global net on iCE40)
        leaves = [sources[_mode_sources(design, code)[lb]] if h else top for code, h in zip(codes, has)]
        note = f"{what} of label bit b{lb} in the symbol's mode"
        if all(has):
            out.append(mode_select(b, f"{what}_b{lb}", mode, leaves, width=width, signed=signed, note=note))
            continue
        value = mode_select(b, f"{what}_sel_b{lb}", mode, leaves, width=width, signed=signed, note=note)
        valid = b.lookup(f"has_b{lb}" if what == "llr" else f"{what}_has_b{lb}", mode, [int(h) for h in has],
                         note=f"the symbol's mode has label bit b{lb}")
        out.append(b.gate(f"{what}_b{lb}", valid, value, width=width, signed=signed,
                          note=note + " (zero past its bits)"))
    for sig in out:             # each is a whole output field: a narrower signal would leave its top bits unset
        if sig.width != width:
            raise ValueError(f"{sig.name}: {sig.width} bits for a {width}-bit field")
    return out


def _modes_datapath(b: Builder, design: Design, axes: list[_Axis], scale: Signal | None, mode: Signal,
                    in_width: int) -> Datapath:
    """An adaptive core: the largest order's datapath with tables keyed by {mode, n_hat} (maxlog), the magnitude
    shifted by the mode's s (folded), then every label bit's field from the axis bit that carries it in the
    symbol's mode, zero past the mode's bits; the mode passes through above the fields."""
    d = design.spec.demapper
    f, k, lw = d.input_fraction, design.bits, d.llr_width
    hard = d.algorithm == "hard"
    if all(a.levels == 2 for a in axes):
        if hard:
            fields = _linear_hard(b, axes, k)
        llrs = [SoftBit(f"{a.c}0", None, None, 0, linear=a.y, negate=bool(a.ad.label_bit_of_level(0)[1]))
                for a in axes]
    elif d.algorithm == "folded":
        llrs = _mode_shifts(b, design, mode, _folded(b, design, axes, f))
    else:
        _range_step(b, axes, f, residual=not hard)
        _decide_step(b, axes, f, residual=not hard)
        if hard:
            fields = _label_step(b, axes, k)
        else:
            llrs = _maxlog(b, design, axes, f, mode)
    if hard:
        by_ident = {_hard_ident(design, k - 1 - f_.lsb): f_.value for f_ in fields}
        routed = _route(b, design, mode, by_ident, 1, False, "hard")
        outs = [Field(v, k - 1 - lb) for lb, v in enumerate(routed)]
        return b.build(outs + [Field(mode, k)], k + design.mode_width, in_width)
    stage = output_stage(b, design.output_stage, llrs, scale, lw)
    b.step("route", "per label bit: the LLR of the axis bit that carries it in the symbol's mode, zero past its bits")
    routed = _route(b, design, mode, {lr.ident: sig for lr, (sig, _) in zip(llrs, stage)}, lw, True, "llr")
    outs = [Field(v, (k - 1 - lb) * lw) for lb, v in enumerate(routed)]
    return b.build(outs + [Field(mode, k * lw)], k * lw + design.mode_width, in_width)


def _hard_ident(design: Design, lb: int) -> str:
    """The ident of the largest order's axis bit that carries label bit lb."""
    return _mode_sources(design, len(design.modes) - 1)[lb]


def _mode_shifts(b: Builder, design: Design, mode: Signal, llrs: list[SoftBit]) -> list[SoftBit]:
    """Folded: each magnitude shifted left by the symbol's mode's s (the metric in the largest order's units)."""
    out = []
    for lr in llrs:
        shifted: dict[int, Signal] = {0: lr.mag}
        leaves = []
        for code in range(1 << mode.width):
            sh = design.modes[mode_of_code(design, code)].shift
            if sh not in shifted:
                shifted[sh] = b.concat(f"{lr.mag.name}_s{sh}", lr.mag, Const(0, sh), note=f"|t| << {sh}")
            leaves.append(shifted[sh])
        mag = mode_select(b, f"mags_{lr.ident}", mode, leaves, note="|t| << s of the symbol's mode")
        out.append(SoftBit(lr.ident, mag, lr.neg, lr.lsb))
    return out


def _dshp(dn: np.ndarray, f: int) -> np.ndarray:
    """(|dn| << f) + (dn > 0): with ~e in place of -e - 1, u = that + (dn > 0 ? ~e : e)."""
    return (np.abs(dn) << f) + (dn > 0)


def _maxlog(b: Builder, design: Design, axes: list[_Axis], f: int, mode: Signal | None = None) -> list[SoftBit]:
    k = design.bits
    lw = design.spec.demapper.llr_width
    if mode is None:
        bits = {a.c: [_bit_structure(a, j, f) for j in range(a.bits)] for a in axes}
    else:
        bits = {a.c: [_mode_bit_structure(a, c, j, f, design) for j in range(a.bits)] for c, a in enumerate(axes)}
        b.step("key", "per axis: the table key {mode, n_hat}")
        for a in axes:
            a.s["km"] = b.concat(f"km_{a.c}", mode, a.s["n"], note="table key {mode, n_hat}")
    _competitor_step(b, axes, bits, f)
    _select_step(b, axes, bits)
    _residual_step(b, axes, bits, f)
    _tree_steps(b, axes, bits)
    return [SoftBit(bt.ident, a.s[f"mag_{bt.ident}"], a.s[f"neg_{bt.ident}"], (k - 1 - a.ad.axis.label_bits[bt.j]) * lw)
            for a in axes for bt in bits[a.c]]


def _competitor_step(b: Builder, axes: list[_Axis], bits: dict[str, list[_Bit]], f: int) -> None:
    b.step("competitor", "per axis bit: tables of the decided level (and the residual's sign): the "
                         "nearest competitor's |dn| and side, the gates of the partial products, the LLR's sign")
    for a in axes:
        n = a.s["n"]
        key_s = None
        if any(bt.uses_sign for bt in bits[a.c]):
            key_s = b.concat(f"ks_{a.c}", n, a.s["e"].msb, note="table key {n_hat, e < 0}")
        for bt in bits[a.c]:
            key = key_s if bt.uses_sign else a.s.get("km", n)
            ident = bt.ident
            lb = a.ad.axis.label_bits[bt.j]
            a.s[f"neg_{ident}"] = b.lookup(f"neg_{ident}", n, a.ad.label_bit_of_level(bt.j),
                                           note=f"axis bit {bt.j} (label bit b{lb}): sign, the decided level's bit")
            uses = bt.need_u or bool(bt.gated)
            if uses and bt.dp_var:
                a.s[f"dp_{ident}"] = b.lookup(f"dp_{ident}", key, bt.dshp,
                                              note=f"(|dn| << {f}) + (dn > 0), dn the nearest competitor"
                                              + (" (in the largest order's levels, less the mode's level offset)"
                                                 if "km" in a.s else ""))
            if uses and bt.pos_var:
                a.s[f"pos_{ident}"] = b.lookup(f"pos_{ident}", key, (bt.dn > 0).astype(np.int64),
                                               note="the competitor is on the right (dn > 0)")
            for i in bt.gated:
                a.s[f"g_{ident}_{i}"] = b.lookup(f"g_{ident}_{i}", key, (np.abs(bt.dn) >> i) & 1,
                                                 note=f"bit {i} of |dn|: the gate of u << {i}")


def _select_step(b: Builder, axes: list[_Axis], bits: dict[str, list[_Bit]]) -> None:
    b.step("select", "per axis bit: dn > 0 ? ~e : e (the +1 of -e sits in the table's constant) and the "
                     "gated copies as AND terms (a mux to zero in front of a register would become its reset)")
    for a in axes:
        e = a.s["e"]
        for bt in bits[a.c]:
            if not (bt.need_u or bt.gated):
                continue
            ident = bt.ident
            se = e
            if bt.pos_var:
                se = b.flip_if(f"se_{ident}", a.s[f"pos_{ident}"], e, note="-sign(dn) e, minus one where dn > 0")
            elif bt.pos_always:
                se = b.flip_if(f"se_{ident}", 1, e, note="~e = -e - 1: the competitor is always on the right")
            a.s[f"se_{ident}"] = se
            for i in bt.gated:
                g = a.s[f"g_{ident}_{i}"]
                a.s[f"gs_{ident}_{i}"] = b.gate(f"gs_{ident}_{i}", g, se)
                a.s[f"ga_{ident}_{i}"] = b.gate(f"ga_{ident}_{i}", g, a.s.get(f"dp_{ident}", bt.dshp[0]))


def _residual_step(b: Builder, axes: list[_Axis], bits: dict[str, list[_Bit]], f: int) -> None:
    """u = (|dn| << f) - sign(dn) e >= 0 and the gated copies w_i = (bit i of |dn|) ? u : 0; R = u << i
    straight away where |dn| is one power of two."""
    b.step("residual", "per axis bit: u = |(dn << f) - e| = ((|dn| << f) + (dn > 0)) + (dn > 0 ? ~e : e), "
                       "one adder (and its gated copies)")
    for a in axes:
        for bt in bits[a.c]:
            ident = bt.ident
            se = a.s[f"se_{ident}"]
            if bt.need_u:
                u = b.add(f"u_{ident}", a.s.get(f"dp_{ident}", bt.dshp[0]), se,
                          note=f"axis bit {bt.j}: u = |(dn << {f}) - e| >= 0")
                a.s[f"u_{ident}"] = u
                if len(bt.leaves) == 1:
                    i = bt.leaves[0][0]
                    a.s[f"mag_{ident}"] = (b.concat(f"mag_{ident}", u, Const(0, i), note=f"|dn| = {1 << i}: R = u << {i}")
                                           if i else u)
            for i in bt.gated:
                a.s[f"w_{ident}_{i}"] = b.add(f"w_{ident}_{i}", a.s[f"ga_{ident}_{i}"], a.s[f"gs_{ident}_{i}"],
                                              note=f"gated copy: (bit {i} of |dn|) ? u : 0")


def _tree_steps(b: Builder, axes: list[_Axis], bits: dict[str, list[_Bit]]) -> None:
    """The adder tree of R = sum of u << i over the leaves, one step per level, both axes side by side."""
    terms: dict[str, list[Signal]] = {}
    for a in axes:
        for bt in bits[a.c]:
            if f"mag_{bt.ident}" not in a.s:
                terms[bt.ident] = [a.s[f"w_{bt.ident}_{i}"] if g else a.s[f"u_{bt.ident}"] for i, g in bt.leaves]
    depth = 0
    while terms:
        b.step("product" if depth == 0 else "accumulate",
               "R = |dn| u: the sum of u << i over the bits i of |dn| that can be 1" if depth == 0 else
               "the next level of the adder tree")
        for a in axes:
            for bt in bits[a.c]:
                level = terms.get(bt.ident)
                if level is None:
                    continue
                if depth == 0:
                    level = [b.concat(f"pp_{bt.ident}_{i}", t, Const(0, i)) if i else t
                             for t, (i, _) in zip(level, bt.leaves)]
                nxt = []
                for x in range(0, len(level), 2):
                    pair = level[x:x + 2]
                    name = f"mag_{bt.ident}" if len(level) <= 2 else f"acc_{bt.ident}_{depth}_{x // 2}"
                    nxt.append(b.add(name, pair[0], pair[1]) if len(pair) == 2 else pair[0])
                if len(nxt) == 1:
                    a.s[f"mag_{bt.ident}"] = nxt[0]
                    del terms[bt.ident]
                else:
                    terms[bt.ident] = nxt
        depth += 1


# --------------------------------------------------------------------------- folded


def _folded(b: Builder, design: Design, axes: list[_Axis], f: int) -> list[SoftBit]:
    k = design.bits
    lw = design.spec.demapper.llr_width
    b.step("fold", "per axis: t0 = y, tj = 2^(m-j) 2^f - |t(j-1)|; |tj| is the magnitude, the sign "
                   "tj for an inverted axis bit and -tj otherwise")
    out = []
    for a in axes:
        m = a.bits
        t = a.y
        for j in range(m):
            ident = f"{a.c}{j}"
            if j:
                t = b.sub(f"t_{ident}", (1 << (m - j)) << f, out[-1].mag,
                          note=f"t{j} = {1 << (m - j)} * 2^{f} - |t{j - 1}|")
            nt = b.sub(f"nt_{ident}", 0, t)
            mag = b.mux(f"mag_{ident}", t.msb, nt, t, note=f"|t{j}|")
            if a.ad.inverted[j]:
                neg = b.resize(f"neg_{ident}", t.msb, 1, False, note=f"sign: t{j} (an inverted axis bit)")
            else:
                neg = b.compare(f"neg_{ident}", "gt", t, 0, note=f"sign: -t{j}")
            out.append(SoftBit(ident, mag, neg, (k - 1 - a.ad.axis.label_bits[j]) * lw))
    return out


# --------------------------------------------------------------------------- 2-D search


def min_tree(b: Builder, prefix: str, leaves: list[tuple[Signal, int]], *, with_label: int = 0):
    """A balanced minimum tree; ties go to the left (the lower label). Returns (minimum, label or None)."""
    level: list[tuple[Signal, Signal | int]] = [(d, lab) for d, lab in leaves]
    count = 0
    while len(level) > 1:
        nxt = []
        for x in range(0, len(level) - 1, 2):
            (ld, ll), (rd, rl) = level[x], level[x + 1]
            name = f"{prefix}_{count}"
            count += 1
            c = b.compare(f"{name}_c", "le", ld, rd)
            root = len(level) == 2
            # the root of an argmin tree needs only the label, a minimum tree only the distance
            md = None if (with_label and root) else b.mux(f"{name}_d", c, ld, rd)
            ml = b.mux(f"{name}_l", c, ll, rl, width=with_label, signed=False) if with_label else 0
            nxt.append((md, ml))
        if len(level) % 2:
            nxt.append(level[-1])
        level = nxt
    return level[0]


def _distances(b: Builder, design: Design, yi: Signal, yq: Signal) -> list[Signal]:
    b.step("distance", "the squared distance to every point, in input codes squared")
    out = []
    for lab, (ci, cq) in enumerate(zip(design.search_i.tolist(), design.search_q.tolist())):
        di = b.sub(f"di_{lab}", yi, ci, note=f"point {lab} at ({ci}, {cq})")
        dq = b.sub(f"dq_{lab}", yq, cq)
        si = b.mul(f"si_{lab}", di, di)
        sq = b.mul(f"sq_{lab}", dq, dq)
        out.append(b.add(f"d_{lab}", si, sq))
    return out


def _search_soft(b: Builder, design: Design, dist: list[Signal]) -> list[SoftBit]:
    k = design.bits
    lw = design.spec.demapper.llr_width
    b.step("minimum", "per label bit: D = min over the points with the bit 1 - min over the points with the bit 0")
    out = []
    for bit in range(k):
        ones = [(dist[lab], lab) for lab in range(len(dist)) if (lab >> (k - 1 - bit)) & 1]
        zeros = [(dist[lab], lab) for lab in range(len(dist)) if not (lab >> (k - 1 - bit)) & 1]
        m1, _ = min_tree(b, f"m1_{bit}", ones)
        m0, _ = min_tree(b, f"m0_{bit}", zeros)
        dif = b.sub(f"dif_{bit}", m1, m0, note=f"label bit b{bit}")
        nd = b.sub(f"nd_{bit}", 0, dif)
        mag = b.mux(f"mag_{bit}", dif.msb, nd, dif)
        neg = b.resize(f"neg_{bit}", dif.msb, 1, False)
        out.append(SoftBit(str(bit), mag, neg, (k - 1 - bit) * lw))
    return out


def _argmin(b: Builder, dist: list[Signal], k: int) -> list[Field]:
    b.step("argmin", "the nearest point's label; ties go to the lower label")
    _, label = min_tree(b, "am", [(d, lab) for lab, d in enumerate(dist)], with_label=k)
    return [Field(label, 0)]


# --------------------------------------------------------------------------- output stage


def _bit(v: Signal, i: int) -> Bits:
    """Bit i of a signed value (beyond its width: the sign, as sign extension gives)."""
    return v[min(i, v.width - 1)]


def output_stage(b: Builder, stage: OutputStage, llrs: list[SoftBit], scale: Signal | None,
                 lw: int) -> list[tuple[Signal, int]]:
    """The last steps, from a magnitude and sign (`_magnitude_stage`) or from a signed value (`_signed_stage`)."""
    if any(lr.linear is None for lr in llrs):
        return _magnitude_stage(b, stage, llrs, scale, lw)
    return _signed_stage(b, stage, llrs, scale, lw)


def _magnitude_stage(b: Builder, stage: OutputStage, llrs: list[SoftBit], scale: Signal | None,
                     lw: int) -> list[tuple[Signal, int]]:
    """A magnitude and its sign: scale (P = |metric| S), round (the rounding add, the saturation compare
    beside it), sign (saturation mux and x = {0, s} ^ neg in one LUT level, then x + neg in one adder)."""
    ps = {}
    if scale is not None:
        b.step("scale", "the reliability scale: one multiply per LLR, P = |metric| * S")
        for lr in llrs:
            ps[lr.ident] = b.mul(f"p_{lr.ident}", lr.mag, scale)
    else:
        ps = {lr.ident: lr.mag for lr in llrs}
    sh = stage.shift
    b.step("round", f"the rounding shift by {sh} ({stage.rounding}); the saturation compare runs beside the add")
    vs, ovfs = {}, {}
    for lr in llrs:
        vs[lr.ident], ovfs[lr.ident] = _round_magnitude(b, lr.ident, ps[lr.ident], sh, stage, lw)
    b.step("sign", f"symmetric saturation to +-{stage.llr_max} and the sign: x = {{0, s}} ^ neg in one LUT "
                   "level, then -s = ~s + 1 in one adder")
    out = []
    for lr in llrs:
        v, ovf = vs[lr.ident], ovfs[lr.ident]
        s = b.mux(f"s_{lr.ident}", ovf, stage.llr_max, v, width=lw - 1, signed=False) if ovf is not None else v
        x = b.flip_if(f"x_{lr.ident}", lr.neg, s, width=lw, signed=True)
        out.append((b.add(f"llr_{lr.ident}", x, lr.neg, width=lw, signed=True,
                          note=f"LLR {lr.ident}: positive means bit 0 is more likely"), lr.lsb))
    return out


def _round_magnitude(b: Builder, ident: str, p: Signal, sh: int, stage: OutputStage, lw: int) -> tuple[Signal | Const, Signal | None]:
    """v = round(p / 2^sh) with its saturation flag (v > llr_max), or the flag None when v never exceeds it."""
    top = stage.llr_max
    if sh <= 0:
        v = b.concat(f"v_{ident}", p, Const(0, -sh)) if sh < 0 else p
        if v.hi <= top:
            return v, None
        ovf = b.reduce(f"ovf_{ident}", "or", v[v.width - 1:lw - 1], note="v > the largest LLR")
        return b.resize(f"vo_{ident}", v[lw - 2:0], lw - 1, False), ovf
    half = 0 if stage.rounding == "toward-zero" else 1 << (sh - 1)    # the magnitude: toward zero is a plain shift
    hval = max(half - (1 if stage.rounding == "half-even" else 0), 0)
    odd = stage.rounding == "half-even" and sh < p.width
    if odd:
        rhalf = b.mux(f"rhalf_{ident}", p[sh], hval + 1, hval, note="half-even: 2^(sh-1) - 1 + p[sh]")
        rsum = b.add(f"rsum_{ident}", p, rhalf)
    elif hval:
        rsum = b.add(f"rsum_{ident}", p, hval)
    else:
        rsum = p
    if rsum.width <= sh:                     # every product rounds to zero
        return Const(0, lw - 1), None
    v_hi = rsum.hi >> sh
    if v_hi <= top:
        return b.resize(f"vo_{ident}", rsum[rsum.width - 1:sh], lw - 1, False), None
    # saturation: p >= 2^(lw-1+sh) - (rounding constant), the carry out of p + (2^cw - threshold)
    cw = p.width + 1
    limit = (1 << (lw - 1 + sh)) - hval
    oc = b.add(f"oc_{ident}", p, (1 << cw) - min(limit, (1 << cw) - 1), width=cw + 1, signed=False)
    if odd:
        od = b.add(f"od_{ident}", p, (1 << cw) - min(limit - 1, (1 << cw) - 1), width=cw + 1, signed=False)
        ovf = b.mux(f"ovf_{ident}", p[sh], od[cw], oc[cw])
    else:
        ovf = b.resize(f"ovf_{ident}", oc[cw], 1, False)
    return b.resize(f"vo_{ident}", rsum[sh + lw - 2:sh], lw - 1, False), ovf


def _signed_stage(b: Builder, stage: OutputStage, llrs: list[SoftBit], scale: Signal | None,
                  lw: int) -> list[tuple[Signal, int]]:
    """A signed value whose LLR is +-v (two levels per axis): scale (P = v S), round (one adder: t = P + C,
    C a rounding constant chosen by the sign), saturate (r = (t >>> shift) xor sign, then symmetric
    saturation from r's top bits; the xor merges into those LUTs)."""
    src: dict[str, Signal] = {}
    if scale is not None:
        b.step("scale", "the reliability scale: one multiply per LLR, P = metric * S")
        for lr in llrs:
            base = lr.linear if lr.linear is not None else lr.mag
            src[lr.ident] = b.mul(f"p_{lr.ident}", base, scale)
    else:
        src = {lr.ident: (lr.linear if lr.linear is not None else lr.mag) for lr in llrs}
    sh = stage.shift
    b.step("round", f"t = P + C: the rounding by 2^{sh} ({stage.rounding}) and the sign in one adder, C chosen by "
                    "the sign (for a negative LLR, ~floor((P - K) / 2^shift) = -round(P / 2^shift))")
    ts = {lr.ident: _round(b, lr, src[lr.ident], sh, stage.rounding) for lr in llrs}
    b.step("saturate", f"r = (t >>> {sh}) xor sign, then symmetric saturation to +-{stage.llr_max} from r's top bits")
    out = []
    for lr in llrs:
        t, flip = ts[lr.ident]
        r = _shift_and_sign(b, lr.ident, t, sh, flip)
        out.append((_saturate(b, lr.ident, r, lw, stage.llr_max), lr.lsb))
    return out


def _round(b: Builder, lr: SoftBit, p: Signal, sh: int, rounding: str) -> tuple[Signal, Operand | None]:
    """t = P + C (the rounding constant chosen by the sign), and the flag that inverts t >>> shift (None: never).

    A magnitude P >= 0 with sign flag neg (H = 2^(shift-1), D = 2^shift): half-away C = neg ? -H : H;
    toward-zero C = neg ? -D : 0; half-even C = neg ? -(H + 1 - P[shift]) : H - 1 + P[shift]; then
    r = (t >>> shift) xor neg. A signed value v whose LLR is +v: half-away C = H - [v < 0], toward-zero
    C = [v < 0] (D - 1), half-even C = H - 1 + v[shift]; whose LLR is -v: the constants of ~v + K, negated,
    and r = ~(t >>> shift). A left shift (shift <= 0) is exact: t = +-P."""
    ident = lr.ident
    if sh <= 0:
        if lr.linear is not None:
            return (b.sub(f"rs_{ident}", 0, p) if lr.negate else p), None
        x = b.flip_if(f"x_{ident}", lr.neg, p, width=p.width + 1, signed=True, note="neg ? -P - 1 : P")
        return b.add(f"rs_{ident}", x, lr.neg, note="+-P exactly"), None
    half, one = 1 << (sh - 1), 1 << sh
    if lr.linear is None:
        neg = lr.neg
        if rounding == "half-away":
            c = b.mux(f"rc_{ident}", neg, -half, half)
        elif rounding == "toward-zero":
            c = b.mux(f"rc_{ident}", neg, -one, 0)
        else:
            key = b.concat(f"rk_{ident}", neg, _bit(p, sh), note="the rounding constant by (neg, P[shift])")
            c = b.lookup(f"rc_{ident}", key, [half - 1, half, -(half + 1), -half], signed=True)
        flip: Operand | None = neg
    else:
        msb = p.msb
        if not lr.negate:
            if rounding == "half-away":
                c = b.mux(f"rc_{ident}", msb, half - 1, half)
            elif rounding == "toward-zero":
                c = b.mux(f"rc_{ident}", msb, one - 1, 0)
            else:
                c = b.mux(f"rc_{ident}", _bit(p, sh), half, half - 1)
            flip = None
        else:                                  # LLR = -v = ~v + 1: ~v + K = ~(v - K), so t = v - K, r = ~(t >>> shift)
            if rounding == "half-away":
                c = b.mux(f"rc_{ident}", msb, -half - 1, -half)
            elif rounding == "toward-zero":
                c = b.mux(f"rc_{ident}", msb, -1, -one)
            else:                              # K = H + ((-v)[shift] = v[shift] xor (v[shift-1:0] != 0))
                low = b.reduce(f"vlo_{ident}", "or", p[min(sh, p.width) - 1:0])
                key = b.concat(f"rk_{ident}", _bit(p, sh), low)
                c = b.lookup(f"rc_{ident}", key, [-half, -half - 1, -half - 1, -half], signed=True)
            flip = Const(1, 1)
    t = b.add(f"rs_{ident}", p, c, note=f"LLR {ident}: P + C")
    return t, flip


def _shift_and_sign(b: Builder, ident: str, t: Signal, sh: int, flip: Operand | None) -> Signal:
    """r = (t >>> sh), inverted where the flag is set (an arithmetic shift: t's top bits read as signed)."""
    if sh <= 0:
        r = t if sh == 0 else b.concat(f"rsh_{ident}", t, Const(0, -sh), width=t.width - sh, signed=True)
    else:
        top = t[t.width - 1:sh] if t.width > sh else t.msb
        r = b.resize(f"rsh_{ident}", top, max(t.width - sh, 1), True, note=f"t >>> {sh}")
    if flip is None:
        return r
    return b.flip_if(f"r_{ident}", flip, r, note="xor the sign: ~floor((P - K) / D) = -round(P / D)")


def _saturate(b: Builder, ident: str, r: Signal, lw: int, top: int) -> Signal:
    """The LLR: r where |r| <= top, else +-top (the most negative code is never produced)."""
    note = f"LLR {ident}: positive means bit 0 is more likely"
    if -top <= r.lo and r.hi <= top:
        return b.resize(f"llr_{ident}", r, lw, True, note=note)
    msb = r.msb
    any_lo = b.reduce(f"alo_{ident}", "or", r[lw - 2:0]) if lw > 1 else Const(0, 1)
    if r.width - 2 >= lw - 1:
        high = r[r.width - 2:lw - 1]
        any_hi = b.reduce(f"ahi_{ident}", "or", high, note="r >= 2^(lw-1) when positive")
        fits = b.logic(f"fit_{ident}", "and", b.reduce(f"ehi_{ident}", "and", high), any_lo,
                       note="r >= -(2^(lw-1) - 1) when negative")
    else:
        any_hi, fits = Const(0, 1), any_lo
    ovf = b.mux(f"ovf_{ident}", msb, b.invert(f"nfit_{ident}", fits), any_hi, note="|r| > the largest LLR")
    sat = b.mux(f"sat_{ident}", msb, -top, top, width=lw, signed=True)
    return b.mux(f"llr_{ident}", ovf, sat, b.resize(f"rl_{ident}", r, lw, True), width=lw, signed=True, note=note)


__all__ = ["SoftBit", "demapper_datapath", "min_tree", "output_stage"]
