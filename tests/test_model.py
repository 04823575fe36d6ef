"""The bit-exact model: integer demapper against independent brute force, float references against
komm and brute force, hard decisions and BER against the closed form.

Outside references, named beside each check:
- komm (PyPI): Constellation.posteriors (AWGN, complex noise of power N0) marginalized to bit
  L-values with Labeling.marginalize, L = log P(b=0)/P(b=1) (same sign convention as ours).
- Cho and Yoon, "On the general BER expression of one- and two-dimensional amplitude modulations",
  IEEE Trans. Commun., vol. 50, no. 7, 2002: exact BER of Gray square M-QAM in AWGN (the expression
  is written from memory and checked below against a direct integration over the decision regions).
- Tosato and Bisaglia, "Simplified soft-output demapper for binary interleaved COFDM systems with
  application to HIPERLAN/2", ICC 2002: the folded LLR equals max-log on each axis' LSB and in the
  innermost region of the MSB, and is smaller than max-log beyond.
Everything else is checked against brute force written here (integer distances to every point).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from qamsmith.numbers.constellation import ORDERS as ALL_ORDERS
from qamsmith.numbers.constellation import bits_per_symbol, label_bits, named
from qamsmith.errors import SpecError
from qamsmith.model import (demap, demap_direct, derive, hard_decisions, llr_exact, llr_maxlog, map_bits,
                            quantize_input)
from qamsmith.spec import ConstellationSpec, DemapperSpec, DesignSpec, MapperSpec

NAMED = ("gray", "3gpp-nr", "ieee-802.11", "natural")
GRAY_TYPE = ("gray", "3gpp-nr", "ieee-802.11")
#: BPSK and the square orders, every named labeling; the odd-bit rectangles (8 .. 2048) with gray and natural
#: (3GPP NR and IEEE 802.11 define no odd-bit order; Smith's cross in tests/test_cross.py)
ORDERS = tuple(o for o in ALL_ORDERS if o == 2 or bits_per_symbol(o) % 2 == 0)
ODD = tuple(o for o in ALL_ORDERS if o > 2 and bits_per_symbol(o) % 2)
ODD_NAMED = [(o, lab) for o in ODD for lab in ("gray", "natural")]


def _oid(order: int) -> str:
    return "bpsk" if order == 2 else "qpsk" if order == 4 else f"qam{order}"


# --------------------------------------------------------------------------- user tables

def _grid(order: int) -> list[complex]:
    L = math.isqrt(order)
    return [complex(a, b) for a in range(-(L - 1), L, 2) for b in range(-(L - 1), L, 2)]


def _table_separable_16() -> tuple:
    """16-QAM product table with a non-Gray I axis (levels carry b0b1 = 00, 11, 01, 10) and natural Q."""
    i_of = {0: -3, 3: -1, 1: 1, 2: 3}
    return tuple((lab, float(i_of[lab >> 2]), float(2 * (lab & 3) - 3)) for lab in range(16))


def _table_swapped_64() -> tuple:
    """64-QAM Gray per axis but with the I bits in the order b1, b2, b0 and Q on b3..b5 (separable)."""
    rows = []
    for lab in range(64):
        b = [(lab >> (5 - n)) & 1 for n in range(6)]
        ni = (b[1] << 2 | b[2] << 1 | b[0])
        nq = (b[3] << 2 | b[4] << 1 | b[5])
        gi = next(n for n in range(8) if n ^ (n >> 1) == ni)
        gq = next(n for n in range(8) if n ^ (n >> 1) == nq)
        rows.append((lab, float(2 * gi - 7), float(2 * gq - 7)))
    return tuple(rows)


def _table_scrambled_16() -> tuple:
    """16 grid points with labels scrambled over both axes: not a product, 2-D search."""
    perm = np.random.default_rng(11).permutation(16)
    return tuple((int(perm[n]), p.real, p.imag) for n, p in enumerate(_grid(16)))


def _table_rotated_16() -> tuple:
    """Gray 16-QAM rotated by 0.3 rad: off the grid, 2-D search on points rounded to the input grid."""
    c = named(16, "gray").points * np.exp(0.3j)
    return tuple((lab, float(p.real), float(p.imag)) for lab, p in enumerate(c))


TABLES = {"table16-separable": (16, _table_separable_16()), "table64-swapped": (64, _table_swapped_64()),
          "table16-scrambled": (16, _table_scrambled_16()), "table16-rotated": (16, _table_rotated_16())}


def make_spec(order: int, labeling: str, *, f: int = 3, width: int | None = None, algorithm: str = "maxlog",
              llr_width: int = 32, llr_fraction: int | None = None, rounding: str = "half-away",
              scale_width: int = 0, scale_fraction: int = 0, extra_llr_fraction: int = 0) -> DesignSpec:
    """A spec for tests: input wide enough to reach well beyond the outermost level.

    llr_fraction None: the metric's own fraction plus extra_llr_fraction (output shift <= 0, exact).
    """
    table = ()
    if labeling in TABLES:
        order, table = TABLES[labeling]
    cons = ConstellationSpec(order=order, labeling="table" if table else labeling, table=table)
    const = named(order, labeling) if not table else None
    if width is None:
        peak = (math.ceil(max(max(abs(r[1]), abs(r[2])) for r in table)) if table
                else int(np.max(np.abs(const.points.real))))
        width = min(20, (peak << f).bit_length() + 2)
    if llr_fraction is None:
        search = bool(table) and labeling in ("table16-scrambled", "table16-rotated") or (order == 2 and labeling == "3gpp-nr")
        llr_fraction = (2 * f + 2 if search else f) + scale_fraction + extra_llr_fraction
    dem = DemapperSpec(algorithm=algorithm, input_width=width, input_fraction=f, llr_width=llr_width,
                       llr_fraction=llr_fraction, rounding=rounding, scale_width=scale_width,
                       scale_fraction=scale_fraction)
    return DesignSpec(name="t", constellation=cons, mapper=MapperSpec(width=20, fraction=17), demapper=dem)


# --------------------------------------------------------------------------- brute force references

def brute_metric(design, i: np.ndarray, q: np.ndarray) -> np.ndarray:
    """D = min_{b=1} |y-x|^2 - min_{b=0} |y-x|^2 over all M points, in input codes squared (exact ints).

    Points at round(x * 2^f) (exact for grid points; the declared rounding for off-grid tables).
    """
    f = design.spec.demapper.input_fraction
    const = design.constellation
    px = np.rint(const.points.real * 2.0 ** f).astype(np.int64)
    py = np.rint(const.points.imag * 2.0 ** f).astype(np.int64)
    k = const.bits
    out = np.empty((i.size, k), dtype=np.int64)
    step = max(1, (1 << 20) // const.order)
    for s in range(0, i.size, step):
        di = i[s:s + step, None] - px[None, :]
        dq = q[s:s + step, None] - py[None, :]
        d2 = di * di + dq * dq
        for b in range(k):
            one, zero = _split(d2, b, k)
            out[s:s + step, b] = one.min(axis=(1, 2)) - zero.min(axis=(1, 2))
    return out


def _split(a: np.ndarray, b: int, k: int) -> tuple[np.ndarray, np.ndarray]:
    """Views of the columns (labels 0..M-1) whose bit b (0 = b0, the MSB) is 1, and 0."""
    v = a.reshape(a.shape[0], 1 << b, 2, 1 << (k - 1 - b))
    return v[:, :, 1, :], v[:, :, 0, :]


def expected_llr(design, d: np.ndarray, scale: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """LLR codes from the exact metric D (codes squared): sign(D) * sat(round(|D| s 2^(lf - sf) / 2^(2f+2))).

    Rounding done here in plain integer arithmetic (quotient, remainder), independent of fixed.shift_round.
    Returns (codes, exact value as float) for the error bound checks.
    """
    dm = design.spec.demapper
    f, lf = dm.input_fraction, dm.llr_fraction
    sf = dm.scale_fraction if dm.scale_width else 0
    s = np.ones((d.shape[0], 1), np.int64) if scale is None else np.asarray(scale, np.int64).reshape(-1, 1)
    num = np.abs(d) * s
    den_exp = 2 * f + 2 + sf - lf
    if den_exp <= 0:                                          # exact left shift, in Python integers
        mag = np.array([[min(int(v) << -den_exp, design.llr_format.max_code) for v in row] for row in num],
                       dtype=np.int64).reshape(num.shape)
        exact = num.astype(float) * 2.0 ** -den_exp
    else:
        quo, rem = num >> den_exp, num & ((1 << den_exp) - 1)
        half = 1 << (den_exp - 1)
        mode = dm.rounding
        if mode == "toward-zero":                          # the magnitude truncated, then signed
            mag = quo
        elif mode == "half-away":
            mag = quo + (rem >= half)
        else:
            mag = quo + ((rem > half) | ((rem == half) & (quo & 1 == 1)))
        exact = num / float(1 << den_exp)
    mag = np.minimum(mag, design.llr_format.max_code)
    return np.where(d < 0, -mag, mag), np.where(d < 0, -exact, exact)


def axis_sweep(design, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """Every input code on I with a random Q, then every code on Q with a random I."""
    fmt = design.input_format
    codes = np.arange(fmt.min_code, fmt.max_code + 1, dtype=np.int64)
    other = rng.integers(fmt.min_code, fmt.max_code + 1, codes.size)
    return np.concatenate([codes, other]), np.concatenate([other, codes])


# --------------------------------------------------------------------------- (a) exact max-log

EXACT_CASES = ([(o, lab) for o in ORDERS for lab in NAMED] + ODD_NAMED
               + [(16, "table16-separable"), (64, "table64-swapped"), (16, "table16-scrambled")])


@pytest.mark.parametrize("extra", [0, 2], ids=["shift0", "shift-2"])
@pytest.mark.parametrize("order,labeling", EXACT_CASES, ids=[f"{_oid(o)}-{lab}" for o, lab in EXACT_CASES])
def test_maxlog_equals_float_maxlog_of_quantized_input(order: int, labeling: str, extra: int) -> None:
    """No rounding, no saturation: demap * llr_lsb == float max-log of the quantized input, every input code per axis."""
    design = derive(make_spec(order, labeling, extra_llr_fraction=extra))
    assert design.output_shift == -extra
    rng = np.random.default_rng(order + extra)
    i, q = axis_sweep(design, rng)
    got = demap(design, i, q)
    want, _ = expected_llr(design, brute_metric(design, i, q))
    assert np.abs(want).max() < design.llr_format.max_code           # really no saturation
    np.testing.assert_array_equal(got, want)
    # the float reference of the same quantized samples, in normalized units
    y = (i + 1j * q) * design.input_lsb
    ref = llr_maxlog(design, y)
    np.testing.assert_allclose(got * design.llr_lsb, ref, rtol=1e-12, atol=1e-12 * np.abs(ref).max())


def test_maxlog_with_scale_equals_scaled_float_maxlog() -> None:
    """Reliability input: demap * llr_lsb == max-log * scale * scale_lsb exactly when nothing is rounded."""
    design = derive(make_spec(256, "3gpp-nr", scale_width=5, scale_fraction=2))
    assert design.output_shift == 0
    rng = np.random.default_rng(3)
    i, q = axis_sweep(design, rng)
    s = rng.integers(0, 32, i.size)
    got = demap(design, i, q, scale=s)
    ref = llr_maxlog(design, (i + 1j * q) * design.input_lsb) * (s * design.scale_lsb)[:, None]
    np.testing.assert_allclose(got * design.llr_lsb, ref, rtol=1e-12, atol=1e-9)
    assert np.all(got[s == 0] == 0)


def test_bpsk_3gpp_nr_search_is_exact() -> None:
    """3GPP BPSK (TS 38.211 5.1.2: one bit on both axes) is demapped by the 2-D search, exhaustively 2-D here."""
    design = derive(make_spec(2, "3gpp-nr", f=2, width=6))
    assert not design.per_axis
    fmt = design.input_format
    c = np.arange(fmt.min_code, fmt.max_code + 1)
    i, q = (a.ravel() for a in np.meshgrid(c, c))
    got = demap(design, i, q)
    np.testing.assert_array_equal(got, expected_llr(design, brute_metric(design, i, q))[0])
    # max-log of (1+j)/sqrt2 vs -(1+j)/sqrt2 is 4 Re(y (1-j))/sqrt2 in normalized units (worked by hand)
    y = (i + 1j * q) * design.input_lsb
    np.testing.assert_allclose(got[:, 0] * design.llr_lsb, 4 * (y.real + y.imag) / math.sqrt(2), atol=1e-12)


def test_rotated_table_search() -> None:
    """Off-grid table: exact against brute force on the rounded points, and within the rounding bound of the true max-log."""
    design = derive(make_spec(16, "table16-rotated", f=4, width=10))
    assert not design.per_axis
    rng = np.random.default_rng(5)
    i, q = axis_sweep(design, rng)
    got = demap(design, i, q)
    np.testing.assert_array_equal(got, expected_llr(design, brute_metric(design, i, q))[0])
    # each point moves by at most delta = sqrt(2) 2^-(f+1) amplitude units when rounded to the input grid:
    # each min |y-x|^2 moves by at most delta (2 d + delta), d the largest distance involved
    y_amp = (i + 1j * q) * 2.0 ** -4
    d = np.abs(y_amp[:, None] - design.constellation.points[None, :]).max()
    delta = math.sqrt(2) * 2.0 ** -5
    bound = 2 * delta * (2 * d + delta) * design.constellation.kappa ** 2
    ref = llr_maxlog(design, (i + 1j * q) * design.input_lsb)
    assert np.abs(got * design.llr_lsb - ref).max() <= bound


# --------------------------------------------------------------------------- (b) rounding and saturation

ROUND_CASES = [(16, "gray"), (256, "3gpp-nr"), (64, "natural"), (4096, "ieee-802.11"), (16, "table16-scrambled")]


@pytest.mark.parametrize("rounding", ["half-even", "half-away", "toward-zero"])
@pytest.mark.parametrize("order,labeling", ROUND_CASES, ids=[f"{_oid(o)}-{lab}" for o, lab in ROUND_CASES])
def test_rounding_and_saturation(order: int, labeling: str, rounding: str) -> None:
    """Right shift with rounding and 5-bit symmetric saturation: within half an LSB (toward-zero: one) before saturation."""
    search = labeling.startswith("table16-s")
    spec = make_spec(order, labeling, f=4, llr_width=5, llr_fraction=1, rounding=rounding)
    design = derive(spec)
    assert design.output_shift == (2 * 4 + 2 if search else 4) - 1 > 0
    rng = np.random.default_rng(order)
    i, q = axis_sweep(design, rng)
    got = demap(design, i, q)
    want, exact = expected_llr(design, brute_metric(design, i, q))
    np.testing.assert_array_equal(got, want)
    top = design.llr_format.max_code
    assert top == 15 and got.max() == top and got.min() == -top      # symmetric, both ends reached
    inside = np.abs(exact) < top - 1
    err = got[inside] - exact[inside]
    if rounding == "toward-zero":
        assert np.all((np.abs(got[inside]) <= np.abs(exact[inside])) & (np.abs(err) < 1))
    else:
        assert np.abs(err).max() <= 0.5
    # the most negative input code on either axis, explicitly
    lo = design.input_format.min_code
    edge = demap(design, np.array([lo, 0, lo]), np.array([0, lo, lo]))
    np.testing.assert_array_equal(edge, expected_llr(design, brute_metric(design, np.array([lo, 0, lo]),
                                                                          np.array([0, lo, lo])))[0])


@pytest.mark.parametrize("rounding", ["half-even", "half-away", "toward-zero"])
def test_rounding_with_scale(rounding: str) -> None:
    """Scale multiply then rounding shift then saturation, against the exact product (256-QAM Gray)."""
    design = derive(make_spec(256, "gray", f=3, llr_width=8, llr_fraction=2, rounding=rounding,
                              scale_width=6, scale_fraction=3))
    assert design.output_shift == 3 + 3 - 2
    rng = np.random.default_rng(9)
    i, q = axis_sweep(design, rng)
    s = rng.integers(0, 64, i.size)
    s[:3] = [0, 63, 1]
    got = demap(design, i, q, scale=s)
    np.testing.assert_array_equal(got, expected_llr(design, brute_metric(design, i, q), s)[0])
    assert got.min() == -127 and got.max() == 127


def test_most_negative_llr_code_never_produced_with_left_shift() -> None:
    """Output shift < 0 with a wide reliability input: saturate, never wrap in int64 (model bug found and fixed)."""
    # widest corner: 20-bit input, no fraction, 18-bit scale, 31 LLR fraction bits -> shift -31
    design = derive(make_spec(16, "gray", f=0, width=20, llr_width=32, llr_fraction=31,
                              scale_width=18, scale_fraction=0))
    assert design.output_shift == -31
    fmt = design.input_format
    i = np.array([fmt.min_code, fmt.max_code, 1000, 0, -3])
    q = np.array([fmt.max_code, fmt.min_code, -1000, 0, 1])
    s = np.array([(1 << 18) - 1, (1 << 18) - 1, 1, 0, 1])
    got = demap(design, i, q, scale=s)
    np.testing.assert_array_equal(got, expected_llr(design, brute_metric(design, i, q), s)[0])
    assert got.min() > -(1 << 31)


def test_int64_refusal_message() -> None:
    """A spec whose scaled metric would not fit the model's int64 (62 bits) is refused, naming the width."""
    # a 256-point table that is not a product, one point far out: the 2-D distances grow with it
    pts = _grid(256)
    rows = [(n, p.real, p.imag) for n, p in enumerate(pts)]
    rows[0] = (0, 400.0, 400.0)
    perm = np.random.default_rng(1).permutation(256)
    rows = tuple((int(perm[n]), i, q) for n, i, q in rows)
    base = dict(constellation=ConstellationSpec(order=256, labeling="table", table=rows),
                mapper=MapperSpec(width=20, fraction=10))
    ok = DesignSpec(demapper=DemapperSpec(input_width=20, input_fraction=18, llr_width=32, llr_fraction=2), **base)
    assert derive(ok).widths["product"][0] <= 62
    bad = DesignSpec(demapper=DemapperSpec(input_width=20, input_fraction=18, llr_width=32, llr_fraction=2,
                                           scale_width=18), **base)
    with pytest.raises(SpecError, match=r"^demapper\.scale_width = 18: a narrower reliability input or "
                                        r"demapper\.input_width: the scaled metric needs \d+ bits, at most 62 supported$"):
        derive(bad)


