"""Constellations and labelings checked against outside sources.

Sources, named beside each check:
- 3GPP TS 38.211 section 5.1 (5.1.2 .. 5.1.7): closed-form modulation mapping formulas, written
  out here from the standard (from memory) and implemented independently of the generator.
- IEEE Std 802.11, clause 17.3.5.8 (OFDM PHY data modulation): the BPSK, QPSK, 16-QAM and
  64-QAM encoding tables and the normalization factor K_MOD (written out from memory); the
  256-, 1024- and 4096-QAM factors are those of the later amendments (from memory).
- komm (PyPI, a general-purpose communications library), version as installed: its QAM/PAM
  constellations and its reflected (Gray) and natural labelings.
- Proakis, Digital Communications: average energy 2(M-1)/3 of square M-QAM with levels +-1, +-3, ...;
  (LI^2 + LQ^2 - 2)/3 of an LI x LQ rectangle (one PAM per axis, the same derivation).
- Common practice: the Gray property; the shape of square 16-QAM.
Odd-bit orders (rectangles here; Smith's cross in tests/test_cross.py): komm's rectangular
QAMConstellation((MI, MQ)) with ReflectedRectangularLabeling((kI, kQ)) and NaturalLabeling.
"""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pytest

from qamsmith.numbers.constellation import ORDERS as ALL_ORDERS
from qamsmith.numbers.constellation import bits_per_symbol, from_table, label_bits, named

#: BPSK and the square orders (3GPP NR and IEEE 802.11 define only these); the odd-bit orders apart
ORDERS = tuple(o for o in ALL_ORDERS if o == 2 or bits_per_symbol(o) % 2 == 0)
ODD_ORDERS = tuple(o for o in ALL_ORDERS if o > 2 and bits_per_symbol(o) % 2)
SQUARE_ORDERS = [o for o in ORDERS if o > 2]
NAMED = ("gray", "3gpp-nr", "ieee-802.11", "natural")


def _id(order: int, labeling: str = "") -> str:
    name = "bpsk" if order == 2 else "qpsk" if order == 4 else f"qam{order}"
    return f"{name}-{labeling}" if labeling else name


# --------------------------------------------------------------------------- 3GPP TS 38.211 5.1


def _s(bit: int) -> int:
    """1 - 2b: bit value 0 on the positive side (TS 38.211 5.1 throughout)."""
    return 1 - 2 * bit


def _nr_formula(b: list[int]) -> complex:
    """TS 38.211 5.1.2-5.1.7, the formulas exactly as printed (from memory), one per order."""
    k = len(b)
    if k == 1:   # 5.1.2 BPSK
        return (_s(b[0]) + 1j * _s(b[0])) / math.sqrt(2)
    if k == 2:   # 5.1.3 QPSK
        return (_s(b[0]) + 1j * _s(b[1])) / math.sqrt(2)
    if k == 4:   # 5.1.4 16QAM
        return (_s(b[0]) * (2 - _s(b[2])) + 1j * _s(b[1]) * (2 - _s(b[3]))) / math.sqrt(10)
    if k == 6:   # 5.1.5 64QAM
        return (_s(b[0]) * (4 - _s(b[2]) * (2 - _s(b[4])))
                + 1j * _s(b[1]) * (4 - _s(b[3]) * (2 - _s(b[5])))) / math.sqrt(42)
    if k == 8:   # 5.1.6 256QAM
        return (_s(b[0]) * (8 - _s(b[2]) * (4 - _s(b[4]) * (2 - _s(b[6]))))
                + 1j * _s(b[1]) * (8 - _s(b[3]) * (4 - _s(b[5]) * (2 - _s(b[7]))))) / math.sqrt(170)
    if k == 10:  # 5.1.7 1024QAM
        return (_s(b[0]) * (16 - _s(b[2]) * (8 - _s(b[4]) * (4 - _s(b[6]) * (2 - _s(b[8])))))
                + 1j * _s(b[1]) * (16 - _s(b[3]) * (8 - _s(b[5]) * (4 - _s(b[7]) * (2 - _s(b[9])))))
                ) / math.sqrt(682)
    raise ValueError(f"TS 38.211 5.1 has no {k}-bit square QAM")


def _nr_nested(b: list[int]) -> complex:
    """The recursion behind 5.1.4-5.1.7 for any even k: per axis (1-2c0)(2^(m-1) - (1-2c1)(2^(m-2) - ...)).

    Not in TS 38.211 beyond 1024QAM: this is the generator's own extension to 4096-QAM.
    """
    k = len(b)
    m = k // 2

    def axis(c: list[int]) -> int:
        t = 1                                        # innermost: 2 - (1 - 2c) = 2^1 - s * 1
        for j in range(m - 1, 0, -1):
            t = (1 << (m - j)) - _s(c[j]) * t
        return _s(c[0]) * t

    energy = 2 * ((1 << k) - 1) / 3
    return (axis(b[0::2]) + 1j * axis(b[1::2])) / math.sqrt(energy)


