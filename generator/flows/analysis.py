"""What the chosen widths cost: seeded Monte-Carlo over AWGN of the bit-exact fixed-point chain.

At each Es/N0 point the engine draws labels and unit Gaussian noise (the same draws at every
point: common random numbers, so curves are smooth in SNR and differences between chains are
precise), and runs three receivers on the same noise:

* fixed: the bit-exact mapper codes -> AWGN -> demapper input quantizer -> `model.demap`
  (and `model.hard_decisions` for the BER);
* float max-log and float exact log-MAP LLRs of the ideal (unquantized) constellation.

Figures of merit: bit error rate of hard decisions next to the closed-form BER of Gray square
M-QAM (K. Cho and D. Yoon, "On the general BER expression of one- and two-dimensional amplitude
modulations", IEEE Trans. Commun. 50(7), 2002, eq. (14)); the BICM generalized mutual information
(GMI, bits per symbol: k - sum_j E[log2(1 + exp(-s_j * llr_j))], s_j = +1 for bit 0; Caire,
Taricco and Biglieri, IEEE Trans. Inf. Theory 44(3), 1998) where LLRs of arbitrary scale
(fixed-point codes, max-log) are multiplied by the scalar factor that maximizes the GMI (what a
decoder's input scaling would apply); the implementation loss in dB of Es/N0 at an operating
point; the mapper's quantization EVM. Confidence comes from batch means over `BATCHES`
independent batches of symbols.

Conventions: Es is the mean energy of the mapper's actual output (unit power for the ideal
points); a reliability input, when the design has one, is driven with round(2^f / N0), an ideal
1/N0 estimate. GMIs come from histograms of s * LLR (integer codes exactly; float LLRs in bins of
1/64 nat), so the scalar-factor search is cheap. Float exact LLRs are computed on every symbol,
exp() and the level sums in float32 (error < 1e-5 nats), magnitudes capped near 80 nats.
"""

from __future__ import annotations

import json
import math
import re
import sys
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterator, Sequence

import numpy as np

from ..artifacts import probe_file, write_file
from ..errors import SpecError
from ..model import AxisDemap, Design, demap, derive, hard_decisions
from ..numbers import Constellation, label_bits, quantize
from ..spec import DesignSpec

#: independent batches for the batch-means confidence intervals
BATCHES = 16
#: largest chunk of symbols processed at once (bounded memory: a few tens of MB)
CHUNK = 1 << 16
#: float LLRs are computed in blocks of this many symbols (their (levels x N) arrays stay in cache)
FLOAT_BLOCK = 1 << 14
#: float LLR histograms: bins per natural-log unit and the clipping magnitude (nats)
FLOAT_BINS_PER_NAT = 64
FLOAT_LLR_CLIP = 512.0
#: offset (bins) of zero in the float histograms: the clipping magnitude in bins
_FLOAT_OFFSET = int(FLOAT_LLR_CLIP * FLOAT_BINS_PER_NAT)
#: range of the GMI-maximizing scalar factor, relative to the natural scale
FACTOR_RANGE = (2.0 ** -6, 2.0 ** 6)
#: default operating point: float exact GMI at this fraction of log2(M)
DEFAULT_GMI_FRACTION = 0.9
DEFAULT_SYMBOLS = 1_000_000
DEFAULT_SEED = 1
DEFAULT_BUDGET_DB = 0.1
#: two-sided 97.5 % quantile of Student's t with BATCHES - 1 = 15 degrees of freedom
T_975 = 2.131
#: the smallest symbol count (every batch needs a few hundred symbols)
MIN_SYMBOLS = 1024
#: expected bit errors needed to estimate a BER (relative standard error about 10 %), common practice
ERRORS_NEEDED = 100
SNR_LIMITS_DB = (-30.0, 80.0)
MAX_POINTS = 200


# --------------------------------------------------------------------------- SNR syntax


def parse_snr(text: str, *, key: str = "snr") -> list[float]:
    """Es/N0 (or Eb/N0) points in dB: a list "10,12,14" or an inclusive range "start:step:stop"."""
    allowed = "a list like 10,12,14 or a range start:step:stop like 8:2:20 (dB)"
    if not isinstance(text, str) or not text.strip():
        raise SpecError(key, text, allowed)
    s = text.replace(" ", "")
    num = r"[-+]?(?:\d+\.?\d*|\.\d+)"
    if re.fullmatch(rf"{num}:{num}:{num}", s):
        start, step, stop = (float(v) for v in s.split(":"))
        if step <= 0:
            raise SpecError(key, text, "a range with a positive step (start:step:stop)")
        count = math.floor((stop - start) / step + 1e-9) + 1
        if count < 1:
            raise SpecError(key, text, "a non-empty range: stop >= start")
        if count > MAX_POINTS:
            raise SpecError(key, text, f"at most {MAX_POINTS} points")
        points = [round(start + i * step, 9) for i in range(count)]
    elif re.fullmatch(rf"{num}(?:,{num})*", s):
        points = [float(v) for v in s.split(",")]
        if len(points) > MAX_POINTS:
            raise SpecError(key, text, f"at most {MAX_POINTS} points")
        if len(set(points)) != len(points):
            raise SpecError(key, text, "distinct points")
    else:
        raise SpecError(key, text, allowed)
    lo, hi = SNR_LIMITS_DB
    for p in points:
        if not lo <= p <= hi:
            raise SpecError(key, text, f"points from {lo:g} to {hi:g} dB")
    return sorted(points)


def esn0_from_ebn0(ebn0_db: float, bits: int) -> float:
    """Es/N0 in dB of an Eb/N0 in dB at `bits` bits per symbol."""
    return ebn0_db + 10.0 * math.log10(bits)


def check_symbols(symbols: int, bits: int, ber_floor: float | None = None) -> None:
    """Refuse symbol counts too small for the batch-means confidence or for the requested BER floor."""
    if not isinstance(symbols, int) or isinstance(symbols, bool) or symbols < MIN_SYMBOLS:
        raise SpecError("symbols", symbols, f"an integer of at least {MIN_SYMBOLS} ({BATCHES} batches of 64)")
    if symbols > 10 ** 10:
        raise SpecError("symbols", symbols, "at most 1e10")
    if ber_floor is not None:
        if not 0 < ber_floor < 0.5:
            raise SpecError("ber_floor", ber_floor, "a BER between 0 and 0.5")
        need = math.ceil(ERRORS_NEEDED / (bits * ber_floor))
        if symbols < need:
            raise SpecError("symbols", symbols, f"at least {need} to estimate a BER of {ber_floor:g} "
                            f"({ERRORS_NEEDED} expected bit errors at {bits} bits per symbol)")


# --------------------------------------------------------------------------- theory


