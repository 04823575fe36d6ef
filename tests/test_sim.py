"""Simulation tier: generated RTL on Icarus compared bit-exactly with the model (marked `sim`).

The matrix (every order x labeling x algorithm at two width settings) runs the generated
Verilog harness on plain iverilog/vvp -- vectors/ (per-axis exhaustive sweeps, extreme codes,
every mapper label) plus random words, random input gaps and output backpressure -- two
simulations at a time. The option tests run the generated cocotb benches (Python source,
sink and scoreboard, tlast/tuser, full rate, reset in mid-stream) through `qamsmith verify`.
"""

from __future__ import annotations

import ast
import shutil
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import pytest

import qamsmith
from qamsmith import write_design
from qamsmith.flows import verify
from qamsmith.spec import ConstellationSpec, DemapperSpec, DesignSpec, InterfaceSpec, MapperSpec

from matrix import CASES, MODE_CASES, accepted_spec, case_id, expect_refusal, matrix_spec, mode_spec

pytestmark = [pytest.mark.sim,
              pytest.mark.skipif(shutil.which("iverilog") is None, reason="Icarus Verilog not installed")]

MATRIX_RANDOM = 500  # random words per block on top of vectors/ (qamsmith verify uses 100k)


@pytest.fixture(scope="module")
def matrix_results(tmp_path_factory: pytest.TempPathFactory) -> dict:
    """Simulate every accepted case, two at a time; refusals are recorded with their message."""
    root = tmp_path_factory.mktemp("matrix")
    results: dict = {}
    jobs = []
    for case in CASES:
        spec = accepted_spec(case)
        if isinstance(spec, str):
            results[case] = ("refused", spec)
            continue
        write_design(spec, root)
        jobs.append((case, root / spec.name))

    def run(job):
        case, path = job
        order, labeling = case[:2]
        # the 2-D search of 64 or 256 points simulates slowly: a strided subset of its vectors
        search = labeling == "table" and order >= 64
        return case, verify.run_direct(path, n_random=100 if search else MATRIX_RANDOM, seed=1 + CASES.index(case),
                                       in_pct=75, out_pct=75, vector_limit=(600 if order == 64 else 300) if search else None)

    with ThreadPoolExecutor(max_workers=2) as pool:
        for case, res in pool.map(run, jobs):
            results[case] = ("ran", res)
    return results


@pytest.mark.parametrize("case", CASES, ids=[case_id(*c) for c in CASES])
def test_matrix(case, matrix_results) -> None:
    kind, res = matrix_results[case]
    refusal = expect_refusal(*case[:3])
    if refusal:
        assert kind == "refused", f"{case} was expected to be refused"
        assert __import__("re").search(refusal, res), res
        return
    assert kind == "ran", res
    assert res.mismatches == 0, res.details
    assert res.compared > 0


@pytest.mark.parametrize("name", list(MODE_CASES))
def test_modes_and_lanes_matrix(name: str, tmp_path: Path) -> None:
    """Adaptive cores and lanes: vectors/ (every mode, random mode sequences, a mode change on every symbol;
    thinned) and random words, with gaps and backpressure, bit-exact against the model."""
    write_design(mode_spec(name), tmp_path)
    res = verify.run_direct(tmp_path / f"m-{name}", n_random=300, seed=3, in_pct=70, out_pct=70, vector_limit=900,
                            build_dir=tmp_path / "build")
    assert res.mismatches == 0, res.details
    assert res.compared > 900


def test_bench_catches_a_wrong_expected_word(tmp_path: Path) -> None:
    """Mutation check: one corrupted expected word must be reported (the bench can fail)."""
    spec = matrix_spec(16, "gray", "maxlog", 0)
    write_design(spec, tmp_path)
    d = tmp_path / spec.name
    path = d / "vectors" / "demapper_out.hex"
    lines = path.read_text().splitlines()
    n = next(i for i, ln in enumerate(lines) if not ln.startswith("//")) + 10
    lines[n] = format(int(lines[n], 16) ^ 1, f"0{len(lines[n])}x")
    path.write_text("\n".join(lines) + "\n")
    res = verify.run_direct(d, n_random=0)
    assert res.mismatches == 1
    assert "BAD demapper word 10" in res.details[0]


