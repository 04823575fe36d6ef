"""Smith's cross: the exact max-log demapper derived from the geometry, as integer steps (int64 numpy).

A cross (`numbers.constellation.Cross`) is the union of two rectangular pieces, each with a product
labeling: the core (|I| <= S-1, |Q| <= N-1) and the arms (|I| <= N-1, N+1 <= |Q| <= S-1), S = 3N/2 the
levels per axis of the enclosing square. For a set that is a union, the nearest point with bit value v
is the nearer of the nearest such point in each piece, and inside a product piece that is a per-axis
matter. So every quantity below is a function of one input component, except the last step, which
adds and compares a handful of them:

1. `decide` (per axis): the enclosing square's decision n = clamp((y + (S << f)) >>> (f+1), 0, S-1) and
   the residual e = y - a_n (input codes, f fraction bits).
2. `place` (per axis and piece): the piece's level on this axis is a clamp of n (core Q and arms I: into
   the N central levels; arms Q: out of them), dn = n_piece - n, the piece's residual e - (2 dn << f), and
   delta = dn ((dn << f) - e) >= 0: how much farther the piece's level is than the square's, in the units of
   the per-axis metric R ((2 amplitude units)^2 with f fraction bits).
3. `metric` (per axis, piece and label bit the piece carries on that axis): the nearest competitor's
   R = dn ((dn << f) - e_piece) >= 0 from a table keyed by (level, e < 0), and the decided level's bit.
4. `combine`: relative to the square's nearest point, the core's nearest point is X_core = delta_core_q
   away and the arms' X_arms = delta_arms_i + delta_arms_q (squared-distance excess, R units). The nearest
   cross point is in the winner W (the core on a tie); with D = |X_arms - X_core| and R_W, R_L each piece's
   metric for the bit (infinite where the piece holds one bit value only):
       |LLR| = min(R_W, D + [the pieces' decided bits agree] R_L),  sign: W's decided bit.
   The two sign bits (I > 0 and Q > 0 over the whole cross) have their competitor in the row or column
   next to the axis, which spans the square: |LLR| = R_square - min(X_core, X_arms).
5. the output stage of every soft demapper (`steps.output`).

`tests/test_cross.py` holds the result equal to a brute-force float max-log over every point.
"""

from __future__ import annotations

from dataclasses import dataclass
from types import MappingProxyType
from typing import Mapping

import numpy as np

from ..numbers.constellation import Cross, PieceAxis

#: the per-axis parts of the cross demapper: (name, input component, piece, levels)
AXIS_NAMES = ("square_i", "square_q", "core_q", "arms_i", "arms_q")


@dataclass(frozen=True, eq=False)
class CrossMetric:
    """The max-log metric of one label bit along one piece axis: R = dn ((dn << f) - e) with dn from a table."""

    bit: int
    #: competitor offset dn[n, e < 0] in levels of the square (rows of levels outside the piece: 0)
    competitor: np.ndarray
    #: True where the offset depends on the residual's sign
    uses_sign: bool
    #: the bit's value at each level of the square (0 outside the piece)
    level_bit: np.ndarray


@dataclass(frozen=True, eq=False)
class CrossAxis:
    """One piece axis: its levels (indices n of the square's levels), the map from the square's decision onto
    them, and the metrics of the label bits the demapper needs along it."""

    name: str
    #: 0: the I input, 1: the Q input
    component: int
    levels: tuple[int, ...]
    #: the piece's level for each decision n of the square, shape (S,)
    place: np.ndarray
    metrics: tuple[CrossMetric, ...]

    @property
    def clamped(self) -> bool:
        """False when the piece's levels are the square's (no placement, delta = 0)."""
        return len(self.levels) != self.place.size


@dataclass(frozen=True)
class CrossBit:
    """How one label bit is demapped: a sign bit (its metric on a square axis), or its metric in each piece."""

    bit: int
    kind: str                   # "sign" or "pieces"
    #: sign: the square axis; pieces: the core's axis
    core: str
    #: the arms' axis, or None when the bit is constant over the arms
    arms: str | None = None
    #: the bit's value over the arms when constant there
    arms_value: int = 0


@dataclass(frozen=True, eq=False)
class CrossDemap:
    """Everything the cross demapper's steps need, derived from the `Cross` once."""

    cross: Cross
    #: S: levels per axis of the enclosing square
    span: int
    axes: Mapping[str, CrossAxis]
    bits: tuple[CrossBit, ...]

    def metric(self, axis: str, bit: int) -> CrossMetric:
        return next(m for m in self.axes[axis].metrics if m.bit == bit)


