"""Constellations and bit labelings, in amplitude units (half the minimum distance = 1).

A label is an integer of k bits whose most significant bit is b0, the first bit in time.
Every named labeling of a square or rectangular shape is a product of two per-axis PAM
labelings (an `Axis` each for I and Q; odd-bit rectangles have 2^ceil(k/2) levels on I and
2^floor(k/2) on Q); 3GPP BPSK, whose one bit moves both I and Q, and user tables that are not
products are `Constellation`s without axes, demapped by an exact search over all points.
A cross (odd k >= 5) has no axes either but a `Cross`: two rectangular pieces, each a product.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache
from itertools import permutations

import numpy as np

from ..errors import SpecError
from ..spec import LABELINGS, ORDERS, shown
#: The largest user table demapped by searching every point (the cost grows with M).
MAX_SEARCH_POINTS = 256


def brgc(n: np.ndarray | int) -> np.ndarray | int:
    """Binary-reflected Gray code of the level index n."""
    return n ^ (n >> 1)


def bits_per_symbol(order: int) -> int:
    return order.bit_length() - 1


def label_bits(labels: np.ndarray, k: int) -> np.ndarray:
    """Labels (N,) to bits (N, k) of 0/1, column 0 = b0 = the label's MSB."""
    labels = np.asarray(labels, dtype=np.int64)
    shifts = np.arange(k - 1, -1, -1, dtype=np.int64)
    return ((labels[:, None] >> shifts) & 1).astype(np.int8)


def bits_to_labels(bits: np.ndarray) -> np.ndarray:
    """Bits (N, k), column 0 = b0, to integer labels (N,)."""
    bits = np.asarray(bits, dtype=np.int64)
    k = bits.shape[1]
    weights = np.int64(1) << np.arange(k - 1, -1, -1, dtype=np.int64)
    return bits @ weights


@dataclass(frozen=True)
class Axis:
    """One L-level PAM axis of a product labeling; level n sits at amplitude 2n - (L - 1)."""

    levels: int
    #: label bit (0 = b0) carried by axis bit j; axis bit 0 is the most significant of the axis label
    label_bits: tuple[int, ...]
    #: axis label (m bits, axis bit 0 first) of level n = 0 .. L-1, n = 0 the most negative
    codes: tuple[int, ...]

    @property
    def bits(self) -> int:
        return len(self.label_bits)

    @property
    def gray_mask(self) -> int | None:
        """m-bit mask with codes[n] == brgc(n) ^ mask (a Gray-type axis), or None."""
        masks = {c ^ brgc(n) for n, c in enumerate(self.codes)}
        return masks.pop() if len(masks) == 1 else None

    @property
    def index_of_code(self) -> tuple[int, ...]:
        """Level index n of each axis label c (the inverse of `codes`)."""
        inv = [0] * self.levels
        for n, c in enumerate(self.codes):
            inv[c] = n
        return tuple(inv)

    @property
    def amplitudes(self) -> np.ndarray:
        return 2 * np.arange(self.levels, dtype=np.int64) - (self.levels - 1)

    def axis_bit(self, codes: np.ndarray, j: int) -> np.ndarray:
        """Bit j (0 = axis MSB) of axis labels."""
        return (np.asarray(codes) >> (self.bits - 1 - j)) & 1


@dataclass(frozen=True)
class PieceAxis:
    """One axis of a piece of a cross: its levels (amplitude units, ascending, odd, maybe with a gap) and
    the label bits that vary along it."""

    amplitudes: tuple[int, ...]
    #: label bits (0 = b0) carried by this axis, axis bit 0 (the axis label's MSB) first
    label_bits: tuple[int, ...]
    #: axis label of each level, in the order of `amplitudes`
    codes: tuple[int, ...]

    def bit_of_level(self, label_bit: int) -> tuple[int, ...]:
        """The value of `label_bit` (one this axis carries) at each level."""
        j = self.label_bits.index(label_bit)
        return tuple((c >> (len(self.label_bits) - 1 - j)) & 1 for c in self.codes)


