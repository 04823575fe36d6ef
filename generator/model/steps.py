"""The demapper's integer steps, one function per hardware step (all int64 numpy, no floats).

`decide` (shift and clamp), `metric` (exact max-log, nearest-competitor form) or `fold`
(Tosato-Bisaglia), then `output` (reliability multiply, rounding shift, symmetric saturation,
sign). The RTL builders in `qamsmith.ir` reproduce each of them operation for operation.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..numbers import Axis, shift_round


@dataclass(frozen=True, eq=False)
class AxisDemap:
    """Per-axis demapper data of one PAM axis: competitor tables and the level grid in input codes."""

    axis: Axis
    #: competitor offset dn[j, n_hat, e < 0] (levels) of axis bit j, maxlog
    competitor: np.ndarray
    #: True where competitor[j] depends on the residual's sign (else only on n_hat)
    uses_sign: tuple[bool, ...]
    #: per axis bit: True when the bit is inverted against the Gray code (folded sign)
    inverted: tuple[bool, ...]
    #: input code of each level n: (2n - (L-1)) * 2^f
    level_input_codes: tuple[int, ...]
    #: input codes of the decision boundaries between levels n and n + 1: (2n - L + 2) * 2^f
    boundaries: tuple[int, ...]

    @property
    def levels(self) -> int:
        return self.axis.levels

    @property
    def bits(self) -> int:
        return self.axis.bits

    def label_bit_of_level(self, j: int) -> np.ndarray:
        """Axis bit j (0 = axis MSB) of the label of every level n, shape (L,)."""
        return self.axis.axis_bit(np.asarray(self.axis.codes), j).astype(np.int64)


@dataclass(frozen=True)
class OutputStage:
    """The demapper's last steps: P = |metric| * S, v = round(P / 2^shift), min(v, llr_max), sign."""

    #: right shift of the product (a negative shift is an exact left shift)
    shift: int
    rounding: str
    #: largest LLR code (symmetric saturation: the most negative code is never produced)
    llr_max: int


def decide(ad: AxisDemap, y: np.ndarray, f: int) -> tuple[np.ndarray, np.ndarray]:
    """Hard decision n_hat (shift and clamp) and residual e = y - a_hat, in input codes."""
    L = ad.levels
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
    neg = ad.label_bit_of_level(j)[n_hat].astype(bool)
    return r, neg


def fold(ad: AxisDemap, y: np.ndarray, f: int) -> list[tuple[np.ndarray, np.ndarray]]:
    """Folded LLRs (Tosato and Bisaglia, ICC 2002): t0 = y, tj = 2^(m-j) 2^f - |t(j-1)|.

    Returns (magnitude, negative) per axis bit; |t| of the most negative input is exact
    because t is one bit wider than the input.
    """
    m = ad.bits
    out = []
    t = y
    for j in range(m):
        if j:
            t = ((1 << (m - j)) << f) - np.abs(t)
        signed = t if ad.inverted[j] else -t
        out.append((np.abs(signed), signed < 0))
    return out


def output(stage: OutputStage, mag: np.ndarray, neg: np.ndarray, scale: np.ndarray | None) -> np.ndarray:
    """Output stage: magnitude x scale, rounding shift, symmetric saturation, sign."""
    p = mag if scale is None else mag * scale
    if stage.shift < 0:
        # clamp before the exact left shift so int64 cannot wrap; same result as shifting first
        p = np.minimum(p, (stage.llr_max >> -stage.shift) + 1)
    v = shift_round(p, stage.shift, stage.rounding)
    v = np.minimum(v, stage.llr_max)
    return np.where(neg, -v, v)


def axis_steps(ad: AxisDemap, algorithm: str, f: int, y: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per-axis (magnitude, negative, hard bits), each (N, m), straight from the step functions."""
    n_hat, e = decide(ad, y, f)
    hard = np.stack([ad.label_bit_of_level(j)[n_hat] for j in range(ad.bits)], axis=1)
    if algorithm == "folded":
        pairs = fold(ad, y, f)
    else:
        pairs = [metric(ad, n_hat, e, f, j) for j in range(ad.bits)]
    mag = np.stack([p[0] for p in pairs], axis=1)
    neg = np.stack([p[1] for p in pairs], axis=1)
    return mag, neg, hard.astype(np.int8)


__all__ = ["AxisDemap", "OutputStage", "axis_steps", "decide", "fold", "metric", "output"]