def test_widest_per_axis_spec_fits_int64() -> None:
    """Per-axis widest corner (20-bit input, 18-bit scale, 4096-QAM): the product width stays far below 62 bits."""
    spec = make_spec(4096, "gray", f=0, width=20, llr_width=32, llr_fraction=0, scale_width=18)
    design = derive(spec)
    assert design.widths["product"][0] < 62
    fmt = design.input_format
    i = np.array([fmt.min_code, fmt.max_code, fmt.min_code])
    s = np.array([(1 << 18) - 1] * 3)
    got = demap(design, i, i[::-1].copy(), scale=s)
    np.testing.assert_array_equal(got, expected_llr(design, brute_metric(design, i, i[::-1].copy()), s)[0])


# --------------------------------------------------------------------------- (c) tables vs step functions

DIRECT_CASES = [(o, lab, alg, sw) for o in ORDERS for lab in ("gray", "3gpp-nr", "natural") for alg in ("maxlog", "folded")
                for sw in (0, 7) if not (alg == "folded" and lab == "natural" and o > 4)
                and not (o == 2 and lab == "3gpp-nr")] + [(64, "table64-swapped", "maxlog", 7)] \
    + [(o, lab, alg, 7) for o, lab in ODD_NAMED for alg in ("maxlog", "folded") if not (alg == "folded" and lab == "natural")]