@dataclass(frozen=True)
class Piece:
    """A rectangular grid of points whose labeling is a product: label = I bits | Q bits | constant bits."""

    name: str
    i: PieceAxis
    q: PieceAxis
    #: label bits with one value over the whole piece, and that value of each (0/1)
    constants: tuple[tuple[int, int], ...]

    def carrier(self, label_bit: int) -> str | None:
        """'i' or 'q': the axis along which `label_bit` varies; None when it is constant over the piece."""
        if label_bit in self.i.label_bits:
            return "i"
        if label_bit in self.q.label_bits:
            return "q"
        return None


@dataclass(frozen=True)
class Cross:
    """Smith's cross of M = 2^k points, k = 2m + 1 >= 5: the S x S square (S = 3N/2 levels per axis, N = 2^m)
    without its four c x c corners (c = N/4), as two products: the core |I| <= S-1, |Q| <= N-1 and the arms
    |I| <= N-1, N+1 <= |Q| <= S-1. Levels of the enclosing square: amplitude 2n - (S-1), n = 0 .. S-1."""

    bits: int
    #: N = 2^m: the core's Q levels and the arms' I levels
    n: int
    #: S = 3N/2: levels per axis of the enclosing square
    span: int
    core: Piece
    arms: Piece

    @property
    def corner(self) -> int:
        """c = N/4: the side, in levels, of each missing corner block."""
        return self.n // 4

    @property
    def pieces(self) -> tuple[Piece, Piece]:
        return self.core, self.arms


@dataclass(frozen=True, eq=False)
class Constellation:
    """Points (complex, amplitude units) indexed by label, with per-axis structure when it has one."""

    order: int
    labeling: str
    #: complex amplitude of each label, shape (M,)
    points: np.ndarray
    #: (I axis, Q axis) for a product labeling, or None for a 2-D search (and a cross)
    axes: tuple[Axis, Axis] | None
    #: the two product pieces of a cross shape, None for every other shape
    cross: Cross | None = None

    @property
    def shape(self) -> str:
        """'cross', or 'rectangular' (squares included) for a named labeling; 'table' for a user table."""
        return "cross" if self.cross is not None else "table" if self.labeling == "table" else "rectangular"

    @property
    def bits(self) -> int:
        return bits_per_symbol(self.order)

    @property
    def energy(self) -> float:
        """Average symbol energy in amplitude units squared."""
        return float(np.mean(np.abs(self.points) ** 2))

    @property
    def kappa(self) -> float:
        """Amplitude unit in normalized (unit-average-power) units."""
        return 1.0 / np.sqrt(self.energy)

    @property
    def normalized(self) -> np.ndarray:
        return self.points * self.kappa

    @property
    def gray_type(self) -> bool:
        """True when both axes are Gray-coded (up to bit inversion): what `folded` needs."""
        return self.axes is not None and all(a.gray_mask is not None for a in self.axes)

    @property
    def on_grid(self) -> bool:
        """True when every point has odd-integer coordinates (codes are exact in the demapper)."""
        p = self.points
        return bool(np.all(p.real == np.round(p.real)) and np.all(p.imag == np.round(p.imag)))


def _product(order: int, labeling: str, i_axis: Axis, q_axis: Axis) -> Constellation:
    labels = np.arange(order, dtype=np.int64)
    bits = label_bits(labels, bits_per_symbol(order))
    coords = []
    for axis in (i_axis, q_axis):
        code = np.zeros(order, dtype=np.int64)
        for lb in axis.label_bits:
            code = (code << 1) | bits[:, lb]
        n = np.asarray(axis.index_of_code, dtype=np.int64)[code] if axis.bits else np.zeros(order, np.int64)
        coords.append(axis.amplitudes[n])
    points = coords[0] + 1j * coords[1]
    points.setflags(write=False)
    return Constellation(order, labeling, points, (i_axis, q_axis))


def _axis(levels: int, label_bits: tuple[int, ...], codes) -> Axis:
    return Axis(levels, tuple(int(b) for b in label_bits), tuple(int(c) for c in codes))


_NO_AXIS = Axis(1, (), (0,))