@pytest.mark.parametrize("order", [2, 4, 16, 64, 256, 1024], ids=lambda o: f"{_id(o)}-ts38211-5.1")
def test_3gpp_nr_matches_ts38211_formulas(order: int) -> None:
    """TS 38.211 5.1.2-5.1.7 (from memory): every label maps to the printed formula's point."""
    const = named(order, "3gpp-nr")
    k = bits_per_symbol(order)
    bits = label_bits(np.arange(order), k)
    expected = np.array([_nr_formula(list(map(int, row))) for row in bits])
    np.testing.assert_allclose(const.normalized, expected, rtol=0, atol=1e-12)


@pytest.mark.parametrize("order", [16, 64, 256, 1024], ids=lambda o: _id(o))
def test_nested_recursion_reproduces_ts38211(order: int) -> None:
    """The recursion used for the 4096-QAM extension gives back TS 38.211 5.1.4-5.1.7 exactly."""
    k = bits_per_symbol(order)
    for row in label_bits(np.arange(order), k):
        b = list(map(int, row))
        assert abs(_nr_nested(b) - _nr_formula(b)) < 1e-12


def test_3gpp_nr_4096_follows_the_nested_recursion() -> None:
    """4096-QAM is NOT in TS 38.211 5.1: the generator extends the 5.1.4-5.1.7 recursion (checked here)."""
    const = named(4096, "3gpp-nr")
    bits = label_bits(np.arange(4096), 12)
    expected = np.array([_nr_nested(list(map(int, row))) for row in bits])
    np.testing.assert_allclose(const.normalized, expected, rtol=0, atol=1e-12)
    # by hand from the recursion: all bits 0 gives 32-16+8-4+2-1 = 21 on each axis; b0 = b1 = 0 and
    # every other bit 1 gives the outermost level 32+16+8+4+2+1 = 63 (amplitude units)
    assert const.points[0] == 21 + 21j
    assert const.points[0b001111111111] == 63 + 63j


# --------------------------------------------------------------------------- IEEE 802.11 17.3.5.8

# IEEE Std 802.11 clause 17.3.5.8, encoding tables (from memory): input bits (b0 first) -> I (or Q).
IEEE_BPSK = {(0,): -1, (1,): 1}                                    # Table "BPSK encoding table"
IEEE_QPSK = {(0,): -1, (1,): 1}                                    # b0 -> I, b1 -> Q
IEEE_16 = {(0, 0): -3, (0, 1): -1, (1, 1): 1, (1, 0): 3}           # b0b1 -> I, b2b3 -> Q
IEEE_64 = {(0, 0, 0): -7, (0, 0, 1): -5, (0, 1, 1): -3, (0, 1, 0): -1,
           (1, 1, 0): 1, (1, 1, 1): 3, (1, 0, 1): 5, (1, 0, 0): 7}  # b0b1b2 -> I, b3b4b5 -> Q
IEEE_TABLES = {2: IEEE_BPSK, 4: IEEE_QPSK, 16: IEEE_16, 64: IEEE_64}

# K_MOD (from memory): 17.3.5.8 for BPSK..64-QAM; 256-QAM (VHT), 1024-QAM (HE), 4096-QAM (EHT) amendments.
IEEE_KMOD = {2: 1.0, 4: 1 / math.sqrt(2), 16: 1 / math.sqrt(10), 64: 1 / math.sqrt(42),
             256: 1 / math.sqrt(170), 1024: 1 / math.sqrt(682), 4096: 1 / math.sqrt(2730)}


