"""Analysis engine: Monte-Carlo BER/GMI against closed forms and quadrature, EVM, loss, width explorer.

Outside checks name their source beside them. Symbol counts are small; every statistical
tolerance is stated where it is used (batch-means standard errors from the engine itself,
or a binomial bound).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from qamsmith import ConstellationSpec, DemapperSpec, DesignSpec, MapperSpec, SpecError, derive, model
from qamsmith.flows import analysis as an
from qamsmith.spec import examples


def _spec(order: int, labeling: str = "gray", **demapper) -> DesignSpec:
    return DesignSpec(constellation=ConstellationSpec(order=order, labeling=labeling),
                      demapper=DemapperSpec(**demapper) if demapper else DemapperSpec())


def _se(batches: np.ndarray) -> float:
    return float(np.std(batches, ddof=1) / math.sqrt(len(batches)))


# --------------------------------------------------------------------------- SNR syntax and input checks


def test_snr_list_and_range() -> None:
    assert an.parse_snr("10,12,14") == [10.0, 12.0, 14.0]
    assert an.parse_snr("8:2:20") == [8.0, 10.0, 12.0, 14.0, 16.0, 18.0, 20.0]
    assert an.parse_snr("0:0.5:1") == [0.0, 0.5, 1.0]
    assert an.parse_snr("-3") == [-3.0]
    assert an.esn0_from_ebn0(10.0, 4) == pytest.approx(10.0 + 10 * math.log10(4))


@pytest.mark.parametrize("text, allowed", [
    ("10;12", "a list like 10,12,14 or a range"),
    ("8:2", "a list like 10,12,14 or a range"),
    ("abc", "a list like 10,12,14 or a range"),
    ("20:2:8", "a non-empty range"),
    ("8:0:20", "a positive step"),
    ("8:-1:20", "a positive step"),
    ("10,10", "distinct points"),
    ("500", "points from -30 to 80 dB"),
    ("0:0.001:100", "at most 200 points"),
])
def test_snr_bad_syntax(text: str, allowed: str) -> None:
    with pytest.raises(SpecError, match=allowed) as exc:
        an.parse_snr(text)
    assert "\n" not in str(exc.value) and repr(text) in str(exc.value)


def test_symbols_too_few_for_ber_says_how_many() -> None:
    with pytest.raises(SpecError, match=r"at least 2500000 to estimate a BER of 1e-05"):
        an.check_symbols(100_000, 4, ber_floor=1e-5)
    an.check_symbols(2_500_000, 4, ber_floor=1e-5)
    with pytest.raises(SpecError, match="at least 1024"):
        an.check_symbols(100, 4)


# --------------------------------------------------------------------------- theory formulas


def test_cho_yoon_reduces_to_textbook_forms() -> None:
    # Proakis, Digital Communications (5th ed.), 4.3: BPSK and Gray QPSK P_b = Q(sqrt(2 Eb/N0))
    for ebn0_db in (0.0, 4.0, 8.0):
        g = 10 ** (ebn0_db / 10)
        q = 0.5 * math.erfc(math.sqrt(g))
        assert an.ber_gray_qam(2, ebn0_db)[0] == pytest.approx(q, rel=1e-12)
        assert an.ber_gray_qam(4, ebn0_db + 10 * math.log10(2))[0] == pytest.approx(q, rel=1e-12)
    # Cho and Yoon 2002, eq. (14) written out by hand for 16-QAM (L = 4):
    # P_b = (1/4)[ (3/2) erfc(a) + erfc(3a) - (1/2) erfc(5a) ],  a = sqrt(Es / (10 N0))
    for esn0_db in (6.0, 12.0, 18.0):
        a = math.sqrt(10 ** (esn0_db / 10) / 10)
        want = 0.25 * (1.5 * math.erfc(a) + math.erfc(3 * a) - 0.5 * math.erfc(5 * a))
        assert an.ber_gray_qam(16, esn0_db)[0] == pytest.approx(want, rel=1e-12)


# --------------------------------------------------------------------------- float references


@pytest.mark.parametrize("order, labeling", [(4, "gray"), (16, "3gpp-nr"), (64, "gray"), (256, "natural"),
                                             (4096, "gray")])
def test_fast_float_llrs_equal_the_model(order: int, labeling: str) -> None:
    # the engine's per-axis float LLRs against the model's brute-force references (max-log exactly;
    # exact log-MAP to 1e-5 nats where |LLR| < 60 nats, beyond which the engine caps the exponent
    # and only the sign and |LLR| > 60 are kept)
    design = derive(_spec(order, labeling))
    chain = an.Chain(design)
    rng = np.random.default_rng(7)
    y = (rng.standard_normal(3000) + 1j * rng.standard_normal(3000)) * 0.9
    for n0 in (0.05, 0.5, 3e-4):
        mx, ex = chain.float_llrs(y, n0)
        assert np.allclose(mx.T, model.llr_maxlog(design, y), atol=1e-12)
        ref = model.llr_exact(design, y, n0)
        ok = np.abs(ref) < 60
        assert np.allclose(ex.T[ok], ref[ok], rtol=0, atol=1e-5)
        assert np.all(np.sign(ex.T[~ok]) == np.sign(ref[~ok])) and np.all(np.abs(ex.T[~ok]) > 60)


@pytest.mark.parametrize("example", ["larkspur-spur-16"])
def test_fast_float_llrs_2d_equal_the_model(repo, example: str) -> None:
    # a table labeling that is not a product: the engine's 2-D float LLRs against the model's references
    design = derive(DesignSpec.from_toml(repo / "generator" / "spec" / "examples" / f"{example}.toml"))
    chain = an.Chain(design)
    assert not chain.per_axis
    rng = np.random.default_rng(5)
    y = (rng.standard_normal(3000) + 1j * rng.standard_normal(3000)) * 0.9
    for n0 in (0.05, 0.5):
        mx, ex = chain.float_llrs(y, n0)
        assert np.allclose(mx.T, model.llr_maxlog(design, y), atol=1e-12)
        ref = model.llr_exact(design, y, n0)
        ok = np.abs(ref) < 60
        assert np.allclose(ex.T[ok], ref[ok], rtol=0, atol=1e-5)


# --------------------------------------------------------------------------- BER


@pytest.mark.parametrize("order, labeling, esn0_db", [
    (4, "gray", 6.0), (4, "gray", 10.0), (16, "gray", 12.0), (16, "3gpp-nr", 14.0), (64, "gray", 18.0),
    (256, "ieee-802.11", 24.0),
])
def test_mc_ber_matches_cho_yoon(order: int, labeling: str, esn0_db: float) -> None:
    # Cho and Yoon, IEEE Trans. Commun. 2002 (exact Gray square M-QAM BER). Tolerance: the BER
    # estimate of N symbols has standard deviation <= sqrt(P_b / N) (bit errors per symbol <= k);
    # 4.5 sigma for the float nearest-point detector; the fixed chain (default widths) gets 3 %
    # relative on top for its quantization.
    design = derive(_spec(order, labeling))
    n = 1 << 16
    st, _ = an.Chain(design).run(esn0_db, n, seed=11)
    pb = float(an.ber_gray_qam(order, esn0_db)[0])
    sigma = math.sqrt(pb / n)
    assert abs(st.ber_maxlog - pb) <= 4.5 * sigma
    assert abs(st.ber_fixed - pb) <= 4.5 * sigma + 0.03 * pb


def test_hard_gmi_is_bsc_capacity() -> None:
    # hard decisions seen as LLRs +-c: the best c gives per bit the binary symmetric channel's
    # capacity 1 - h2(p) (Shannon 1948; Cover and Thomas, Elements of Information Theory, 7.1.4);
    # both QPSK bits have the same error probability, so GMI = 2 (1 - h2(BER))
    design = derive(_spec(4, algorithm="hard"))
    st, _ = an.Chain(design).run(4.0, 1 << 15, seed=3)
    p = st.ber_fixed
    h2 = -p * math.log2(p) - (1 - p) * math.log2(1 - p)
    assert st.gmi_fixed == pytest.approx(2 * (1 - h2), abs=2e-3)


# --------------------------------------------------------------------------- GMI


def _pam_bicm_capacity(levels: int, esn0_db: float, nodes: int = 96) -> float:
    """BICM capacity (bits per real dimension) of Gray L-PAM, each axis of normalized square QAM,
    by Gauss-Hermite quadrature: sum_j 1 - E[log2(sum_a p(y|a) / sum_{a: b_j(a) = b_j(x)} p(y|a))].

    Written here independently of qamsmith: levels (2n - L + 1) kappa with kappa^2 = 3 / (2 (L^2 - 1))
    (unit average symbol power over both axes), Gray label n ^ (n >> 1), noise variance N0 / 2.
    """
    n0 = 10 ** (-esn0_db / 10)
    sigma = math.sqrt(n0 / 2)
    if levels == 2:
        kappa = math.sqrt(0.5)
    else:
        kappa = math.sqrt(3.0 / (2.0 * (levels * levels - 1)))
    amp = (2 * np.arange(levels) - levels + 1) * kappa
    m = int(math.log2(levels))
    gray = np.arange(levels) ^ (np.arange(levels) >> 1)
    bits = (gray[:, None] >> np.arange(m - 1, -1, -1)) & 1            # (L, m)
    t, w = np.polynomial.hermite.hermgauss(nodes)
    cap = float(m)
    for x in range(levels):
        y = amp[x] + math.sqrt(2) * sigma * t                               # E[f(x + sigma z)]
        logp = -(y[:, None] - amp[None, :]) ** 2 / n0                       # (nodes, L)
        top = logp.max(axis=1, keepdims=True)
        p = np.exp(logp - top)
        for j in range(m):
            same = bits[:, j] == bits[x, j]
            ratio = np.log2(p.sum(axis=1) / p[:, same].sum(axis=1))
            cap -= float(w @ ratio) / math.sqrt(math.pi) / levels
    return cap


def _bpsk_capacity(snr: float, nodes: int = 96) -> float:
    """Binary-input real AWGN capacity of BPSK at energy / N0 = snr, noise variance N0/2 (Gauss-Hermite):
    C = 1 - E[log2(1 + exp(-2 y / s2))], y = 1 + s z, s2 = 1 / (2 snr)  (textbook form)."""
    s2 = 1.0 / (2.0 * snr)
    t, w = np.polynomial.hermite.hermgauss(nodes)
    y = 1.0 + math.sqrt(2 * s2) * t
    return 1.0 - float(w @ np.logaddexp(0.0, -2.0 * y / s2)) / math.sqrt(math.pi) / math.log(2.0)


@pytest.mark.parametrize("esn0_db", [-2.0, 3.0, 8.0])
def test_qpsk_bicm_is_twice_bpsk(esn0_db: float) -> None:
    # Gray QPSK is two independent BPSK channels at half the symbol energy each: the BICM capacity
    # equals twice the BPSK AWGN capacity (Ungerboeck, IEEE Trans. Inf. Theory 1982; Caire,
    # Taricco and Biglieri, IEEE Trans. Inf. Theory 1998). Quadrature identity, then the engine.
    es = 10 ** (esn0_db / 10)
    twice = 2 * _bpsk_capacity(es / 2)       # each dimension: energy Es/2, noise variance N0/2
    assert 2 * _pam_bicm_capacity(2, esn0_db) == pytest.approx(twice, abs=1e-9)
    st, _ = an.Chain(derive(_spec(4))).run(esn0_db, 1 << 15, seed=5, fixed=False)
    assert abs(st.gmi_exact - twice) <= 4 * _se(st.gmi_exact_batches) + 2e-3


@pytest.mark.parametrize("order, esn0_db", [(4, 0.0), (4, 5.0), (16, 6.0), (16, 12.0), (16, 16.0)])
def test_exact_gmi_matches_quadrature_and_bounds(order: int, esn0_db: float) -> None:
    # BICM capacity by Gauss-Hermite quadrature (Caire, Taricco and Biglieri 1998, eq. for C_BICM):
    # a square QAM of a product labeling is two PAM axes. Tolerance: 4 batch-means standard errors
    # plus 2e-3 bits for the engine's 1/64-nat LLR histogram bins.
    st, _ = an.Chain(derive(_spec(order))).run(esn0_db, 1 << 16, seed=9, fixed=False)
    se = _se(st.gmi_exact_batches)
    cap = 2 * _pam_bicm_capacity(int(math.sqrt(order)), esn0_db)
    assert abs(st.gmi_exact - cap) <= 4 * se + 2e-3
    k = int(math.log2(order))
    assert st.gmi_exact <= k + 4 * se                                        # log2 M
    assert st.gmi_exact <= math.log2(1 + 10 ** (esn0_db / 10)) + 4 * se      # Shannon 1948, complex AWGN


@pytest.mark.parametrize("order, esn0_db", [(16, 4.0), (64, 12.0), (256, 20.0), (1024, 26.0)])
def test_gmi_order_maxlog_below_exact_below_capacity(order: int, esn0_db: float) -> None:
    # GMI with the exact LLRs is the BICM capacity, an upper bound of the GMI of any other metric at
    # any scaling (mismatched decoding; Martinez, Guillen i Fabregas, Caire and Willems, IEEE Trans.
    # Inf. Theory 55(6), 2009); all below log2 M and the Shannon capacity (beyond the MC interval)
    st, _ = an.Chain(derive(_spec(order))).run(esn0_db, 1 << 14, seed=2)
    se = max(_se(st.gmi_exact_batches), _se(st.gmi_maxlog_batches))
    assert st.gmi_maxlog <= st.gmi_exact + 4 * se
    assert st.gmi_exact <= math.log2(order) + 4 * se
    assert st.gmi_exact <= math.log2(1 + 10 ** (esn0_db / 10)) + 4 * se
    assert 0 < st.gmi_fixed <= st.gmi_exact + 4 * se


def test_histogram_gmi_equals_direct_gmi() -> None:
    # GMI definition (Caire et al. 1998): k - sum_j E[log2(1 + exp(-s_j L_j))]; the engine works
    # on histograms of integer codes, which must give the same number as the direct mean
    rng = np.random.default_rng(4)
    bits = rng.integers(0, 2, size=(5000, 4))
    codes = np.clip(np.round((1 - 2 * bits) * 6 + rng.normal(0, 5, bits.shape)), -31, 31).astype(np.int64)
    signed = codes * (1 - 2 * bits)
    values, counts = np.unique(signed, return_counts=True)
    scale = 0.37
    direct = an.gmi_direct(codes * scale, bits)
    assert float(an._gmi_of(values.astype(float), counts.astype(float), scale, 4, 5000)) == pytest.approx(direct, abs=1e-12)
    factor, best = an.best_scale(values.astype(float), counts, 1.0, 4, 5000)
    grid = [an.gmi_direct(codes * a, bits) for a in np.linspace(0.01, 2, 400)]
    assert best >= max(grid) - 1e-6 and best == pytest.approx(an.gmi_direct(codes * factor, bits), abs=1e-12)


# --------------------------------------------------------------------------- EVM


@pytest.mark.parametrize("order", [1024, 4096])
def test_evm_matches_uniform_quantization_noise(order: int) -> None:
    # uniform quantization noise LSB^2 / 12 per component (Widrow and Kollar, Quantization Noise,
    # 2008, ch. 4): with 32 or 64 levels per axis the level rounding errors spread like uniform
    # noise; each fraction within -1 dB / +1 dB of the model
    for frac in range(6, 14):
        design = derive(DesignSpec(constellation=ConstellationSpec(order=order),
                                   mapper=MapperSpec(width=18, fraction=frac)))
        e = an.mapper_evm(design)
        ratio = 10 ** ((e["evm_db"] - e["evm_uniform_model_db"]) / 10)
        assert 10 ** -0.1 <= ratio <= 10 ** 0.1, (frac, ratio)
        assert e["evm_uniform_model_db"] == pytest.approx(10 * math.log10(2 * design.mapper_lsb ** 2 / 12))


def test_evm_average_over_fractions_256() -> None:
    # the same model (Widrow and Kollar 2008), averaged over mapper fractions 4..11 for 16 levels per axis
    ratios = []
    for frac in range(4, 12):
        design = derive(DesignSpec(constellation=ConstellationSpec(order=256), mapper=MapperSpec(width=18, fraction=frac)))
        e = an.mapper_evm(design)
        ratios.append(10 ** ((e["evm_db"] - e["evm_uniform_model_db"]) / 10))
    assert 0.8 <= float(np.mean(ratios)) <= 1.2


# 3GPP TS 38.104 (NR base station), 6.5.2 transmitted signal quality, EVM requirements per
# modulation (from memory): QPSK 17.5 %, 16-QAM 12.5 %, 64-QAM 8 %, 256-QAM 3.5 %, 1024-QAM 2.5 %
_EVM_LIMITS = {4: 17.5, 16: 12.5, 64: 8.0, 256: 3.5, 1024: 2.5}


@pytest.mark.parametrize("order", sorted(_EVM_LIMITS))
def test_default_width_evm_a_tenth_of_3gpp_limit(order: int) -> None:
    design = derive(DesignSpec(constellation=ConstellationSpec(order=order)))
    assert an.mapper_evm(design)["evm_percent"] <= _EVM_LIMITS[order] / 10


def test_evm_grows_when_the_mapper_narrows() -> None:
    wide = an.mapper_evm(derive(DesignSpec(constellation=ConstellationSpec(order=1024), mapper=MapperSpec(width=14, fraction=12))))
    narrow = an.mapper_evm(derive(DesignSpec(constellation=ConstellationSpec(order=1024), mapper=MapperSpec(width=9, fraction=7))))
    # each fraction bit less: about 6 dB more quantization noise (uniform model, common practice)
    assert narrow["evm_db"] - wide["evm_db"] == pytest.approx(5 * 6.02, abs=3.0)


def test_input_noise_figures() -> None:
    design = derive(_spec(16, input_width=10, input_fraction=3))
    noise = an.input_noise(design)
    assert noise["input_lsb"] == pytest.approx(design.constellation.kappa / 8)
    assert noise["input_noise_db"] == pytest.approx(10 * math.log10(2 * noise["input_lsb"] ** 2 / 12))
    st, _ = an.Chain(design).run(12.0, 1 << 14, seed=1, floats=False)
    # measured rounding noise of the received samples: uniform model within 0.3 dB (no clipping here)
    assert st.input_clip_percent == 0.0
    assert st.input_noise_db == pytest.approx(noise["input_noise_db"], abs=0.3)


# --------------------------------------------------------------------------- loss


@pytest.mark.parametrize("order, labeling", [(16, "gray"), (64, "3gpp-nr")])
def test_loss_not_negative_beyond_interval(order: int, labeling: str) -> None:
    design = derive(_spec(order, labeling))
    res = an.implementation_loss(design, 1 << 14, seed=4)
    for value, ci in ((res.loss_db_vs_exact, res.loss_db_vs_exact_ci95),
                      (res.loss_db_vs_maxlog, res.loss_db_vs_maxlog_ci95)):
        assert value is not None and ci is not None
        assert ci[0] <= value <= ci[1]
        assert ci[1] >= 0.0
    # max-log is never better than exact log-MAP: the loss to max-log is not above the loss to exact
    assert res.loss_db_vs_maxlog <= res.loss_db_vs_exact + (res.loss_db_vs_exact_ci95[1] - res.loss_db_vs_exact)
    # the operating point: float exact GMI at 90 % of log2 M
    grid_gmi = np.interp(res.operating_point_esn0_db, [g.esn0_db for g in res.grid], [g.gmi_exact for g in res.grid])
    assert grid_gmi == pytest.approx(0.9 * math.log2(order), abs=1e-6)


def test_coarse_llr_costs_more_than_fine() -> None:
    coarse = an.implementation_loss(derive(_spec(16, llr_width=3, llr_fraction=0)), 1 << 14, seed=4)
    fine = an.implementation_loss(derive(_spec(16, llr_width=8, llr_fraction=5)), 1 << 14, seed=4)
    assert coarse.loss_db_vs_exact > fine.loss_db_vs_exact + 0.1


def test_given_operating_point() -> None:
    res = an.implementation_loss(derive(_spec(4)), 1 << 13, seed=1, operating_point_db=3.0)
    assert res.operating_point_esn0_db == pytest.approx(3.0, abs=1e-9)
    assert res.loss_db_vs_exact is not None


# --------------------------------------------------------------------------- determinism, odd designs


def test_seeded_and_deterministic() -> None:
    design = derive(_spec(16))
    a, _ = an.Chain(design).run(10.0, 5000, seed=8)
    b, _ = an.Chain(design).run(10.0, 5000, seed=8)
    c, _ = an.Chain(design).run(10.0, 5000, seed=9)
    assert (a.ber_fixed, a.gmi_fixed, a.gmi_exact) == (b.ber_fixed, b.gmi_fixed, b.gmi_exact)
    assert a.gmi_exact != c.gmi_exact


def test_search_table_and_reliability_designs_run() -> None:
    table = DesignSpec(constellation=ConstellationSpec(order=2, labeling="3gpp-nr"))
    st, _ = an.Chain(derive(table)).run(3.0, 4096, seed=1)
    assert st.ber_fixed == pytest.approx(float(an.ber_gray_qam(2, 3.0)[0]), abs=5 * math.sqrt(0.03 / 4096))
    rel = _spec(16, scale_width=6, scale_fraction=3)
    chain = an.Chain(derive(rel))
    assert chain.reliability(0.1) == 63 and chain.reliability(1.0) == 8
    st, _ = chain.run(8.0, 4096, seed=1)
    assert st.reliability_code == round(8 * 10 ** 0.8) and 0 < st.gmi_fixed <= 4


def test_width_explorer_recommends_within_budget() -> None:
    res = an.explore_widths(_spec(4), budget_db=0.2, symbols=4096, seed=3)
    rec = res["recommended"]
    assert rec["within_budget"] and rec["loss_db"] <= 0.2
    assert set(rec["settings"]) >= {"mapper.width", "demapper.input_width", "demapper.input_fraction",
                                    "demapper.llr_width", "demapper.llr_fraction"}
    derive(_spec(4).with_settings(rec["settings"]))
    # narrower LLR words never measure much better than wider ones at their best fraction
    llr = {r["width"]: r["loss_db"] for r in res["llr_best"]}
    assert llr[2] > llr[6]
    text = an.widths_table(res)
    assert "recommended:" in text and "llr" in text
    with pytest.raises(SpecError, match="budget_db"):
        an.explore_widths(_spec(4), budget_db=0.0)


def test_progress_bar_only_on_a_terminal(monkeypatch: pytest.MonkeyPatch) -> None:
    import io
    import sys

    class Tty(io.StringIO):
        def isatty(self) -> bool:
            return True

    for stream, shown in ((Tty(), True), (io.StringIO(), False)):
        monkeypatch.setattr(sys, "stderr", stream)
        bar = an._progress(3, "sweep")
        for n in (1, 2, 3):
            bar(n)
        assert ("sweep [" in stream.getvalue() and "3/3" in stream.getvalue()) is shown
        assert (stream.getvalue() == "") is not shown


def test_a_hard_demapper_with_a_reliability_input_is_analyzed() -> None:
    """The reliability code is part of a hard demapper's input word (read, not used): the chain passes it."""
    spec = DesignSpec.from_toml(examples()["larkspur-telemetry-qpsk"]).with_settings({"demapper.algorithm": "hard"})
    res = an.implementation_loss(derive(spec), symbols=4000)
    assert res.grid and all(st.ber_fixed > 0 for st in res.grid)