@pytest.mark.parametrize("order,labeling,algorithm,scale_width", DIRECT_CASES,
                         ids=[f"{_oid(o)}-{lab}-{alg}-s{sw}" for o, lab, alg, sw in DIRECT_CASES])
def test_tables_equal_step_functions(order: int, labeling: str, algorithm: str, scale_width: int) -> None:
    """The fast path (per-axis tables) equals the step functions run on the inputs (model.demap_direct)."""
    design = derive(make_spec(order, labeling, f=4, llr_width=7, llr_fraction=1, algorithm=algorithm,
                              scale_width=scale_width, scale_fraction=3 if scale_width else 0))
    rng = np.random.default_rng(order * 7 + scale_width)
    fmt = design.input_format
    n = 3000
    i = rng.integers(fmt.min_code, fmt.max_code + 1, n)
    q = rng.integers(fmt.min_code, fmt.max_code + 1, n)
    i[:2], q[:2] = fmt.min_code, fmt.max_code
    s = rng.integers(0, 1 << scale_width, n) if scale_width else None
    np.testing.assert_array_equal(demap(design, i, q, s), demap_direct(design, i, q, s))


# --------------------------------------------------------------------------- (d) folded

FOLD_CASES = [(o, lab) for o in ORDERS for lab in GRAY_TYPE if not (o == 2 and lab == "3gpp-nr")] + [(o, "gray") for o in ODD]