@lru_cache(maxsize=None)
def named(order: int, labeling: str, shape: str = "rectangular") -> Constellation:
    """The constellation of a named labeling (see LABELINGS); odd-bit orders as a rectangle or Smith's cross."""
    k = bits_per_symbol(order)
    if shape == "cross":
        if labeling != "gray" or k < 5 or k % 2 == 0:
            raise SpecError("constellation.shape", shape, "rectangular for this order and labeling (a cross needs an "
                            "odd-bit order of 32 points or more and labeling gray)")
        return _cross(order)
    if order == 2:
        if labeling == "3gpp-nr":
            # TS 38.211 5.1.2: d = (1 - 2 b0)(1 + j)/sqrt(2): one bit drives both axes.
            points = np.array([1 + 1j, -1 - 1j])
            points.setflags(write=False)
            return Constellation(order, labeling, points, None)
        # gray, ieee-802.11 and natural BPSK: b0 = 0 at -1, b0 = 1 at +1, on I only.
        return _product(order, labeling, _axis(2, (0,), (0, 1)), _NO_AXIS)
    if k % 2:
        # odd k: 2^ceil(k/2) x 2^floor(k/2) levels, the first ceil(k/2) bits on I, per-axis Gray or natural
        mi, mq = (k + 1) // 2, k // 2
        ni, nq = np.arange(1 << mi), np.arange(1 << mq)
        if labeling == "gray":
            return _product(order, labeling, _axis(1 << mi, range(mi), brgc(ni)), _axis(1 << mq, range(mi, k), brgc(nq)))
        if labeling == "natural":
            return _product(order, labeling, _axis(1 << mi, range(mi), ni), _axis(1 << mq, range(mi, k), nq))
        raise SpecError("constellation.labeling", labeling, f"gray, natural or table for order {order} ({labeling} "
                        "defines no odd-bit order)")
    m = k // 2
    levels = 1 << m
    n = np.arange(levels)
    if labeling in ("gray", "ieee-802.11"):
        # Binary-reflected Gray code of the level index, label 0 at the most negative level,
        # the first m bits on I (IEEE 802.11 17.3.5.8 tables have exactly this form).
        return _product(order, labeling, _axis(levels, range(m), brgc(n)), _axis(levels, range(m, k), brgc(n)))
    if labeling == "3gpp-nr":
        # TS 38.211 5.1: bits alternate I, Q; bit value 0 on the positive side; per axis the
        # nested form (1-2c0)(2^(m-1) - (1-2c1)(2^(m-2) - ...)) is the inverted Gray code.
        mask = levels - 1
        return _product(order, labeling, _axis(levels, range(0, k, 2), brgc(n) ^ mask),
                        _axis(levels, range(1, k, 2), brgc(n) ^ mask))
    if labeling == "natural":
        return _product(order, labeling, _axis(levels, range(m), n), _axis(levels, range(m, k), n))
    raise SpecError("constellation.labeling", labeling, f"one of {', '.join(LABELINGS)}")


