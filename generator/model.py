"""The bit-exact fixed-point model: the contract the generated RTL equals bit for bit.

Pure numpy, integer arithmetic only in the fixed-point path. The demapper is written as the
hardware's steps (`decide`, `metric` or `fold`, then `output`); for a product labeling each
axis is a function of its own input code, so `derive` evaluates those steps once over every
input code and the fast path reads the result from per-axis tables. Float references
(exact log-MAP and max-log, normalized units) sit beside it for analysis and tests.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np

from .constellation import Axis, Constellation, bits_to_labels, from_table, label_bits, named
from .errors import SpecError
from .fixed import QFormat, bits_for_range, quantize, round_float, shift_round
from .spec import DesignSpec

#: int64 products must stay below this (the model's exactness limit and a sane hardware limit)
_PRODUCT_LIMIT = 1 << 62


# --------------------------------------------------------------------------- derived design


@dataclass(frozen=True, eq=False)
class AxisDemap:
    """Per-axis demapper tables and steps for one PAM axis."""

    axis: Axis
    #: competitor offset dn[j, n_hat, e < 0] (levels) of axis bit j, maxlog
    competitor: np.ndarray
    #: True where competitor[j] depends on the residual's sign (else only on n_hat)
    uses_sign: tuple[bool, ...]
    #: per axis bit: True when the bit is inverted against the Gray code (folded sign)
    inverted: tuple[bool, ...]


@dataclass(frozen=True, eq=False)
class Design:
    """Everything derived from a spec: constellation, formats, tables and internal widths."""

    spec: DesignSpec
    constellation: Constellation
    #: mapper output format and the value of one output LSB in normalized units
    mapper_format: QFormat
    mapper_lsb: float
    #: mapper I and Q codes of every label, shape (M,)
    point_i: np.ndarray
    point_q: np.ndarray
    #: per-axis level codes, indexed by level n (product labelings); empty otherwise
    level_codes: tuple[np.ndarray, ...]
    input_format: QFormat
    input_lsb: float
    llr_format: QFormat
    llr_lsb: float
    scale_format: QFormat | None
    scale_lsb: float
    #: fraction bits of the LLR magnitude before the output stage, and that stage's right shift
    metric_fraction: int
    output_shift: int
    axes: tuple[AxisDemap, ...]
    #: input codes of every point (2-D search only), shape (M,)
    search_i: np.ndarray
    search_q: np.ndarray
    #: internal widths: name -> (width, signed)
    widths: dict[str, tuple[int, bool]] = field(default_factory=dict)
    #: per-axis magnitude/negative tables over every input code (product labelings)
    tables: tuple[tuple[np.ndarray, np.ndarray], ...] = ()
    #: per-axis final LLR tables (N_codes, k), when there is no reliability input
    llr_tables: tuple[np.ndarray, ...] = ()
    hard_tables: tuple[np.ndarray, ...] = ()

    @property
    def bits(self) -> int:
        return self.constellation.bits

    @property
    def per_axis(self) -> bool:
        return self.constellation.axes is not None


def constellation_of(spec: DesignSpec) -> Constellation:
    c = spec.constellation
    if c.labeling == "table":
        return from_table(c.order, c.table)
    return named(c.order, c.labeling)


@lru_cache(maxsize=64)
def derive(spec: DesignSpec) -> Design:
    """Derive and check everything the model, the RTL and the manifest need (raises SpecError)."""
    const = constellation_of(spec)
    d = spec.demapper
    if d.algorithm == "folded" and not const.gray_type:
        raise SpecError("demapper.algorithm", "folded",
                        f"maxlog or hard for labeling {spec.constellation.labeling!r} at order "
                        f"{const.order} (folded needs a Gray-type product labeling)")
    if spec.mapper.implementation == "logic" and not _logic_capable(const):
        raise SpecError("mapper.implementation", "logic",
                        "rom for this labeling (logic needs a Gray-type or natural product labeling)")
    mfmt, mlsb, pi, pq, levels = _mapper_tables(spec, const)
    ifmt = QFormat(d.input_width, d.input_fraction)
    f = d.input_fraction
    peak = int(max(np.max(np.abs(const.points.real)), np.max(np.abs(const.points.imag))))
    if const.on_grid:
        need = (peak << f) if peak else 0
        if need > ifmt.max_code:
            minimum = (max(peak, 1) << f).bit_length() + 1
            raise SpecError("demapper.input_width", d.input_width,
                            f"at least {minimum} bits to hold the outermost level at input_fraction {f}")
    lfmt = QFormat(d.llr_width, d.llr_fraction)
    sfmt = QFormat(d.scale_width, d.scale_fraction, signed=False) if d.scale_width else None
    kappa = const.kappa
    axes: list[AxisDemap] = []
    search_i = search_q = np.zeros(0, np.int64)
    widths: dict[str, tuple[int, bool]] = {}
    if const.axes is not None:
        for ax in const.axes:
            if ax.bits:
                axes.append(_axis_demap(ax))
        metric_fraction = f
    else:
        search_i = round_float(const.points.real * 2.0 ** f, "half-even")
        search_q = round_float(const.points.imag * 2.0 ** f, "half-even")
        if len(set(zip(search_i.tolist(), search_q.tolist()))) != const.order:
            raise SpecError("demapper.input_fraction", f, "more fraction bits: the table's points collide on the input grid")
        metric_fraction = 2 * f + 2
    scale_frac = d.scale_fraction if sfmt else 0
    shift = metric_fraction + scale_frac - d.llr_fraction
    design = Design(
        spec=spec, constellation=const, mapper_format=mfmt, mapper_lsb=mlsb, point_i=pi, point_q=pq,
        level_codes=levels, input_format=ifmt, input_lsb=kappa * 2.0 ** -f, llr_format=lfmt,
        # one LLR LSB = 2^-llr_fraction metric units; a metric unit is (2 amplitude units)^2 = 4 kappa^2
        llr_lsb=4.0 * kappa * kappa * 2.0 ** -d.llr_fraction, scale_format=sfmt,
        scale_lsb=(2.0 ** -d.scale_fraction) if sfmt else 1.0, metric_fraction=metric_fraction,
        output_shift=shift, axes=tuple(axes), search_i=search_i, search_q=search_q, widths=widths)
    # the per-axis steps over every input code: sized once, then kept as the fast path's tables
    steps = None
    if design.per_axis:
        codes = np.arange(ifmt.min_code, ifmt.max_code + 1, dtype=np.int64)
        steps = [_axis_steps(design, ad, codes) for ad in design.axes]
    _derive_widths(design, steps)
    if steps is not None:
        _build_tables(design, steps)
    return design


def _logic_capable(const: Constellation) -> bool:
    if const.axes is None:
        return False
    return all(a.gray_mask is not None or a.codes == tuple(range(a.levels)) for a in const.axes if a.bits)


def _mapper_tables(spec: DesignSpec, const: Constellation):
    """Mapper output codes per label (and per-axis levels), checked for collisions and clipping."""
    m = spec.mapper
    fmt = QFormat(m.width, m.fraction if m.scaling == "unit-power" else 0)
    kappa = const.kappa
    peak = float(max(np.max(np.abs(const.points.real)), np.max(np.abs(const.points.imag))))
    if m.scaling == "unit-power":
        per_amp = kappa * 2.0 ** m.fraction            # output codes per amplitude unit
        key, value = "mapper.fraction", m.fraction
    else:
        per_amp = fmt.max_code * 10.0 ** (-m.backoff_db / 20.0) / peak
        key, value = "mapper.width", m.width

    def codes(x: np.ndarray) -> np.ndarray:
        return round_float(np.asarray(x, dtype=np.float64) * per_amp, m.rounding)

    ci, cq = codes(const.points.real), codes(const.points.imag)
    top = int(max(np.max(np.abs(ci)), np.max(np.abs(cq))))
    if top > fmt.max_code or -top < fmt.min_code:
        limit = m.fraction - (top // (fmt.max_code + 1)).bit_length()
        raise SpecError(key, value, f"the outermost level ({top}) exceeds the {m.width}-bit output; "
                        f"use mapper.fraction <= {limit} or a wider mapper.width")
    if len(set(zip(ci.tolist(), cq.tolist()))) != const.order or (
            const.axes is not None and any(len(set(codes(a.amplitudes).tolist())) != a.levels for a in const.axes)):
        raise SpecError(key, value, f"at least {_mapper_minimum(spec, const, peak)} "
                        f"{'fraction bits' if key == 'mapper.fraction' else 'bits'}: mapper levels collide at this resolution")
    levels = tuple(codes(a.amplitudes) for a in const.axes) if const.axes is not None else ()
    lsb = kappa / per_amp
    for arr in (ci, cq, *levels):
        arr.setflags(write=False)
    return fmt, lsb, ci, cq, levels


def _mapper_minimum(spec: DesignSpec, const: Constellation, peak: float) -> int:
    """Smallest mapper.fraction (unit-power) or mapper.width (full-scale) keeping every level distinct."""
    m = spec.mapper
    start = (m.fraction if m.scaling == "unit-power" else m.width) + 1
    for n in range(start, 63):
        per_amp = (const.kappa * 2.0 ** n if m.scaling == "unit-power"
                   else ((1 << (n - 1)) - 1) * 10.0 ** (-m.backoff_db / 20.0) / peak)
        ci = round_float(const.points.real * per_amp, m.rounding)
        cq = round_float(const.points.imag * per_amp, m.rounding)
        if len(set(zip(ci.tolist(), cq.tolist()))) == const.order and (const.axes is None or all(
                len(set(round_float(a.amplitudes * per_amp, m.rounding).tolist())) == a.levels for a in const.axes)):
            return n
    return 63


def _axis_demap(ax: Axis) -> AxisDemap:
    """Competitor tables by brute force over the axis labeling (exact for any labeling)."""
    L, m = ax.levels, ax.bits
    codes = np.asarray(ax.codes)
    comp = np.zeros((m, L, 2), dtype=np.int64)
    for j in range(m):
        bit = ax.axis_bit(codes, j)
        for n in range(L):
            others = np.flatnonzero(bit != bit[n])
            left = others[others < n]
            right = others[others > n]
            kl = n - left.max() if left.size else None
            kr = right.min() - n if right.size else None
            for neg in (0, 1):
                if kr is None or (kl is not None and (kl < kr or (kl == kr and neg))):
                    comp[j, n, neg] = -kl
                else:
                    comp[j, n, neg] = kr
    uses_sign = tuple(bool(np.any(comp[j, :, 0] != comp[j, :, 1])) for j in range(m))
    mask = ax.gray_mask
    inverted = tuple(bool(mask is not None and (mask >> (m - 1 - j)) & 1) for j in range(m))
    comp.setflags(write=False)
    return AxisDemap(ax, comp, uses_sign, inverted)


# --------------------------------------------------------------------------- demapper steps


def decide(ad: AxisDemap, y: np.ndarray, f: int) -> tuple[np.ndarray, np.ndarray]:
    """Hard decision n_hat (shift and clamp) and residual e = y - a_hat, in input codes."""
    L = ad.axis.levels
    n_hat = np.clip((y + (L << f)) >> (f + 1), 0, L - 1)
    e = y - ((2 * n_hat - (L - 1)) << f)
    return n_hat, e


def metric(ad: AxisDemap, n_hat: np.ndarray, e: np.ndarray, f: int, j: int) -> tuple[np.ndarray, np.ndarray]:
    """Exact max-log |LLR| of axis bit j, nearest-competitor form: R = dn * (dn * 2^f - e) >= 0.

    R is the metric in units of (2 amplitude units)^2 with f fraction bits; the sign (negative
    when the decided level carries bit value 1) comes from the decided level's label.
    """
    dn = ad.competitor[j, n_hat, (e < 0).astype(np.int64)]
    r = dn * ((dn << f) - e)
    neg = ad.axis.axis_bit(np.asarray(ad.axis.codes)[n_hat], j).astype(bool)
    return r, neg


def fold(ad: AxisDemap, y: np.ndarray, f: int) -> list[tuple[np.ndarray, np.ndarray]]:
    """Folded LLRs (Tosato and Bisaglia, ICC 2002): t0 = y, tj = 2^(m-j) 2^f - |t(j-1)|.

    Returns (magnitude, negative) per axis bit; |t| of the most negative input is exact
    because t is one bit wider than the input.
    """
    m = ad.axis.bits
    out = []
    t = y
    for j in range(m):
        if j:
            t = ((1 << (m - j)) << f) - np.abs(t)
        signed = t if ad.inverted[j] else -t
        out.append((np.abs(signed), signed < 0))
    return out


def output(design: Design, mag: np.ndarray, neg: np.ndarray, scale: np.ndarray | None) -> np.ndarray:
    """Output stage: magnitude x scale, rounding shift, symmetric saturation, sign."""
    d = design.spec.demapper
    p = mag if scale is None else mag * scale
    if design.output_shift < 0:
        # clamp before the exact left shift so int64 cannot wrap; same result as shifting first
        p = np.minimum(p, (design.llr_format.max_code >> -design.output_shift) + 1)
    v = shift_round(p, design.output_shift, d.rounding)
    v = np.minimum(v, design.llr_format.max_code)
    return np.where(neg, -v, v)


def _axis_steps(design: Design, ad: AxisDemap, y: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per-axis (magnitude, negative, hard bits), each (N, m), straight from the step functions."""
    f = design.spec.demapper.input_fraction
    n_hat, e = decide(ad, y, f)
    hard = np.stack([ad.axis.axis_bit(np.asarray(ad.axis.codes)[n_hat], j) for j in range(ad.axis.bits)], axis=1)
    if design.spec.demapper.algorithm == "folded":
        pairs = fold(ad, y, f)
    else:
        pairs = [metric(ad, n_hat, e, f, j) for j in range(ad.axis.bits)]
    mag = np.stack([p[0] for p in pairs], axis=1)
    neg = np.stack([p[1] for p in pairs], axis=1)
    return mag, neg, hard.astype(np.int8)