@pytest.mark.parametrize("order,labeling", FOLD_CASES, ids=[f"{_oid(o)}-{lab}" for o, lab in FOLD_CASES])
def test_folded_against_maxlog(order: int, labeling: str) -> None:
    """Tosato and Bisaglia (ICC 2002): per axis, folded == max-log on the LSB everywhere and on the MSB for
    |y| within the two innermost levels' region (|y| <= 2 amplitude units); never larger; same sign."""
    f = 3
    fold = derive(make_spec(order, labeling, f=f, algorithm="folded"))
    ml = derive(make_spec(order, labeling, f=f))
    rng = np.random.default_rng(order)
    i, q = axis_sweep(fold, rng)
    a, b = demap(fold, i, q), demap(ml, i, q)
    assert np.all(np.abs(a) <= np.abs(b))
    np.testing.assert_array_equal(np.sign(a), np.sign(b))
    for ax, y in zip(fold.constellation.axes, (i, q)):
        if not ax.bits:
            continue
        lsb, msb = ax.label_bits[-1], ax.label_bits[0]
        np.testing.assert_array_equal(a[:, lsb], b[:, lsb])
        inner = np.abs(y) <= (2 << f)
        np.testing.assert_array_equal(a[inner, msb], b[inner, msb])
        if ax.bits > 1:
            assert np.any(np.abs(a[~inner, msb]) < np.abs(b[~inner, msb]))   # really smaller out there


