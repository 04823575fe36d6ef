"""Odd-bit orders: the shape key, Smith's cross and its exact max-log demapper, rectangles of unequal axes.

Outside references, named beside each check:
- komm (PyPI, as installed): `CrossQAMConstellation(M)` (the cross's points with delta = 2) and its
  `mean_energy()` (komm's closed form delta^2 (31M - 32) / 192); `QAMConstellation((MI, MQ))` with
  `ReflectedRectangularLabeling((kI, kQ))` for the Gray rectangles.
- J. G. Smith, "Odd-bit quadrature amplitude-shift keying", IEEE Trans. Commun. 23(3), 1975: the cross
  as the Gray 2N x N rectangle with its outer columns folded onto the top and bottom, the points keeping
  their labels (the fold's orientation is this project's reading; see numbers.constellation._cross).
- The average energy of the cross, derived here in exact fractions (docstring of the test).
- Brute force written here: the max-log metric over every point in integer codes (test_model.brute_metric,
  exact) and the output stage redone in plain integer arithmetic (test_model.expected_llr).
- P. K. Vitthaladevuni, M.-S. Alouini and J. C. Kieffer, "Exact BER computation for cross QAM
  constellations", IEEE Trans. Wireless Commun. 4(6), 2005: the method of flows.analysis.ber_cross_qam,
  checked here against Monte-Carlo; K. Cho and D. Yoon, IEEE Trans. Commun. 50(7), 2002, I x J rectangles.
"""

from __future__ import annotations

import json
import math
from fractions import Fraction

import numpy as np
import pytest

from qamsmith.artifacts import build_files
from qamsmith.errors import SpecError
from qamsmith.flows import analysis as an
from qamsmith.ir import design_modules, evaluate, output_words
from qamsmith.ir.references import bruteforce_module
from qamsmith.model import demap, demap_direct, derive, hard_decisions, llr_maxlog, map_labels
from qamsmith.numbers.constellation import brgc, from_table, label_bits, named
from qamsmith.spec import ConstellationSpec, DesignSpec

from test_model import brute_metric, expected_llr

CROSS = (32, 128, 512, 2048)
ODD = (8, 32, 128, 512, 2048)


def _spec(order: int, shape: str = "cross", **settings) -> DesignSpec:
    return DesignSpec(name="t").with_settings({"constellation.order": order, "constellation.shape": shape, **settings})


def _neighbour_bits(points: np.ndarray) -> dict[int, int]:
    """{Hamming distance: number of neighbour pairs} over the pairs at distance 2 (the minimum distance)."""
    at = {(int(p.real), int(p.imag)): lab for lab, p in enumerate(points)}
    out: dict[int, int] = {}
    for (i, q), lab in at.items():
        for di, dq in ((2, 0), (0, 2)):
            other = at.get((i + di, q + dq))
            if other is not None:
                h = bin(lab ^ other).count("1")
                out[h] = out.get(h, 0) + 1
    return dict(sorted(out.items()))


# --------------------------------------------------------------------------- spec