def test_bench_catches_a_wrong_rtl_constant(tmp_path: Path) -> None:
    """Mutation check: a wrong competitor constant in the generated RTL must be caught."""
    spec = matrix_spec(64, "3gpp-nr", "maxlog", 0)
    write_design(spec, tmp_path)
    d = tmp_path / spec.name
    rtl_path = next((d / "rtl").glob("*_demapper.v"))
    text = rtl_path.read_text()
    # (|dn| << f) + (dn > 0) of axis bit 1 at level 1: 3 (dn = +1, f = 1) made 1
    old = "3'd1: dp_i1_table = 3'd3;"
    assert old in text
    rtl_path.write_text(text.replace(old, "3'd1: dp_i1_table = 3'd1;", 1))
    res = verify.run_direct(d, n_random=0)
    assert res.mismatches > 0


# --------------------------------------------------------------------------- cocotb benches

OPTIONS = {
    "rom-file-tlast": dict(mapper=MapperSpec(implementation="rom", tables="readmemh"), interface=InterfaceSpec(tlast=True)),
    "rom-inline-tuser-stages1": dict(mapper=MapperSpec(implementation="rom", tables="inline"),
                                     interface=InterfaceSpec(tlast=True, tuser_width=5, mapper_stages=1, demapper_stages=1)),
    "logic-scale-stages4": dict(mapper=MapperSpec(implementation="logic"),
                                demapper=DemapperSpec(scale_width=5, scale_fraction=3, llr_width=7),
                                interface=InterfaceSpec(tlast=False, mapper_stages=4, demapper_stages=4)),
    "folded-notlast": dict(demapper=DemapperSpec(algorithm="folded"), interface=InterfaceSpec(tlast=False)),
    "skid-tuser-stages2": dict(interface=InterfaceSpec(skid=True, tuser_width=4, mapper_stages=2, demapper_stages=2)),
    "per-stage-flow": dict(interface=InterfaceSpec(flow_control="per-stage")),
    "per-stage-flow-skid": dict(interface=InterfaceSpec(flow_control="per-stage", skid=True, tuser_width=2)),
    "modes-lanes3-skid-tuser": dict(constellation=ConstellationSpec(order=64, labeling="3gpp-nr", orders=(4, 16, 64)),
                                    demapper=DemapperSpec(scale_width=3, scale_fraction=1),
                                    interface=InterfaceSpec(lanes=3, skid=True, tuser_width=2, tlast=True)),
}


@pytest.mark.parametrize("option", list(OPTIONS))
def test_cocotb_benches(option: str, tmp_path: Path) -> None:
    kw = OPTIONS[option]
    spec = DesignSpec(name=f"opt-{option}", **{"constellation": ConstellationSpec(order=64, labeling="3gpp-nr"), **kw})
    write_design(spec, tmp_path)
    res = verify.run_cocotb(tmp_path / spec.name, n_random=2000, stream=600, build_dir=tmp_path / "build")
    assert res.failed_tests == 0, res.details
    assert res.mismatches == 0, res.details
    assert res.compared > 4000


@pytest.mark.parametrize("name", ["larkspur-backhaul-256", "larkspur-spur-16", "larkspur-telemetry-qpsk"])
def test_committed_examples_verify(name: str, repo: Path, tmp_path: Path) -> None:
    res = verify.run_cocotb(repo / "out" / name, n_random=2000, stream=500, build_dir=tmp_path / "build")
    assert res.ok, res.details


# --------------------------------------------------------------------------- the stable API of generated files

FROZEN = "frozen-qpsk-v0-2-0"


def _qamsmith_names(path: Path) -> set[str]:
    """Names a generated Python file takes from qamsmith: `qamsmith.X` and `from qamsmith import X`."""
    tree = ast.parse(path.read_text())
    names = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom) and node.module and node.module.startswith("qamsmith"):
            assert node.module == "qamsmith", f"{path.name} imports the internal module {node.module}"
            names |= {a.name for a in node.names}
        elif isinstance(node, ast.Attribute) and isinstance(node.value, ast.Name) and node.value.id == "qamsmith":
            names.add(node.attr)
    return names


def test_generated_testbenches_use_only_the_stable_api(repo: Path) -> None:
    for tb in [*(repo / "out").glob("*/tb/*.py"), *(repo / "tests" / "fixtures").glob("*/tb/*.py")]:
        assert _qamsmith_names(tb) <= set(qamsmith.__all__), tb


def test_a_design_generated_by_an_earlier_version_still_verifies(repo: Path, tmp_path: Path) -> None:
    """tests/fixtures/frozen-qpsk-v0-2-0 was written by qamsmith 0.2.0 and is never regenerated: its benches
    reach qamsmith only through `qamsmith.__all__`, and `verify` finds everything through its manifest."""
    d = tmp_path / FROZEN
    shutil.copytree(repo / "tests" / "fixtures" / FROZEN, d)
    res = verify.run_cocotb(d, n_random=1000, stream=300, build_dir=tmp_path / "build")
    assert res.ok, res.details
