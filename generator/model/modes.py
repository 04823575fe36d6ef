"""Adaptive order (`constellation.orders`): the modes of one core, each an order of the same Gray-type family.

The input scaling, exactly (the contract the RTL equals):

* The demapper input has one format for every mode: the largest order's grid, its levels at odd multiples
  of 2^f codes (f = demapper.input_fraction), so one input LSB is kappa_max 2^-f normalized units.
* Mode m of L_m levels per axis (L_max for the largest order) is demapped on *declared* levels at
  (2n - (L_m - 1)) 2^(f + s) codes, s = log2(L_max / L_m): one of its level steps is 2^s steps of the
  largest order. Its decision is n_m = n_max >> s (the largest order's shift and clamp, top bits), its
  labels are the top bits of the largest order's (Gray-type labels nest), so one datapath serves all modes.
* The declared levels are the standard unit-power points of mode m scaled by the gain
  g_m = 2^s kappa_max / kappa_m (0.994, 0.970 and 0.868 for 64-, 16-QAM and QPSK under 256-QAM): a mode
  below the largest sits slightly inside its declared grid. Max-log is exact with respect to the declared
  levels; the cost of the mismatch is measured by `qamsmith analyze` as implementation loss per mode.
* The metric of mode m is its own per-axis max-log metric R_m (input fraction f + s), shifted left by s:
  R = R_m << s = D ((D << f) - e_m), D = dn << s the competitor offset in the largest order's levels. So
  every mode's metric is in the same units, (2 amplitude units of the largest order)^2 with f fraction bits,
  one output stage serves all modes and llr_lsb is the same for every mode.

A mode code past the list acts as the last mode (the largest order). Label bit b of mode m goes to LLR field
b of the largest order's word (b0 most significant); the fields past the mode's k_m bits are zero.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..numbers import Constellation, named
from .steps import AxisDemap, OutputStage, axis_steps, output


@dataclass(frozen=True, eq=False)
class Mode:
    """One mode of an adaptive core: its order, its declared grid and its per-axis tables over every input code."""

    index: int
    order: int
    constellation: Constellation
    #: s = log2(L_max / L_m): the mode's level step is 2^(f + 1 + s) input codes
    shift: int
    #: declared over standard amplitude, 2^s kappa_max / kappa_m (<= 1)
    gain: float
    #: per-axis demapper data of the axes that carry bits (input fraction f + s)
    axes: tuple[AxisDemap, ...]
    #: mapper I and Q codes of every label of this mode, shape (M_m,)
    point_i: np.ndarray
    point_q: np.ndarray
    #: per-axis mapper level codes by level index (I, Q); a one-level axis (BPSK's Q) holds its one code
    level_codes: tuple[np.ndarray, ...]
    #: per carrying axis: (magnitude << s, negative) over every input code, each (N_codes, m)
    tables: tuple[tuple[np.ndarray, np.ndarray], ...]
    #: per carrying axis: the final LLRs (no reliability input) and the hard bits, each (N_codes, m)
    llr_tables: tuple[np.ndarray, ...]
    hard_tables: tuple[np.ndarray, ...]

    @property
    def bits(self) -> int:
        return self.constellation.bits

    @property
    def kappa(self) -> float:
        return self.constellation.kappa


def mode_shift(const_max: Constellation, const: Constellation) -> int:
    """s = log2(L_max / L_m) of the I axis (the one every mode carries; squares have equal axes)."""
    return (const_max.axes[0].levels // const.axes[0].levels).bit_length() - 1


def mode_steps(ad: AxisDemap, algorithm: str, f: int, s: int, y: np.ndarray):
    """A mode's per-axis (magnitude << s, negative, hard bits) at input fraction f + s (`axis_steps`, then the shift)."""
    mag, neg, hard = axis_steps(ad, algorithm, f + s, y)
    return mag << s, neg, hard


def build_mode(index: int, order: int, labeling: str, const_max: Constellation, f: int, algorithm: str,
               axis_demap, mapper: tuple[np.ndarray, np.ndarray, tuple[np.ndarray, ...]], codes: np.ndarray,
               stage: OutputStage, final: bool) -> Mode:
    """One mode: its declared grid, its mapper codes (given) and its tables over every input code."""
    const = named(order, labeling)
    s = mode_shift(const_max, const)
    axes = tuple(axis_demap(ax, f + s) for ax in const.axes if ax.bits)
    tables, llrs, hards = [], [], []
    dtype = np.int8 if stage.llr_max < 128 else np.int16 if stage.llr_max < 1 << 15 else np.int32
    for ad in axes:
        mag, neg, hard = mode_steps(ad, algorithm, f, s, codes)
        mag = mag.astype(np.int32) if int(mag.max(initial=0)) < 1 << 31 else mag
        llr = output(stage, mag.astype(np.int64), neg, None).astype(dtype) if final else np.zeros((0, ad.bits), dtype)
        for a in (mag, neg, llr, hard):
            a.setflags(write=False)
        tables.append((mag, neg))
        llrs.append(llr)
        hards.append(hard)
    pi, pq, levels = mapper
    gain = float((1 << s) * const_max.kappa / const.kappa)
    return Mode(index=index, order=order, constellation=const, shift=s, gain=gain, axes=axes, point_i=pi,
                point_q=pq, level_codes=levels, tables=tuple(tables), llr_tables=tuple(llrs), hard_tables=tuple(hards))


def mode_codes(modes: np.ndarray, count: int, width: int) -> np.ndarray:
    """Mode field values to mode indices: a code past the list acts as the last mode (the largest order)."""
    modes = np.asarray(modes, dtype=np.int64)
    if modes.size and (modes.min() < 0 or modes.max() >= 1 << width):
        raise ValueError(f"mode codes must be in 0..{(1 << width) - 1}")
    return np.minimum(modes, count - 1)


__all__ = ["Mode", "build_mode", "mode_codes", "mode_shift", "mode_steps"]