@pytest.mark.parametrize("order,labeling", [(16, "natural"), (2, "3gpp-nr"), (16, "table16-separable")],
                         ids=["qam16-natural", "bpsk-3gpp-nr", "qam16-table-separable"])
def test_folded_refused_for_non_gray(order: int, labeling: str) -> None:
    with pytest.raises(SpecError, match=r"^demapper\.algorithm = 'folded': maxlog or hard for labeling .* "
                                        r"\(folded needs a Gray-type product labeling\)$"):
        derive(make_spec(order, labeling, algorithm="folded"))


# --------------------------------------------------------------------------- (e) hard decisions

HARD_CASES = [(o, lab) for o in ORDERS for lab in NAMED] + ODD_NAMED + [(16, t) for t in TABLES if t.startswith("table16")] \
             + [(64, "table64-swapped")]


@pytest.mark.parametrize("order,labeling", HARD_CASES, ids=[f"{_oid(o)}-{lab}" for o, lab in HARD_CASES])
def test_hard_decisions_are_the_nearest_label(order: int, labeling: str) -> None:
    """Hard bits == label of the nearest point (brute force over all points in codes), ties left out."""
    design = derive(make_spec(order, labeling, f=3, algorithm="hard"))
    fmt = design.input_format
    rng = np.random.default_rng(order + len(labeling))
    n = 4000
    i = rng.integers(fmt.min_code, fmt.max_code + 1, n)
    q = rng.integers(fmt.min_code, fmt.max_code + 1, n)
    f = design.spec.demapper.input_fraction
    px = np.rint(design.constellation.points.real * 2.0 ** f).astype(np.int64)
    py = np.rint(design.constellation.points.imag * 2.0 ** f).astype(np.int64)
    d2 = (i[:, None] - px) ** 2 + (q[:, None] - py) ** 2
    best = d2.min(axis=1)
    unique = (d2 == best[:, None]).sum(axis=1) == 1
    assert unique.mean() > 0.9
    want = label_bits(np.argmin(d2, axis=1), design.bits)
    got = hard_decisions(design, i, q)
    np.testing.assert_array_equal(got[unique], want[unique])
    np.testing.assert_array_equal(demap(design, i, q), got)          # algorithm 'hard' returns the same bits


