"""The cross demapper's datapath: `qamsmith.model.cross` written as IR (Smith's cross, exact max-log).

Per axis, one decision of the enclosing square (shift and clamp: n, residual e); every per-axis quantity of
the model (the pieces' extra distance delta and each piece's competitor metric R) is then R = dn (K - e) with
dn and K read from tables keyed by n (and e < 0 where that matters): the piece's level is a function of n, and
so is the sign of the piece's residual except where the piece's level is n itself. As in the per-axis
demapper (`ir.demapper`), u = (s K + [s > 0]) + (s > 0 ? ~e : e) in one adder (s the sign of dn), or, where
every partial product is gated, v = (-K - [s > 0]) + e and u = s > 0 ? ~v : v (the flip merges with the
gates); R = |dn| u as the sum of u << i over the bits of |dn|, the bits that are never 1 together sharing one
term (a mux: |dn| in {1, 2, 3, 4} is (u << 2 or u << 1) + u, one adder). Two identities save tables: one Q
table gives both pieces' Q deltas (`d_q`: the arms' where the square's level is central, the core's
elsewhere), and the arms' I delta is the metric of b1 (the bit of the central columns) where the square's
level is not central. Signals of one axis are traced over every input code of that axis (exact widths); the
2-D step is sized by interval arithmetic:

    X_core = central ? 0 : d_q, X_arms = d_arms_i + (central ? d_q : 0); the arms win where X_arms < X_core;
    D = |X_arms - X_core|, X_min = min(X_core, X_arms);
    sign bits: |LLR| = R_square - X_min;
    other bits: R_W, R_L the winner's and the loser's metric, cand = D + (decided bits agree ? R_L : 0),
    |LLR| = min(R_W, cand) (a bit constant over the arms: R_W infinite where the arms win, R_L = R_core).

`soft_bits` leaves the output stage (the per-axis demapper's, `ir.demapper.output_stage`) to its caller,
`ir.demapper.demapper_datapath`; `hard_datapath` is a whole datapath.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..model import Design
from ..model.cross import AXIS_NAMES, CrossDemap
from .build import Builder
from .core import Const, Datapath, Field, Signal

_COMPONENT = ("i", "q")


@dataclass
class _Metric:
    """R = dn (K - e) >= 0 from tables over the key of one input component."""

    ident: str
    comp: str                   # 'i' or 'q'
    by_sign: bool               # keyed by {n, e < 0} (else by n)
    dn: np.ndarray
    const: np.ndarray           # s K + [s > 0]: u = const + (s > 0 ? ~e : e)
    pos: np.ndarray             # dn > 0
    note: str

    @property
    def flip_after(self) -> bool:
        """Every partial product is gated and dn's sign varies: v = (-K - [s > 0]) + e, u = s > 0 ? ~v : v, so
        that the flip merges with each gate into one LUT (u = K - e where s > 0, e - K where s < 0)."""
        return bool(self.leaves) and all(g for _, g in self.leaves) and _varies(self.pos)

    @property
    def groups(self) -> list[tuple[list[int], bool]]:
        """The leaves (bits i of |dn|) in groups of bits never 1 together, each with whether every entry has one
        of its bits set: a group is one term, u << i for its set bit (a mux chain; 0 if none is set), and R is
        the sum of the terms. |dn| in {1, 2, 3, 4}: {4, 1} and {2}, one adder instead of two."""
        adn = np.abs(self.dn)
        groups: list[list[int]] = []
        for i, _ in sorted(self.leaves, reverse=True):
            col = (adn >> i) & 1
            home = next((g for g in groups if not any(np.any(col & ((adn >> j) & 1)) for j in g)), None)
            if home is None:
                groups.append([i])
            else:
                home.append(i)
        out = []
        for g in groups:
            covered = np.zeros(adn.size, dtype=bool)
            for j in g:
                covered |= ((adn >> j) & 1).astype(bool)
            out.append((sorted(g), bool(covered.all())))
        return out

    def needs_gate(self, i: int) -> bool:
        """Bit i of |dn| is read as a select or a gate (not in a group that covers every entry, as its first bit)."""
        for g, covers in self.groups:
            if i in g:
                return not (covers and i == g[0])
        return False

    @property
    def leaves(self) -> list[tuple[int, bool]]:
        """(i, gated): the partial products u << i over the bits i of |dn| that can be 1."""
        adn = np.abs(self.dn)
        top = int(adn.max()).bit_length()
        every = int(np.bitwise_and.reduce(adn)) if adn.size else 0
        some = int(np.bitwise_or.reduce(adn)) if adn.size else 0
        return [(i, not (every >> i) & 1) for i in range(top) if (some >> i) & 1]


def _metric(ident: str, comp: str, dn: np.ndarray, shift: np.ndarray, f: int, by_sign: bool, note: str) -> _Metric:
    """Tables of R = dn (((dn + 2 shift) << f) - e): a competitor dn levels from a piece's level that lies `shift`
    levels from the square's (delta: dn = shift, no competitor, K = shift << f)."""
    dn = np.asarray(dn, dtype=np.int64)
    k = (dn + 2 * np.asarray(shift, dtype=np.int64)) << f
    pos = dn > 0
    const = np.where(dn == 0, 0, np.where(pos, k + 1, -k))
    return _Metric(ident, comp, by_sign, dn, const, pos, note)