def ber_gray_qam(order: int, esn0_db: float | np.ndarray) -> np.ndarray:
    """Exact BER of Gray-labeled M-QAM (and BPSK) with nearest-point decisions in AWGN.

    BPSK: Q(sqrt(2 Es/N0)) = erfc(sqrt(Es/N0)) / 2. Every other order is the I x J rectangle of Cho and Yoon
    (`ber_gray_rectangular`), I = 2^ceil(k/2), J = 2^floor(k/2): the square I = J = sqrt(M) for even k.
    """
    if order == 2:
        es = 10.0 ** (np.atleast_1d(np.asarray(esn0_db, dtype=np.float64)) / 10.0)
        return 0.5 * np.vectorize(math.erfc)(np.sqrt(es))
    k_bits = order.bit_length() - 1
    return ber_gray_rectangular(1 << ((k_bits + 1) // 2), 1 << (k_bits // 2), esn0_db)


def ber_gray_rectangular(levels_i: int, levels_q: int, esn0_db: float | np.ndarray) -> np.ndarray:
    """Exact BER of Gray-labeled I x J rectangular QAM (binary-reflected Gray per axis), nearest-point decisions.

    Cho and Yoon, IEEE Trans. Commun. 50(7), 2002, eqs. (14)-(16):
    P_b = (sum_{k=1}^{log2 I} P_I(k) + sum_{l=1}^{log2 J} P_J(l)) / log2(I J), P_I(k) = (1/I) sum_{i=0}^{(1-2^-k)I-1}
    (-1)^floor(i 2^(k-1)/I) (2^(k-1) - floor(i 2^(k-1)/I + 1/2)) erfc((2i+1) sqrt(3 Es/N0 / (I^2 + J^2 - 2))),
    the mean energy of the rectangle being (I^2 + J^2 - 2)/3 (d_min = 2). I = J is the square.
    """
    es = 10.0 ** (np.atleast_1d(np.asarray(esn0_db, dtype=np.float64)) / 10.0)
    erfc = np.vectorize(math.erfc)
    arg = np.sqrt(3.0 * es / (levels_i ** 2 + levels_q ** 2 - 2))
    total = np.zeros_like(es)
    for L in (levels_i, levels_q):
        for k in range(1, L.bit_length()):
            pk = np.zeros_like(es)
            for i in range(int((1 - 2.0 ** -k) * L)):
                w = (i * 2 ** (k - 1)) // L
                weight = (-1) ** w * (2 ** (k - 1) - math.floor(i * 2 ** (k - 1) / L + 0.5))
                pk += weight * erfc((2 * i + 1) * arg)
            total += pk / L
    return total / ((levels_i * levels_q).bit_length() - 1)


#: Gauss-Legendre nodes of the cross BER's corner integrals (per piece of each integral)
_GL_NODES, _GL_WEIGHTS = np.polynomial.legendre.leggauss(48)


def ber_cross_qam(const: Constellation, esn0_db: float | np.ndarray) -> np.ndarray:
    """Exact BER of Smith's cross (its quasi-Gray labeling) with nearest-point decisions in AWGN.

    The method of P. K. Vitthaladevuni, M.-S. Alouini and J. C. Kieffer, "Exact BER computation for cross QAM
    constellations", IEEE Trans. Wireless Commun. 4(6), 2005 (from memory: the BER is the sum, over the
    transmitted points x and the decision regions of the points x', of (Hamming distance of the labels) x
    P(y in the region of x' | x) / (k M), each region's probability a product of Gaussian tail integrals).
    Here the regions come from the enclosing S x S square: its cells are products of intervals (erfc
    products, as in the paper); a cell of a cut corner goes to the core's point (a_I, +-(N-1)) or the arms'
    (+-(N-1), a_Q), split by the line X_core = X_arms, and that split's probability is integrated
    numerically (Gauss-Legendre, 48 nodes per smooth piece, error far below 1e-12 of the BER) instead of the
    paper's closed form, not reproduced here. Checked against Monte-Carlo in tests/test_cross.py.
    """
    cross = const.cross
    if cross is None:
        raise ValueError("not a cross constellation")
    es = 10.0 ** (np.atleast_1d(np.asarray(esn0_db, dtype=np.float64)) / 10.0)
    k, m = const.bits, const.order
    s, n = cross.span, cross.n
    pts = const.points
    xi, xq = pts.real, pts.imag
    lab_at = {(int(p.real), int(p.imag)): lab for lab, p in enumerate(pts)}
    hd = np.array([[bin(a ^ b).count("1") for b in range(m)] for a in range(m)], dtype=np.float64)
    amps = 2 * np.arange(s) - (s - 1)
    lo = np.where(np.arange(s) == 0, -np.inf, amps - 1.0)
    hi = np.where(np.arange(s) == s - 1, np.inf, amps + 1.0)
    out = np.zeros_like(es)
    for idx, snr in enumerate(es):
        sigma = math.sqrt(const.energy / (2.0 * snr))           # per component, amplitude units
        r2 = sigma * math.sqrt(2.0)

        def cdf(z: np.ndarray) -> np.ndarray:
            return 0.5 * _erfc_v(-z / r2)

        pi_ = cdf(hi[None, :] - xi[:, None]) - cdf(lo[None, :] - xi[:, None])      # (M, S)
        pq_ = cdf(hi[None, :] - xq[:, None]) - cdf(lo[None, :] - xq[:, None])
        total = 0.0
        for a in range(s):
            for b in range(s):
                ai, aq = int(amps[a]), int(amps[b])
                p_cell = pi_[:, a] * pq_[:, b]
                here = lab_at.get((ai, aq))
                if here is not None:
                    total += float(p_cell @ hd[:, here])
                    continue
                core = lab_at[(ai, int(np.sign(aq)) * (n - 1))]
                arms = lab_at[(int(np.sign(ai)) * (n - 1), aq)]
                split = _corner_split(xi, xq, ai, aq, n, sigma)
                total += float(p_cell @ hd[:, arms] + split @ (hd[:, core] - hd[:, arms]))
        out[idx] = total / (k * m)
    return out


def _erfc_v(z: np.ndarray) -> np.ndarray:
    return np.vectorize(math.erfc, otypes=[np.float64])(z) if np.ndim(z) else np.float64(math.erfc(float(z)))


def _corner_split(xi: np.ndarray, xq: np.ndarray, ai: int, aq: int, n: int, sigma: float) -> np.ndarray:
    """P(y in the square's cell (ai, aq) of a cut corner, and nearer the core's candidate | x), for every x.

    Mirrored into the first quadrant (the noise is symmetric). There the core's candidate is (ai, N-1) and the
    arms' (N-1, aq); the core wins where (aq - N+1)(2v - aq - N+1) <= (ai - N+1)(2u - ai - N+1), v below a line.
    """
    si, sq = (1 if ai > 0 else -1), (1 if aq > 0 else -1)
    ai, aq = abs(ai), abs(aq)
    x, y = xi * si, xq * sq
    s_top = ai + 1.0, aq + 1.0
    ul, uh = ai - 1.0, s_top[0]
    vl, vh = aq - 1.0, s_top[1]
    outer = 3 * n // 2 - 1
    if ai == outer:
        uh = np.inf
    if aq == outer:
        vh = np.inf
    di, dq = ai - (n - 1), aq - (n - 1)

    def line(u: np.ndarray) -> np.ndarray:
        return (di * (2.0 * u - ai - (n - 1)) / dq + aq + (n - 1)) / 2.0

    r2 = sigma * math.sqrt(2.0)
    res = np.zeros(x.size)
    # points farther than 12 sigma from the cell contribute below exp(-72): left at 0
    near = np.flatnonzero((np.maximum(ul - x, 0) + np.maximum(x - uh, 0) < 12 * sigma)
                          & (np.maximum(vl - y, 0) + np.maximum(y - vh, 0) < 12 * sigma))
    if not near.size:
        return res
    full, x, y = res, x[near], y[near]
    res = np.zeros(near.size)
    # pieces of u where the line is below the cell, inside it, above it: breakpoints where line(u) = vl, vh
    u_vl = ((2.0 * vl - aq - (n - 1)) * dq / di + ai + (n - 1)) / 2.0
    u_vh = ((2.0 * vh - aq - (n - 1)) * dq / di + ai + (n - 1)) / 2.0 if np.isfinite(vh) else np.inf
    for lo_u, hi_u in ((ul, min(max(u_vl, ul), uh)), (min(max(u_vl, ul), uh), min(max(u_vh, ul), uh)),
                       (min(max(u_vh, ul), uh), uh)):
        if not hi_u > lo_u:
            continue
        # u = x + sigma t, t within +-10 (beyond: below 1e-22 of the tail), per transmitted point
        t_lo = np.maximum((lo_u - x) / sigma, -10.0)
        t_hi = np.minimum((hi_u - x) / sigma, 10.0) if np.isfinite(hi_u) else np.full(x.size, 10.0)
        ok = t_hi > t_lo
        if not ok.any():
            continue
        half = (t_hi - t_lo) / 2.0
        mid = (t_hi + t_lo) / 2.0
        t = mid[:, None] + half[:, None] * _GL_NODES[None, :]                        # (M, nodes)
        u = x[:, None] + sigma * t
        top = np.minimum(np.maximum(line(u), vl), vh)
        inner = 0.5 * (_erfc_v((vl - y[:, None]) / r2) - _erfc_v((top - y[:, None]) / r2))
        dens = np.exp(-0.5 * t * t) / math.sqrt(2.0 * math.pi)
        res += np.where(ok, half * ((dens * inner) @ _GL_WEIGHTS), 0.0)
    full[near] = res
    return full


def theory_ber(design: Design, esn0_db: float | np.ndarray) -> np.ndarray:
    """The closed-form BER that describes the design's labeling (see `theory_applies`)."""
    const = design.constellation
    if const.cross is not None:
        return ber_cross_qam(const, esn0_db)
    return ber_gray_qam(const.order, esn0_db)


def theory_source(design: Design) -> str:
    """Where the theory curve comes from, or why there is none (analysis.json 'theory')."""
    if not theory_applies(design):
        return "none: the labeling is not Gray-type square or rectangular QAM, nor Smith's cross"
    const = design.constellation
    if const.cross is not None:
        return CROSS_THEORY_SOURCE
    if const.order > 2 and const.bits % 2:
        return THEORY_SOURCE.replace("Gray square M-QAM", "Gray I x J rectangular QAM")
    return THEORY_SOURCE


def theory_applies(design: Design) -> bool:
    """True when a closed form describes the labeling: Cho-Yoon (Gray-type square or rectangular QAM, BPSK) or
    the cross formula (Smith's cross)."""
    const = design.constellation
    if const.cross is not None:
        return True
    if const.order == 2:
        return True
    if not const.gray_type:
        return False
    # Cho-Yoon's rectangle is binary-reflected Gray on 2^ceil(k/2) x 2^floor(k/2) levels (either way round)
    return all(a.levels == 1 << a.bits for a in const.axes if a.bits)


def shannon_capacity(esn0_db: float | np.ndarray) -> np.ndarray:
    """AWGN capacity log2(1 + Es/N0) of a complex channel, bits per symbol (Shannon 1948)."""
    return np.log2(1.0 + 10.0 ** (np.asarray(esn0_db, dtype=np.float64) / 10.0))


# --------------------------------------------------------------------------- EVM


def mapper_evm(design: Design) -> dict[str, float]:
    """RMS EVM of the quantized mapper against the ideal points, all labels equally likely.

    EVM = sqrt(mean |x_q - x|^2 / mean |x|^2); `evm_uniform_model_db` is the uniform-quantization
    estimate 2 * LSB^2 / 12 (two components) over unit power.
    """
    const = design.constellation
    ideal = const.normalized
    xq = (design.point_i + 1j * design.point_q) * design.mapper_lsb
    err = float(np.mean(np.abs(xq - ideal) ** 2))
    sig = float(np.mean(np.abs(ideal) ** 2))
    ratio = err / sig
    evm_db = 10.0 * math.log10(ratio) if ratio > 0 else -math.inf
    model_ratio = 2.0 * design.mapper_lsb ** 2 / 12.0
    if const.axes is not None and not const.axes[1].bits:
        model_ratio /= 2.0          # BPSK on I only: the Q component is exactly zero
    return {"evm_db": evm_db, "evm_percent": 100.0 * math.sqrt(ratio),
            "evm_uniform_model_db": 10.0 * math.log10(model_ratio),
            "mapper_power_db": 10.0 * math.log10(float(np.mean(np.abs(xq) ** 2)))}


def input_noise(design: Design) -> dict[str, float]:
    """Demapper input quantization: uniform-noise power 2 * LSB^2 / 12 (dB re unit symbol power) and headroom."""
    lsb = design.input_lsb
    const = design.constellation
    peak = float(max(np.max(np.abs(const.normalized.real)), np.max(np.abs(const.normalized.imag))))
    full = design.input_format.max_code * lsb
    return {"input_noise_db": 10.0 * math.log10(2.0 * lsb * lsb / 12.0),
            "input_lsb": lsb, "input_full_scale": full,
            "input_headroom_db": 20.0 * math.log10(full / peak)}


# --------------------------------------------------------------------------- GMI from histograms


def _softplus(scale: float, values: np.ndarray) -> np.ndarray:
    """log(1 + exp(-scale * values)) in nats, elementwise (exp() kept out of the subnormal range)."""
    t = -scale * values
    np.maximum(t, -700.0, out=t)                # terms below exp(-700) are zero anyway
    return np.logaddexp(0.0, t)


def _gmi_of(values: np.ndarray, counts: np.ndarray, scale: float, bits_per_symbol: int,
            symbols: int | np.ndarray) -> float | np.ndarray:
    """GMI (bits/symbol) from a histogram of s * llr values (any unit) at `scale` nats per unit.

    `counts` may be (n,) or (batches, n) with `symbols` per batch.
    """
    loss = counts @ _softplus(scale, values)
    return bits_per_symbol - loss / (math.log(2.0) * np.asarray(symbols, dtype=np.float64))


def best_scale(values: np.ndarray, counts: np.ndarray, natural: float, bits_per_symbol: int,
               symbols: int, lo: float = FACTOR_RANGE[0], hi: float = FACTOR_RANGE[1]) -> tuple[float, float]:
    """The factor (relative to `natural` nats per unit) maximizing the GMI, and that GMI.

    GMI is concave in the factor (log(1 + exp(-a x)) is convex in a), so a golden-section
    search on the log of the factor finds the maximum; tolerance 1e-4 in log units.
    """
    keep = counts > 0
    v, c = values[keep].astype(np.float64), counts[keep].astype(np.float64)
    g = (math.sqrt(5.0) - 1.0) / 2.0
    a, b = math.log(lo), math.log(hi)

    def f(t: float) -> float:
        return -float(_gmi_of(v, c, natural * math.exp(t), bits_per_symbol, symbols))

    x1, x2 = b - g * (b - a), a + g * (b - a)
    f1, f2 = f(x1), f(x2)
    while b - a > 1e-4:
        if f1 <= f2:
            b, x2, f2 = x2, x1, f1
            x1 = b - g * (b - a)
            f1 = f(x1)
        else:
            a, x1, f1 = x1, x2, f2
            x2 = a + g * (b - a)
            f2 = f(x2)
    t = (a + b) / 2.0
    return math.exp(t), -f(t)


def gmi_direct(llr_nats: np.ndarray, bits: np.ndarray) -> float:
    """GMI (bits/symbol) straight from natural-log LLRs (N, k) and transmitted bits (N, k); for tests."""
    s = 1.0 - 2.0 * np.asarray(bits, dtype=np.float64)
    k = llr_nats.shape[1]
    return k - float(np.mean(np.logaddexp(0.0, -s * llr_nats).sum(axis=1))) / math.log(2.0)


# --------------------------------------------------------------------------- the chain


@dataclass
class _Hist:
    """Per-batch histograms of s * llr: dense over a fixed range, or sparse (wide LLR codes)."""

    offset: int
    dense: np.ndarray | None
    sparse: list[list[tuple[np.ndarray, np.ndarray]]] | None = None

    @classmethod
    def make(cls, offset: int, dense: bool) -> "_Hist":
        if dense:
            return cls(offset, np.zeros((BATCHES, 2 * offset + 1), dtype=np.int64))
        return cls(offset, None, [[] for _ in range(BATCHES)])

    def add(self, b: int, idx: np.ndarray) -> None:
        """Add signed values (dense: already offset into 0..2*offset)."""
        if self.dense is not None:
            self.dense[b] += np.bincount(idx.ravel(), minlength=self.dense.shape[1])
        else:
            self.sparse[b].append(np.unique(idx.ravel(), return_counts=True))

    def arrays(self) -> tuple[np.ndarray, np.ndarray]:
        """(values, counts per batch (BATCHES, n)) with values in histogram units."""
        if self.dense is not None:
            return np.arange(-self.offset, self.offset + 1, dtype=np.float64), self.dense
        vals = [v for parts in self.sparse for v, _ in parts]
        keys = np.unique(np.concatenate(vals)) if vals else np.zeros(0, np.int64)
        counts = np.zeros((BATCHES, keys.size), dtype=np.int64)
        for b, parts in enumerate(self.sparse):
            for v, c in parts:
                counts[b] += np.bincount(np.searchsorted(keys, v), weights=c, minlength=keys.size).astype(np.int64)
        return keys.astype(np.float64), counts


@dataclass
class PointStats:
    """Results at one Es/N0 point; `*_batches` hold the per-batch values for the confidence."""

    esn0_db: float
    ebn0_db: float
    n0: float
    symbols: int
    bits: int
    ber_fixed: float | None = None
    ber_fixed_batches: np.ndarray | None = None
    bit_errors_fixed: int = 0
    ber_exact: float | None = None
    ber_exact_batches: np.ndarray | None = None
    ber_maxlog: float | None = None
    ber_maxlog_batches: np.ndarray | None = None
    gmi_fixed: float | None = None
    gmi_fixed_batches: np.ndarray | None = None
    factor_fixed: float | None = None
    nats_per_code: float | None = None
    gmi_maxlog: float | None = None
    gmi_maxlog_batches: np.ndarray | None = None
    factor_maxlog: float | None = None
    gmi_exact: float | None = None
    gmi_exact_batches: np.ndarray | None = None
    factor_exact: float | None = None
    input_noise_db: float | None = None
    input_clip_percent: float | None = None
    reliability_code: int | None = None


def _stderr(batches: np.ndarray | None) -> float | None:
    if batches is None:
        return None
    return float(np.std(batches, ddof=1) / math.sqrt(len(batches)))


def _row_sum(a: np.ndarray, rows: np.ndarray) -> np.ndarray:
    """Sum of the given rows of a (L, N) array (row by row: much faster than a small matmul)."""
    out = a[rows[0]].copy()
    for r in rows[1:]:
        out += a[r]
    return out


def _bit_rows(bits: np.ndarray) -> tuple[list[np.ndarray], list[np.ndarray]]:
    """Rows of a 0/1 table (levels or points x label bits) where bit j is 0, and where it is 1, for every j."""
    cols = range(bits.shape[1])
    return [np.flatnonzero(bits[:, j] == 0) for j in cols], [np.flatnonzero(bits[:, j] == 1) for j in cols]


def _exact_weights(d2: np.ndarray, n0: float) -> np.ndarray:
    """Weights exp(-(d2 - min d2) / N0) per column of squared distances d2 (rows, N), float32; d2 is overwritten.

    The exponent is formed in float64, exp() and the sums run in float32 (SIMD; LLR error < 1e-5 nats);
    exponents are clamped at -80 (w >= 1.8e-35, normal in float32), so |LLR| is capped near 80 nats,
    where a bit's GMI term is below 1e-34.
    """
    d2 -= d2.min(axis=0)
    d2 *= -1.0 / n0
    np.maximum(d2, -80.0, out=d2)
    return np.exp(d2.astype(np.float32))


def _log_ratio(w: np.ndarray, rows0: np.ndarray, rows1: np.ndarray) -> np.ndarray:
    """Exact LLR (nats) per column: log of the summed weights of the bit-0 rows over those of the bit-1 rows."""
    s0 = _row_sum(w, rows0)
    s0 /= _row_sum(w, rows1)
    return np.log(s0)


def _batch_sizes(symbols: int) -> list[int]:
    """Symbols in each of the BATCHES batches: near-equal parts, the first `symbols % BATCHES` one larger."""
    return [symbols // BATCHES + (1 if b < symbols % BATCHES else 0) for b in range(BATCHES)]


def _ber(errors: np.ndarray, nb: np.ndarray, bits: int, symbols: int) -> tuple[float, np.ndarray]:
    """Bit error rate over all `symbols` and per batch, from per-batch bit error counts (nb: symbols per batch)."""
    return float(errors.sum() / (symbols * bits)), errors / (nb * bits)


def _add_float_hist(h: _Hist, b: int, binned: np.ndarray) -> None:
    """Add float s * LLR values, already in histogram bins, to batch b: clipped, rounded (`binned` is overwritten)."""
    np.clip(binned, -_FLOAT_OFFSET, _FLOAT_OFFSET, out=binned)
    np.rint(binned, out=binned)
    idx = binned.astype(np.int64)
    idx += _FLOAT_OFFSET
    h.add(b, idx)


def _gmi_batches(h: _Hist, natural: float, nb: np.ndarray, bits: int,
                 optimize: bool = True) -> tuple[float, np.ndarray, float]:
    """GMI (bits/symbol) of all batches, the per-batch GMIs and the LLR factor used (relative to `natural` nats/unit).

    With `optimize` the factor maximizes the pooled GMI (a decoder's input scaling); otherwise it is 1.
    """
    values, counts = h.arrays()
    total = counts.sum(axis=0)
    used = total > 0
    values, counts, total = values[used], counts[:, used], total[used]
    n = int(nb.sum())
    if optimize:
        factor, gmi = best_scale(values, total, natural, bits, n)
    else:
        factor = 1.0
        gmi = float(_gmi_of(values, total.astype(np.float64), natural, bits, n))
    batches = _gmi_of(values, counts.astype(np.float64), natural * factor, bits, nb)
    return gmi, batches, factor


@dataclass
class _Tally:
    """Per-batch accumulators of one Es/N0 point: bit errors, input quantization, s * LLR histograms, kept symbols."""

    err_fixed: np.ndarray            # (BATCHES,) bit errors of the fixed chain's hard decisions
    err_maxlog: np.ndarray           # (BATCHES,) sign errors of the float max-log LLRs
    err_exact: np.ndarray            # (BATCHES,) sign errors of the float exact LLRs
    quant_noise: np.ndarray          # (BATCHES,) summed squared input rounding error (amplitude units^2)
    clipped: np.ndarray              # (BATCHES,) input components at the most negative or positive code
    h_fixed: _Hist | None
    h_maxlog: _Hist | None
    h_exact: _Hist | None
    keep: int                        # how many of the first symbols to keep for the received-cloud plot
    kept: dict[str, list[np.ndarray]] = field(default_factory=lambda: {"labels": [], "i": [], "q": []})
    kept_n: int = 0

    @classmethod
    def make(cls, fixed_offset: int, dense: bool, *, fixed: bool, floats: bool, keep: int) -> "_Tally":
        """Empty accumulators; histograms only for the chains that run (fixed codes dense or sparse)."""
        return cls(np.zeros(BATCHES, np.int64), np.zeros(BATCHES, np.int64), np.zeros(BATCHES, np.int64),
                   np.zeros(BATCHES), np.zeros(BATCHES, np.int64),
                   _Hist.make(fixed_offset, dense) if fixed else None,
                   _Hist.make(_FLOAT_OFFSET, True) if floats else None,
                   _Hist.make(_FLOAT_OFFSET, True) if floats else None, keep)

    def keep_symbols(self, lab: np.ndarray, ci: np.ndarray, cq: np.ndarray) -> None:
        """Keep labels and input codes of a chunk's leading symbols until `keep` symbols are kept."""
        if self.keep and self.kept_n < self.keep:
            take = min(self.keep - self.kept_n, lab.size)
            self.kept["labels"].append(lab[:take])
            self.kept["i"].append(ci[:take])
            self.kept["q"].append(cq[:take])
            self.kept_n += take

    def kept_arrays(self) -> dict[str, np.ndarray]:
        """The kept labels and I/Q input codes, each one array (empty when nothing was kept)."""
        return {key: np.concatenate(v) if v else np.zeros(0, np.int64) for key, v in self.kept.items()}


class _FloatReference:
    """Float max-log metrics and exact log-MAP LLRs of the ideal (unquantized) constellation, per axis or in 2-D."""

    def __init__(self, design: Design, txbits: np.ndarray, const: Constellation | None = None,
                 axes: Sequence[AxisDemap] | None = None) -> None:
        """`const` and `axes`: an adaptive core's mode (default: the design's constellation and axes)."""
        const = const or design.constellation
        self.design = design
        self.axes_demap = tuple(design.axes if axes is None else axes)
        self.const = const
        self.k = const.bits
        self.txbits = txbits                                                             # (M, k) int8
        self.points = const.normalized.astype(np.complex128)
        self.per_axis = const.axes is not None
        self.axes = [self._axis_tables(n, ax) for n, ax in enumerate(const.axes) if ax.bits] if self.per_axis else []
        #: 2-D search: the points whose bit j is 0, and 1
        self.rows0, self.rows1 = ([], []) if self.per_axis else _bit_rows(txbits)

    def _axis_tables(self, n: int, ax) -> dict[str, Any]:
        """Tables of one axis (component n): levels, bit-0/bit-1 rows and max-log competitor offsets."""
        kappa = self.const.kappa
        L = ax.levels
        codes = np.asarray(ax.codes)
        cb = np.stack([ax.axis_bit(codes, j) for j in range(ax.bits)], axis=1).astype(np.float64)   # (L, m)
        ad = self.axes_demap[n]
        comp = ad.competitor.astype(np.float64)                                          # (m, L, 2)
        rows0, rows1 = _bit_rows(cb)
        # max-log: decided level, competitor offset by residual sign, sign from decided level's bit
        return {"component": n, "cols": list(ax.label_bits), "levels": L, "lev": ax.amplitudes * kappa,
                "rows0": rows0, "rows1": rows1,
                "comp": comp.transpose(1, 2, 0).reshape(2 * L, ax.bits).T.copy(),     # (m, 2L)
                "neg": (1.0 - 2.0 * cb).T.copy()}                                     # (m, L): +1 for bit 0

    def llrs(self, y: np.ndarray, n0: float) -> tuple[np.ndarray, np.ndarray]:
        """(max-log metric in normalized units, exact LLR in nats), both (k, N), of normalized samples."""
        if not self.per_axis:
            return self._llrs_2d(y, n0)
        mx = np.empty((self.k, y.size))
        ex = np.empty((self.k, y.size))
        for t in self.axes:
            self._axis_llrs(t, y.real if t["component"] == 0 else y.imag, n0, mx, ex)
        return mx, ex

    def _axis_llrs(self, t: dict[str, Any], comp: np.ndarray, n0: float, mx: np.ndarray, ex: np.ndarray) -> None:
        """One axis's bits from one component (normalized units): max-log into mx, exact (nats) into ex."""
        kappa = self.const.kappa
        L = t["levels"]
        amp = comp / kappa
        n_hat = np.clip(np.floor((amp + L) / 2.0), 0, L - 1).astype(np.int64)
        e = amp - (2.0 * n_hat - (L - 1))
        idx = 2 * n_hat + (e < 0)
        dn = np.take(t["comp"], idx, axis=1)                                              # (m, N)
        metric = 4.0 * kappa * kappa * dn * (dn - e)
        metric *= np.take(t["neg"], n_hat, axis=1)
        d2 = comp[None, :] - t["lev"][:, None]                                             # (L, N)
        d2 *= d2
        w = _exact_weights(d2, n0)
        for j, col in enumerate(t["cols"]):
            mx[col] = metric[j]
            ex[col] = _log_ratio(w, t["rows0"][j], t["rows1"][j])

    def _llrs_2d(self, y: np.ndarray, n0: float) -> tuple[np.ndarray, np.ndarray]:
        """Float LLRs over every point (no per-axis structure), (k, N): the same method in 2-D."""
        pts = self.points
        d2 = y.real[None, :] - pts.real[:, None]                                         # (M, N)
        d2 *= d2
        dq = y.imag[None, :] - pts.imag[:, None]
        dq *= dq
        d2 += dq
        mx = np.empty((self.k, y.size))
        ex = np.empty((self.k, y.size))
        for j in range(self.k):
            one = self.txbits[:, j].astype(bool)
            mx[j] = d2[one].min(axis=0) - d2[~one].min(axis=0)
        w = _exact_weights(d2, n0)
        for j in range(self.k):
            ex[j] = _log_ratio(w, self.rows0[j], self.rows1[j])
        return mx, ex


class Chain:
    """Precomputed tables for the Monte-Carlo of one design (fixed chain and float references)."""

    def __init__(self, design: Design, *, ideal_mapper: bool = False, scale_code: int | None = None,
                 mode: int | None = None) -> None:
        """Label bits, transmitted points, demapper settings and float-reference tables of `design`.

        An adaptive core: `mode` (default the largest) is the mode every symbol is sent and demapped in; its
        points go through the common input format (the largest order's grid) and the float references are that
        mode's ideal constellation."""
        self.design = design
        self.mode = None if not design.modes else len(design.modes) - 1 if mode is None else mode
        m = design.modes[self.mode] if self.mode is not None else None
        const = m.constellation if m is not None else design.constellation
        self.const = const
        #: kappa of the input grid (the largest order's): amplitude units of the demapper input
        self.kappa_in = design.constellation.kappa
        self.M, self.k = const.order, const.bits
        self.txbits = label_bits(np.arange(self.M), self.k)                              # (M, k) int8
        self.sign = (1.0 - 2.0 * self.txbits).T.copy()                                  # (k, M) +-1
        self._init_mapper(ideal_mapper)
        self._init_demapper(scale_code)
        self.chunk = CHUNK if const.axes is not None else max(1024, (1 << 21) // self.M)
        self.floats = _FloatReference(design, self.txbits, const, m.axes if m is not None else design.axes)
        self.per_axis = self.floats.per_axis

    def _init_mapper(self, ideal_mapper: bool) -> None:
        """What is sent: the ideal points (unit power) and the fixed mapper's (or the ideal) points."""
        design, const = self.design, self.const
        self.tx_ideal = const.normalized.astype(np.complex128)
        if ideal_mapper:
            self.tx_fixed = self.tx_ideal
        elif self.mode is not None:
            m = design.modes[self.mode]
            self.tx_fixed = (m.point_i + 1j * m.point_q) * design.mapper_lsb
        else:
            self.tx_fixed = (design.point_i + 1j * design.point_q) * design.mapper_lsb
        #: mean energy of the fixed mapper's output (normalized units): Es/N0 refers to what is sent,
        #: so a mapper whose rounding raises its power gains nothing from it
        self.es_fixed = float(np.mean(np.abs(self.tx_fixed) ** 2))
        #: fixed mapper output per component in amplitude units of the input grid (the demapper input's scale)
        self.tx_amp = (self.tx_fixed.real / self.kappa_in, self.tx_fixed.imag / self.kappa_in)
        #: noise (already times sigma) to amplitude units, with the Es of the fixed mapper
        self.amp_noise = math.sqrt(self.es_fixed) / self.kappa_in

    def _init_demapper(self, scale_code: int | None) -> None:
        """The demapper's algorithm, reliability input, LLR code range (histogram layout) and input LSB."""
        design = self.design
        d = design.spec.demapper
        self.algorithm = d.algorithm
        self.hard = d.algorithm == "hard"
        #: reliability input: a fixed code, or None for the ideal 1/N0 estimate at each point
        self.scale_code = scale_code if design.scale_format is not None else None
        self.has_scale = design.scale_format is not None
        self.llr_max = 1 if self.hard else design.llr_format.max_code
        self.dense = self.llr_max <= (1 << 15)
        # fixed histogram index: s * llr + offset = llr * (1 - 2 b) + offset
        self.fixed_sign = (1 - 2 * self.txbits).astype(np.int32)                         # (M, k)
        self.fixed_offset = self.llr_max
        #: one demapper input code in amplitude units
        self.input_lsb_amp = 2.0 ** -design.input_format.fraction

    # ---- float references ------------------------------------------------------------

    def float_llrs(self, y: np.ndarray, n0: float) -> tuple[np.ndarray, np.ndarray]:
        """(max-log metric in normalized units, exact LLR in nats), both (k, N), of normalized samples."""
        return self.floats.llrs(y, n0)

    # ---- Monte-Carlo -------------------------------------------------------------------

    def reliability(self, n0: float) -> int | None:
        """Reliability code fed to the demapper at noise density n0: the fixed code, or round(2^f / N0)
        (an ideal 1/N0 estimate in the input's format), clamped to 1 .. max code."""
        if not self.has_scale:
            return None
        if self.scale_code is not None:
            return int(self.scale_code)
        fmt = self.design.scale_format
        return int(min(max(round(2.0 ** fmt.fraction / n0), 1), fmt.max_code))

    def natural_nats(self, n0: float) -> float:
        """Nats per LLR code that make the codes true max-log LLRs: llr_lsb / (scale * N0)."""
        if self.hard:
            return 1.0
        code = self.reliability(n0)
        value = 1.0 if code is None else code * self.design.scale_lsb
        return self.design.llr_lsb / (max(value, 1e-300) * n0)

    def run(self, esn0_db: float, symbols: int, seed: int, *, fixed: bool = True, floats: bool = True,
            keep: int = 0) -> tuple[PointStats, dict[str, np.ndarray]]:
        """Monte-Carlo at one Es/N0 (dB): `symbols` symbols in BATCHES batches, seeded, chunked.

        Returns the statistics and, when `keep` > 0, the first `keep` symbols' labels and
        fixed-chain input codes (for the received-cloud plot).
        """
        n0 = 10.0 ** (-esn0_db / 10.0)
        st = PointStats(esn0_db=esn0_db, ebn0_db=esn0_db - 10.0 * math.log10(self.k), n0=n0, symbols=symbols,
                        bits=self.k)
        st.reliability_code = self.reliability(n0)
        scale = None if st.reliability_code is None else np.int64(st.reliability_code)
        tally = _Tally.make(self.fixed_offset, self.dense, fixed=fixed, floats=floats, keep=keep)
        per_batch = _batch_sizes(symbols)
        for b, lab, z in self._draws(seed, per_batch, math.sqrt(n0 / 2.0)):
            if fixed:
                self._fixed_chunk(b, lab, z, scale, tally)
            if floats:
                self._float_chunk(b, lab, z, n0, tally)
        nb = np.asarray(per_batch, dtype=np.float64)
        if fixed:
            self._fixed_stats(st, tally, nb)
        if floats:
            self._float_stats(st, tally, nb)
        return st, tally.kept_arrays()

    def _draws(self, seed: int, per_batch: list[int], sigma: float) -> Iterator[tuple[int, np.ndarray, np.ndarray]]:
        """(batch, labels, noise (2, n) times sigma) chunk by chunk; batch b draws from child b of `seed`.

        The same seed gives the same draws at every Es/N0 (common random numbers): labels, then noise.
        """
        children = np.random.SeedSequence(seed).spawn(BATCHES)
        for b in range(BATCHES):
            rng = np.random.Generator(np.random.PCG64(children[b]))
            left = per_batch[b]
            while left > 0:
                n = min(self.chunk, left)
                left -= n
                lab = rng.integers(0, self.M, size=n)
                z = rng.standard_normal((2, n))
                z *= sigma
                yield b, lab, z

    def _fixed_chunk(self, b: int, lab: np.ndarray, z: np.ndarray, scale: np.int64 | None, tally: _Tally) -> None:
        """The bit-exact chain on one chunk: quantized input, demapper, bit errors and histogram of s * LLR codes."""
        ci = self._input_codes(b, lab, z[0], 0, tally)
        cq = self._input_codes(b, lab, z[1], 1, tally)
        txb = np.take(self.txbits, lab, axis=0)
        hb, llr = self._demap(ci, cq, scale)
        tally.err_fixed[b] += int(np.count_nonzero(hb != txb))
        signed = llr * np.take(self.fixed_sign, lab, axis=0)
        if self.dense:
            signed += self.fixed_offset
        tally.h_fixed.add(b, signed)
        tally.keep_symbols(lab, ci, cq)

    def _input_codes(self, b: int, lab: np.ndarray, noise: np.ndarray, comp: int, tally: _Tally) -> np.ndarray:
        """Demapper input codes of one component (0: I, 1: Q) as the AGC delivers them (amplitude units),
        rounded half to even and saturated; tallies the rounding noise and the clipped samples."""
        ifmt = self.design.input_format
        amp = np.take(self.tx_amp[comp], lab)
        amp += noise * self.amp_noise
        c = quantize(amp, ifmt, "half-even")
        r = c * self.input_lsb_amp
        r -= amp
        tally.quant_noise[b] += float(np.dot(r, r))
        tally.clipped[b] += int(np.count_nonzero(c == ifmt.max_code) + np.count_nonzero(c == ifmt.min_code))
        return c

    def _demap(self, ci: np.ndarray, cq: np.ndarray, scale: np.int64 | None) -> tuple[np.ndarray, np.ndarray]:
        """Hard bits and LLR codes (both (N, k)) of the bit-exact model; a hard demapper's bits become +-1 codes."""
        modes = None if self.mode is None else np.full(ci.size, self.mode, dtype=np.int64)
        if self.hard:
            hb = demap(self.design, ci, cq, scale, modes)[:, :self.k]     # the reliability code is read, not used
            return hb, (1 - 2 * hb).astype(np.int32)
        llr = demap(self.design, ci, cq, scale, modes)[:, :self.k]
        return hard_decisions(self.design, ci, cq, modes)[:, :self.k], llr

    def _float_chunk(self, b: int, lab: np.ndarray, z: np.ndarray, n0: float, tally: _Tally) -> None:
        """The float references on one chunk of ideal points plus noise, in cache-sized blocks of FLOAT_BLOCK."""
        y0 = np.take(self.tx_ideal, lab) + (z[0] + 1j * z[1])
        for lo in range(0, lab.size, FLOAT_BLOCK):
            sl = slice(lo, lo + FLOAT_BLOCK)
            self._float_block(b, y0[sl], lab[sl], n0, tally)

    def _float_block(self, b: int, y0: np.ndarray, lab: np.ndarray, n0: float, tally: _Tally) -> None:
        """Float max-log and exact LLRs of one block: errors of their signs and histograms of s * LLR."""
        mx, ex = self.float_llrs(y0, n0)
        sg = np.take(self.sign, lab, axis=1)
        mx *= sg
        ex *= sg
        tally.err_maxlog[b] += int(np.count_nonzero(mx < 0))
        tally.err_exact[b] += int(np.count_nonzero(ex < 0))
        mx *= FLOAT_BINS_PER_NAT / n0           # max-log metric (normalized units) to bins of 1/64 nat
        ex *= FLOAT_BINS_PER_NAT
        _add_float_hist(tally.h_maxlog, b, mx)
        _add_float_hist(tally.h_exact, b, ex)

    def _fixed_stats(self, st: PointStats, tally: _Tally, nb: np.ndarray) -> None:
        """The fixed chain's BER, GMI at its best LLR factor, and input quantization noise (dB) and clipping (%)."""
        symbols = st.symbols
        st.ber_fixed, st.ber_fixed_batches = _ber(tally.err_fixed, nb, self.k, symbols)
        st.bit_errors_fixed = int(tally.err_fixed.sum())
        nat = self.natural_nats(st.n0)
        st.gmi_fixed, st.gmi_fixed_batches, st.factor_fixed = _gmi_batches(tally.h_fixed, nat, nb, self.k)
        st.nats_per_code = st.factor_fixed * nat
        kappa = self.kappa_in
        st.input_noise_db = 10.0 * math.log10(max(float(tally.quant_noise.sum()) * kappa * kappa / symbols, 1e-300))
        st.input_clip_percent = 100.0 * float(tally.clipped.sum()) / (2 * symbols)

    def _float_stats(self, st: PointStats, tally: _Tally, nb: np.ndarray) -> None:
        """The float references' BERs (signs of the LLRs) and GMIs (max-log at its best factor, exact as is)."""
        st.ber_maxlog, st.ber_maxlog_batches = _ber(tally.err_maxlog, nb, self.k, st.symbols)
        st.ber_exact, st.ber_exact_batches = _ber(tally.err_exact, nb, self.k, st.symbols)
        unit = 1.0 / FLOAT_BINS_PER_NAT
        st.gmi_maxlog, st.gmi_maxlog_batches, st.factor_maxlog = _gmi_batches(tally.h_maxlog, unit, nb, self.k)
        st.gmi_exact, st.gmi_exact_batches, st.factor_exact = _gmi_batches(tally.h_exact, unit, nb, self.k,
                                                                           optimize=False)


# --------------------------------------------------------------------------- sweeps


def _progress(total: int, label: str) -> Callable[[int], None]:
    """A progress bar on stderr when it is a terminal; a no-op otherwise."""
    if not (hasattr(sys.stderr, "isatty") and sys.stderr.isatty()) or total <= 1:
        return lambda done: None

    def show(done: int) -> None:
        width = 30
        fill = int(width * done / total)
        sys.stderr.write(f"\r{label} [{'#' * fill}{'.' * (width - fill)}] {done}/{total}")
        if done >= total:
            sys.stderr.write("\n")
        sys.stderr.flush()

    show(0)
    return show


def sweep(design: Design, esn0_db: Sequence[float], symbols: int = DEFAULT_SYMBOLS, seed: int = DEFAULT_SEED, *,
          chain: Chain | None = None, label: str = "sweep") -> list[PointStats]:
    """Monte-Carlo of all three chains at every Es/N0 point (dB)."""
    chain = chain or Chain(design)
    bar = _progress(len(esn0_db), label)
    out = []
    for n, s in enumerate(esn0_db):
        out.append(chain.run(float(s), symbols, seed)[0])
        bar(n + 1)
    return out


def _crossing(x: np.ndarray, y: np.ndarray, target: float, rising: bool = True) -> float:
    """First x where the piecewise-linear curve y(x) reaches `target` (nan if it never does)."""
    ok = (y >= target) if rising else (y <= target)
    hit = np.flatnonzero(ok)
    if hit.size == 0:
        return math.nan
    i = int(hit[0])
    if i == 0:
        return float(x[0]) if y[0] == target else math.nan
    y0, y1 = y[i - 1], y[i]
    return float(x[i - 1] + (target - y0) * (x[i] - x[i - 1]) / (y1 - y0))


def find_operating_point(chain: Chain, gmi_target: float, seed: int, symbols: int = 1 << 15) -> float:
    """Es/N0 (dB) where the float exact GMI reaches gmi_target bits (bisection on a quick Monte-Carlo)."""
    lo, hi = -20.0, 60.0
    for _ in range(14):
        mid = (lo + hi) / 2.0
        g = chain.run(mid, symbols, seed, fixed=False)[0].gmi_exact
        if g < gmi_target:
            lo = mid
        else:
            hi = mid
    return (lo + hi) / 2.0


@dataclass
class LossResult:
    """Implementation loss (dB of Es/N0) of the fixed chain at the operating point, with 95 % intervals."""

    operating_point_esn0_db: float
    gmi_target: float
    loss_db_vs_exact: float | None
    loss_db_vs_exact_ci95: tuple[float, float] | None
    loss_db_vs_maxlog: float | None
    loss_db_vs_maxlog_ci95: tuple[float, float] | None
    ber_target: float | None
    ber_loss_db_vs_exact: float | None
    ber_loss_db_vs_exact_ci95: tuple[float, float] | None
    ber_loss_db_vs_maxlog: float | None
    ber_loss_db_vs_maxlog_ci95: tuple[float, float] | None
    grid: list[PointStats] = field(default_factory=list)
    note: str = ""


def _grid_right(op: float) -> list[float]:
    """Es/N0 points right of the operating point: 0.1 dB steps to +1 dB, then coarser up to +10 dB."""
    pts = [op + 0.1 * i for i in range(1, 11)]
    pts += [op + 1.0 + 0.25 * i for i in range(1, 9)]
    pts += [op + 3.0 + 0.5 * i for i in range(1, 15)]
    return [round(p, 6) for p in pts]


def _interval(full: float, batches: list[float]) -> tuple[float, float] | None:
    vals = np.asarray(batches, dtype=np.float64)
    if not np.all(np.isfinite(vals)) or not math.isfinite(full):
        return None
    half = T_975 * float(np.std(vals, ddof=1)) / math.sqrt(len(vals))
    return (full - half, full + half)


def _starting_point(chain: Chain, operating_point_db: float | None, gmi_fraction: float,
                    seed: int) -> tuple[float, float | None]:
    """Es/N0 (dB) of the operating point to start from, and the GMI target (bits/symbol; None when the point is given).

    Without a given point: where the float exact GMI reaches gmi_fraction x log2(M).
    """
    if operating_point_db is not None:
        return float(operating_point_db), None
    if not 0.0 < gmi_fraction < 1.0:
        raise SpecError("gmi_target", gmi_fraction, "a fraction of log2(M) between 0 and 1")
    target = gmi_fraction * chain.k
    return find_operating_point(chain, target, seed), target


#: the float references the fixed chain is measured against
_REFERENCES = ("exact", "maxlog")


def _all_below(st: PointStats, target: float, ber0: float) -> bool:
    """True when every batch of every chain is short of the targets: GMI below `target` bits, BER above `ber0`."""
    gmi_ok = all(np.all(getattr(st, f"gmi_{c}_batches") < target) for c in ("exact", "maxlog", "fixed"))
    ber_ok = all(np.all(getattr(st, f"ber_{c}_batches") > ber0) for c in ("exact", "maxlog", "fixed"))
    return gmi_ok and ber_ok


def _all_above(st: PointStats, target: float, ber0: float) -> bool:
    """True when every batch has crossed: all three GMIs at least `target` bits, the fixed BER below 0.8 x `ber0`."""
    gmi_ok = all(np.all(getattr(st, f"gmi_{c}_batches") >= target) for c in ("fixed", "maxlog", "exact"))
    return bool(gmi_ok and np.all(st.ber_fixed_batches < ber0 * 0.8))


class _LossGrid:
    """Monte-Carlo points of all three chains around the operating point, each Es/N0 (dB, to 1e-6) run once."""

    def __init__(self, chain: Chain, symbols: int, seed: int, label: str) -> None:
        self.chain, self.symbols, self.seed = chain, symbols, seed
        self.points: dict[float, PointStats] = {}
        self.bar = _progress(24, label)

    def at(self, esn0_db: float) -> PointStats:
        """The statistics at Es/N0 `esn0_db` (dB), run on first use."""
        s = round(esn0_db, 6)
        if s not in self.points:
            self.points[s] = self.chain.run(s, self.symbols, self.seed)[0]
            self.bar(min(len(self.points), 23))
        return self.points[s]

    def grow(self, op0: float, target: float, ber0: float) -> None:
        """Add points left of op0 (0.1 dB steps, 0.3 to 3 dB) until every batch starts short of the targets,
        and right of it (`_grid_right`, up to 10 dB) until every batch has crossed them."""
        for i in range(3, 31):
            if _all_below(self.at(op0 - 0.1 * i), target, ber0):
                break
        for s in _grid_right(op0):
            if _all_above(self.at(s), target, ber0):
                break
        self.bar(24)

    def stats(self) -> list[PointStats]:
        """The points in increasing Es/N0."""
        return [self.points[s] for s in sorted(self.points)]


class _Curves:
    """Curves of the grid against Es/N0 (dB), over all batches or per batch, and where they cross a target."""

    def __init__(self, grid: list[PointStats]) -> None:
        self.grid = grid
        self.x = np.asarray([g.esn0_db for g in grid])

    def values(self, attr: str, b: int | None = None) -> np.ndarray:
        """The figure `attr` at every grid point: over all batches, or that of batch b."""
        if b is None:
            return np.asarray([getattr(g, attr) for g in self.grid])
        return np.asarray([getattr(g, attr + "_batches")[b] for g in self.grid])

    def cross(self, attr: str, tgt: float, b: int | None = None, rising: bool = True) -> float:
        """Es/N0 (dB) where the curve first reaches tgt: a rising GMI linearly, a falling BER in log10 (nan: never)."""
        y = self.values(attr, b)
        if not rising:
            y = np.log10(np.maximum(y, 1e-300))
            tgt = math.log10(max(tgt, 1e-300))
        return _crossing(self.x, y, tgt, rising)

    def ber_at(self, esn0_db: float, ref: str, b: int | None = None) -> float:
        """BER of the float reference `ref` at `esn0_db` (dB), log-linearly interpolated; all batches or batch b."""
        y = np.log10(np.maximum(self.values(f"ber_{ref}", b), 1e-300))
        return 10.0 ** float(np.interp(esn0_db, self.x, y))

    def gap(self, quantity: str, ref: str, target: float, batch_targets: Sequence[float],
            rising: bool) -> tuple[float | None, tuple[float, float] | None]:
        """Horizontal distance (dB) of the fixed chain's curve right of the reference's at the target (None if
        the fixed curve never gets there), and its 95 % batch-means interval (batch b at batch_targets[b])."""
        fixed, other = f"{quantity}_fixed", f"{quantity}_{ref}"
        full = self.cross(fixed, target, rising=rising) - self.cross(other, target, rising=rising)
        per = [self.cross(fixed, t, b, rising) - self.cross(other, t, b, rising) for b, t in enumerate(batch_targets)]
        return (full if math.isfinite(full) else None, _interval(full, per))


def implementation_loss(design: Design, symbols: int = DEFAULT_SYMBOLS, seed: int = DEFAULT_SEED, *,
                        operating_point_db: float | None = None, gmi_fraction: float = DEFAULT_GMI_FRACTION,
                        chain: Chain | None = None, label: str = "loss") -> LossResult:
    """Horizontal distance (dB) between the fixed and the float GMI (and BER) curves at the operating point.

    The curves are measured on a grid around the operating point (0.1 dB steps where the fixed
    curve usually crosses) with common random numbers and linearly interpolated; the 95 %
    interval is the batch-means interval of the same crossing computed per batch. The grid
    grows to the left until every batch starts below the target and to the right until every
    batch of the fixed chain has crossed it (at most 10 dB).
    """
    chain = chain or Chain(design)
    op0, target = _starting_point(chain, operating_point_db, gmi_fraction, seed)
    grid = _LossGrid(chain, symbols, seed, label)
    centre = grid.at(op0)
    if target is None:
        target = centre.gmi_exact
    grid.grow(op0, target, min(centre.ber_exact, centre.ber_maxlog))
    curves = _Curves(grid.stats())
    s_exact = curves.cross("gmi_exact", target)
    op = s_exact if math.isfinite(s_exact) else op0
    gmi = {ref: curves.gap("gmi", ref, target, [target] * BATCHES, rising=True) for ref in _REFERENCES}
    # BER: the reference BER at the operating point (log-linear interpolation), fixed chain crossing it
    ber = {ref: curves.gap("ber", ref, curves.ber_at(op, ref), [curves.ber_at(op, ref, b) for b in range(BATCHES)],
                           rising=False) for ref in _REFERENCES}
    last = max(grid.points)
    note = "" if gmi["exact"][0] is not None else (
        f"the fixed-point GMI stays below the target {target:.4g} bits up to "
        f"{last:.1f} dB Es/N0: the loss is larger than {last - op:.1f} dB")
    return LossResult(operating_point_esn0_db=op, gmi_target=float(target),
                      loss_db_vs_exact=gmi["exact"][0], loss_db_vs_exact_ci95=gmi["exact"][1],
                      loss_db_vs_maxlog=gmi["maxlog"][0], loss_db_vs_maxlog_ci95=gmi["maxlog"][1],
                      ber_target=curves.ber_at(op, "exact"),
                      ber_loss_db_vs_exact=ber["exact"][0], ber_loss_db_vs_exact_ci95=ber["exact"][1],
                      ber_loss_db_vs_maxlog=ber["maxlog"][0], ber_loss_db_vs_maxlog_ci95=ber["maxlog"][1],
                      grid=curves.grid, note=note)


# --------------------------------------------------------------------------- width explorer

DEFAULT_EXPLORE_SYMBOLS = 1 << 17
MAPPER_WIDTHS = range(3, 17)
INPUT_FRACTIONS = range(0, 8)
INPUT_EXTRA_BITS = 5
LLR_WIDTHS = range(2, 13)
#: the fine demapper input used while another stage is swept (fraction bits)
REFERENCE_INPUT_FRACTION = 6


def _exact_llr_settings(spec: DesignSpec) -> dict[str, Any]:
    """LLR width and fraction that carry the demapper's metric exactly (no rounding, no saturation)."""
    design = derive(spec.with_settings({"demapper.llr_width": 32, "demapper.llr_fraction": 0}))
    d = spec.demapper
    frac = design.metric_fraction + (d.scale_fraction if d.scale_width else 0)
    width = design.widths["product"][0] + 1
    if width > 32 or frac > 31:
        width, frac = 32, min(frac, 31)
    return {"demapper.llr_width": width, "demapper.llr_fraction": min(frac, width - 1)}


def reference_spec(spec: DesignSpec, esn0_db: float) -> DesignSpec:
    """The spec with a fine, unclipped demapper input at `esn0_db` and exact LLR words (the explorer's reference)."""
    const = derive(spec).constellation
    peak = float(max(np.max(np.abs(const.points.real)), np.max(np.abs(const.points.imag))))
    sigma_amp = math.sqrt(10.0 ** (-esn0_db / 10.0) / 2.0) / const.kappa
    last = None
    for f in range(REFERENCE_INPUT_FRACTION, -1, -1):
        reach = (peak + 1.0 + 8.0 * sigma_amp) * 2 ** f
        width = min(int(reach).bit_length() + 1, 20)
        try:
            cand = spec.with_settings({"demapper.input_width": width, "demapper.input_fraction": f})
            cand = cand.with_settings(_exact_llr_settings(cand))
            derive(cand)
            return cand
        except SpecError as exc:
            last = exc
    raise last if last else SpecError("demapper", spec.demapper, "a demapper the explorer can widen")


def _min_input_width(spec: DesignSpec, f: int) -> int | None:
    for w in range(max(2, f + 2), 21):
        try:
            derive(spec.with_settings({"demapper.input_width": w, "demapper.input_fraction": f}))
            return w
        except SpecError:
            continue
    return None


@dataclass
class _Probe:
    """GMI of fixed chains at the operating point against a reference, as a linearized loss (dB)."""

    esn0_db: float
    symbols: int
    seed: int
    ref_gmi: float
    ref_batches: np.ndarray
    slope: float                     # bits per dB of the reference GMI curve at the operating point
    evaluations: int = 0

    def loss(self, spec: DesignSpec, *, ideal_mapper: bool) -> dict[str, Any]:
        try:
            design = derive(spec)
        except SpecError as exc:
            return {"loss_db": None, "error": str(exc)}
        st = Chain(design, ideal_mapper=ideal_mapper).run(self.esn0_db, self.symbols, self.seed, floats=False)[0]
        self.evaluations += 1
        full = (self.ref_gmi - st.gmi_fixed) / self.slope
        per = (self.ref_batches - st.gmi_fixed_batches) / self.slope
        half = T_975 * float(np.std(per, ddof=1)) / math.sqrt(BATCHES)
        return {"loss_db": full, "loss_db_ci95": [full - half, full + half], "gmi": st.gmi_fixed,
                "llr_factor": st.factor_fixed}

    def row(self, spec: DesignSpec, width: int, fraction: int | None, *, ideal_mapper: bool) -> dict[str, Any]:
        """One row of a stage's sweep: the candidate's width and fraction (bits) and its loss (dB)."""
        return {"width": width, "fraction": fraction, **self.loss(spec, ideal_mapper=ideal_mapper)}


def _reference_probe(spec: DesignSpec, op: float, symbols: int, seed: int) -> tuple[DesignSpec, PointStats, _Probe]:
    """The wide reference at Es/N0 op (dB), its statistics there, and the probe measuring candidates against it.

    The probe's slope (bits per dB) is that of the reference GMI over op +- 0.1 dB.
    """
    ref = reference_spec(spec, op)
    ref_chain = Chain(derive(ref), ideal_mapper=True)
    st0 = ref_chain.run(op, symbols, seed)[0]
    lo = ref_chain.run(op - 0.1, symbols, seed, floats=False)[0].gmi_fixed
    hi = ref_chain.run(op + 0.1, symbols, seed, floats=False)[0].gmi_fixed
    slope = max((hi - lo) / 0.2, 1e-6)
    return ref, st0, _Probe(op, symbols, seed, st0.gmi_fixed, st0.gmi_fixed_batches, slope)


class _Steps:
    """A progress bar of `total` steps, advanced one step per call."""

    def __init__(self, total: int, label: str) -> None:
        self.total, self.done = total, 0
        self.bar = _progress(total, label)

    def __call__(self) -> None:
        self.done += 1
        self.bar(self.done)

    def finish(self) -> None:
        self.bar(self.total)


def _no_progress() -> None:
    """A progress step that shows nothing."""


def _fitting_mapper(ref: DesignSpec, scaling: str, spec_fraction: int, width: int) -> tuple[int, DesignSpec] | None:
    """The mapper fraction (bits) and candidate for a `width`-bit mapper on the reference, or None if none derives.

    Unit-power: the largest fraction that fits; full-scale: the spec's fraction (0 if it does not fit the width).
    """
    fracs = range(width - 1, -1, -1) if scaling == "normalized" else (spec_fraction if spec_fraction < width else 0,)
    for f in fracs:
        try:
            cand = ref.with_settings({"mapper.width": width, "mapper.fraction": f})
            derive(cand)
        except SpecError:
            continue
        return f, cand
    return None


def _sweep_mapper(spec: DesignSpec, ref: DesignSpec, probe: _Probe, step: Callable[[], None]) -> list[dict[str, Any]]:
    """Loss (dB) and EVM (dB) of every mapper width, the rest of the chain at reference precision."""
    m = spec.mapper
    rows = []
    for w in MAPPER_WIDTHS:
        step()
        fit = _fitting_mapper(ref, m.scaling, m.fraction, w)
        if fit is None:
            continue
        f, cand = fit
        row = probe.row(cand, w, f if m.scaling == "normalized" else None, ideal_mapper=False)
        row["evm_db"] = mapper_evm(derive(cand))["evm_db"]
        rows.append(row)
    return rows


def _input_candidate(ref: DesignSpec, width: int, fraction: int) -> DesignSpec | None:
    """The reference with a `width`-bit demapper input of `fraction` bits and exact LLR words; None if invalid."""
    try:
        cand = ref.with_settings({"demapper.input_width": width, "demapper.input_fraction": fraction})
        return cand.with_settings(_exact_llr_settings(cand))
    except SpecError:
        return None


def _sweep_input(ref: DesignSpec, probe: _Probe, step: Callable[[], None]) -> list[dict[str, Any]]:
    """Loss (dB) of demapper input words: each fraction from its narrowest width up to INPUT_EXTRA_BITS wider."""
    rows = []
    for f in INPUT_FRACTIONS:
        wmin = _min_input_width(ref, f)
        for extra in range(INPUT_EXTRA_BITS + 1):
            step()
            if wmin is None or wmin + extra > 20:
                continue
            cand = _input_candidate(ref, wmin + extra, f)
            if cand is not None:
                rows.append(probe.row(cand, wmin + extra, f, ideal_mapper=True))
    return rows


def _llr_rows(base: DesignSpec, width: int, probe: _Probe, *, ideal_mapper: bool,
              step: Callable[[], None] = _no_progress) -> list[dict[str, Any]]:
    """Loss (dB) of a `width`-bit LLR word at every fraction (0 .. width - 1) on `base`."""
    rows = []
    for f in range(width):
        step()
        cand = base.with_settings({"demapper.llr_width": width, "demapper.llr_fraction": f})
        rows.append(probe.row(cand, width, f, ideal_mapper=ideal_mapper))
    return rows


def _sweep_stages(spec: DesignSpec, ref: DesignSpec, probe: _Probe, stages: list[str],
                  label: str) -> dict[str, list[dict[str, Any]]]:
    """Every candidate of every stage, each with the other two at reference precision (LLR only if soft)."""
    steps = _Steps(len(MAPPER_WIDTHS) + len(INPUT_FRACTIONS) * (INPUT_EXTRA_BITS + 1) + sum(LLR_WIDTHS), label)
    rows = {"mapper": _sweep_mapper(spec, ref, probe, steps), "input": _sweep_input(ref, probe, steps), "llr": []}
    if "llr" in stages:
        for w in LLR_WIDTHS:
            rows["llr"] += _llr_rows(ref, w, probe, ideal_mapper=True, step=steps)
    steps.finish()
    return rows


def _best_row(rows: list[dict[str, Any]]) -> dict[str, Any] | None:
    """The row of least loss (the first of equals), ignoring rows that could not be measured; None if none was."""
    best = None
    for r in rows:
        if r.get("loss_db") is not None and (best is None or r["loss_db"] < best["loss_db"]):
            best = r
    return best


def _best_per_width(rows: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """The best measured row of each width, in increasing width (the stage's loss-against-width curve)."""
    by_width: dict[int, list[dict[str, Any]]] = {}
    for r in rows:
        by_width.setdefault(r["width"], []).append(r)
    best = {w: _best_row(group) for w, group in by_width.items()}
    return [best[w] for w in sorted(best) if best[w] is not None]


def _first_within(curve: list[dict[str, Any]], share: float) -> dict[str, Any] | None:
    """The narrowest width whose loss is within `share` dB; the widest if none is; None for an empty curve."""
    for r in curve:
        if r["loss_db"] <= share:
            return r
    return curve[-1] if curve else None


def _next_wider(curve: list[dict[str, Any]], width: int) -> dict[str, Any] | None:
    """The next width on the curve above `width` bits, or None at the widest."""
    return next((r for r in curve if r["width"] > width), None)


def _combined(spec: DesignSpec, chosen: dict[str, dict[str, Any]], probe: _Probe) -> tuple[DesignSpec, dict[str, Any]]:
    """The spec with every stage's chosen width (the LLR word at its best fraction) and its measured loss (dB)."""
    settings: dict[str, Any] = {"mapper.width": chosen["mapper"]["width"]}
    if spec.mapper.scaling == "normalized":
        settings["mapper.fraction"] = chosen["mapper"]["fraction"]
    settings["demapper.input_width"] = chosen["input"]["width"]
    settings["demapper.input_fraction"] = chosen["input"]["fraction"]
    cand = spec.with_settings(settings)
    if "llr" not in chosen:
        return cand, {"settings": settings, **probe.loss(cand, ideal_mapper=False)}
    w = chosen["llr"]["width"]
    best = _best_row(_llr_rows(cand, w, probe, ideal_mapper=False))
    llr = {"demapper.llr_width": w, "demapper.llr_fraction": best["fraction"]}
    settings.update(llr)
    measured = {key: v for key, v in best.items() if key not in ("width", "fraction")}
    return cand.with_settings(llr), {"settings": settings, **measured}


def _widen_one(chosen: dict[str, dict[str, Any]], curves: dict[str, list[dict[str, Any]]], stages: list[str]) -> bool:
    """Move the stage of largest loss that has a wider candidate to its next width; False when none can widen."""
    for s in sorted(stages, key=lambda s: -chosen[s]["loss_db"]):
        nxt = _next_wider(curves[s], chosen[s]["width"])
        if nxt is not None:
            chosen[s] = nxt
            return True
    return False


def _fit_budget(spec: DesignSpec, chosen: dict[str, dict[str, Any]], curves: dict[str, list[dict[str, Any]]],
                stages: list[str], probe: _Probe, budget_db: float) -> tuple[DesignSpec, dict[str, Any]]:
    """Measure the chosen combination and widen it stage by stage (at most 12 rounds) until within `budget_db`."""
    combo_spec, combo = _combined(spec, chosen, probe)
    rounds = 0
    while combo["loss_db"] > budget_db and rounds < 12:
        rounds += 1
        if not _widen_one(chosen, curves, stages):
            break
        combo_spec, combo = _combined(spec, chosen, probe)
    return combo_spec, combo


def _current(spec: DesignSpec, probe: _Probe) -> dict[str, Any]:
    """The loss (dB) of the spec as it stands, with its width settings."""
    m, d = spec.mapper, spec.demapper
    current = probe.loss(spec, ideal_mapper=False)
    current["settings"] = {"mapper.width": m.width, "mapper.fraction": m.fraction,
                           "demapper.input_width": d.input_width, "demapper.input_fraction": d.input_fraction,
                           "demapper.llr_width": d.llr_width, "demapper.llr_fraction": d.llr_fraction}
    return current


def _add_float_losses(combo: dict[str, Any], combo_spec: DesignSpec, budget_db: float, symbols: int, seed: int,
                      operating_point_db: float | None, gmi_fraction: float) -> None:
    """Add the recommendation's loss (dB) against the float references and whether it is within budget.

    The float losses come from a full `implementation_loss` of the recommended spec.
    """
    full = implementation_loss(derive(combo_spec), symbols, seed, operating_point_db=operating_point_db,
                               gmi_fraction=gmi_fraction, label="check")
    combo["loss_db_vs_exact"] = full.loss_db_vs_exact
    combo["loss_db_vs_exact_ci95"] = full.loss_db_vs_exact_ci95
    combo["loss_db_vs_maxlog"] = full.loss_db_vs_maxlog
    combo["loss_db_vs_maxlog_ci95"] = full.loss_db_vs_maxlog_ci95
    combo["within_budget"] = bool(combo["loss_db"] <= budget_db)


def _reference_record(ref: DesignSpec, st0: PointStats, slope: float) -> dict[str, Any]:
    """The explorer's reference: its settings, GMI (bits/symbol), slope (bits/dB) and loss to float exact (dB)."""
    return {"reference": {"mapper": "ideal (float points)", "demapper.input_width": ref.demapper.input_width,
                          "demapper.input_fraction": ref.demapper.input_fraction,
                          "demapper.llr_width": ref.demapper.llr_width,
                          "demapper.llr_fraction": ref.demapper.llr_fraction},
            "reference_gmi": st0.gmi_fixed, "slope_bits_per_db": slope,
            "reference_loss_db_vs_exact": (st0.gmi_exact - st0.gmi_fixed) / slope}


def explore_widths(spec: DesignSpec, *, budget_db: float = DEFAULT_BUDGET_DB,
                   symbols: int = DEFAULT_EXPLORE_SYMBOLS, seed: int = DEFAULT_SEED,
                   operating_point_db: float | None = None, gmi_fraction: float = DEFAULT_GMI_FRACTION,
                   label: str = "widths") -> dict[str, Any]:
    """Sweep mapper, demapper input and LLR widths; recommend the smallest within `budget_db`.

    Each stage is swept with the other two at reference precision (ideal mapper, fine unclipped
    input, exact LLR words); its loss is the GMI gap to the reference at the operating point
    divided by the slope of the reference GMI curve there (dB, linearized: accurate for small
    losses). Stage losses add to first order, so each stage gets an equal share of the budget;
    the combination is then measured and widened stage by stage until it fits the budget.
    """
    if not isinstance(budget_db, (int, float)) or not 0 < budget_db <= 10:
        raise SpecError("budget_db", budget_db, "a loss budget in dB, above 0 and at most 10")
    check_symbols(symbols, spec.bits)
    op, _ = _starting_point(Chain(derive(spec)), operating_point_db, gmi_fraction, seed)
    ref, st0, probe = _reference_probe(spec, op, symbols, seed)
    algorithm = spec.demapper.algorithm
    stages = ["mapper", "input"] + ([] if algorithm == "hard" else ["llr"])
    share = budget_db / len(stages)
    rows = _sweep_stages(spec, ref, probe, stages, label)
    curves = {s: _best_per_width(r) for s, r in rows.items()}
    chosen = {s: _first_within(curves[s], share) for s in stages}
    combo_spec, combo = _fit_budget(spec, chosen, curves, stages, probe, budget_db)
    current = _current(spec, probe)
    _add_float_losses(combo, combo_spec, budget_db, symbols, seed,
                      op if operating_point_db is not None else None, gmi_fraction)
    return {
        "operating_point_esn0_db": op, "budget_db": budget_db, "stage_share_db": share, "symbols": symbols,
        "seed": seed, "batches": BATCHES, "algorithm": algorithm, **_reference_record(ref, st0, probe.slope),
        "mapper": rows["mapper"], "input": rows["input"], "llr": rows["llr"],
        "mapper_best": curves["mapper"], "input_best": curves["input"], "llr_best": curves["llr"],
        "chosen": {s: {"width": chosen[s]["width"], "fraction": chosen[s]["fraction"],
                       "loss_db": chosen[s]["loss_db"]} for s in stages},
        "recommended": combo, "current": current, "evaluations": probe.evaluations,
        "method": ("linearized loss: (reference GMI - candidate GMI) / reference slope at the operating point; "
                   "each stage swept with the others at reference precision; common random numbers"),
    }


def widths_table(result: dict[str, Any]) -> str:
    """A plain-text table of the explorer's per-width losses and its recommendation."""
    lines = [f"operating point Es/N0 {result['operating_point_esn0_db']:.2f} dB, budget {result['budget_db']:g} dB "
             f"({result['stage_share_db']:.3f} dB per stage), {result['symbols']} symbols, seed {result['seed']}",
             f"{'stage':<8} {'width':>5} {'frac':>5} {'loss dB':>9} {'95% interval':>21}"]
    for stage in ("mapper", "input", "llr"):
        for r in result[f"{stage}_best"]:
            ci = r.get("loss_db_ci95") or [math.nan, math.nan]
            frac = "-" if r["fraction"] is None else str(r["fraction"])
            mark = " <" if result["chosen"].get(stage, {}).get("width") == r["width"] else ""
            lines.append(f"{stage:<8} {r['width']:>5} {frac:>5} {r['loss_db']:>9.4f} "
                         f"[{ci[0]:>8.4f}, {ci[1]:>8.4f}]{mark}")
    rec = result["recommended"]
    lines.append("recommended: " + ", ".join(f"{k} = {v}" for k, v in rec["settings"].items()))
    ci = rec.get("loss_db_ci95") or [math.nan, math.nan]
    lines.append(f"  loss {rec['loss_db']:.4f} dB [{ci[0]:.4f}, {ci[1]:.4f}] vs the reference "
                 f"({'within' if rec['within_budget'] else 'OVER'} budget)")
    if rec.get("loss_db_vs_exact") is not None:
        lines.append(f"  loss vs float exact log-MAP {rec['loss_db_vs_exact']:.4f} dB, "
                     f"vs float max-log {rec['loss_db_vs_maxlog']:.4f} dB")
    cur = result["current"]
    if cur.get("loss_db") is not None:
        lines.append(f"current spec: loss {cur['loss_db']:.4f} dB vs the reference")
    return "\n".join(lines)


# --------------------------------------------------------------------------- the analysis document

THEORY_SOURCE = ("K. Cho and D. Yoon, 'On the general BER expression of one- and two-dimensional amplitude "
                 "modulations', IEEE Trans. Commun. 50(7), 2002 (exact, Gray square M-QAM)")
CROSS_THEORY_SOURCE = ("P. K. Vitthaladevuni, M.-S. Alouini and J. C. Kieffer, 'Exact BER computation for cross QAM "
                       "constellations', IEEE Trans. Wireless Commun. 4(6), 2005 (exact BER of Smith's cross; its "
                       "method, with the cut corners integrated numerically)")

GMI_SOURCE = ("BICM GMI (bits/symbol) with the LLR scaled by the factor that maximizes it; G. Caire, G. Taricco "
              "and E. Biglieri, 'Bit-interleaved coded modulation', IEEE Trans. Inf. Theory 44(3), 1998")


def _num(x: Any, digits: int = 7) -> Any:
    """JSON-friendly number: rounded to `digits` significant digits; nan/inf -> None."""
    if x is None:
        return None
    if isinstance(x, (list, tuple, np.ndarray)):
        return [_num(v, digits) for v in x]
    if isinstance(x, (bool, np.bool_)):
        return bool(x)
    if isinstance(x, (int, np.integer)):
        return int(x)
    x = float(x)
    if not math.isfinite(x):
        return None
    return float(f"{x:.{digits}g}")


def _ci(full: float | None, batches: np.ndarray | None) -> list[float] | None:
    se = _stderr(batches)
    if full is None or se is None:
        return None
    return [full - T_975 * se, full + T_975 * se]


def _gap_ci(ref: float | None, ref_batches: np.ndarray | None, other: float | None,
            other_batches: np.ndarray | None) -> list[float] | None:
    """95 % interval of ref - other (bits/symbol) from the paired per-batch values (same noise in both)."""
    if ref is None or other is None or ref_batches is None or other_batches is None:
        return None
    return _ci(ref - other, np.asarray(ref_batches) - np.asarray(other_batches))


def point_record(st: PointStats, design: Design) -> dict[str, Any]:
    """One SNR point of analysis.json (the keys the issue names, plus confidence and diagnostics)."""
    k = st.bits
    ber_theory = float(theory_ber(design, st.esn0_db)[0]) if theory_applies(design) else None
    rec = {
        "esn0_db": st.esn0_db, "ebn0_db": st.ebn0_db,
        "ber_fixed": st.ber_fixed, "ber_theory": ber_theory,
        "gmi_fixed": st.gmi_fixed, "gmi_maxlog": st.gmi_maxlog, "gmi_exact": st.gmi_exact,
        "ber_fixed_ci95": _ci(st.ber_fixed, st.ber_fixed_batches),
        "bit_errors_fixed": st.bit_errors_fixed,
        # no error seen: the one-sided 95 % upper bound ~ 3 / bits (the 'rule of three')
        "ber_fixed_upper95": (3.0 / (st.symbols * k)) if st.bit_errors_fixed == 0 else None,
        "ber_exact": st.ber_exact, "ber_maxlog": st.ber_maxlog,
        "gmi_fixed_ci95": _ci(st.gmi_fixed, st.gmi_fixed_batches),
        "gmi_maxlog_ci95": _ci(st.gmi_maxlog, st.gmi_maxlog_batches),
        "gmi_exact_ci95": _ci(st.gmi_exact, st.gmi_exact_batches),
        # the loss itself (the report's GMI gap plot): float exact minus each, paired batch means
        "gmi_gap_fixed_vs_exact_ci95": _gap_ci(st.gmi_exact, st.gmi_exact_batches, st.gmi_fixed,
                                               st.gmi_fixed_batches),
        "gmi_gap_maxlog_vs_exact_ci95": _gap_ci(st.gmi_exact, st.gmi_exact_batches, st.gmi_maxlog,
                                                st.gmi_maxlog_batches),
        "llr_factor_fixed": st.factor_fixed, "nats_per_llr_code": st.nats_per_code,
        "llr_factor_maxlog": st.factor_maxlog,
        "input_noise_db": st.input_noise_db, "input_clip_percent": st.input_clip_percent,
        "reliability_code": st.reliability_code,
        "shannon_capacity": float(shannon_capacity(st.esn0_db)),
    }
    return {key: _num(v) for key, v in rec.items()}


def default_sweep(operating_point_db: float) -> list[float]:
    """Es/N0 points (dB) when none are given: 1 dB steps from 8 dB below to 6 dB above the operating point."""
    start = math.floor(operating_point_db) - 8
    return [float(start + i) for i in range(15)]


def run_analysis(spec: DesignSpec, *, esn0_db: Sequence[float] | None = None, symbols: int = DEFAULT_SYMBOLS,
                 seed: int = DEFAULT_SEED, operating_point_db: float | None = None,
                 gmi_fraction: float = DEFAULT_GMI_FRACTION, ber_floor: float | None = None) -> dict[str, Any]:
    """The SNR sweep, the implementation loss and the quantization figures of one design, as analysis.json."""
    design = derive(spec)
    k = design.bits
    check_symbols(symbols, k, ber_floor)
    if operating_point_db is not None and not SNR_LIMITS_DB[0] <= operating_point_db <= SNR_LIMITS_DB[1]:
        raise SpecError("operating_point", operating_point_db,
                        f"an Es/N0 from {SNR_LIMITS_DB[0]:g} to {SNR_LIMITS_DB[1]:g} dB")
    chain = Chain(design)
    loss = implementation_loss(design, symbols, seed, operating_point_db=operating_point_db,
                               gmi_fraction=gmi_fraction, chain=chain)
    op = loss.operating_point_esn0_db
    points = list(esn0_db) if esn0_db else default_sweep(op)
    stats = sweep(design, points, symbols, seed, chain=chain)
    evm = mapper_evm(design)
    noise = input_noise(design)
    n0_op = 10.0 ** (-op / 10.0)
    d = spec.demapper
    doc: dict[str, Any] = {
        "design": spec.name, "order": design.constellation.order, "labeling": spec.constellation.labeling,
        "algorithm": d.algorithm, "bits_per_symbol": k,
        "symbols": symbols, "seed": seed, "batches": BATCHES,
        "points": [point_record(st, design) for st in stats],
        "evm_db": _num(evm["evm_db"]), "evm_percent": _num(evm["evm_percent"]),
        "evm_uniform_model_db": _num(evm["evm_uniform_model_db"]), "mapper_power_db": _num(evm["mapper_power_db"]),
        "mapper_lsb": _num(design.mapper_lsb),
        "input_lsb": _num(noise["input_lsb"]), "input_noise_db": _num(noise["input_noise_db"]),
        "input_noise_to_n0_db": _num(noise["input_noise_db"] - 10.0 * math.log10(n0_op)),
        "input_headroom_db": _num(noise["input_headroom_db"]),
        "llr_lsb": _num(design.llr_lsb),
        "operating_point_esn0_db": _num(op), "operating_point_ebn0_db": _num(op - 10.0 * math.log10(k)),
        "operating_point_gmi": _num(loss.gmi_target),
        "operating_point_rule": (f"given: Es/N0 = {operating_point_db:g} dB" if operating_point_db is not None
                                 else f"float exact GMI = {gmi_fraction:g} x log2(M)"),
        "loss_db_vs_exact": _num(loss.loss_db_vs_exact), "loss_db_vs_exact_ci95": _num(loss.loss_db_vs_exact_ci95),
        "loss_db_vs_maxlog": _num(loss.loss_db_vs_maxlog),
        "loss_db_vs_maxlog_ci95": _num(loss.loss_db_vs_maxlog_ci95),
        "ber_at_operating_point": _num(loss.ber_target),
        "ber_loss_db_vs_exact": _num(loss.ber_loss_db_vs_exact),
        "ber_loss_db_vs_exact_ci95": _num(loss.ber_loss_db_vs_exact_ci95),
        "ber_loss_db_vs_maxlog": _num(loss.ber_loss_db_vs_maxlog),
        "ber_loss_db_vs_maxlog_ci95": _num(loss.ber_loss_db_vs_maxlog_ci95),
        "loss_note": loss.note,
        "loss_grid": [point_record(st, design) for st in loss.grid],
        "reliability_code": chain.scale_code,
        "reliability_rule": (None if not chain.has_scale else "fixed code" if chain.scale_code is not None
                             else "round(2^scale_fraction / N0) clamped to 1..max: an ideal 1/N0 estimate"),
        "theory": theory_source(design),
        "gmi_definition": GMI_SOURCE,
        "method": ("AWGN, Es = mean energy of the mapper's output; common random numbers at every point; "
                   f"{BATCHES} independent batches (95 % intervals by batch means, Student t); float LLRs "
                   "of the ideal constellation on the same noise; loss = horizontal distance of the curves on a "
                   "0.1 dB grid around the operating point, linearly interpolated"),
    }
    if ber_floor is not None:
        doc["ber_floor"] = ber_floor
    if design.modes:
        doc["modes"] = mode_losses(design, symbols, seed, gmi_fraction)
    return doc


def mode_losses(design: Design, symbols: int, seed: int, gmi_fraction: float) -> list[dict[str, Any]]:
    """An adaptive core: the implementation loss of every mode at its own operating point (float exact GMI =
    gmi_fraction x k_m), every symbol sent and demapped in that mode through the common input format."""
    out = []
    for n, m in enumerate(design.modes):
        chain = Chain(design, mode=n)
        loss = implementation_loss(design, symbols, seed, gmi_fraction=gmi_fraction, chain=chain,
                                   label=f"loss {m.order}-point mode")
        op = loss.operating_point_esn0_db
        out.append({
            "mode": n, "order": m.order, "bits": m.bits, "shift": m.shift, "gain_db": _num(20.0 * math.log10(m.gain)),
            "operating_point_esn0_db": _num(op), "operating_point_ebn0_db": _num(op - 10.0 * math.log10(m.bits)),
            "operating_point_gmi": _num(loss.gmi_target),
            "loss_db_vs_exact": _num(loss.loss_db_vs_exact), "loss_db_vs_exact_ci95": _num(loss.loss_db_vs_exact_ci95),
            "loss_db_vs_maxlog": _num(loss.loss_db_vs_maxlog),
            "loss_db_vs_maxlog_ci95": _num(loss.loss_db_vs_maxlog_ci95),
            "ber_at_operating_point": _num(loss.ber_target),
            "ber_loss_db_vs_exact": _num(loss.ber_loss_db_vs_exact),
            "ber_loss_db_vs_maxlog": _num(loss.ber_loss_db_vs_maxlog),
            "loss_note": loss.note,
            "loss_grid": [{key: v for key, v in point_record(st, design).items()
                           if key in ("esn0_db", "gmi_fixed", "gmi_maxlog", "gmi_exact", "ber_fixed", "ber_exact")}
                          for st in loss.grid],
        })
    return out


def to_json(doc: dict[str, Any]) -> str:
    """Deterministic JSON (sorted keys, rounded numbers, no timestamps)."""
    return json.dumps(_clean(doc), indent=2, sort_keys=True) + "\n"


def _clean(x: Any) -> Any:
    if isinstance(x, dict):
        return {str(k): _clean(v) for k, v in x.items()}
    if isinstance(x, (list, tuple, np.ndarray)):
        return [_clean(v) for v in x]
    if isinstance(x, (float, int, np.floating, np.integer)) and not isinstance(x, bool):
        return _num(x)
    return x


def check_seed(seed: int) -> None:
    if seed < 0 or seed >= 2 ** 63:
        raise SpecError("--seed", seed, "an integer from 0 to 2^63 - 1")


def widths_run(spec: DesignSpec, path: Path, *, budget_db: float = DEFAULT_BUDGET_DB,
               symbols: int = DEFAULT_EXPLORE_SYMBOLS, seed: int = DEFAULT_SEED, operating_point_db: float | None = None,
               gmi_fraction: float = DEFAULT_GMI_FRACTION) -> dict[str, Any]:
    """`qamsmith widths`: check the arguments, explore, write the JSON table at `path`."""
    check_seed(seed)
    if not 0 < gmi_fraction < 1:
        raise SpecError("--gmi-target", gmi_fraction, "a fraction of log2(M) between 0 and 1")
    if path.exists() and path.is_dir():
        raise SpecError("--json", str(path), "a file path (a directory is in the way)")
    probe_file(path, key="--json")             # fail before the long computation, not after it
    result = explore_widths(spec, budget_db=budget_db, symbols=symbols, seed=seed,
                            operating_point_db=operating_point_db, gmi_fraction=gmi_fraction)
    result["design"] = spec.name
    write_file(path, to_json(result), key="--json")
    return result


__all__ = ["BATCHES", "Chain", "LossResult", "mode_losses", "PointStats", "ber_cross_qam", "ber_gray_qam", "ber_gray_rectangular",
           "best_scale", "check_symbols", "theory_applies", "theory_ber", "theory_source",
           "esn0_from_ebn0", "explore_widths", "gmi_direct", "implementation_loss", "input_noise", "mapper_evm",
           "check_seed", "parse_snr", "run_analysis", "widths_run", "shannon_capacity", "sweep", "to_json", "widths_table"]