def _cross(order: int) -> Constellation:
    """Smith's cross (J. G. Smith, "Odd-bit quadrature amplitude-shift keying", IEEE Trans. Commun. 23(3), 1975).

    Start from the Gray-labeled 2N x N rectangle (N = 2^m, k = 2m + 1: the I axis carries b0 .. bm, the Q axis
    b(m+1) .. b2m, binary-reflected Gray per axis); fold the c = N/4 outer columns on each side onto the top and
    bottom, every point keeping its label. The fold used here swaps the magnitudes and keeps the signs:
    (I, Q) -> (sgn(I) |Q|, sgn(Q) (|I| - N/2)); the i-th outer column from the cross's edge becomes the i-th row
    beyond the core. (Smith's paper and Vitthaladevuni, Alouini and Kieffer, IEEE Trans. Wireless Commun. 4(6),
    2005, describe the fold of the rectangle's outer columns; the orientation written here is this project's
    reading of it, chosen because both pieces stay products: see `Cross`.) Perfect Gray labeling of a cross
    does not exist; the neighbour pairs that differ in more than one bit are counted in the tests.
    """
    k = bits_per_symbol(order)
    m = (k - 1) // 2
    n_q, n_i = 1 << m, 2 << m
    span = 3 * n_q // 2
    ni, nq = np.meshgrid(np.arange(n_i), np.arange(n_q), indexing="ij")
    a = 2 * ni - (n_i - 1)
    q = 2 * nq - (n_q - 1)
    labels = ((brgc(ni) << m) | brgc(nq)).ravel()
    outer = np.abs(a) > span - 1
    pi = np.where(outer, np.sign(a) * np.abs(q), a).ravel()
    pq = np.where(outer, np.sign(q) * (np.abs(a) - n_q // 2), q).ravel()
    points = np.zeros(order, dtype=np.complex128)
    points[labels] = pi + 1j * pq
    points.setflags(write=False)
    core = _piece("core", points, np.abs(points.imag) <= n_q - 1, k)
    arms = _piece("arms", points, np.abs(points.imag) >= n_q + 1, k)
    return Constellation(order, "gray", points, None, Cross(k, n_q, span, core, arms))


def _piece(name: str, points: np.ndarray, member: np.ndarray, k: int) -> Piece:
    """The product structure of the points in `member` (which label bits vary along I, along Q, or not at all)."""
    labels = np.flatnonzero(member)
    pi, pq = points.real[labels].astype(np.int64), points.imag[labels].astype(np.int64)
    ai, aq = sorted(set(pi.tolist())), sorted(set(pq.tolist()))
    if len(ai) * len(aq) != labels.size:
        raise ValueError(f"cross piece {name} is not a full grid")
    bits = label_bits(labels, k)
    on_i, on_q, constants = [], [], []
    for b in range(k):
        col = bits[:, b]
        by_i = {v: set(col[pi == v].tolist()) for v in ai}
        by_q = {v: set(col[pq == v].tolist()) for v in aq}
        if len(set(col.tolist())) == 1:
            constants.append((b, int(col[0])))
        elif all(len(v) == 1 for v in by_i.values()):
            on_i.append(b)
        elif all(len(v) == 1 for v in by_q.values()):
            on_q.append(b)
        else:
            raise ValueError(f"cross piece {name}: label bit b{b} depends on both I and Q")

    def axis(amps: list[int], coord: np.ndarray, carried: list[int]) -> PieceAxis:
        codes = []
        for v in amps:
            row = bits[np.flatnonzero(coord == v)[0]]
            code = 0
            for b in carried:
                code = (code << 1) | int(row[b])
            codes.append(code)
        return PieceAxis(tuple(amps), tuple(carried), tuple(codes))

    return Piece(name, axis(ai, pi, on_i), axis(aq, pq, on_q), tuple(constants))


def standard_energy(order: int, shape: str = "rectangular") -> float:
    """Average energy, in amplitude units squared, of the order's standard grid (levels +-1, +-3, ...).

    Square: 2(M-1)/3. Odd-bit rectangle of LI x LQ levels: (LI^2 - 1)/3 + (LQ^2 - 1)/3 (one PAM per axis).
    Cross: (31M - 32)/48, from the S x S square (S = 3N/2, sum 2 S^2 (S^2 - 1)/3) less the four c x c corners
    (c = N/4 levels at N+1, N+3, ..., S-1 on both axes), divided by M: 20 at 32 points, 82 at 128.
    """
    if order == 2:
        return 1.0
    k = bits_per_symbol(order)
    if k % 2 == 0:
        return 2.0 * (order - 1) / 3.0
    if shape == "cross":
        return (31.0 * order - 32.0) / 48.0
    li, lq = 1 << ((k + 1) // 2), 1 << (k // 2)
    return (li * li + lq * lq - 2) / 3.0


def from_table(order: int, rows: tuple[tuple[int, float, float], ...]) -> Constellation:
    """A user table of (label, i, q) rows, scaled to the order's standard energy.

    Tables whose points land on the standard grid with I and Q driven by disjoint label
    bits become product labelings; every other table is demapped by a search over all points.
    """
    key = "constellation.table"
    if len(rows) != order:
        raise SpecError(key, f"{len(rows)} rows", f"exactly {order} rows (one per label) for order {order}")
    labels = [r[0] for r in rows]
    seen = set()
    for lab in labels:
        if lab in seen:
            raise SpecError(key, f"label {shown(lab)!r}", "each label exactly once (duplicate label)")
        seen.add(lab)
    missing = sorted(set(range(order)) - seen)
    if missing:
        raise SpecError(key, f"label {missing[0]} missing", f"labels 0..{order - 1}, each once")
    pts = np.zeros(order, dtype=np.complex128)
    for lab, i, q in rows:
        pts[lab] = complex(float(i), float(q))
    if len(set(pts.tolist())) != order:
        raise SpecError(key, "repeated point", "distinct points, one per label")
    peak = float(max(np.max(np.abs(pts.real)), np.max(np.abs(pts.imag))))
    if not peak > 0:
        raise SpecError(key, "all points at zero", "points with non-zero energy")
    if not 1e-100 < peak < 1e100:             # scaled first, so that no square overflows (1e200) or underflows
        pts = pts / peak
    energy = float(np.mean(np.abs(pts) ** 2))
    # odd-bit orders: the table is scaled to the rectangle's energy, else to the cross's when that puts it on the grid
    shapes = ("rectangular", "cross") if bits_per_symbol(order) % 2 and order >= 32 else ("rectangular",)
    for shape in shapes:
        scaled = pts * np.sqrt(standard_energy(order, shape) / energy)
        snapped = np.round(scaled.real) + 1j * np.round(scaled.imag)
        if np.allclose(scaled, snapped, atol=1e-9) and np.all(snapped.real % 2 == 1) and np.all(
                (snapped.imag % 2 == 1) | (order == 2)):
            break
    else:
        shape = shapes[0]
    pts = pts * np.sqrt(standard_energy(order, shape) / energy)
    snapped = np.round(pts.real) + 1j * np.round(pts.imag)
    if np.allclose(pts, snapped, atol=1e-9):
        pts = snapped
        axes = _separate(order, pts)
        if axes is not None:
            return _product(order, "table", *axes)
    if order > MAX_SEARCH_POINTS:
        raise SpecError(key, f"{order}-point table that is not a product of two PAM labelings",
                        f"such tables up to {MAX_SEARCH_POINTS} points (the demapper searches every point)")
    pts.setflags(write=False)
    return Constellation(order, "table", pts, None)


def _separate(order: int, pts: np.ndarray) -> tuple[Axis, Axis] | None:
    """The (I, Q) axes of a grid table that is a product of two PAM labelings, else None."""
    k = bits_per_symbol(order)
    if order == 2:
        levels_i, levels_q = 2, 1
    elif k % 2:                                   # odd k: a rectangle either way round
        levels_i, levels_q = len(set(pts.real.tolist())), len(set(pts.imag.tolist()))
        if levels_i * levels_q != order or {levels_i, levels_q} != {1 << (k // 2), 1 << ((k + 1) // 2)}:
            return None
    else:
        levels_i = levels_q = 1 << (k // 2)
    labels = np.arange(order)
    on_i, on_q = [], []
    for b in range(k):
        flip = labels ^ (1 << (k - 1 - b))
        if np.any(pts.real != pts.real[flip]):
            on_i.append(b)
        if np.any(pts.imag != pts.imag[flip]):
            on_q.append(b)
    if set(on_i) & set(on_q) or len(on_i) + len(on_q) != k:
        return None
    if max(np.abs(pts.real)) > levels_i - 1 or max(np.abs(pts.imag), default=0) > levels_q - 1:
        return None
    axes = []
    bits = label_bits(labels, k)
    for coord, lbits, levels in ((pts.real, on_i, levels_i), (pts.imag, on_q, levels_q)):
        if levels == 1:
            axes.append(_NO_AXIS)
            continue
        n = ((coord + levels - 1) / 2).astype(np.int64)
        best = None
        for perm in permutations(lbits):
            code = np.zeros(order, dtype=np.int64)
            for lb in perm:
                code = (code << 1) | bits[:, lb]
            codes = [0] * levels
            for c, nn in zip(code, n):
                codes[nn] = int(c)
            axis = _axis(levels, perm, codes)
            if best is None:
                best = axis
            if axis.gray_mask is not None:
                best = axis
                break
        axes.append(best)
    return axes[0], axes[1]
