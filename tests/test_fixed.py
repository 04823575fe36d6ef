"""The integer fixed-point core against outside references.

- fxpmath (PyPI, 0.4.x) for `quantize`: the same word/fraction widths, saturation, and the rounding
  names mapped from fxpmath's own code (Fxp._round): 'around' is numpy.around, i.e. round half to
  even; 'nearest_away' rounds ties away from zero; 'floor' is floor; 'trunc' is numpy.trunc, toward
  zero. Overflow 'saturate'.
- Python's exact rationals (fractions.Fraction) for `shift_round`: round() of a Fraction is round
  half to even, math.floor is floor, math.trunc is toward zero; half-away is sign * floor(|x| + 1/2).
"""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pytest
from fxpmath import Fxp

from qamsmith.numbers.fixed import ROUNDING_MODES, QFormat, bits_for_range, quantize, saturate, shift_round

FXP_ROUNDING = {"half-even": "around", "half-away": "nearest_away", "floor": "floor", "toward-zero": "trunc"}

FORMATS = [QFormat(2, 0), QFormat(4, 2), QFormat(8, 3), QFormat(12, 10), QFormat(16, 0), QFormat(20, 19),
           QFormat(8, 4, signed=False), QFormat(18, 6, signed=False)]


def _fmt_id(fmt: QFormat) -> str:
    return f"{'s' if fmt.signed else 'u'}{fmt.width}f{fmt.fraction}"


def _probe_values(fmt: QFormat, rng: np.random.Generator) -> np.ndarray:
    """Random values across (and beyond) the range, plus every tie, edge and overflow case nearby."""
    lsb = fmt.lsb
    lo, hi = fmt.min_code * lsb, fmt.max_code * lsb
    span = max(hi - lo, lsb)
    rand = rng.uniform(lo - span / 4, hi + span / 4, 4000)
    codes = np.arange(-40, 41)
    ties = (codes + 0.5) * lsb                                  # exact halves (binary fractions)
    edges = np.array([lo, hi, lo - lsb / 2, hi + lsb / 2, lo - lsb, hi + lsb / 2 - lsb / 4,
                      (fmt.min_code - 0.5) * lsb, (fmt.max_code + 0.5) * lsb, (fmt.max_code - 0.5) * lsb,
                      (fmt.min_code + 0.5) * lsb, 0.0, -0.0, 1e9, -1e9, lsb / 4, -lsb / 4, 3 * lsb / 4])
    return np.concatenate([rand, ties, codes * lsb, edges])


@pytest.mark.parametrize("mode", ROUNDING_MODES)
@pytest.mark.parametrize("fmt", FORMATS, ids=_fmt_id)
def test_quantize_matches_fxpmath(fmt: QFormat, mode: str) -> None:
    """fxpmath Fxp(x, signed, n_word, n_frac, rounding, overflow='saturate').val == quantize(x)."""
    rng = np.random.default_rng(fmt.width * 31 + fmt.fraction)
    x = _probe_values(fmt, rng)
    ref = Fxp(x, signed=fmt.signed, n_word=fmt.width, n_frac=fmt.fraction,
              rounding=FXP_ROUNDING[mode], overflow="saturate").val
    got = quantize(x, fmt, mode)
    assert got.dtype == np.int64
    np.testing.assert_array_equal(got, np.asarray(ref, dtype=np.int64))


def test_fxpmath_rounding_names_mean_what_we_think() -> None:
    """The mapping above, checked on fxpmath itself at the ties +-0.5, +-1.5, +-2.5 LSB."""
    x = np.array([0.5, 1.5, 2.5, -0.5, -1.5, -2.5])
    expect = {"around": [0, 2, 2, 0, -2, -2], "nearest_away": [1, 2, 3, -1, -2, -3], "floor": [0, 1, 2, -1, -2, -3]}
    for name, want in expect.items():
        assert Fxp(x, signed=True, n_word=8, n_frac=0, rounding=name, overflow="saturate").val.tolist() == want


