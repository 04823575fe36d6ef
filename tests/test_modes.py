"""Adaptive order (constellation.orders) and lanes (interface.lanes): spec refusals, outside checks of
every mode's points, the per-mode max-log against a brute-force float reference, lanes against
independent single-lane runs, and the IR evaluator against the model.

Outside sources (as in tests/test_constellation.py, whose tables and formulas are reused here):
- 3GPP TS 38.211 section 5.1.3-5.1.7 (QPSK .. 1024QAM formulas, from memory);
- IEEE Std 802.11 clause 17.3.5.8 encoding tables and K_MOD (from memory).
"""

from __future__ import annotations

import json
import math
import re
from pathlib import Path

import numpy as np
import pytest

from qamsmith.artifacts import (MANIFEST, lane_symbols, packing, parse_words, random_words, run_block, unpack_words,
                                vector_files, write_design)
from qamsmith.errors import SpecError
from qamsmith.ir import design_modules, evaluate, output_words
from qamsmith.model import demap, demap_direct, derive, map_labels
from qamsmith.numbers.constellation import bits_per_symbol, label_bits
from qamsmith.spec import DesignSpec

from test_constellation import IEEE_KMOD, IEEE_TABLES, _nr_formula
from test_model import expected_llr


def _spec(orders, labeling: str = "3gpp-nr", **settings) -> DesignSpec:
    base = {"constellation.orders": list(orders), "constellation.labeling": labeling} if orders else {}
    return DesignSpec(name="t").with_settings({**base, **settings})


# --------------------------------------------------------------------------- spec refusals


@pytest.mark.parametrize("argv,pattern", [
    (["--set", "constellation.orders=[16,4]"], r"constellation\.orders = \[16, 4\]: ascending orders from 2, 4, 16"),
    (["--set", "constellation.orders=[16]"], r"constellation\.orders = \[16\]: ascending orders .*at least two$"),
    (["--set", "constellation.orders=[4,32]"], r"constellation\.orders = \[4, 32\]: ascending orders from 2, 4, 16, 64"),
    (["--set", "constellation.orders=[4,16]", "--labeling", "natural"],
     r"constellation\.(labeling = 'natural'|orders = \[4, 16\]): .*gray, 3gpp-nr, ieee-802\.11"),
    (["--set", "constellation.orders=[2,4,16]", "--labeling", "3gpp-nr"],
     r"constellation\.orders = \[2, 4, 16\]: orders from 4 up with labeling 3gpp-nr"),
    (["--set", "constellation.orders=[4,16]", "--order", "64"],
     r"constellation\.order = 64: constellation\.order = the largest of constellation\.orders \(16\)"),
    (["--set", "constellation.orders=nr-pdsch-999"], r"constellation\.orders = 'nr-pdsch-999': a list of orders or a preset: nr-pdsch-64"),
    (["--set", "constellation.orders=wlan-he", "--labeling", "3gpp-nr"],
     r"constellation\.orders = 'wlan-he': a preset of labeling '3gpp-nr', or set constellation\.labeling = 'ieee-802\.11'"),
    (["--set", "constellation.orders=4.5"], r"constellation\.orders = 4\.5: a list of orders or a preset"),
    (["--set", "interface.lanes=0"], r"interface\.lanes = 0: an integer from 1 to 16$"),
    (["--set", "interface.lanes=17"], r"interface\.lanes = 17: an integer from 1 to 16$"),
    (["--set", "constellation.orders=[4,16]", "--set", "mapper.implementation='logic'"],
     r"mapper\.implementation = 'logic': rom with constellation\.orders"),
], ids=["descending", "one-order", "odd-order", "natural", "nr-bpsk", "order-mismatch", "unknown-preset",
        "preset-labeling", "not-a-list", "lanes-0", "lanes-17", "logic-mapper"])
def test_bad_orders_and_lanes_exit_2_and_write_nothing(cli, tmp_path: Path, argv: list[str], pattern: str) -> None:
    r = cli("generate", *argv, "--out", str(tmp_path / "out"))
    assert r.code == 2 and r.out == "", r.err
    assert len(r.err.splitlines()) == 1
    assert re.match(r"qamsmith: error: " + pattern, r.err), r.err
    assert not (tmp_path / "out").exists()


