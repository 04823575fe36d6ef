"""Float references in normalized units: exact log-MAP and max-log bit LLRs (for analysis and tests)."""

from __future__ import annotations

import numpy as np

from ..numbers import Constellation, label_bits
from ..spec import DesignSpec
from .design import Design, derive


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
    return (obj if isinstance(obj, Design) else derive(obj)).constellation


__all__ = ["llr_exact", "llr_maxlog"]