def _plan(cd: CrossDemap, f: int) -> tuple[list[_Metric], dict[tuple[str, int], np.ndarray], dict[str, tuple[str, np.ndarray]]]:
    """Every per-axis metric as tables over the key of its component, and the decided bits (tables over n).

    On Q, the core's level leaves the square's only where the arms' does not: one table gives both deltas,
    d_q, with the central flag (`central_q`) saying whose it is. On I, the arms' level is the nearest central one,
    which is the competitor of the label bit that marks the central levels (b1): d_arms_i is that metric where the
    square's level is not central, 0 where it is (`aliases`: name -> (metric, where it applies))."""
    s = cd.span
    n = np.arange(s)
    metrics: list[_Metric] = []
    aliases: dict[str, tuple[str, np.ndarray]] = {}
    bits: dict[tuple[str, int], np.ndarray] = {}
    central = np.asarray(cd.axes["arms_i"].place) == n       # the square's level is one of the N central ones
    for name in AXIS_NAMES:
        ax = cd.axes[name]
        comp = _COMPONENT[ax.component]
        place = np.asarray(ax.place)
        shift = place - n
        if name == "arms_i":
            d_ai = _metric("d_arms_i", comp, shift, np.zeros(s, np.int64), f, False,
                           "delta of the arms' I level: its extra squared distance")
            moved = shift != 0
            same = next((mt for mt in metrics if mt.comp == "i" and not mt.by_sign
                         and np.array_equal(mt.dn[moved], d_ai.dn[moved])
                         and np.array_equal(mt.const[moved], d_ai.const[moved])), None)
            if same is not None:
                aliases["d_arms_i"] = (same.ident, moved.astype(np.int64))
            else:
                metrics.append(d_ai)
        elif name == "arms_q":
            # the core's Q level moves off the square's only outside the central levels, the arms' only inside
            both = np.where(central, shift, np.asarray(cd.axes["core_q"].place) - n)
            metrics.append(_metric("d_q", comp, both, np.zeros(s, np.int64), f, False,
                                   "delta of the arms' Q level (central n) or of the core's (outer n)"))
        # key (n, t): t = e < 0; the piece's residual e - 2 shift << f is negative where shift > 0, positive where
        # shift < 0 (a clamped level is beyond y), and has e's sign where the piece's level is n
        ns = np.repeat(n, 2)
        ts = np.tile([0, 1], s)
        sh = np.repeat(shift, 2)
        side = np.where(sh == 0, ts, (sh > 0).astype(np.int64))
        for m in ax.metrics:
            dn = m.competitor[place[ns], side]
            if m.uses_sign or np.any(sh != 0):
                tab = _metric(f"r_{name}_{m.bit}", comp, dn, sh, f, True, f"b{m.bit}: {name.replace('_', ' ')} metric")
                if not np.any(tab.dn.reshape(s, 2)[:, 0] != tab.dn.reshape(s, 2)[:, 1]) and not np.any(
                        tab.const.reshape(s, 2)[:, 0] != tab.const.reshape(s, 2)[:, 1]):
                    tab = _metric(tab.ident, comp, dn[::2], sh[::2], f, False, tab.note)
            else:
                tab = _metric(f"r_{name}_{m.bit}", comp, dn[::2], shift, f, False,
                              f"b{m.bit}: {name.replace('_', ' ')} metric")
            metrics.append(tab)
            bits[(name, m.bit)] = np.asarray(m.level_bit)[place]
    return metrics, bits, aliases