def _derive_widths(design: Design, steps: list | None) -> None:
    """Internal widths from the exact range of every intermediate (exhaustive over input codes).

    `steps` holds `_axis_steps` of each axis over every input code (product labelings)."""
    d = design.spec.demapper
    ifmt = design.input_format
    f = d.input_fraction
    w = design.widths
    smax = design.scale_format.max_code if design.scale_format else 1
    if design.per_axis:
        y = np.arange(ifmt.min_code, ifmt.max_code + 1, dtype=np.int64)
        mag_max = 0
        e_lo = e_hi = 0
        dn_max = 0
        for ad, (mag, _, _) in zip(design.axes, steps):
            _, e = decide(ad, y, f)
            e_lo, e_hi = min(e_lo, int(e.min())), max(e_hi, int(e.max()))
            dn_max = max(dn_max, int(np.abs(ad.competitor).max()))
            mag_max = max(mag_max, int(mag.max()))
        w["residual"] = bits_for_range(e_lo, e_hi)
        w["competitor"] = bits_for_range(-dn_max, dn_max)
        if d.algorithm == "folded":
            w["fold"] = (ifmt.width + 1, True)
    else:
        corner = max(abs(ifmt.min_code), ifmt.max_code)
        far = max(int(np.max(np.abs(design.search_i))), int(np.max(np.abs(design.search_q)))) + corner
        dist_max = 2 * far * far
        w["distance"] = bits_for_range(0, dist_max)
        w["difference"] = bits_for_range(-dist_max, dist_max)
        mag_max = dist_max
    w["magnitude"] = bits_for_range(0, mag_max)
    product_max = mag_max * smax
    if product_max >= _PRODUCT_LIMIT:
        raise SpecError("demapper.scale_width", d.scale_width,
                        f"a narrower reliability input or demapper.input_width: the scaled metric needs "
                        f"{product_max.bit_length()} bits, at most 62 supported")
    w["product"] = bits_for_range(0, product_max)
    w["llr"] = (d.llr_width, True)


