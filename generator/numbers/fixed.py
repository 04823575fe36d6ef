"""Integer fixed-point core: Q-formats, quantization, rounding shifts and saturation.

Every function works on integer numpy arrays (int64) and maps one-to-one onto hardware:
a right shift with a rounding increment, a compare-and-clamp, a conditional negate.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..spec import ROUNDING_MODES


@dataclass(frozen=True)
class QFormat:
    """A two's-complement (or unsigned) fixed-point format: `width` bits, `fraction` of them fractional."""

    width: int
    fraction: int
    signed: bool = True

    @property
    def min_code(self) -> int:
        return -(1 << (self.width - 1)) if self.signed else 0

    @property
    def max_code(self) -> int:
        return (1 << (self.width - 1)) - 1 if self.signed else (1 << self.width) - 1

    @property
    def lsb(self) -> float:
        """Value of one LSB (2^-fraction)."""
        return 2.0 ** -self.fraction

    def __str__(self) -> str:
        kind = "Q" if self.signed else "UQ"
        return f"{kind}{self.width - self.fraction - (1 if self.signed else 0)}.{self.fraction}"


def bits_for_range(lo: int, hi: int) -> tuple[int, bool]:
    """Smallest (width, signed) that holds every integer in [lo, hi]."""
    lo, hi = int(lo), int(hi)
    if lo >= 0:
        return max(1, hi.bit_length()), False
    width = max((-lo - 1).bit_length(), hi.bit_length()) + 1
    return width, True


def round_float(x: np.ndarray, mode: str) -> np.ndarray:
    """Round real values to integers with `mode` (one of ROUNDING_MODES); returns int64."""
    x = np.asarray(x, dtype=np.float64)
    if mode == "half-even":
        r = np.rint(x)
    elif mode == "half-away":
        r = np.copysign(np.floor(np.abs(x) + 0.5), x)
    elif mode == "floor":
        r = np.floor(x)
    elif mode == "toward-zero":
        r = np.trunc(x)
    else:
        raise ValueError(f"unknown rounding mode {mode!r}")
    return r.astype(np.int64)


def saturate(codes: np.ndarray, fmt: QFormat) -> np.ndarray:
    """Clamp integer codes into the representable range of `fmt`."""
    return np.clip(np.asarray(codes, dtype=np.int64), fmt.min_code, fmt.max_code)


def quantize(x: np.ndarray, fmt: QFormat, mode: str) -> np.ndarray:
    """Real values to codes of `fmt`: scale by 2^fraction, round with `mode`, saturate."""
    scaled = np.asarray(x, dtype=np.float64) * (2.0 ** fmt.fraction)
    return saturate(round_float(scaled, mode), fmt)


def shift_round(x: np.ndarray, shift: int, mode: str) -> np.ndarray:
    """Integer x / 2^shift rounded with `mode`, as hardware does it (shift <= 0 is an exact left shift).

    half-away adds 2^(shift-1) to |x| before the shift (the sign is re-applied after);
    half-even adds 2^(shift-1) - 1 plus the LSB of the truncated quotient; floor is an arithmetic
    shift; toward-zero shifts |x| (the sign is re-applied after).
    """
    x = np.asarray(x, dtype=np.int64)
    if shift <= 0:
        return x << (-shift)
    if mode == "floor":
        return x >> shift
    if mode == "toward-zero":
        mag = np.abs(x) >> shift
        return np.where(x < 0, -mag, mag)
    half = np.int64(1) << (shift - 1)
    if mode == "half-away":
        mag = (np.abs(x) + half) >> shift
        return np.where(x < 0, -mag, mag)
    if mode == "half-even":
        odd = (x >> shift) & 1
        return (x + half - 1 + odd) >> shift
    raise ValueError(f"unknown rounding mode {mode!r}")