def _index(span: int, amplitudes: tuple[int, ...]) -> tuple[int, ...]:
    """Indices n of the square's levels (amplitude 2n - (S-1)) of the given amplitudes."""
    return tuple((a + span - 1) // 2 for a in amplitudes)


def _competitors(span: int, levels: tuple[int, ...], values: tuple[int, ...]) -> tuple[np.ndarray, bool]:
    """dn[n, e < 0]: the nearest level of `levels` whose bit differs from n's (ties: the side of the residual).

    By level distance; exact for every residual a level's decision region holds (its cell: |e| <= 1 amplitude
    unit, or beyond the outermost level on that side, or across the gap of the arms' Q axis, whose nearest
    competitor across the gap is farther by N + 1 levels than its mirror on the near side).
    """
    comp = np.zeros((span, 2), dtype=np.int64)
    bit = dict(zip(levels, values))
    for n in levels:
        left = [n - o for o in levels if o < n and bit[o] != bit[n]]
        right = [o - n for o in levels if o > n and bit[o] != bit[n]]
        kl = min(left) if left else None
        kr = min(right) if right else None
        for neg in (0, 1):
            if kr is None or (kl is not None and (kl < kr or (kl == kr and neg))):
                comp[n, neg] = -kl
            else:
                comp[n, neg] = kr
    return comp, bool(np.any(comp[:, 0] != comp[:, 1]))


def _metric(span: int, levels: tuple[int, ...], axis: PieceAxis | None, bit: int, values: tuple[int, ...] | None = None) -> CrossMetric:
    values = values if values is not None else axis.bit_of_level(bit)
    comp, uses_sign = _competitors(span, levels, values)
    level_bit = np.zeros(span, dtype=np.int64)
    level_bit[list(levels)] = values
    comp.setflags(write=False)
    level_bit.setflags(write=False)
    return CrossMetric(bit, comp, uses_sign, level_bit)


def _place(span: int, levels: tuple[int, ...]) -> np.ndarray:
    """The piece's level nearest to each level n of the square (the square's decision n placed on the piece)."""
    lv = np.asarray(levels)
    n = np.arange(span)
    # nearest by index; ties (none occur for these pieces) to the upper level
    out = lv[np.argmin(np.abs(lv[None, :] - n[:, None]) * 2 - (lv[None, :] > n[:, None]), axis=1)]
    out.setflags(write=False)
    return out


def _sign_bit(cross: Cross, component: int) -> int:
    """The label bit that is 1 exactly where the I (component 0) or Q (1) coordinate is positive."""
    core_axis = cross.core.i if component == 0 else cross.core.q
    for b in core_axis.label_bits:
        ok = True
        for piece in cross.pieces:
            pa = piece.i if component == 0 else piece.q
            if b not in pa.label_bits or pa.bit_of_level(b) != tuple(int(a > 0) for a in pa.amplitudes):
                ok = False
        if ok:
            return b
    raise ValueError("the cross labeling has no sign bit on this axis")


def cross_demap(cross: Cross) -> CrossDemap:
    """The cross demapper's axes, tables and per-bit plan."""
    s = cross.span
    core, arms = cross.core, cross.arms
    sign_i, sign_q = _sign_bit(cross, 0), _sign_bit(cross, 1)
    full = tuple(range(s))
    if _index(s, core.i.amplitudes) != full:
        raise ValueError("the cross core's I axis is not the enclosing square's")
    q_all = tuple(int(n >= s // 2) for n in full)
    core_q_lv, arms_i_lv, arms_q_lv = (_index(s, core.q.amplitudes), _index(s, arms.i.amplitudes),
                                       _index(s, arms.q.amplitudes))
    axes = {
        "square_i": CrossAxis("square_i", 0, full, _place(s, full),
                              tuple(_metric(s, full, core.i, b) for b in core.i.label_bits)),
        "square_q": CrossAxis("square_q", 1, full, _place(s, full), (_metric(s, full, None, sign_q, q_all),)),
        "core_q": CrossAxis("core_q", 1, core_q_lv, _place(s, core_q_lv),
                            tuple(_metric(s, core_q_lv, core.q, b) for b in core.q.label_bits if b != sign_q)),
        "arms_i": CrossAxis("arms_i", 0, arms_i_lv, _place(s, arms_i_lv),
                            tuple(_metric(s, arms_i_lv, arms.i, b) for b in arms.i.label_bits if b != sign_i)),
        "arms_q": CrossAxis("arms_q", 1, arms_q_lv, _place(s, arms_q_lv),
                            tuple(_metric(s, arms_q_lv, arms.q, b) for b in arms.q.label_bits if b != sign_q)),
    }
    constants = dict(arms.constants)
    plan = []
    for b in range(cross.bits):
        if b == sign_i:
            plan.append(CrossBit(b, "sign", "square_i"))
        elif b == sign_q:
            plan.append(CrossBit(b, "sign", "square_q"))
        else:
            where = {"i": "square_i", "q": "core_q"}[core.carrier(b)]
            arm = arms.carrier(b)
            plan.append(CrossBit(b, "pieces", where, None if arm is None else {"i": "arms_i", "q": "arms_q"}[arm],
                                 constants.get(b, 0)))
    return CrossDemap(cross, s, MappingProxyType(axes), tuple(plan))


# --------------------------------------------------------------------------- the steps


def decide(cd: CrossDemap, y: np.ndarray, f: int) -> tuple[np.ndarray, np.ndarray]:
    """The enclosing square's decision n (shift and clamp) and residual e = y - a_n, in input codes."""
    s = cd.span
    n = np.clip((y + (s << f)) >> (f + 1), 0, s - 1)
    return n, y - ((2 * n - (s - 1)) << f)


def place(ax: CrossAxis, n: np.ndarray, e: np.ndarray, f: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The piece's level, its residual and delta = dn ((dn << f) - e) >= 0 (the extra squared distance, R units)."""
    npc = ax.place[n]
    dn = npc - n
    return npc, e - ((2 * dn) << f), dn * ((dn << f) - e)


def metric(m: CrossMetric, n: np.ndarray, e: np.ndarray, f: int) -> tuple[np.ndarray, np.ndarray]:
    """R = dn ((dn << f) - e) >= 0 of the nearest level with the other bit value, and the decided level's bit."""
    dn = m.competitor[n, (e < 0).astype(np.int64)]
    return dn * ((dn << f) - e), m.level_bit[n]


def axis_terms(cd: CrossDemap, name: str, y: np.ndarray, f: int) -> dict[str, np.ndarray]:
    """One piece axis' per-axis quantities over inputs y: delta, and per needed bit its R and decided bit."""
    ax = cd.axes[name]
    n, e = decide(cd, y, f)
    npc, ep, delta = place(ax, n, e, f)
    out = {"delta": delta}
    for m in ax.metrics:
        out[f"r{m.bit}"], out[f"h{m.bit}"] = metric(m, npc, ep, f)
    return out


def terms(cd: CrossDemap, i: np.ndarray, q: np.ndarray, f: int) -> dict[str, dict[str, np.ndarray]]:
    """Every per-axis quantity of inputs (i, q), by axis name."""
    return {name: axis_terms(cd, name, i if cd.axes[name].component == 0 else q, f) for name in AXIS_NAMES}


def combine(cd: CrossDemap, t: Mapping[str, Mapping[str, np.ndarray]], k: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(magnitude, negative, hard bits), each (N, k): the 2-D step from the per-axis quantities."""
    x_core = t["core_q"]["delta"]
    x_arms = t["arms_i"]["delta"] + t["arms_q"]["delta"]
    arms_win = x_arms < x_core
    x_min = np.minimum(x_core, x_arms)
    gap = np.abs(x_arms - x_core)
    size = x_core.shape[0]
    mag = np.zeros((size, k), dtype=np.int64)
    neg = np.zeros((size, k), dtype=bool)
    for pb in cd.bits:
        b = pb.bit
        if pb.kind == "sign":
            mag[:, b] = t[pb.core][f"r{b}"] - x_min
            neg[:, b] = t[pb.core][f"h{b}"] == 1
            continue
        rc, hc = t[pb.core][f"r{b}"], t[pb.core][f"h{b}"]
        if pb.arms is not None:
            ra, ha = t[pb.arms][f"r{b}"], t[pb.arms][f"h{b}"]
            agree = hc == ha
            mag[:, b] = np.where(arms_win, np.minimum(ra, gap + agree * rc), np.minimum(rc, gap + agree * ra))
        else:
            ha = np.full(size, pb.arms_value, dtype=np.int64)
            agree = hc == ha
            mag[:, b] = np.where(arms_win, gap + agree * rc, np.where(agree, rc, np.minimum(rc, gap)))
        neg[:, b] = np.where(arms_win, ha, hc) == 1
    return mag, neg, neg.astype(np.int8)


def steps(cd: CrossDemap, i: np.ndarray, q: np.ndarray, f: int, k: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(magnitude, negative, hard bits) of inputs (i, q) straight from the step functions."""
    return combine(cd, terms(cd, i, q, f), k)


def term_ranges(cd: CrossDemap, codes: np.ndarray, f: int) -> dict[str, dict[str, tuple[int, int]]]:
    """The exact range of every per-axis quantity over every input code."""
    return {name: {key: (int(v.min()), int(v.max())) for key, v in axis_terms(cd, name, codes, f).items()}
            for name in AXIS_NAMES}


def magnitude_bound(cd: CrossDemap, ranges: Mapping[str, Mapping[str, tuple[int, int]]]) -> dict[str, int]:
    """Upper bounds of the 2-D quantities (interval arithmetic on the per-axis ranges): X, D and |LLR| metric."""
    x_core = ranges["core_q"]["delta"][1]
    x_arms = ranges["arms_i"]["delta"][1] + ranges["arms_q"]["delta"][1]
    gap = max(x_core, x_arms)
    top = 0
    for pb in cd.bits:
        b = pb.bit
        rc = ranges[pb.core][f"r{b}"][1]
        if pb.kind == "sign":
            top = max(top, rc)
        elif pb.arms is None:
            top = max(top, gap + rc)
        else:
            top = max(top, max(rc, ranges[pb.arms][f"r{b}"][1]))
    return {"x_core": x_core, "x_arms": x_arms, "gap": gap, "magnitude": top}


__all__ = ["AXIS_NAMES", "CrossAxis", "CrossBit", "CrossDemap", "CrossMetric", "axis_terms", "combine", "cross_demap",
           "decide", "magnitude_bound", "metric", "place", "steps", "term_ranges", "terms"]