def test_qformat_ranges() -> None:
    """Two's complement: W bits hold -2^(W-1) .. 2^(W-1)-1; unsigned 0 .. 2^W-1 (common practice)."""
    assert (QFormat(8, 3).min_code, QFormat(8, 3).max_code) == (-128, 127)
    assert (QFormat(8, 3, signed=False).min_code, QFormat(8, 3, signed=False).max_code) == (0, 255)
    assert str(QFormat(12, 10)) == "Q1.10" and str(QFormat(8, 4, signed=False)) == "UQ4.4"
    assert QFormat(12, 10).lsb == 2.0 ** -10
    assert np.array_equal(saturate(np.array([-300, -128, 0, 127, 300]), QFormat(8, 0)), [-128, -128, 0, 127, 127])


@pytest.mark.parametrize("lo,hi,expect", [(0, 0, (1, False)), (0, 1, (1, False)), (0, 255, (8, False)),
                                          (0, 256, (9, False)), (-1, 0, (1, True)), (-128, 127, (8, True)),
                                          (-129, 0, (9, True)), (-128, 128, (9, True)), (-5, 3, (4, True))],
                         ids=lambda v: str(v))
def test_bits_for_range(lo: int, hi: int, expect: tuple[int, bool]) -> None:
    """Smallest two's-complement / unsigned width holding [lo, hi] (worked by hand)."""
    assert bits_for_range(lo, hi) == expect
    w, signed = expect
    fmt = QFormat(w, 0, signed)
    assert fmt.min_code <= lo and hi <= fmt.max_code


def _exact_round(num: int, shift: int, mode: str) -> int:
    """num / 2^shift rounded exactly with Python rationals (the outside reference)."""
    x = Fraction(num, 1 << shift)
    if mode == "half-even":
        return round(x)                       # Fraction.__round__: ties to even
    if mode == "floor":
        return math.floor(x)
    if mode == "toward-zero":
        return math.trunc(x)
    mag = math.floor(abs(x) + Fraction(1, 2))
    return -mag if x < 0 else mag


@pytest.mark.parametrize("mode", ROUNDING_MODES)
@pytest.mark.parametrize("shift", [1, 2, 3, 5, 8, 17, 30, 40], ids=lambda s: f"shift{s}")
def test_shift_round_matches_exact_rationals(shift: int, mode: str) -> None:
    """shift_round(x, s) == x / 2^s rounded exactly (fractions.Fraction), random, ties and edges."""
    rng = np.random.default_rng(shift)
    big = (1 << 61) - 1
    rand = rng.integers(-big, big, 3000, dtype=np.int64)
    small = rng.integers(-(1 << (shift + 3)), 1 << (shift + 3), 3000, dtype=np.int64)
    q = np.arange(-9, 10, dtype=np.int64)
    step = np.int64(1) << shift
    half = np.int64(1) << (shift - 1)
    ties = np.concatenate([q * step + half, q * step - half, q * step, q * step + half - 1, q * step + half + 1])
    edges = np.array([0, 1, -1, big, -big, -(1 << 61), (1 << 61) - half], dtype=np.int64)
    x = np.concatenate([rand, small, ties, edges])
    got = shift_round(x, shift, mode)
    want = np.array([_exact_round(int(v), shift, mode) for v in x], dtype=np.int64)
    np.testing.assert_array_equal(got, want)


@pytest.mark.parametrize("shift", [0, -1, -7], ids=lambda s: f"shift{s}")
def test_shift_round_non_positive_is_exact(shift: int) -> None:
    """A shift <= 0 is an exact multiplication by 2^-shift in every mode."""
    x = np.array([-1000, -3, -1, 0, 1, 5, 1 << 40], dtype=np.int64)
    for mode in ROUNDING_MODES:
        np.testing.assert_array_equal(shift_round(x, shift, mode), x * (1 << -shift))


def test_unknown_rounding_mode_is_refused() -> None:
    with pytest.raises(ValueError, match="unknown rounding mode 'nearest'"):
        shift_round(np.array([3]), 1, "nearest")
    with pytest.raises(ValueError, match="unknown rounding mode"):
        quantize(np.array([0.5]), QFormat(8, 0), "nearest")