@pytest.mark.parametrize("order,labeling", [(o, lab) for o in ORDERS for lab in NAMED if not (o == 2 and lab == "3gpp-nr")]
                         + ODD_NAMED,
                         ids=[f"{_oid(o)}-{lab}" for o in ORDERS for lab in NAMED if not (o == 2 and lab == "3gpp-nr")]
                         + [f"{_oid(o)}-{lab}" for o, lab in ODD_NAMED])
def test_map_then_hard_decide_round_trip(order: int, labeling: str) -> None:
    """Noise-free: every label mapped, scaled to the input grid, decided back to itself."""
    design = derive(make_spec(order, labeling))
    k = bits_per_symbol(order)
    bits = label_bits(np.arange(order), k)
    ci, cq = map_bits(design, bits)
    i, q = quantize_input(design, (ci + 1j * cq) * design.mapper_lsb)
    np.testing.assert_array_equal(hard_decisions(design, i, q), bits)


# --------------------------------------------------------------------------- (f) BER vs closed form

def ber_cho_yoon(order: int, es_n0: float) -> float:
    """Cho and Yoon (IEEE Trans. Commun. 50(7), 2002), exact BER of Gray square M-QAM in AWGN (from memory)."""
    sm = math.isqrt(order)
    m = sm.bit_length() - 1
    arg = math.sqrt(3.0 * es_n0 / (2.0 * (order - 1)))
    total = 0.0
    for k in range(1, m + 1):
        acc = 0.0
        for i in range(int((1 - 2.0 ** -k) * sm)):
            w = math.floor(i * 2 ** (k - 1) / sm)
            acc += (-1) ** w * (2 ** (k - 1) - math.floor(i * 2 ** (k - 1) / sm + 0.5)) * math.erfc((2 * i + 1) * arg)
        total += acc / sm
    return total / m


def ber_direct(order: int, es_n0: float) -> float:
    """Gray PAM bit errors by direct integration over the decision regions (no formula from a paper)."""
    L = math.isqrt(order)
    m = L.bit_length() - 1
    kappa = math.sqrt(3.0 / (2.0 * (order - 1)))
    sigma = math.sqrt(1.0 / (2.0 * es_n0)) / kappa                  # per-dimension noise, amplitude units

    def sf(x: float) -> float:                                         # P(noise > x), tail-accurate
        return 0.5 * math.erfc(x / (sigma * math.sqrt(2)))

    def region(lo: float, hi: float) -> float:                         # P(lo < noise < hi)
        if lo >= 0:
            return sf(lo) - sf(hi)
        if hi <= 0:
            return sf(-hi) - sf(-lo)
        return 1.0 - sf(hi) - sf(-lo)

    gray = [n ^ (n >> 1) for n in range(L)]
    errs = 0.0
    for t in range(L):
        a = 2 * t - (L - 1)
        for d in range(L):
            lo = -math.inf if d == 0 else 2 * d - L
            hi = math.inf if d == L - 1 else 2 * d - L + 2
            errs += region(lo - a, hi - a) * bin(gray[t] ^ gray[d]).count("1")
    return errs / (L * m)