def _range(b: Builder, cd: CrossDemap, y: Signal, c: str, f: int) -> dict[str, Signal | None]:
    """The adders of the square's decision on one axis: y + (S << f), the clamp compares, the clamped residuals."""
    s = cd.span
    m = (s - 1).bit_length()
    total = b.add(f"sum_{c}", y, s << f)
    nm = b.resize(f"nm_{c}", total[f + m:f + 1], m, False,
                  note=f"{c.upper()}: n = clamp((y + ({s} << {f})) >>> {f + 1}, 0, {s - 1}), the enclosing square's level")
    lo = b.resize(f"lo_{c}", total.msb, 1, False, note="y below the lowest decision region") if total.lo < 0 else None
    hs = None
    if (total.hi >> (f + 1)) > s - 1:
        hsum = b.add(f"hsum_{c}", y, -(s << f))
        hs = b.resize(f"hs_{c}", hsum.msb, 1, False, note=f"y < {s} << {f}: no high clamp")
    yl = b.resize(f"yl_{c}", y[f:0], f + 1, False, note=f"the low {f + 1} bits of y: the residual inside is yl - 2^{f}")
    values = b.values(y)
    nn = np.clip((values + (s << f)) >> (f + 1), 0, s - 1)
    ev = values - ((2 * nn - (s - 1)) << f)
    width = max(int(ev.max()).bit_length(), (-int(ev.min()) - 1).bit_length()) + 1
    elo = b.add(f"elo_{c}", y, (s - 1) << f, width=width, signed=True, note="residual at the lowest level") if lo is not None else None
    ehi = b.sub(f"ehi_{c}", y, (s - 1) << f, width=width, signed=True, note="residual at the highest level") if hs is not None else None
    return {"nm": nm, "lo": lo, "hs": hs, "yl": yl, "elo": elo, "ehi": ehi, "width": width}


def _clamp(b: Builder, cd: CrossDemap, r: dict, c: str, f: int) -> tuple[Signal, Signal]:
    """The enclosing square's decision on one axis: n = clamp((y + (S << f)) >>> (f+1), 0, S-1), e = y - a_n."""
    s = cd.span
    nm, lo, hs, yl, elo, ehi, width = (r[x] for x in ("nm", "lo", "hs", "yl", "elo", "ehi", "width"))
    n = nm
    if hs is not None:
        n = b.mux(f"nh_{c}" if lo is not None else f"n_{c}", hs, n, s - 1, note="the high clamp")
    if lo is not None:
        n = b.mux(f"n_{c}", lo, 0, n, note="the low clamp")
    e = b.logic(f"e_{c}" if hs is None and lo is None else f"emid_{c}", "xor", yl, Const(1 << f, f + 1),
                width=f + 1, signed=True, note=f"yl - 2^{f}: the residual inside the levels (top bit flipped)")
    if hs is not None:
        e = b.mux(f"e_{c}" if lo is None else f"eh_{c}", hs, e, ehi, width=width, signed=True)
    if lo is not None:
        e = b.mux(f"e_{c}", lo, elo, e, width=width, signed=True)
    return n, e


def _varies(a: np.ndarray) -> bool:
    return bool(np.any(a != a[0]))


@dataclass
class CrossSoft:
    """The cross demapper up to its output stage: the builder, and per label bit (b0 first) its output field's
    name, |LLR| metric, negative flag and field LSB; the reliability input and the word widths."""

    builder: Builder
    bits: list[tuple[str, Signal, Signal, int]]
    scale: Signal | None
    in_width: int
    out_width: int


def hard_datapath(design: Design) -> Datapath:
    """The cross hard demapper: the label of the nearest cross point (the core's on a tie)."""
    got = _build(design, hard=True)
    assert isinstance(got, Datapath)
    return got


def soft_bits(design: Design) -> CrossSoft:
    """The cross max-log demapper up to the output stage (see the module's doc)."""
    got = _build(design, hard=False)
    assert isinstance(got, CrossSoft)
    return got