def test_presets_resolve_and_are_listed(cli) -> None:
    spec = DesignSpec(name="t").with_settings({"constellation.orders": "wlan-vht", "constellation.labeling": "ieee-802.11"})
    assert spec.modes == (2, 4, 16, 64, 256) and spec.constellation.order == 256
    r = cli("list")
    assert re.search(r"nr-pdsch-256 +3gpp-nr +4, 16, 64, 256 +3GPP TS 38\.214 .*from memory", r.out), r.out


def test_single_order_designs_are_unchanged_in_the_resolved_spec() -> None:
    d = DesignSpec(name="t").to_dict()
    assert "orders" not in d["constellation"] and "lanes" not in d["interface"]
    d = _spec([4, 16], **{"interface.lanes": 2}).to_dict()
    assert d["constellation"]["orders"] == [4, 16] and d["interface"]["lanes"] == 2


# --------------------------------------------------------------------------- outside checks of the points


def _standard_points(order: int, labeling: str) -> np.ndarray:
    """Unit-average-power points by label from the standards (TS 38.211 5.1 / IEEE 802.11 17.3.5.8, from memory)."""
    k = bits_per_symbol(order)
    rows = [list(map(int, r)) for r in label_bits(np.arange(order), k)]
    if labeling == "3gpp-nr":
        return np.array([_nr_formula(b) for b in rows])
    if order not in IEEE_TABLES:
        # 256-QAM and up (the VHT/HE amendments, from memory): the same rule as the 17.3.5.8 tables, the
        # binary-reflected Gray code of the level index on each axis, bit value 0 on the negative side
        m = k // 2
        level = {n ^ (n >> 1): 2 * n - ((1 << m) - 1) for n in range(1 << m)}
        table = {tuple((c >> (m - 1 - j)) & 1 for j in range(m)): a for c, a in level.items()}
    else:
        table = IEEE_TABLES[order]
    if order == 2:
        return np.array([table[tuple(b)] * IEEE_KMOD[2] + 0j for b in rows])
    return np.array([complex(table[tuple(b[:k // 2])], table[tuple(b[k // 2:])]) * IEEE_KMOD[order] for b in rows])


@pytest.mark.parametrize("labeling,orders,scaling", [
    ("3gpp-nr", (4, 16, 64, 256), "normalized"),
    ("ieee-802.11", (2, 4, 16, 64), "normalized"),
    ("3gpp-nr", (4, 16, 64, 256), "full-scale"),
], ids=["3gpp-nr-ts38211-5.1", "ieee-802.11-17.3.5.8", "3gpp-nr-ts38211-5.1-full-scale"])
def test_each_modes_mapper_points_are_the_standards(tmp_path: Path, labeling: str, orders: tuple, scaling: str) -> None:
    """Every mode's points in the manifest (and from the model on {mode, label}) are its order's standard points:
    normalized, at the mapper lsb to within half an lsb; full-scale, at one common scale for every mode."""
    spec = _spec(orders, labeling, **{"mapper.scaling": scaling, "mapper.width": 14}).with_settings({"name": "m"})
    write_design(spec, tmp_path)
    man = json.loads((tmp_path / "m" / MANIFEST).read_text())
    assert [m["order"] for m in man["modes"]["list"]] == list(orders)
    design = derive(spec)
    scale = None
    for n, (entry, order) in enumerate(zip(man["modes"]["list"], orders)):
        pts = np.array([complex(i, q) for _, i, q in entry["points"]])
        assert [lab for lab, _, _ in entry["points"]] == list(range(order))
        std = _standard_points(order, labeling)
        if scaling == "normalized":
            for part in (np.real, np.imag):
                np.testing.assert_allclose(part(pts) * man["mapper"]["lsb"], part(std), rtol=0,
                                           atol=man["mapper"]["lsb"] / 2)
        else:                                       # one scale for all modes: the same average power
            s = float(np.sum(np.abs(std) ** 2) / np.real(np.sum(pts * np.conj(std))))
            scale = s if scale is None else scale
            assert s == pytest.approx(scale, rel=2e-3)
            for part in (np.real, np.imag):
                np.testing.assert_allclose(part(pts) * scale, part(std), rtol=0, atol=scale)
        i, q = map_labels(design, np.arange(order), np.full(order, n))
        assert (i + 1j * q).tolist() == pts.tolist()


# --------------------------------------------------------------------------- max-log per mode, brute force


def _brute(points_codes: np.ndarray, k: int, i: np.ndarray, q: np.ndarray) -> np.ndarray:
    """min over points with bit b = 1 of |y - x|^2 minus min over bit b = 0, in input codes squared (exact)."""
    px, py = points_codes.real.astype(np.int64), points_codes.imag.astype(np.int64)
    d2 = (i[:, None] - px[None, :]) ** 2 + (q[:, None] - py[None, :]) ** 2
    labels = np.arange(px.size)
    out = np.empty((i.size, k), dtype=np.int64)
    for b in range(k):
        one = (labels >> (k - 1 - b)) & 1 == 1
        out[:, b] = d2[:, one].min(axis=1) - d2[:, ~one].min(axis=1)
    return out


@pytest.mark.parametrize("labeling,orders,settings", [
    ("3gpp-nr", (4, 16, 64, 256), {}),
    ("3gpp-nr", (4, 16, 64), {"demapper.input_fraction": 1, "demapper.input_width": 7, "demapper.llr_width": 6,
                              "demapper.llr_fraction": 0, "demapper.rounding": "half-even"}),
    ("ieee-802.11", (2, 4, 16, 64, 256, 1024), {"demapper.scale_width": 3, "demapper.scale_fraction": 1,
                                                "demapper.llr_width": 12, "demapper.rounding": "toward-zero"}),
    ("gray", (2, 16), {"demapper.llr_width": 16, "demapper.llr_fraction": 8}),
], ids=["nr-4to256-default", "nr-4to64-narrow", "wlan-2to1024-scale", "gray-2-16-leftshift"])
def test_maxlog_of_each_mode_equals_brute_force_at_its_declared_levels(labeling: str, orders: tuple,
                                                                      settings: dict) -> None:
    """Each mode's LLRs equal the float max-log over every point of that mode at its declared levels (the
    standard points in amplitude units times 2^(f + s) input codes, s = log2(L_max / L_m)), rounded and
    saturated by the documented output stage with the same LLR lsb for every mode; fields past the mode's
    bits are zero; a mode code past the list acts as the largest order."""
    design = derive(_spec(orders, labeling, **settings))
    f = design.spec.demapper.input_fraction
    fmt = design.input_format
    rng = np.random.default_rng(7)
    codes = design.input_codes
    n = codes.size
    i = np.concatenate([codes, rng.integers(fmt.min_code, fmt.max_code + 1, n), [fmt.min_code, fmt.max_code]])
    q = np.concatenate([rng.integers(fmt.min_code, fmt.max_code + 1, n), codes, [fmt.max_code, fmt.min_code]])
    scale = None
    if design.scale_format is not None:
        scale = rng.integers(0, design.scale_format.max_code + 1, i.size)
    l_max = int(math.isqrt(orders[-1]))
    k_max = design.bits
    for code in range(1 << design.mode_width):
        m = min(code, len(orders) - 1)
        order = orders[m]
        std = _standard_points(order, labeling)
        amp = std / np.sqrt(np.mean(np.abs(std) ** 2)) * math.sqrt(2 * (order - 1) / 3) if order > 2 else std
        s = (l_max // (2 if order == 2 else int(math.isqrt(order)))).bit_length() - 1
        pts = np.round(amp * 2.0 ** (f + s))
        assert np.allclose(pts, amp * 2.0 ** (f + s))          # odd integers in amplitude units: exact codes
        k = bits_per_symbol(order)
        got = demap(design, i, q, scale, np.full(i.size, code))
        want, _ = expected_llr(design, _brute(pts, k, i, q), scale)
        np.testing.assert_array_equal(got[:, :k], want, err_msg=f"mode {order}")
        assert not got[:, k:].any()
        np.testing.assert_array_equal(demap_direct(design, i, q, scale, np.full(i.size, code)), got)
        assert k <= k_max


def test_hard_decisions_of_each_mode_are_the_nearest_declared_point() -> None:
    design = derive(_spec((4, 16, 64), "3gpp-nr", **{"demapper.algorithm": "hard"}))
    f = design.spec.demapper.input_fraction
    rng = np.random.default_rng(3)
    fmt = design.input_format
    i, q = (rng.integers(fmt.min_code, fmt.max_code + 1, 3000) for _ in range(2))
    for code, order in enumerate((4, 16, 64)):
        std = _standard_points(order, "3gpp-nr")
        amp = std * math.sqrt(2 * (order - 1) / 3)
        s = (8 // int(math.isqrt(order))).bit_length() - 1
        pts = amp * 2.0 ** (f + s)
        d2 = np.abs((i + 1j * q)[:, None] - pts[None, :]) ** 2
        ties = np.sort(d2, axis=1)[:, :2]
        ok = ties[:, 1] - ties[:, 0] > 1e-9            # ties between levels: the documented upper-level rule
        best = np.argmin(d2, axis=1)
        k = bits_per_symbol(order)
        want = label_bits(best, k)
        got = demap(design, i, q, None, np.full(i.size, code))
        np.testing.assert_array_equal(got[ok, :k], want[ok])
        assert not got[:, k:].any()


# --------------------------------------------------------------------------- lanes


@pytest.mark.parametrize("settings", [
    {"constellation.order": 64, "constellation.labeling": "gray", "demapper.scale_width": 3},
    {"constellation.orders": [4, 16, 64, 256], "constellation.labeling": "3gpp-nr"},
    {"constellation.orders": [2, 4, 16], "constellation.labeling": "ieee-802.11", "demapper.algorithm": "hard"},
    {"constellation.order": 128, "constellation.shape": "cross", "constellation.labeling": "gray"},
], ids=["qam64-scale", "nr-modes", "wlan-modes-hard", "cross128"])
@pytest.mark.parametrize("lanes", [2, 5])
def test_lanes_equal_independent_single_lane_runs(settings: dict, lanes: int) -> None:
    """A word of N lanes gives, lane by lane, what the one-lane design gives on that lane's symbol alone."""
    one = derive(DesignSpec(name="t").with_settings(settings))
    many = derive(DesignSpec(name="t").with_settings({**settings, "interface.lanes": lanes}))
    p1, pn = packing(one), packing(many)
    for block in ("mapper", "demapper"):
        words = random_words(many, block, 300, seed=lanes)
        symbols = lane_symbols(words, pn[f"{block}_input"])
        assert len(symbols) == 300 * lanes
        assert all(s < 1 << p1[f"{block}_input"]["width"] for s in symbols)
        got = lane_symbols(run_block(many, block, words), pn[f"{block}_output"])
        assert got == run_block(one, block, symbols)
        assert pn[f"{block}_output"]["width"] == lanes * p1[f"{block}_output"]["width"]


# --------------------------------------------------------------------------- the IR evaluator


@pytest.mark.parametrize("settings", [
    {"constellation.orders": [4, 16, 64, 256], "constellation.labeling": "3gpp-nr"},
    {"constellation.orders": [4, 16, 64], "constellation.labeling": "3gpp-nr", "demapper.algorithm": "folded",
     "demapper.scale_width": 4, "demapper.scale_fraction": 2, "demapper.rounding": "half-even"},
    {"constellation.orders": [2, 4, 16, 64, 256], "constellation.labeling": "ieee-802.11",
     "demapper.algorithm": "hard"},
    {"constellation.orders": [2, 4, 16, 64, 256, 1024], "constellation.labeling": "ieee-802.11",
     "demapper.input_fraction": 2, "demapper.llr_width": 6, "demapper.llr_fraction": 0,
     "demapper.rounding": "toward-zero", "mapper.scaling": "full-scale"},
    {"constellation.orders": [2, 4], "constellation.labeling": "gray", "demapper.algorithm": "folded"},
    # LLR fields wider than any one mode's range needs (the example's widths): each field is sign-extended
    {"constellation.orders": [4, 16, 64, 256], "constellation.labeling": "3gpp-nr", "demapper.input_fraction": 6,
     "demapper.llr_width": 10, "demapper.llr_fraction": 3},
    {"constellation.orders": [4, 16], "constellation.labeling": "gray", "interface.lanes": 3},
    {"constellation.order": 16, "constellation.labeling": "natural", "interface.lanes": 2,
     "demapper.scale_width": 2},
], ids=["nr-4to256", "nr-4to64-folded-scale", "wlan-2to256-hard", "wlan-2to1024-narrow-fullscale",
        "gray-2-4-folded", "nr-4to256-llr10", "gray-4-16-lanes3", "natural16-lanes2"])
def test_mode_and_lane_datapaths_equal_the_model(settings: dict) -> None:
    """Every label field under every mode code, and every input code of each axis under every mode code,
    through the IR evaluator, against the model on the same words."""
    design = derive(DesignSpec(name="t").with_settings(settings))
    mods = design_modules(design)
    pack = packing(design)
    rng = np.random.default_rng(11)
    for block in ("mapper", "demapper"):
        dp = mods[block].datapath
        entry = pack[f"{block}_input"]
        lane_w = entry.get("lane_width", entry["width"])
        if block == "mapper":
            symbols = list(range(1 << lane_w)) if design.modes else list(range(design.constellation.order))
        else:
            fields = {f["name"]: f for f in entry["fields"]}
            codes = design.input_codes
            reps = 1 << design.mode_width if design.modes else 1
            i = np.tile(codes, 2 * reps)
            q = np.concatenate([rng.permutation(codes) for _ in range(2 * reps)])
            i[codes.size * reps:], q[codes.size * reps:] = q[codes.size * reps:].copy(), i[codes.size * reps:].copy()
            mask = lambda v, w: int(v) & ((1 << w) - 1)  # noqa: E731
            symbols = []
            for x in range(i.size):
                v = mask(i[x], fields["i"]["width"]) | (mask(q[x], fields["q"]["width"]) << fields["q"]["lsb"])
                if "s" in fields:
                    v |= int(rng.integers(0, 1 << fields["s"]["width"])) << fields["s"]["lsb"]
                if "mode" in fields:
                    v |= (x // codes.size % reps) << fields["mode"]["lsb"]
                symbols.append(v)
        n = design.lanes
        symbols += symbols[:(-len(symbols)) % n]
        words = [sum(symbols[x + l] << (lane_w * l) for l in range(n)) for x in range(0, len(symbols), n)]
        inputs = {}
        for fld in dp.inputs:
            sig = fld.value
            raw = np.array([(w >> fld.lsb) & ((1 << sig.width) - 1) for w in words], dtype=np.int64)
            inputs[sig.name] = np.where(raw >= 1 << (sig.width - 1), raw - (1 << sig.width), raw) if sig.signed else raw
        got = [int(v) for v in output_words(dp, evaluate(dp, inputs))]
        assert got == run_block(design, block, words), block


def test_a_mode_error_in_the_model_input_is_refused() -> None:
    design = derive(_spec((4, 16)))
    with pytest.raises(ValueError, match="give a mode code per symbol"):
        demap(design, np.zeros(2, np.int64), np.zeros(2, np.int64))
    with pytest.raises(ValueError, match="labels must be in 0..M-1 of each symbol's mode"):
        map_labels(design, np.array([4]), np.array([0]))
    with pytest.raises(SpecError):
        derive(_spec((4, 16), "natural"))


def test_vectors_cover_every_mode_random_modes_and_a_change_on_every_symbol() -> None:
    """vectors/: every label of every mode code (past the list too) through the mapper; every input code of each
    axis under every mode code, and a section whose mode changes on every consecutive symbol."""
    design = derive(_spec((4, 16, 64), **{"interface.lanes": 2}))
    files, entry = vector_files(design)
    pack = packing(design)
    m_in = lane_symbols(parse_words(files["vectors/mapper_in.hex"].decode()), pack["mapper_input"])
    fields = unpack_words(m_in, pack["mapper_input"]["fields"])
    modes, k = fields["mode"], design.bits
    labels = np.asarray(m_in) & ((1 << k) - 1)
    for code, order in enumerate((4, 16, 64, 64)):
        kb = bits_per_symbol(order)
        seen = set((labels[modes == code] >> (k - kb)).tolist())
        assert seen == set(range(order)), code
    d_in = lane_symbols(parse_words(files["vectors/demapper_in.hex"].decode()), pack["demapper_input"])
    f = unpack_words(d_in, pack["demapper_input"]["fields"])
    codes = set(design.input_codes.tolist())
    for code in range(4):
        sel = f["mode"] == code
        assert set(f["i"][sel].tolist()) == codes and set(f["q"][sel].tolist()) == codes, code
    tail = np.asarray(f["mode"][-4096:])
    assert np.all(tail[1:] != tail[:-1])
