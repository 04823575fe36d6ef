"""The bit-exact model on symbols: map labels or bits to output codes, demap input codes to LLRs.

Pure numpy, integer arithmetic only: the contract the generated RTL equals bit for bit.
"""

from __future__ import annotations

import numpy as np

from ..numbers import bits_to_labels, label_bits, quantize
from ..spec import DesignSpec
from .cross import combine as cross_combine
from .cross import steps as cross_steps
from .design import Design, derive
from .modes import mode_codes, mode_steps
from .steps import axis_steps, output


def _design(spec_or_design: DesignSpec | Design) -> Design:
    return spec_or_design if isinstance(spec_or_design, Design) else derive(spec_or_design)


def _mode_index(design: Design, modes: np.ndarray | None, shape: tuple[int, ...]) -> np.ndarray | None:
    """Mode indices of the symbols (a code past the list acts as the last mode); None for a single order."""
    if not design.modes:
        if modes is not None:
            raise ValueError("this design has one order (no constellation.orders): give no modes")
        return None
    if modes is None:
        raise ValueError("this design has modes (constellation.orders): give a mode code per symbol")
    return mode_codes(np.broadcast_to(np.asarray(modes, dtype=np.int64), shape), len(design.modes), design.mode_width)


def map_labels(spec: DesignSpec | Design, labels: np.ndarray, modes: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Mapper: integer labels (b0 = MSB) to signed output codes (i, q), int64.

    An adaptive core takes a mode code per symbol; the label is then that mode's own (0 .. M_m - 1).
    """
    design = _design(spec)
    labels = np.asarray(labels, dtype=np.int64)
    idx = _mode_index(design, modes, labels.shape)
    if idx is None:
        if labels.size and (labels.min() < 0 or labels.max() >= design.constellation.order):
            raise ValueError(f"labels must be in 0..{design.constellation.order - 1}")
        return np.take(design.point_i, labels), np.take(design.point_q, labels)
    orders = np.asarray([m.order for m in design.modes], dtype=np.int64)[idx]
    if labels.size and (labels.min() < 0 or np.any(labels >= orders)):
        raise ValueError("labels must be in 0..M-1 of each symbol's mode")
    m_max = design.constellation.order
    pi = np.zeros((len(design.modes), m_max), dtype=np.int64)
    pq = np.zeros_like(pi)
    for n, m in enumerate(design.modes):
        pi[n, :m.order], pq[n, :m.order] = m.point_i, m.point_q
    return pi[idx, labels], pq[idx, labels]


def map_bits(spec: DesignSpec | Design, bits: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Mapper: bits (N, k) of 0/1, column 0 = b0 (first in time), to output codes (i, q)."""
    design = _design(spec)
    bits = np.asarray(bits)
    if bits.ndim != 2 or bits.shape[1] != design.bits:
        raise ValueError(f"bits must have shape (N, {design.bits})")
    return map_labels(design, bits_to_labels(bits))


def _check_codes(design: Design, i: np.ndarray, q: np.ndarray, scale) -> tuple:
    ifmt = design.input_format
    i = np.asarray(i, dtype=np.int64)
    q = np.asarray(q, dtype=np.int64)
    if i.shape != q.shape or i.ndim != 1:
        raise ValueError("i and q must be 1-D arrays of the same length")
    for name, v in (("i", i), ("q", q)):
        if v.size and (v.min() < ifmt.min_code or v.max() > ifmt.max_code):
            raise ValueError(f"{name} codes must be in {ifmt.min_code}..{ifmt.max_code}")
    if design.scale_format is None:
        if scale is not None:
            raise ValueError("this design has no reliability input (demapper.scale_width = 0)")
    else:
        if scale is None:
            raise ValueError("this design needs a reliability scale code per symbol")
        scale = np.broadcast_to(np.asarray(scale, dtype=np.int64), i.shape)
        if scale.size and (scale.min() < 0 or scale.max() > design.scale_format.max_code):
            raise ValueError(f"scale codes must be in 0..{design.scale_format.max_code}")
    return i, q, scale


def _demap_modes(design: Design, i: np.ndarray, q: np.ndarray, scale: np.ndarray | None, idx: np.ndarray,
                 direct: bool = False) -> np.ndarray:
    """An adaptive core: each symbol by its mode's tables (or steps), label bit b in column b of the largest order's
    k columns, the columns past the mode's bits zero (model.modes)."""
    hard = design.spec.demapper.algorithm == "hard"
    f = design.spec.demapper.input_fraction
    out = np.zeros((i.size, design.bits), dtype=np.int32)
    offset = -design.input_format.min_code
    for n, m in enumerate(design.modes):
        rows = np.flatnonzero(idx == n)
        if not rows.size:
            continue
        s = None if scale is None else scale[rows, None]
        for c, (ad, (mag, neg), llr, hb) in enumerate(zip(m.axes, m.tables, m.llr_tables, m.hard_tables)):
            y = (i, q)[c][rows]
            cols = list(ad.axis.label_bits)
            if direct:
                mag_d, neg_d, hard_d = mode_steps(ad, design.spec.demapper.algorithm, f, m.shift, y)
                out[np.ix_(rows, cols)] = hard_d if hard else output(design.output_stage, mag_d, neg_d, s)
            elif hard:
                out[np.ix_(rows, cols)] = hb[y + offset]
            elif s is None:
                out[np.ix_(rows, cols)] = llr[y + offset]
            else:
                out[np.ix_(rows, cols)] = output(design.output_stage, mag[y + offset].astype(np.int64), neg[y + offset], s)
    return out


def demap(spec: DesignSpec | Design, i: np.ndarray, q: np.ndarray, scale: np.ndarray | None = None,
          modes: np.ndarray | None = None) -> np.ndarray:
    """Demapper: input codes (i, q) (and reliability codes) to LLR codes, shape (N, k), int32.

    Positive means bit 0 is more likely; column 0 is b0. For algorithm 'hard' the result is
    the hard-decided bits (0/1) instead. An adaptive core takes a mode code per symbol: k is the
    largest order's, the columns past the mode's bits are zero.
    """
    design = _design(spec)
    i, q, scale = _check_codes(design, i, q, scale)
    idx = _mode_index(design, modes, i.shape)
    if idx is not None:
        return _demap_modes(design, i, q, scale, idx)
    if design.spec.demapper.algorithm == "hard":
        return hard_decisions(design, i, q).astype(np.int32)
    if design.cross is not None:
        mag, neg, _ = _cross_tables(design, i, q)
        return output(design.output_stage, mag, neg, None if scale is None else scale[:, None]).astype(np.int32)
    if not design.per_axis:
        mag, neg, _ = _search(design, i, q)
        return output(design.output_stage, mag, neg, None if scale is None else scale[:, None]).astype(np.int32)
    offset = -design.input_format.min_code
    idx = (i + offset, q + offset)
    if scale is None:
        out = np.take(design.llr_tables[0], idx[0], axis=0)
        if len(design.axes) > 1:
            out += np.take(design.llr_tables[1], idx[1], axis=0)
        return out
    k = design.bits
    out = np.zeros((i.size, k), dtype=np.int32)
    for ad, (mag_t, neg_t), ix in zip(design.axes, design.tables, idx):
        cols = list(ad.axis.label_bits)
        out[:, cols] = output(design.output_stage, mag_t[ix], neg_t[ix], scale[:, None])
    return out


def demap_direct(spec: DesignSpec | Design, i: np.ndarray, q: np.ndarray, scale: np.ndarray | None = None,
                 modes: np.ndarray | None = None) -> np.ndarray:
    """`demap` computed through the step functions on the given inputs (no tables); for tests."""
    design = _design(spec)
    i, q, scale = _check_codes(design, i, q, scale)
    idx = _mode_index(design, modes, i.shape)
    if idx is not None:
        return _demap_modes(design, i, q, scale, idx, direct=True)
    if design.cross is not None:
        mag, neg, hard = cross_steps(design.cross, i, q, design.spec.demapper.input_fraction, design.bits)
        if design.spec.demapper.algorithm == "hard":
            return hard.astype(np.int32)
        return output(design.output_stage, mag, neg, None if scale is None else scale[:, None]).astype(np.int32)
    if design.spec.demapper.algorithm == "hard" or not design.per_axis:
        return demap(design, i, q, scale)
    out = np.zeros((i.size, design.bits), dtype=np.int32)
    s = None if scale is None else scale[:, None]
    for ad, y in zip(design.axes, (i, q)):
        mag, neg, _ = axis_steps(ad, design.spec.demapper.algorithm, design.spec.demapper.input_fraction, y)
        out[:, list(ad.axis.label_bits)] = output(design.output_stage, mag, neg, s)
    return out


def hard_decisions(spec: DesignSpec | Design, i: np.ndarray, q: np.ndarray, modes: np.ndarray | None = None) -> np.ndarray:
    """Hard-decided bits (N, k) of input codes: the nearest point's label (ties to the upper level).

    An adaptive core: the nearest declared point of each symbol's mode, its bits in the first k_m columns."""
    design = _design(spec)
    i, q, _ = _check_codes(design, i, q, 1 if design.scale_format else None)
    idx = _mode_index(design, modes, i.shape)
    if idx is not None:
        return _hard_modes(design, i, q, idx)
    if design.cross is not None:
        return _cross_tables(design, i, q)[2]
    if not design.per_axis:
        return _search(design, i, q)[2]
    offset = -design.input_format.min_code
    out = np.take(design.hard_tables[0], i + offset, axis=0)
    if len(design.axes) > 1:
        out |= np.take(design.hard_tables[1], q + offset, axis=0)
    return out


def _hard_modes(design: Design, i: np.ndarray, q: np.ndarray, idx: np.ndarray) -> np.ndarray:
    out = np.zeros((i.size, design.bits), dtype=np.int8)
    offset = -design.input_format.min_code
    for n, m in enumerate(design.modes):
        rows = np.flatnonzero(idx == n)
        for c, (ad, hb) in enumerate(zip(m.axes, m.hard_tables)):
            out[np.ix_(rows, list(ad.axis.label_bits))] = hb[(i, q)[c][rows] + offset]
    return out


def _cross_tables(design: Design, i: np.ndarray, q: np.ndarray):
    """A cross: (|LLR| metric, negative, hard bits) from the per-axis tables and the 2-D step (model.cross)."""
    offset = -design.input_format.min_code
    idx = (i + offset, q + offset)
    t = {name: {key: np.take(v, idx[design.cross.axes[name].component]).astype(np.int64) for key, v in arrays.items()}
         for name, arrays in design.cross_terms.items()}
    return cross_combine(design.cross, t, design.bits)


def _search(design: Design, i: np.ndarray, q: np.ndarray, chunk: int = 4096):
    """Exact 2-D max-log over every point: (|D|, D < 0, hard bits); D in input codes squared."""
    if i.size > chunk:
        parts = [_search(design, i[s:s + chunk], q[s:s + chunk], chunk) for s in range(0, i.size, chunk)]
        return tuple(np.concatenate([p[n] for p in parts]) for n in range(3))
    k = design.bits
    di = i[:, None] - design.search_i[None, :]
    dq = q[:, None] - design.search_q[None, :]
    dist = di * di + dq * dq                                  # (N, M) int64
    bits = label_bits(np.arange(design.constellation.order), k).astype(bool)
    mag = np.empty((i.size, k), dtype=np.int64)
    neg = np.empty((i.size, k), dtype=bool)
    for b in range(k):
        d = dist[:, bits[:, b]].min(axis=1) - dist[:, ~bits[:, b]].min(axis=1)
        mag[:, b] = np.abs(d)
        neg[:, b] = d < 0
    hard = label_bits(np.argmin(dist, axis=1), k)
    return mag, neg, hard


def quantize_input(spec: DesignSpec | Design, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Normalized complex samples to demapper input codes (round half-even, saturate), as an ADC/AGC would."""
    design = _design(spec)
    amp = np.asarray(y) / design.constellation.kappa          # amplitude units
    fmt = design.input_format
    return quantize(amp.real, fmt, "half-even"), quantize(amp.imag, fmt, "half-even")


def llr_scale_to_nats(spec: DesignSpec | Design, n0: float) -> float:
    """Factor that turns LLR codes (no reliability input) into natural-log LLRs at noise density n0."""
    return _design(spec).llr_lsb / n0


__all__ = ["demap", "demap_direct", "hard_decisions", "llr_scale_to_nats", "map_bits", "map_labels",
           "quantize_input"]