def _build(design: Design, hard: bool) -> Datapath | CrossSoft:
    cd = design.cross
    d = design.spec.demapper
    W, k, f, lw = d.input_width, design.bits, d.input_fraction, d.llr_width
    sw = design.scale_format.width if design.scale_format else 0
    b = Builder()
    codes = design.input_codes
    ys = {c: b.input(f"y_{c}", W, True, n * W, doc=f"equalized {c.upper()} input code", domain=c, values=codes)
          for n, c in enumerate(_COMPONENT)}
    scale = (b.input("scale", sw, False, 2 * W, doc="unsigned reliability code", domain="scale",
                     values=np.arange(1 << sw)) if sw and not hard else None)
    metrics, bit_tables, aliases = _plan(cd, f)
    central = np.asarray(cd.axes["arms_i"].place) == np.arange(cd.span)
    if hard:                                     # only the deltas (who wins) and the decided bits
        metrics = [mt for mt in metrics if mt.ident.startswith("d_") or mt.ident in {a for a, _ in aliases.values()}]
    # ---- decide
    b.step("range", "per axis: y + (S << f), whose bits give the square's n, and the compares of the clamps")
    ranges = {c: _range(b, cd, ys[c], c, f) for c in _COMPONENT}
    b.step("decide", "per axis: the clamp muxes of the square's n and of the residual e")
    ne = {c: _clamp(b, cd, ranges[c], c, f) for c in _COMPONENT}
    # ---- tables
    b.step("tables", "per axis: tables of the square's level (and the residual's sign): each metric's constant, "
                     "side and partial-product gates, and each piece's decided bit")
    keys: dict[str, Signal] = {}
    for c in _COMPONENT:
        if any(mt.by_sign and mt.comp == c for mt in metrics):
            n, e = ne[c]
            keys[c] = b.concat(f"ks_{c}", n, e.msb, note="table key {n, e < 0}")
    sig: dict[str, Signal | int] = {}
    cache: dict[tuple[str, tuple[int, ...]], Signal] = {}

    def lookup(name: str, key: Signal, entries: np.ndarray, note: str) -> Signal:
        """A table, shared by every user of the same entries on the same key."""
        got = cache.get((key.name, tuple(int(x) for x in entries)))
        if got is None:
            got = cache[(key.name, tuple(int(x) for x in entries))] = b.lookup(name, key, entries, note=note)
        return got

    for mt in metrics:
        n, e = ne[mt.comp]
        key = keys[mt.comp] if mt.by_sign else n
        leaves = mt.leaves
        if not leaves:
            continue
        if _varies(mt.pos):
            sig[f"p_{mt.ident}"] = lookup(f"p_{mt.ident}", key, mt.pos.astype(np.int64), "dn > 0")
        def gate_bit(i: int) -> Signal:
            if f"g_{mt.ident}_{i}" not in sig:
                sig[f"g_{mt.ident}_{i}"] = lookup(f"g_{mt.ident}_{i}", key, (np.abs(mt.dn) >> i) & 1, f"bit {i} of |dn|")
            return sig[f"g_{mt.ident}_{i}"]

        for i, _ in leaves:
            if mt.needs_gate(i):
                gate_bit(i)
        if mt.flip_after:
            tconst = np.where(mt.pos, -mt.const, mt.const)          # s K + [s > 0] -> -K - [s > 0]
            sig[f"k_{mt.ident}"] = (lookup(f"k_{mt.ident}", key, tconst, f"{mt.note}: -K - [s > 0]") if _varies(tconst)
                                    else int(tconst[0]))
        elif not _varies(mt.const):
            sig[f"k_{mt.ident}"] = int(mt.const[0])
        elif f >= 1 and np.array_equal(mt.const, (np.abs(mt.dn) << f) + mt.pos):
            # the piece's level is the square's: the constant is {|dn|, 0 .. 0, dn > 0}, read off the gates
            adn = np.abs(mt.dn)
            top = int(adn.max()).bit_length()
            parts: list = []
            for i in range(top - 1, -1, -1):
                col = (adn >> i) & 1
                parts.append(gate_bit(i) if _varies(col) else Const(int(col[0]), 1))
            if f > 1:
                parts.append(Const(0, f - 1))
            parts.append(sig[f"p_{mt.ident}"] if f"p_{mt.ident}" in sig else Const(int(mt.pos[0]), 1))
            sig[f"k_{mt.ident}"] = b.concat(f"k_{mt.ident}", *parts, note=f"{mt.note}: (|dn| << {f}) + (dn > 0)")
        else:
            sig[f"k_{mt.ident}"] = lookup(f"k_{mt.ident}", key, mt.const, f"{mt.note}: s K + [s > 0]")
    decided: dict[str, Signal] = {}
    for pb in cd.bits:
        for axis in (pb.core, pb.arms):
            if axis is None:
                continue
            comp = _COMPONENT[cd.axes[axis].component]
            decided[f"h_{axis}_{pb.bit}"] = lookup(f"h_{axis}_{pb.bit}", ne[comp][0], bit_tables[(axis, pb.bit)],
                                                   f"b{pb.bit}: the {axis.replace('_', ' ')} level's bit")
    central_q = lookup("central_q", ne["q"][0], central.astype(np.int64), "Q: the square's level is a central one")
    # ---- per-axis metrics
    b.step("select", "per metric: s > 0 ? ~e : e (the +1 of -e sits in the table's constant)")
    se: dict[str, Signal] = {}
    flips: dict[str, Signal] = {}
    for mt in metrics:
        if not mt.leaves:
            continue
        e = ne[mt.comp][1]
        if mt.flip_after:
            se[mt.ident] = e
        elif f"p_{mt.ident}" in sig:
            p_ = sig[f"p_{mt.ident}"]
            if p_.name not in flips:
                flips[p_.name] = b.flip_if(f"se_{mt.ident}", p_, e, note="-sign(dn) e, minus one where dn > 0")
            se[mt.ident] = flips[p_.name]
        elif mt.pos[0]:
            se[mt.ident] = b.flip_if(f"se_{mt.ident}", 1, e, note="~e = -e - 1: dn > 0 everywhere")
        else:
            se[mt.ident] = e
    b.step("residual", "per metric: u = (s K + [s > 0]) + (s > 0 ? ~e : e) >= 0 where dn != 0, one adder")
    us: dict[str, Signal] = {}
    for mt in metrics:
        if mt.flip_after:
            v = b.add(f"v_{mt.ident}", sig[f"k_{mt.ident}"], se[mt.ident], note=f"{mt.note}: v = -K - [s > 0] + e")
            us[mt.ident] = b.flip_if(f"u_{mt.ident}", sig[f"p_{mt.ident}"], v, note="u = s > 0 ? ~v : v = R / |dn|")
        elif mt.leaves:
            us[mt.ident] = b.add(f"u_{mt.ident}", sig[f"k_{mt.ident}"], se[mt.ident], note=f"{mt.note}: u = R / |dn|")
    b.step("gate", "per metric: the partial products u << i, gated by bit i of |dn| where it is not always 1")
    terms: dict[str, list[Signal]] = {}
    out: dict[str, Signal | int] = {}
    for mt in metrics:
        leaves = mt.leaves
        if not leaves:
            out[mt.ident] = 0
            continue
        u = us[mt.ident]
        def shift(i: int, w: Signal, tag: str) -> Signal:
            return b.concat(f"pp_{mt.ident}_{tag}{i}", w, Const(0, i)) if i else w

        parts = []
        groups = mt.groups
        for gi, (g, covers) in enumerate(groups):
            last = len(groups) == 1
            if covers:
                w = shift(g[0], u, "")
            else:
                w = shift(g[0], b.gate(f"w_{mt.ident}_{g[0]}", sig[f"g_{mt.ident}_{g[0]}"], u,
                                       note=f"(bit {g[0]} of |dn|) ? u : 0"), "g")
            for j in g[1:]:
                w = b.mux(f"r_{mt.ident}" if last and j == g[-1] else f"t_{mt.ident}_{j}", sig[f"g_{mt.ident}_{j}"],
                          shift(j, u, ""), w, note=f"bit {j} of |dn| (never with the others of its group): u << {j}")
            parts.append(w)
        terms[mt.ident] = parts
    depth = 0
    while any(len(v) > 1 for v in terms.values()):
        b.step("product" if depth == 0 else "accumulate", "R = the sum of u << i over the bits i of |dn| that can be 1")
        for ident in list(terms):
            level = terms[ident]
            if len(level) == 1:
                continue
            nxt = []
            for x in range(0, len(level), 2):
                pair = level[x:x + 2]
                name = f"r_{ident}" if len(level) <= 2 else f"acc_{ident}_{depth}_{x // 2}"
                nxt.append(b.add(name, pair[0], pair[1]) if len(pair) == 2 else pair[0])
            terms[ident] = nxt
        depth += 1
    for ident, level in terms.items():
        out[ident] = level[0]
    # ---- the 2-D step
    b.step("combine", "X_core = central ? 0 : d_q, X_arms = d_arms_i + (central ? d_q : 0); d = X_arms - X_core")
    for name, (source, where) in aliases.items():
        out[name] = b.gate(name, lookup(f"m_{name}", ne["i"][0], where, "the arms' I level is not the square's"),
                           out[source], note=f"{name}: the metric {source} where the level moves, else 0")
    dai, dq = out["d_arms_i"], out["d_q"]
    if isinstance(dai, int) or isinstance(dq, int):
        raise ValueError("a cross whose pieces never leave the square")
    ddif = b.sub("xd", dai, dq, note="outer Q: d = d_arms_i - d_q, the arms win where negative")
    outer_q = b.invert("outer_q", central_q)
    win = b.logic("arms_win", "and", outer_q, ddif.msb, width=1, signed=False,
                  note="the nearest cross point is in the arms")
    if hard:
        b.step("label", "the winner's decided bits")
        fields = []
        for pb in cd.bits:
            hc = decided[f"h_{pb.core}_{pb.bit}"]
            if pb.kind == "sign":
                bit = hc
            else:
                ha = decided[f"h_{pb.arms}_{pb.bit}"] if pb.arms is not None else pb.arms_value
                bit = b.mux(f"hard_{pb.bit}", win, ha, hc, width=1, signed=False, note=f"label bit b{pb.bit}")
            fields.append(Field(bit, k - 1 - pb.bit))
        return b.build(fields, k, 2 * W + sw)
    dsum = b.add("xs", dai, dq, note="central Q: d = X_arms - X_core = d_arms_i + d_q >= 0")
    ndif = b.sub("xdn", dq, dai)
    gap_width = max(dsum.hi, dai.hi, dq.hi).bit_length()
    gap = b.mux("gap", central_q, dsum, b.mux("gapo", win, ndif, ddif, width=gap_width, signed=False),
                width=gap_width, signed=False, note="D = |X_arms - X_core|")
    xmin = b.gate("xmin", outer_q, b.mux("xmo", win, dai, dq), note="X_min = min(X_core, X_arms): 0 at a central Q level")
    b.step("candidate", "per bit: the other piece's candidate D + (the decided bits agree ? R_L : 0), or R_square - X_min")
    llrs = []
    lsb = {pb.bit: (k - 1 - pb.bit) * lw for pb in cd.bits}
    cands = {}
    for pb in cd.bits:
        bt = pb.bit
        rc = out[f"r_{pb.core}_{bt}"]
        hc = decided[f"h_{pb.core}_{bt}"]
        if pb.kind == "sign":
            mag = b.sub(f"mag_{bt}", rc, xmin, width=max(rc.hi.bit_length(), 1), signed=False,
                        note=f"b{bt} (a sign bit): |LLR| = R_square - X_min")
            llrs.append((str(bt), mag, hc, lsb[bt]))
            continue
        if pb.arms is not None:
            ra = out[f"r_{pb.arms}_{bt}"]
            ha = decided[f"h_{pb.arms}_{bt}"]
            agree = b.compare(f"ag_{bt}", "eq", hc, ha, note="the pieces' decided bits agree")
            rl = b.mux(f"rl_{bt}", win, rc, ra, note="R_L, the loser's metric")
            rw = b.mux(f"rw_{bt}", win, ra, rc, note="R_W, the winner's metric")
            neg = b.mux(f"neg_{bt}", win, ha, hc, width=1, signed=False, note="the winner's decided bit")
        else:
            agree = hc if pb.arms_value else b.invert(f"ag_{bt}", hc, note=f"agrees with the arms' constant {pb.arms_value}")
            rl, rw, ha = rc, rc, pb.arms_value
            neg = b.mux(f"neg_{bt}", win, ha, hc, width=1, signed=False, note="the winner's decided bit")
        gl = b.gate(f"gl_{bt}", agree, rl)
        cand = b.add(f"cand_{bt}", gap, gl, note=f"b{bt}: D + (agree ? R_L : 0)")
        cands[bt] = (cand, rw, neg, pb.arms is None)
    b.step("choose", "per bit: |LLR| = min(R_W, candidate) (R_W infinite for a bit the arms hold constant, where they win)")
    for bt, (cand, rw, neg, const) in cands.items():
        less = b.compare(f"lt_{bt}", "lt", cand, rw)
        if const:
            less = b.logic(f"take_{bt}", "or", less, win, width=1, signed=False, note="the arms win: R_W is infinite")
        # min(R_W, candidate) <= R_W: R_W's width, except where the arms win over a bit they hold constant
        mag = (b.mux(f"mag_{bt}", less, cand, rw, note=f"b{bt}: |LLR| = min(R_W, candidate)") if const else
               b.mux(f"mag_{bt}", less, cand, rw, width=rw.width, signed=False, note=f"b{bt}: |LLR| = min(R_W, candidate)"))
        llrs.append((str(bt), mag, neg, lsb[bt]))
    llrs.sort(key=lambda lr: int(lr[0]))
    return CrossSoft(b, llrs, scale, 2 * W + sw, k * lw)


__all__ = ["CrossSoft", "hard_datapath", "soft_bits"]