@pytest.mark.parametrize("order", ODD, ids=lambda o: f"qam{o}")
def test_odd_orders_build_rectangular_by_default(order: int) -> None:
    spec = DesignSpec(name="t").with_settings({"constellation.order": order})
    assert spec.constellation.shape == "rectangular"
    assert spec.to_dict()["constellation"]["shape"] == "rectangular"       # written out for odd orders
    d = derive(spec)
    k = d.bits
    assert [ax.levels for ax in d.constellation.axes] == [1 << ((k + 1) // 2), 1 << (k // 2)]


def test_shape_is_left_out_of_square_orders_resolved_spec() -> None:
    """The key means nothing for a square order: left out of to_dict (so the hash of every square design stays)."""
    assert "shape" not in DesignSpec(name="t").to_dict()["constellation"]
    assert "shape" not in DesignSpec(name="t").with_settings({"constellation.order": 2}).to_dict()["constellation"]


@pytest.mark.parametrize("settings,pattern", [
    ({"constellation.order": 8, "constellation.shape": "cross"},
     r"constellation\.shape = 'cross': rectangular for order 8 \(8 points have no cross; cross for 32, 128, 512, 2048\)"),
    ({"constellation.order": 64, "constellation.shape": "cross"},
     r"constellation\.shape = 'cross': rectangular for order 64 \(an even-bit order is a square; cross for 32, 128, 512, 2048\)"),
    ({"constellation.order": 32, "constellation.shape": "hexagonal"},
     r"constellation\.shape = 'hexagonal': one of rectangular, cross"),
    ({"constellation.order": 32, "constellation.labeling": "3gpp-nr"},
     r"constellation\.labeling = '3gpp-nr': gray, natural or table for order 32 \(3gpp-nr defines no odd-bit order\)"),
    ({"constellation.order": 128, "constellation.labeling": "ieee-802.11"},
     r"constellation\.labeling = 'ieee-802\.11': gray, natural or table for order 128 \(ieee-802\.11 defines no odd-bit order\)"),
    ({"constellation.order": 128, "constellation.shape": "cross", "constellation.labeling": "natural"},
     r"constellation\.labeling = 'natural': gray for shape 'cross' \(Smith's quasi-Gray; natural binary has no cross labeling here\)"),
    ({"constellation.order": 32, "constellation.shape": "cross", "constellation.labeling": "table",
      "constellation.table": [[lab, 1.0 * lab, 0.0] for lab in range(32)]},
     r"constellation\.shape = 'cross': rectangular with labeling = 'table' \(the table's points give its shape\)"),
], ids=["cross-8", "cross-64", "unknown-shape", "3gpp-odd", "ieee-odd", "cross-natural", "cross-table"])
def test_shape_refusals_are_one_line(settings: dict, pattern: str) -> None:
    with pytest.raises(SpecError) as info:
        DesignSpec(name="t").with_settings(settings)
    assert "\n" not in str(info.value)
    assert __import__("re").fullmatch(pattern, str(info.value)), str(info.value)


def test_cross_refuses_the_logic_mapper_and_folded() -> None:
    """A cross is no product labeling: its mapper is a table of points, its demapper maxlog or hard."""
    with pytest.raises(SpecError, match=r"^mapper\.implementation = 'logic': rom for this labeling \(logic needs a "
                                        r"Gray-type or natural product labeling\)$"):
        derive(_spec(128, **{"mapper.implementation": "logic"}))
    with pytest.raises(SpecError, match=r"^demapper\.algorithm = 'folded': maxlog or hard for labeling 'gray' at order "
                                        r"128 \(folded needs a Gray-type product labeling\)$"):
        derive(_spec(128, **{"demapper.algorithm": "folded"}))


def test_odd_order_refusal_names_the_order_when_only_it_was_set() -> None:
    """An example with labeling 3gpp-nr and --order 32: the refusal names the key the user set."""
    base = DesignSpec.from_dict({"constellation": {"labeling": "3gpp-nr"}})
    spec = DesignSpec.from_dict(base.to_dict(), given=frozenset({"constellation.order"}))
    with pytest.raises(SpecError, match=r"^constellation\.order = 32: an even-bit order \(2, 4, 16, \.\.\. 4096\) "
                                        r"for labeling '3gpp-nr'"):
        spec.with_settings({"constellation.order": 32})


# --------------------------------------------------------------------------- the cross's geometry and labeling


@pytest.mark.parametrize("order", CROSS, ids=lambda o: f"cross{o}")
def test_cross_points_match_komm(order: int) -> None:
    """komm.CrossQAMConstellation(M) (delta = 2: levels +-1, +-3, ...): the same set of points; komm's energy."""
    import komm
    kc = komm.CrossQAMConstellation(order)
    const = named(order, "gray", "cross")
    assert set(const.points.tolist()) == set(kc.matrix.ravel().astype(complex).tolist())
    assert const.energy == pytest.approx(kc.mean_energy(), rel=1e-13)


@pytest.mark.parametrize("order", CROSS, ids=lambda o: f"cross{o}")
def test_cross_average_energy_closed_form(order: int) -> None:
    """E = (31M - 32)/48 (amplitude units squared), derived: the S x S square (S = 3N/2 levels of +-1, +-3, ...,
    N = 2^m, M = 2^(2m+1)) has sum 2 S * S (S^2 - 1)/3; each of the four missing c x c corners (c = N/4, levels
    N+1, N+3, ..., S-1 on both axes) has sum 2 c * sum_j (N + 1 + 2j)^2; E = (square - 4 corners) / M.
    That gives 20 at 32 points and 82 at 128 (komm's CrossQAMConstellation.mean_energy agrees)."""
    k = order.bit_length() - 1
    n = 1 << ((k - 1) // 2)
    s, c = 3 * n // 2, n // 4
    square = Fraction(2 * s * s * (s * s - 1), 3)
    corner = 2 * c * sum((n + 1 + 2 * j) ** 2 for j in range(c))
    energy = (square - 4 * corner) / order
    assert energy == Fraction(31 * order - 32, 48)
    exact = sum((Fraction(int(p.real)) ** 2 + Fraction(int(p.imag)) ** 2 for p in named(order, "gray", "cross").points),
                Fraction(0)) / order
    assert exact == energy
    assert {32: 20, 128: 82}.get(order, energy) == energy


@pytest.mark.parametrize("order", ODD, ids=lambda o: f"rect{o}")
def test_rectangles_match_komm_and_their_energy(order: int) -> None:
    """komm QAMConstellation((MI, MQ)) with ReflectedRectangularLabeling((kI, kQ)) is our gray rectangle;
    the mean energy of an LI x LQ rectangle is (LI^2 - 1)/3 + (LQ^2 - 1)/3 (one PAM per axis)."""
    import komm
    k = order.bit_length() - 1
    ki, kq = (k + 1) // 2, k // 2
    kc, kl = komm.QAMConstellation((1 << ki, 1 << kq)), komm.ReflectedRectangularLabeling((ki, kq))
    labels = kl.matrix @ (1 << np.arange(k - 1, -1, -1))
    const = named(order, "gray")
    np.testing.assert_array_equal(const.points[labels], kc.matrix.ravel())
    assert const.energy == pytest.approx(((1 << 2 * ki) + (1 << 2 * kq) - 2) / 3, rel=1e-13)
    assert _neighbour_bits(const.points) == {1: (1 << ki) * ((1 << kq) - 1) + (1 << kq) * ((1 << ki) - 1)}


@pytest.mark.parametrize("order", CROSS, ids=lambda o: f"cross{o}")
def test_smith_construction(order: int) -> None:
    """Smith 1975: the Gray 2N x N rectangle (I: b0..bm, Q: b(m+1)..b2m, binary-reflected Gray per axis) with its
    N/4 outer columns per side folded onto the top and bottom, every point keeping its label; the fold here:
    (I, Q) -> (sgn(I) |Q|, sgn(Q) (|I| - N/2))."""
    k = order.bit_length() - 1
    m = (k - 1) // 2
    n = 1 << m
    s = 3 * n // 2
    const = named(order, "gray", "cross")
    for ni in range(2 * n):
        for nq in range(n):
            a, q = 2 * ni - (2 * n - 1), 2 * nq - (n - 1)
            label = (brgc(ni) << m) | brgc(nq)
            want = complex(a, q) if abs(a) < s else complex(math.copysign(abs(q), a), math.copysign(abs(a) - n // 2, q))
            assert const.points[label] == want
    assert max(np.abs(const.points.real).max(), np.abs(const.points.imag).max()) == s - 1
    assert not np.any((np.abs(const.points.real) > n) & (np.abs(const.points.imag) > n))     # the cut corners


#: multi-bit neighbour pairs of Smith's cross (the fold above), counted: {Hamming distance: pairs}
NEIGHBOURS = {32: {1: 44, 2: 8}, 128: {1: 216, 3: 16}, 512: {1: 944, 3: 16, 5: 16}, 2048: {1: 3936, 3: 16, 5: 32, 7: 16}}


@pytest.mark.parametrize("order", CROSS, ids=lambda o: f"cross{o}")
def test_cross_neighbour_pairs(order: int) -> None:
    """Quasi-Gray: a cross has no Gray labeling; pairs at the minimum distance differing in more than one bit
    are those across the fold (core row N-1 and arm row N+1, and the arms' two halves): 8 of 52 at 32 points
    (2 bits each), 16 of 232 at 128 points (3 bits each); every other neighbour pair differs in one bit."""
    got = _neighbour_bits(named(order, "gray", "cross").points)
    assert got == NEIGHBOURS[order]
    k = order.bit_length() - 1
    s, c = 3 * (1 << ((k - 1) // 2)) // 2, 1 << ((k - 1) // 2) >> 2
    assert sum(got.values()) == 2 * s * (s - 1) - 8 * c * c           # the square's pairs less the corners'
    if order in (32, 128):                                              # the figures the docs quote
        assert sum(v for h, v in got.items() if h > 1) == {32: 8, 128: 16}[order]


def test_cross_pieces_are_products() -> None:
    """The two pieces the demapper uses: the core 12 x 8 and the arms 8 x 4 of the 128-point cross."""
    cross = named(128, "gray", "cross").cross
    assert (len(cross.core.i.amplitudes), len(cross.core.q.amplitudes)) == (12, 8)
    assert (len(cross.arms.i.amplitudes), len(cross.arms.q.amplitudes)) == (8, 4)
    assert cross.arms.q.amplitudes == (-11, -9, 9, 11)
    assert cross.core.i.label_bits == (0, 1, 2, 3) and cross.core.q.label_bits == (4, 5, 6)
    assert cross.arms.i.label_bits == (0, 5, 6) and cross.arms.q.label_bits == (3, 4)
    assert cross.arms.constants == ((1, 0), (2, 0))


# --------------------------------------------------------------------------- the demapper against brute force


def _pairs_near_corners(design, rng: np.random.Generator, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Random codes, plus the corner region and the diagonals where the pieces' nearest points tie."""
    fmt = design.input_format
    i = rng.integers(fmt.min_code, fmt.max_code + 1, n)
    q = rng.integers(fmt.min_code, fmt.max_code + 1, n)
    f = design.spec.demapper.input_fraction
    cross = design.cross.cross
    lo, hi = (cross.n - 2) << f, min(fmt.max_code, (cross.span + 2) << f)
    t = rng.integers(lo, hi + 1, n)
    u = np.clip(t + rng.integers(-3, 4, n), fmt.min_code, fmt.max_code)
    sgn = rng.choice([-1, 1], (2, n))
    return np.concatenate([i, sgn[0] * t, sgn[0] * rng.integers(lo, hi + 1, n)]), \
        np.concatenate([q, sgn[1] * u, sgn[1] * rng.integers(lo, hi + 1, n)])


@pytest.mark.parametrize("order", (32, 128), ids=lambda o: f"cross{o}")
@pytest.mark.parametrize("f", (1, 2))
def test_cross_maxlog_exhaustive_against_brute_force(order: int, f: int) -> None:
    """Every (I, Q) input code pair of an 8-bit input (beyond the outermost level on both axes): the model's LLR
    codes equal the brute-force max-log over every point (exact integers), with no rounding (output shift 0)."""
    spec = DesignSpec(name="t").with_settings({
        "constellation.order": order, "constellation.shape": "cross", "demapper.input_width": 8,
        "demapper.input_fraction": f, "demapper.llr_width": 20, "demapper.llr_fraction": 2 * f + 2})
    design = derive(spec)
    codes = design.input_codes
    gi, gq = np.meshgrid(codes, codes, indexing="ij")
    i, q = gi.ravel(), gq.ravel()
    d = brute_metric(design, i, q)
    want, _ = expected_llr(design, d)
    assert np.abs(want).max() < design.llr_format.max_code                 # nothing saturates
    np.testing.assert_array_equal(demap(design, i, q), want)
    np.testing.assert_array_equal(demap_direct(design, i, q), want)


@pytest.mark.parametrize("order", CROSS, ids=lambda o: f"cross{o}")
@pytest.mark.parametrize("settings", [
    {},
    {"demapper.rounding": "half-even", "demapper.llr_width": 6, "demapper.llr_fraction": 1},
    {"demapper.rounding": "toward-zero", "demapper.scale_width": 5, "demapper.scale_fraction": 3},
    {"demapper.llr_width": 14, "demapper.llr_fraction": 6},                # a left shift
], ids=["default", "half-even-w6", "toward-zero-scale", "left-shift"])
def test_cross_maxlog_default_widths_against_brute_force(order: int, settings: dict) -> None:
    """Default input widths, rounding and saturation: random codes and the corner regions, against the
    brute-force metric and the output stage redone in integers; also the float max-log (model.reference)."""
    design = derive(_spec(order, **settings))
    rng = np.random.default_rng(order)
    i, q = _pairs_near_corners(design, rng, 3000)
    s = rng.integers(0, design.scale_format.max_code + 1, i.size) if design.scale_format else None
    # brute_metric: codes squared, R 2^(f+2); expected_llr divides by 2^(2f+2+sf-lf): the cross's output shift
    want, _ = expected_llr(design, brute_metric(design, i, q), s)
    np.testing.assert_array_equal(demap(design, i, q, s), want)
    np.testing.assert_array_equal(demap_direct(design, i, q, s), want)
    if s is None and not settings:
        y = (i + 1j * q) * design.input_lsb
        ref = llr_maxlog(design, y) / design.llr_lsb                        # in LLR codes, before rounding
        sat = design.llr_format.max_code
        assert np.all(np.abs(np.clip(ref, -sat, sat) - demap(design, i, q)) <= 0.5 + 1e-9)


@pytest.mark.parametrize("order", CROSS, ids=lambda o: f"cross{o}")
def test_cross_hard_decisions_are_the_nearest_point(order: int) -> None:
    design = derive(_spec(order, **{"demapper.algorithm": "hard"}))
    rng = np.random.default_rng(order + 1)
    i, q = _pairs_near_corners(design, rng, 2000)
    f = design.spec.demapper.input_fraction
    px = (design.constellation.points.real.astype(np.int64)) << f
    py = (design.constellation.points.imag.astype(np.int64)) << f
    d2 = (i[:, None] - px) ** 2 + (q[:, None] - py) ** 2
    got = hard_decisions(design, i, q)
    lab = got.astype(np.int64) @ (1 << np.arange(design.bits - 1, -1, -1))
    np.testing.assert_array_equal(d2[np.arange(i.size), lab], d2.min(axis=1))   # a nearest point (ties either way)
    np.testing.assert_array_equal(demap(design, i, q), got)


def test_cross_noise_free_round_trip() -> None:
    design = derive(DesignSpec.from_toml(__import__("pathlib").Path(__file__).parents[1] / "generator" / "spec"
                                         / "examples" / "larkspur-backhaul-128.toml"))
    labels = np.arange(128)
    ci, cq = map_labels(design, labels)
    amp = (ci + 1j * cq) * design.mapper_lsb / design.constellation.kappa
    i = np.rint(amp.real * 2 ** design.spec.demapper.input_fraction).astype(np.int64)
    q = np.rint(amp.imag * 2 ** design.spec.demapper.input_fraction).astype(np.int64)
    np.testing.assert_array_equal(hard_decisions(design, i, q), label_bits(labels, 7))
    llr = demap(design, i, q)
    assert np.all((llr < 0) == label_bits(labels, 7).astype(bool))


# --------------------------------------------------------------------------- the IR against the model


@pytest.mark.parametrize("order", CROSS, ids=lambda o: f"cross{o}")
@pytest.mark.parametrize("settings", [
    {"demapper.input_width": 8, "demapper.input_fraction": 1, "demapper.llr_width": 5, "demapper.llr_fraction": 1,
     "demapper.rounding": "toward-zero"},
    {"demapper.input_width": 7, "demapper.input_fraction": 0, "demapper.algorithm": "hard"},
], ids=["w8-toward-zero", "w7-hard"])
def test_cross_datapath_equals_the_model_exhaustively(order: int, settings: dict) -> None:
    """The evaluator over every (I, Q) input code pair: the demapper's output words equal the model's."""
    design = derive(_spec(order, **settings))
    dp = design_modules(design)["demapper"].datapath
    codes = design.input_codes
    gi, gq = np.meshgrid(codes, codes, indexing="ij")
    i, q = gi.ravel(), gq.ravel()
    values = evaluate(dp, {"y_i": i, "y_q": q})
    assert list(output_words(dp, values)) == _words(design, demap(design, i, q))
    for sig in dp.signals():
        assert sig.lo <= values[sig.name].min() and values[sig.name].max() <= sig.hi, sig


def _words(design, out: np.ndarray) -> list[int]:
    w = 1 if design.spec.demapper.algorithm == "hard" else design.llr_format.width
    res = [0] * out.shape[0]
    for j in range(design.bits):
        res = [(r << w) | (int(v) & ((1 << w) - 1)) for r, v in zip(res, out[:, j])]
    return res


@pytest.mark.parametrize("order", (32, 128), ids=lambda o: f"cross{o}")
def test_cross_brute_force_reference_equals_the_model(order: int) -> None:
    """ir.references' 2-D brute force (the cost flow's comparison) computes the same LLRs as the model."""
    design = derive(_spec(order))
    dp = bruteforce_module(design, "ref").datapath
    rng = np.random.default_rng(3)
    i, q = _pairs_near_corners(design, rng, 500)
    assert list(output_words(dp, evaluate(dp, {"y_i": i, "y_q": q}))) == _words(design, demap(design, i, q))


# --------------------------------------------------------------------------- tables, artifacts, theory


@pytest.mark.parametrize("order", (8, 32, 128), ids=lambda o: f"table{o}")
def test_odd_tables_rectangle_is_a_product_with_unequal_axes(order: int) -> None:
    """A user table of a Gray rectangle (any scale, either way round) is separated into two axes."""
    const = named(order, "gray")
    rows = tuple((lab, 3.0 * p.real, 3.0 * p.imag) for lab, p in enumerate(const.points))
    got = from_table(order, rows)
    assert got.axes is not None
    np.testing.assert_array_equal(got.points, const.points)
    turned = from_table(order, tuple((lab, q, i) for lab, i, q in rows))    # the long axis on Q
    assert turned.axes is not None and turned.axes[1].levels > turned.axes[0].levels


@pytest.mark.parametrize("order", (32, 128), ids=lambda o: f"table{o}")
def test_odd_tables_cross_is_searched_exactly(order: int) -> None:
    """A cross given as a table (not a product) lands on the grid at the cross's energy and is demapped by the
    2-D search: the same LLRs as the cross demapper."""
    const = named(order, "gray", "cross")
    rows = [[lab, float(p.real) / 7, float(p.imag) / 7] for lab, p in enumerate(const.points)]
    table = derive(DesignSpec(name="t").with_settings({"constellation.order": order, "constellation.labeling": "table",
                                                       "constellation.table": rows}))
    assert table.constellation.axes is None and table.cross is None
    np.testing.assert_array_equal(table.constellation.points, const.points)
    # one LLR unit is the metric over d_min^2 in both: the same llr_fraction gives the same codes (exact here)
    cross = derive(_spec(order, **{"demapper.llr_fraction": 6, "demapper.llr_width": 24}))
    tab = derive(table.spec.with_settings({"demapper.llr_fraction": 6, "demapper.llr_width": 24}))
    rng = np.random.default_rng(9)
    i, q = _pairs_near_corners(cross, rng, 400)
    np.testing.assert_array_equal(demap(tab, i, q), demap(cross, i, q))


def test_cross_manifest_and_vectors() -> None:
    files = build_files(_spec(128, name="c128"))
    man = json.loads(files["manifest.json"])
    dem = man["demapper"]
    assert dem["structure"] == "cross" and dem["per_axis"] is None and dem["search_points"] is None
    cr = dem["cross"]
    assert cr["square_levels"] == 12 and cr["n"] == 8 and cr["corner_levels"] == 2
    assert set(cr["axes"]) == {"square_i", "square_q", "core_q", "arms_i", "arms_q"}
    assert cr["bits"]["b0"]["kind"] == "sign" and cr["bits"]["b1"]["arms_constant"] == 0
    assert man["constellation"]["shape"] == "cross"
    assert "cut corners" in man["vectors"]["demapper"]["stimulus"]
    assert man["rtl"]["modules"]["demapper"]["architecture"].startswith("cross")


def test_rectangle_manifest_is_per_axis_with_unequal_axes() -> None:
    man = json.loads(build_files(_spec(32, "rectangular", name="r32"))["manifest.json"])
    axes = man["demapper"]["per_axis"]
    assert (axes["i"]["levels"], axes["q"]["levels"]) == (8, 4)
    assert man["constellation"]["shape"] == "rectangular"


@pytest.mark.parametrize("order,esn0_db", [(32, 14.0), (128, 20.0)], ids=["cross32", "cross128"])
def test_cross_ber_theory_against_monte_carlo(order: int, esn0_db: float) -> None:
    """Vitthaladevuni, Alouini and Kieffer 2005 (their method, see flows.analysis.ber_cross_qam): the exact BER
    of the cross's labeling with nearest-point decisions, against a seeded Monte-Carlo of the same decisions."""
    const = named(order, "gray", "cross")
    theory = float(an.ber_cross_qam(const, esn0_db)[0])
    rng = np.random.default_rng(order)
    n = 200_000
    lab = rng.integers(0, order, n)
    sigma = math.sqrt(const.energy / (2 * 10 ** (esn0_db / 10)))
    y = const.points[lab] + sigma * (rng.standard_normal(n) + 1j * rng.standard_normal(n))
    bits = label_bits(np.arange(order), const.bits)
    errors = 0
    for s in range(0, n, 20_000):
        dec = np.argmin(np.abs(y[s:s + 20_000, None] - const.points[None, :]), axis=1)
        errors += int(np.count_nonzero(bits[dec] != bits[lab[s:s + 20_000]]))
    mc = errors / (n * const.bits)
    # bit errors within a symbol are correlated: allow 4 sigma of a symbol-level count (k bits per symbol)
    assert abs(mc - theory) < 4 * math.sqrt(theory * const.bits / (n * const.bits))
    assert 1e-3 < theory < 0.2


@pytest.mark.parametrize("order,esn0_db", [(8, 10.0), (32, 16.0), (128, 22.0)], ids=["rect8", "rect32", "rect128"])
def test_rectangle_ber_theory(order: int, esn0_db: float) -> None:
    """Cho and Yoon 2002, I x J: against a Monte-Carlo of nearest-point decisions (squares: test_analysis)."""
    const = named(order, "gray")
    theory = float(an.ber_gray_qam(order, esn0_db)[0])
    rng = np.random.default_rng(order)
    n = 100_000
    lab = rng.integers(0, order, n)
    sigma = math.sqrt(const.energy / (2 * 10 ** (esn0_db / 10)))
    y = const.points[lab] + sigma * (rng.standard_normal(n) + 1j * rng.standard_normal(n))
    bits = label_bits(np.arange(order), const.bits)
    dec = np.argmin(np.abs(y[:, None] - const.points[None, :]), axis=1)
    mc = np.count_nonzero(bits[dec] != bits[lab]) / (n * const.bits)
    assert abs(mc - theory) < 4 * math.sqrt(theory * const.bits / (n * const.bits))


@pytest.mark.parametrize("esn0_db", [6.0, 10.0, 14.0])
def test_rectangle_ber_theory_of_8_points_by_hand(esn0_db: float) -> None:
    """The 4 x 2 Gray rectangle from the per-bit errors of Gray 4-PAM (common practice): levels +-1, +-3 on I and
    +-1 on Q (mean energy (16 + 4 - 2)/3 = 6), sigma^2 = Es / (2 Es/N0) per axis; the sign bit of 4-PAM errs with
    (Q(1/s) + Q(3/s))/2, its inner bit with (2Q(1/s) + Q(3/s) - Q(5/s))/2, the BPSK axis with Q(1/s)."""
    s = math.sqrt(6.0 / (2 * 10 ** (esn0_db / 10)))

    def q(x: float) -> float:
        return 0.5 * math.erfc(x / math.sqrt(2))

    want = ((q(1 / s) + q(3 / s)) / 2 + (2 * q(1 / s) + q(3 / s) - q(5 / s)) / 2 + q(1 / s)) / 3
    assert an.ber_gray_qam(8, esn0_db)[0] == pytest.approx(want, rel=1e-12)
    assert an.ber_gray_rectangular(4, 2, esn0_db)[0] == pytest.approx(want, rel=1e-12)


def test_theory_applies_to_odd_orders() -> None:
    assert an.theory_applies(derive(_spec(128))) and an.theory_applies(derive(_spec(32, "rectangular")))
    assert an.theory_source(derive(_spec(128))).startswith("P. K. Vitthaladevuni")
    assert an.theory_source(derive(_spec(32, "rectangular"))).startswith("K. Cho")
    assert not an.theory_applies(derive(_spec(32, "rectangular", **{"constellation.labeling": "natural"})))
    assert ConstellationSpec().shape == "rectangular"