@pytest.mark.parametrize("order", [4, 16, 64, 256, 1024, 4096], ids=_oid)
def test_cho_yoon_expression_matches_direct_integration(order: int) -> None:
    """Guard on the from-memory closed form: it agrees with a direct integration over decision regions."""
    for db in (0.0, 10.0, 20.0, 30.0):
        es_n0 = 10 ** (db / 10)
        assert ber_cho_yoon(order, es_n0) == pytest.approx(ber_direct(order, es_n0), rel=1e-9, abs=1e-300)


BER_CASES = [(4, "gray", 7.0), (4, "3gpp-nr", 9.0), (16, "gray", 13.0), (16, "ieee-802.11", 16.0),
             (64, "3gpp-nr", 19.0), (64, "gray", 22.0), (256, "gray", 25.0), (256, "3gpp-nr", 28.0),
             (1024, "gray", 31.0), (1024, "ieee-802.11", 34.0), (4096, "gray", 37.0)]


@pytest.mark.parametrize("order,labeling,esn0_db", BER_CASES,
                         ids=[f"{_oid(o)}-{lab}-{db:g}dB-cho-yoon" for o, lab, db in BER_CASES])
def test_hard_decision_ber_vs_cho_yoon(order: int, labeling: str, esn0_db: float) -> None:
    """Monte-Carlo BER of map -> AWGN (Es/N0) -> quantize_input -> hard_decisions vs Cho and Yoon (2002).

    Tolerance: 5 sigma, sigma from the per-symbol error counts (bit errors inside one symbol are
    correlated, so a plain per-bit binomial would understate it), at least the binomial sigma.
    """
    n = 120_000
    spec = make_spec(order, labeling, f=6, width=16, algorithm="hard")
    design = derive(spec)
    rng = np.random.default_rng(int(esn0_db * 10) + order)
    k = bits_per_symbol(order)
    bits = rng.integers(0, 2, (n, k), dtype=np.int8)
    ci, cq = map_bits(design, bits)
    x = (ci + 1j * cq) * design.mapper_lsb
    n0 = 10 ** (-esn0_db / 10)                                        # Es = 1 (unit power)
    noise = (rng.standard_normal(n) + 1j * rng.standard_normal(n)) * math.sqrt(n0 / 2)
    i, q = quantize_input(design, x + noise)
    per_symbol = (hard_decisions(design, i, q) != bits).sum(axis=1)
    ber = per_symbol.sum() / (n * k)
    theory = ber_cho_yoon(order, 1 / n0)
    sigma = max(per_symbol.std() / math.sqrt(n) / k, math.sqrt(theory * (1 - theory) / (n * k)))
    assert per_symbol.sum() > 300                                     # enough errors for the estimate
    assert abs(ber - theory) <= 5 * sigma, f"BER {ber:.4g} vs {theory:.4g} (sigma {sigma:.2g})"


# --------------------------------------------------------------------------- (g) float references

def _brute_float(points: np.ndarray, y: np.ndarray, n0: float | None) -> np.ndarray:
    """Brute force over all M points in 2-D: log-sum-exp (n0 given) or max-log (n0 None), normalized units."""
    k = bits_per_symbol(points.size)
    d2 = np.abs(y[:, None] - points[None, :]) ** 2
    out = np.empty((y.size, k))

    def lse(a: np.ndarray) -> np.ndarray:
        top = a.max(axis=(1, 2))
        return top + np.log(np.exp(a - top[:, None, None]).sum(axis=(1, 2)))

    for b in range(k):
        one, zero = _split(d2, b, k)
        if n0 is None:
            out[:, b] = one.min(axis=(1, 2)) - zero.min(axis=(1, 2))
        else:
            out[:, b] = lse(-zero / n0) - lse(-one / n0)
    return out


FLOAT_CASES = [(o, lab) for o in ORDERS for lab in NAMED] + ODD_NAMED