def _build_tables(design: Design, steps: list) -> None:
    """The fast path's tables: the per-axis steps over every input code, placed in label-bit columns."""
    k = design.bits
    tables, llr_tables, hard_tables = [], [], []
    for ad, (mag, neg, hard) in zip(design.axes, steps):
        cols = list(ad.axis.label_bits)
        tables.append((mag, neg))
        full = np.zeros((mag.shape[0], k), dtype=np.int32)
        if design.scale_format is None:
            full[:, cols] = output(design, mag, neg, None)
        llr_tables.append(full)
        hb = np.zeros((mag.shape[0], k), dtype=np.int8)
        hb[:, cols] = hard
        hard_tables.append(hb)
    object.__setattr__(design, "tables", tuple(tables))
    object.__setattr__(design, "llr_tables", tuple(llr_tables))
    object.__setattr__(design, "hard_tables", tuple(hard_tables))


# --------------------------------------------------------------------------- public model


def _design(spec_or_design: DesignSpec | Design) -> Design:
    return spec_or_design if isinstance(spec_or_design, Design) else derive(spec_or_design)


def map_labels(spec: DesignSpec | Design, labels: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Mapper: integer labels (b0 = MSB) to signed output codes (i, q), int64."""
    design = _design(spec)
    labels = np.asarray(labels, dtype=np.int64)
    if labels.size and (labels.min() < 0 or labels.max() >= design.constellation.order):
        raise ValueError(f"labels must be in 0..{design.constellation.order - 1}")
    return np.take(design.point_i, labels), np.take(design.point_q, labels)


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


def demap(spec: DesignSpec | Design, i: np.ndarray, q: np.ndarray, scale: np.ndarray | None = None) -> np.ndarray:
    """Demapper: input codes (i, q) (and reliability codes) to LLR codes, shape (N, k), int32.

    Positive means bit 0 is more likely; column 0 is b0. For algorithm 'hard' the result is
    the hard-decided bits (0/1) instead.
    """
    design = _design(spec)
    i, q, scale = _check_codes(design, i, q, scale)
    if design.spec.demapper.algorithm == "hard":
        return hard_decisions(design, i, q).astype(np.int32)
    if not design.per_axis:
        mag, neg, _ = _search(design, i, q)
        return output(design, mag, neg, None if scale is None else scale[:, None]).astype(np.int32)
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
        out[:, cols] = output(design, mag_t[ix], neg_t[ix], scale[:, None])
    return out


def demap_direct(spec: DesignSpec | Design, i: np.ndarray, q: np.ndarray, scale: np.ndarray | None = None) -> np.ndarray:
    """`demap` computed through the step functions on the given inputs (no tables); for tests."""
    design = _design(spec)
    i, q, scale = _check_codes(design, i, q, scale)
    if design.spec.demapper.algorithm == "hard" or not design.per_axis:
        return demap(design, i, q, scale)
    out = np.zeros((i.size, design.bits), dtype=np.int32)
    s = None if scale is None else scale[:, None]
    for ad, y in zip(design.axes, (i, q)):
        mag, neg, _ = _axis_steps(design, ad, y)
        out[:, list(ad.axis.label_bits)] = output(design, mag, neg, s)
    return out


def hard_decisions(spec: DesignSpec | Design, i: np.ndarray, q: np.ndarray) -> np.ndarray:
    """Hard-decided bits (N, k) of input codes: the nearest point's label (ties to the upper level)."""
    design = _design(spec)
    i, q, _ = _check_codes(design, i, q, 1 if design.scale_format else None)
    if not design.per_axis:
        return _search(design, i, q)[2]
    offset = -design.input_format.min_code
    out = np.take(design.hard_tables[0], i + offset, axis=0)
    if len(design.axes) > 1:
        out |= np.take(design.hard_tables[1], q + offset, axis=0)
    return out


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


# --------------------------------------------------------------------------- float references


def _axis_float(points_axis: np.ndarray, codes_bits: np.ndarray, y: np.ndarray, n0: float | None):
    """Per-axis float LLRs: exact (n0 given) or max-log metric (n0 None), (N, m)."""
    d2 = (y[:, None] - points_axis[None, :]) ** 2
    out = []
    for j in range(codes_bits.shape[1]):
        one = codes_bits[:, j].astype(bool)
        if n0 is None:
            out.append(d2[:, one].min(axis=1) - d2[:, ~one].min(axis=1))
        else:
            out.append(_lse(-d2[:, ~one] / n0) - _lse(-d2[:, one] / n0))
    return np.stack(out, axis=1)


def _lse(a: np.ndarray) -> np.ndarray:
    top = a.max(axis=1)
    return top + np.log(np.exp(a - top[:, None]).sum(axis=1))


def _float_llr(const: Constellation, y: np.ndarray, n0: float | None) -> np.ndarray:
    y = np.asarray(y, dtype=np.complex128)
    k = const.bits
    pts = const.normalized
    if const.axes is None:
        d2 = np.abs(y[:, None] - pts[None, :]) ** 2
        bits = label_bits(np.arange(const.order), k).astype(bool)
        cols = []
        for b in range(k):
            if n0 is None:
                cols.append(d2[:, bits[:, b]].min(axis=1) - d2[:, ~bits[:, b]].min(axis=1))
            else:
                cols.append(_lse(-d2[:, ~bits[:, b]] / n0) - _lse(-d2[:, bits[:, b]] / n0))
        return np.stack(cols, axis=1)
    out = np.zeros((y.size, k))
    for ax, comp in zip(const.axes, (y.real, y.imag)):
        if not ax.bits:
            continue
        lev = ax.amplitudes * const.kappa
        cb = np.stack([ax.axis_bit(np.asarray(ax.codes), j) for j in range(ax.bits)], axis=1)
        out[:, list(ax.label_bits)] = _axis_float(lev, cb, comp, n0)
    return out


def llr_exact(spec_or_const: DesignSpec | Design | Constellation, y: np.ndarray, n0: float) -> np.ndarray:
    """Exact log-MAP bit LLRs (natural log, positive = bit 0) of normalized samples y in AWGN of density n0."""
    return _float_llr(_const(spec_or_const), y, float(n0))


def llr_maxlog(spec_or_const: DesignSpec | Design | Constellation, y: np.ndarray, n0: float | None = None) -> np.ndarray:
    """Float max-log: min_{b=1}|y-x|^2 - min_{b=0}|y-x|^2 in normalized units (divided by n0 when given)."""
    out = _float_llr(_const(spec_or_const), y, None)
    return out if n0 is None else out / n0


def _const(obj) -> Constellation:
    if isinstance(obj, Constellation):
        return obj
    return _design(obj).constellation


__all__ = ["Design", "derive", "map_bits", "map_labels", "demap", "demap_direct", "hard_decisions",
           "quantize_input", "llr_exact", "llr_maxlog", "llr_scale_to_nats", "constellation_of",
           "decide", "metric", "fold", "output"]
