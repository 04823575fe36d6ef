"""Constellations and bit labelings, in amplitude units (half the minimum distance = 1).

A label is an integer of k bits whose most significant bit is b0, the first bit in time.
Every named labeling is a product of two per-axis PAM labelings (an `Axis` each for I and
Q); 3GPP BPSK, whose one bit moves both I and Q, and user tables that are not products
are `Constellation`s without axes, demapped by an exact search over all points.
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


@dataclass(frozen=True, eq=False)
class Constellation:
    """Points (complex, amplitude units) indexed by label, with per-axis structure when it has one."""

    order: int
    labeling: str
    #: complex amplitude of each label, shape (M,)
    points: np.ndarray
    #: (I axis, Q axis) for a product labeling, or None for a 2-D search
    axes: tuple[Axis, Axis] | None

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
def named(order: int, labeling: str) -> Constellation:
    """The constellation of a named labeling (see LABELINGS)."""
    k = bits_per_symbol(order)
    if order == 2:
        if labeling == "3gpp-nr":
            # TS 38.211 5.1.2: d = (1 - 2 b0)(1 + j)/sqrt(2): one bit drives both axes.
            points = np.array([1 + 1j, -1 - 1j])
            points.setflags(write=False)
            return Constellation(order, labeling, points, None)
        # gray, ieee-802.11 and natural BPSK: b0 = 0 at -1, b0 = 1 at +1, on I only.
        return _product(order, labeling, _axis(2, (0,), (0, 1)), _NO_AXIS)
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


def standard_energy(order: int) -> float:
    """Average energy, in amplitude units squared, of the order's standard grid (levels +-1, +-3, ...)."""
    return 1.0 if order == 2 else 2.0 * (order - 1) / 3.0


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
    pts = pts * np.sqrt(standard_energy(order) / energy)
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