@pytest.mark.parametrize("labeling", ["ieee-802.11", "gray"])
@pytest.mark.parametrize("order", sorted(IEEE_TABLES), ids=lambda o: f"{_id(o)}-ieee80211-17.3.5.8")
def test_ieee80211_encoding_tables(order: int, labeling: str) -> None:
    """IEEE 802.11 17.3.5.8 tables (from memory): first half of the bits on I, the rest on Q; 0 negative.

    `gray` (binary-reflected Gray code of the level index, label 0 at the most negative level, I bits
    first) reproduces them too: the two names give one mapping at these orders.
    """
    const = named(order, labeling)
    k = bits_per_symbol(order)
    table = IEEE_TABLES[order]
    for label, row in enumerate(label_bits(np.arange(order), k)):
        b = tuple(map(int, row))
        if order == 2:
            expected = complex(table[b], 0)
        else:
            expected = complex(table[b[: k // 2]], table[b[k // 2:]])
        assert const.points[label] == expected, f"label {label} bits {b}"


@pytest.mark.parametrize("order", ORDERS, ids=lambda o: f"{_id(o)}-ieee80211-kmod")
def test_ieee80211_normalization_kmod(order: int) -> None:
    """IEEE 802.11 K_MOD (from memory): the normalized point is K_MOD times the table's integer point."""
    const = named(order, "ieee-802.11")
    assert const.kappa == pytest.approx(IEEE_KMOD[order], rel=1e-13)
    np.testing.assert_allclose(const.normalized, const.points * IEEE_KMOD[order], rtol=0, atol=1e-13)


# --------------------------------------------------------------------------- komm


def _komm_constellation(order: int):
    import komm
    k = bits_per_symbol(order)
    if order > 2 and k % 2:                                   # an odd-bit rectangle: 2^ceil(k/2) levels on I
        return komm.QAMConstellation((1 << ((k + 1) // 2), 1 << (k // 2)))
    return komm.PAMConstellation(2) if order == 2 else komm.QAMConstellation(order)


def _komm_labeling(order: int, kind: str):
    import komm
    k = bits_per_symbol(order)
    if kind == "natural":
        return komm.NaturalLabeling(k)
    if order > 2 and k % 2:
        return komm.ReflectedRectangularLabeling(((k + 1) // 2, k // 2))
    return komm.ReflectedLabeling(1) if order == 2 else komm.ReflectedRectangularLabeling(k)


KOMM_CASES = ([(o, lab, kind) for o in ORDERS
               for lab, kind in (("gray", "reflected"), ("ieee-802.11", "reflected"), ("natural", "natural"))]
              + [(o, lab, kind) for o in ODD_ORDERS for lab, kind in (("gray", "reflected"), ("natural", "natural"))])


@pytest.mark.parametrize("order,labeling,kind", KOMM_CASES,
                         ids=[f"{_id(o, lab)}-komm-{kind}" for o, lab, kind in KOMM_CASES])
def test_constellation_matches_komm(order: int, labeling: str, kind: str) -> None:
    """komm: QAMConstellation(M) (or PAMConstellation(2)) with ReflectedRectangularLabeling / NaturalLabeling.

    komm (0.37) has no modulation class any more; a constellation and a labeling are separate objects.
    komm index i carries the bit vector labeling.matrix[i] (MSB first = b0) at point matrix[i].
    """
    kc, kl = _komm_constellation(order), _komm_labeling(order, kind)
    k = bits_per_symbol(order)
    weights = 1 << np.arange(k - 1, -1, -1)
    labels = kl.matrix @ weights
    komm_points = kc.matrix.ravel().astype(complex)
    const = named(order, labeling)
    np.testing.assert_array_equal(const.points[labels], komm_points)
    # komm's own energy of the same points (mean_energy, complex QAM or real PAM)
    assert const.energy == pytest.approx(kc.mean_energy(), rel=1e-13)


# --------------------------------------------------------------------------- Gray, energy, shape


def _min_distance_pairs(points: np.ndarray) -> tuple[float, list[tuple[int, int]]]:
    d = np.abs(points[:, None] - points[None, :])
    np.fill_diagonal(d, np.inf)
    dmin = float(d.min())
    a, b = np.nonzero(np.isclose(d, dmin, rtol=0, atol=1e-9))
    return dmin, [(int(x), int(y)) for x, y in zip(a, b) if x < y]


GRAY_CASES = [(o, lab) for o in ORDERS for lab in ("gray", "3gpp-nr", "ieee-802.11")]


@pytest.mark.parametrize("order,labeling", GRAY_CASES, ids=[_id(o, lab) + "-gray-property" for o, lab in GRAY_CASES])
def test_gray_property(order: int, labeling: str) -> None:
    """Common practice: nearest neighbours (distance 2 in amplitude units) differ in exactly one bit."""
    const = named(order, labeling)
    dmin, pairs = _min_distance_pairs(const.points)
    if order == 2 and labeling == "3gpp-nr":
        assert dmin == pytest.approx(2 * math.sqrt(2))      # (1+j) and -(1+j): one pair, one bit
    else:
        assert dmin == pytest.approx(2.0)
    L = 2 if order == 2 else int(math.isqrt(order))
    # an L x L grid (L x 1 for BPSK on I) has 2 L (L - 1) neighbour pairs
    assert len(pairs) == (1 if order == 2 else 2 * L * (L - 1))
    for a, b in pairs:
        assert bin(a ^ b).count("1") == 1, f"labels {a:b} and {b:b} are neighbours"


@pytest.mark.parametrize("order", SQUARE_ORDERS + list(ODD_ORDERS), ids=lambda o: f"{_id(o)}-natural")
def test_natural_is_not_gray(order: int) -> None:
    """Natural labeling (common practice): some neighbours differ in more than one bit from 16-QAM up; QPSK is Gray."""
    const = named(order, "natural")
    _, pairs = _min_distance_pairs(const.points)
    worst = max(bin(a ^ b).count("1") for a, b in pairs)
    # level 2^(m-1)-1 -> 2^(m-1) flips every axis bit: the longer axis of an odd-bit rectangle has ceil(k/2)
    assert worst == (1 if order == 4 else (const.bits + 1) // 2)


@pytest.mark.parametrize("order,labeling", [(o, lab) for o in SQUARE_ORDERS for lab in NAMED],
                         ids=[_id(o, lab) for o in SQUARE_ORDERS for lab in NAMED])
def test_grid_and_average_energy(order: int, labeling: str) -> None:
    """Proakis: square M-QAM on levels +-1, +-3, ... has average energy 2(M-1)/3 (amplitude units squared)."""
    const = named(order, labeling)
    L = math.isqrt(order)
    grid = {complex(a, b) for a in range(-(L - 1), L, 2) for b in range(-(L - 1), L, 2)}
    assert set(const.points.tolist()) == grid                    # every grid point once
    energy = sum((Fraction(int(p.real)) ** 2 + Fraction(int(p.imag)) ** 2 for p in const.points), Fraction(0)) / order
    assert energy == Fraction(2 * (order - 1), 3)
    assert const.energy == pytest.approx(2 * (order - 1) / 3, rel=1e-14)
    assert np.mean(np.abs(const.normalized) ** 2) == pytest.approx(1.0, rel=1e-13)


ODD_NAMED = [(o, lab) for o in ODD_ORDERS for lab in ("gray", "natural")]


@pytest.mark.parametrize("order,labeling", ODD_NAMED, ids=[_id(o, lab) + "-rectangle" for o, lab in ODD_NAMED])
def test_odd_rectangle_grid_energy_and_gray(order: int, labeling: str) -> None:
    """An odd-bit order's default shape: the 2^ceil(k/2) x 2^floor(k/2) grid, energy (LI^2 + LQ^2 - 2)/3 exactly;
    gray: every neighbour pair differs in one bit (per-axis binary-reflected Gray)."""
    const = named(order, labeling)
    k = bits_per_symbol(order)
    li, lq = 1 << ((k + 1) // 2), 1 << (k // 2)
    grid = {complex(a, b) for a in range(-(li - 1), li, 2) for b in range(-(lq - 1), lq, 2)}
    assert set(const.points.tolist()) == grid
    energy = sum((Fraction(int(p.real)) ** 2 + Fraction(int(p.imag)) ** 2 for p in const.points), Fraction(0)) / order
    assert energy == Fraction(li * li + lq * lq - 2, 3)
    _, pairs = _min_distance_pairs(const.points)
    assert len(pairs) == li * (lq - 1) + lq * (li - 1)
    if labeling == "gray":
        assert all(bin(a ^ b).count("1") == 1 for a, b in pairs)


@pytest.mark.parametrize("labeling", NAMED)
def test_16qam_shape_common_practice(labeling: str) -> None:
    """Common practice (no source): square 16-QAM has 4 bits a symbol, 4 levels an axis, 3 distinct amplitudes."""
    const = named(16, labeling)
    assert const.bits == 4
    assert len(set(const.points.real.tolist())) == 4 and len(set(const.points.imag.tolist())) == 4
    assert len({round(float(abs(p)), 9) for p in const.normalized}) == 3


# --------------------------------------------------------------------------- user tables


def test_user_table_product_is_separated() -> None:
    """A grid table whose I and Q bits are disjoint becomes a product labeling (per-axis demapper)."""
    # 16-QAM with a non-Gray I axis: levels -3..3 carry axis labels 0, 3, 1, 2 (b0 b1), Q natural (b2 b3)
    i_of = {0: -3, 3: -1, 1: 1, 2: 3}
    rows = tuple((lab, float(i_of[lab >> 2]), float(2 * (lab & 3) - 3)) for lab in range(16))
    const = from_table(16, rows)
    assert const.axes is not None and const.labeling == "table"
    for lab, i, q in rows:
        assert const.points[lab] == complex(i, q)


def test_user_table_scrambled_is_searched() -> None:
    """A grid table with labels scrambled over both axes is not a product: it gets the 2-D search."""
    rng = np.random.default_rng(7)
    perm = rng.permutation(16)
    pts = [complex(a, b) for a in (-3, -1, 1, 3) for b in (-3, -1, 1, 3)]
    rows = tuple((int(perm[n]), 2 * p.real, 2 * p.imag) for n, p in enumerate(pts))   # any scale is accepted
    const = from_table(16, rows)
    assert const.axes is None
    assert const.energy == pytest.approx(10.0)