@pytest.mark.parametrize("order,labeling", FLOAT_CASES, ids=[f"{_oid(o)}-{lab}" for o, lab in FLOAT_CASES])
def test_float_references_vs_2d_brute_force(order: int, labeling: str) -> None:
    """Per-axis float LLRs (exact log-MAP and max-log) == brute force over all M points in 2-D."""
    const = named(order, labeling)
    rng = np.random.default_rng(order)
    y = (rng.standard_normal(300) + 1j * rng.standard_normal(300)) * 0.8
    for n0 in (0.5, 0.05, 10 ** (-3.5)):
        np.testing.assert_allclose(llr_exact(const, y, n0), _brute_float(const.normalized, y, n0),
                                   rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(llr_maxlog(const, y), _brute_float(const.normalized, y, None), rtol=1e-12, atol=1e-12)


# --------------------------------------------------------------------------- komm exact LLRs

def _komm_lvalues(order: int, labeling: str, y: np.ndarray, n0: float) -> np.ndarray:
    """komm posteriors marginalized to L-values (log P0/P1, the same sign as ours).

    gray: komm's own QAMConstellation(M, deltas = 2 kappa) and ReflectedRectangularLabeling; BPSK:
    PAMConstellation(2) with real noise of power N0/2 (the I part of complex noise of density N0).
    Other labelings: komm.Constellation built from our normalized points, komm.Labeling from our labels
    (komm 0.37 has no 3GPP/IEEE labeling), so komm computes the 2-D posteriors and the marginalization.
    """
    import komm
    const = named(order, labeling)
    k = bits_per_symbol(order)
    if labeling == "gray" and order > 2:
        # odd k: komm's rectangle of 2^ceil(k/2) x 2^floor(k/2) levels with the product of two reflected labelings
        kc = komm.QAMConstellation(order if k % 2 == 0 else (1 << ((k + 1) // 2), 1 << (k // 2)), deltas=2 * const.kappa)
        kl = komm.ReflectedRectangularLabeling(k if k % 2 == 0 else ((k + 1) // 2, k // 2))
        post = kc.posteriors(y, noise_power=n0)
    elif labeling == "gray":
        kc, kl = komm.PAMConstellation(2, delta=2.0), komm.ReflectedLabeling(1)
        post = kc.posteriors(y.real, noise_power=n0 / 2)
    else:
        kc = komm.Constellation(const.normalized.reshape(-1, 1))
        kl = komm.Labeling(label_bits(np.arange(order), k))
        post = kc.posteriors(y, noise_power=n0)
    return kl.marginalize(post).reshape(y.size, k)


KOMM_CASES = [(o, lab) for o in ORDERS for lab in NAMED] + ODD_NAMED
#: Es/N0 (dB) near a raw BER of 1e-2 for each order: where a decoder works
OPERATING_DB = {2: 4.0, 4: 7.0, 8: 10.0, 16: 13.0, 32: 16.0, 64: 19.0, 128: 22.0, 256: 25.0, 512: 28.0, 1024: 31.0,
                2048: 34.0, 4096: 37.0}


@pytest.mark.parametrize("order,labeling", KOMM_CASES, ids=[f"{_oid(o)}-{lab}-komm" for o, lab in KOMM_CASES])
def test_llr_exact_vs_komm(order: int, labeling: str) -> None:
    """komm posteriors -> bit L-values == qamsmith.model.llr_exact (normalized units, AWGN density N0)."""
    const = named(order, labeling)
    rng = np.random.default_rng(order + 1)
    labels = rng.integers(0, order, 400)
    for esn0_db in (3.0, OPERATING_DB[order]):
        n0 = 10 ** (-esn0_db / 10)
        y = const.normalized[labels] + (rng.standard_normal(400) + 1j * rng.standard_normal(400)) * math.sqrt(n0 / 2)
        ours = llr_exact(const, y, n0)
        ref = _komm_lvalues(order, labeling, y, n0)
        # komm's posteriors (normalized probabilities) lose precision below exp(-700) and underflow to 0
        finite = np.abs(ref) < 700
        assert finite.mean() > 0.8
        np.testing.assert_allclose(ours[finite], ref[finite], rtol=1e-6, atol=1e-6)


def test_llr_lsb_is_natural_log_scale() -> None:
    """llr_code * llr_lsb / N0 is the natural-log max-log LLR: within log(M/2) of llr_exact (bound of log-sum-exp)."""
    design = derive(make_spec(16, "gray", f=4, width=10))
    rng = np.random.default_rng(2)
    n0 = 0.01
    y = named(16, "gray").normalized[rng.integers(0, 16, 500)] + (rng.standard_normal(500) + 1j * rng.standard_normal(500)) * 0.07
    i, q = quantize_input(design, y)
    yq = (i + 1j * q) * design.input_lsb
    approx = demap(design, i, q) * design.llr_lsb / n0
    exact = llr_exact(design, yq, n0)
    # 0 <= logsumexp - max <= log(number of terms): each bit's two sums have M/2 = 8 terms
    assert np.abs(approx - exact).max() <= math.log(8)
    assert np.abs(approx - exact).max() > 0                           # they are not the same function