def test_a_mode_of_an_adaptive_core_runs_like_the_single_order_core_of_that_order() -> None:
    """Mode m's chain sends that mode's points: its float references equal those of the single-order design of
    that order (same draws), and its fixed chain runs that mode through the common input format (the largest
    order's grid), so QPSK under 16-QAM decides by the sign like a QPSK core does."""
    adaptive = derive(DesignSpec(name="a").with_settings({"constellation.orders": [4, 16],
                                                          "constellation.labeling": "gray"}))
    single = derive(DesignSpec(name="s").with_settings({"constellation.order": 4, "constellation.labeling": "gray"}))
    st_a, _ = an.Chain(adaptive, mode=0).run(4.0, 1 << 14, seed=9)
    st_s, _ = an.Chain(single).run(4.0, 1 << 14, seed=9)
    assert st_a.bits == 2
    assert st_a.ber_exact == st_s.ber_exact and st_a.gmi_exact == st_s.gmi_exact
    # hard decisions: the signs of the same noisy points, up to the samples each input grid rounds to code 0
    assert abs(st_a.ber_fixed - st_s.ber_fixed) < 1e-3
    assert abs(st_a.gmi_fixed - st_s.gmi_fixed) < 0.01
    st_top, _ = an.Chain(adaptive).run(12.0, 1 << 13, seed=9)
    assert st_top.bits == 4


def test_analysis_of_an_adaptive_core_reports_every_mode() -> None:
    spec = DesignSpec(name="a").with_settings({"constellation.orders": [4, 16], "constellation.labeling": "gray"})
    modes = an.mode_losses(derive(spec), 1 << 12, 5, 0.9)
    assert [m["order"] for m in modes] == [4, 16]
    for m in modes:
        assert m["operating_point_gmi"] == pytest.approx(0.9 * m["bits"])
        assert m["loss_db_vs_exact"] is not None and abs(m["loss_db_vs_exact"]) < 0.5
