"""Generation tier of the RTL (no simulator): register plan, constants, structure, determinism."""

from __future__ import annotations

import re

import numpy as np
import pytest

from qamsmith import rtl, testbench
from qamsmith.errors import SpecError
from qamsmith.model import derive
from qamsmith.spec import ConstellationSpec, DemapperSpec, DesignSpec, InterfaceSpec, MapperSpec


def _spec(order=16, labeling="gray", alg="maxlog", **kw) -> DesignSpec:
    return DesignSpec(name="t", constellation=ConstellationSpec(order=order, labeling=labeling),
                      demapper=DemapperSpec(algorithm=alg, **kw.pop("demapper", {})),
                      mapper=MapperSpec(**kw.pop("mapper", {})), interface=InterfaceSpec(**kw.pop("interface", {})))


@pytest.mark.parametrize("steps", [1, 2, 3, 4])
@pytest.mark.parametrize("stages", range(0, 9))
def test_register_plan(steps: int, stages: int) -> None:
    plan = rtl.place_registers(steps, stages)
    assert len(plan) == steps
    assert sum(plan) == (stages or steps)
    assert plan[-1] >= 1                       # outputs always come from flops
    assert all(p in (0, 1) for p in plan[:-1])  # at most one register between two steps


@pytest.mark.parametrize("order", [2, 4, 16, 64, 256, 1024, 4096])
@pytest.mark.parametrize("scaling", ["unit-power", "full-scale"])
@pytest.mark.parametrize("rounding", ["half-even", "half-away", "floor"])
def test_level_multiply_reproduces_every_level(order: int, scaling: str, rounding: str) -> None:
    d = derive(_spec(order, mapper={"implementation": "logic", "scaling": scaling, "rounding": rounding,
                                    "width": 16, "fraction": 13}))
    for lv in d.level_codes:
        c, k, g = rtl.level_multiply(lv, 16)
        n = np.arange(lv.size)
        assert np.array_equal((n * c + k) >> g, lv)


def test_level_multiply_refuses_non_linear_levels() -> None:
    # floor of a linear function has steps differing by at most one: 0, 5, 6 cannot be one
    with pytest.raises(SpecError, match=r"mapper\.implementation = 'logic'"):
        rtl.level_multiply(np.array([0, 5, 6]), 8)


@pytest.mark.parametrize("alg,steps", [("maxlog", ["range", "decide", "competitor", "select", "residual", "product", "accumulate",
                                                   "round", "sign"]),
                                       ("folded", ["fold", "round", "sign"]),
                                       ("hard", ["range", "decide", "label"])])
def test_manifest_latency_and_steps(alg: str, steps: list[str]) -> None:
    d = derive(_spec(64, alg=alg))
    m = rtl.manifest(d)["modules"]["demapper"]
    assert [s["step"] for s in m["pipeline"]] == steps
    assert m["latency"] == len(steps)
    d2 = derive(_spec(64, alg=alg, demapper={"scale_width": 4} if alg != "hard" else {}, interface={"demapper_stages": 5}))
    m2 = rtl.manifest(d2)["modules"]["demapper"]
    assert m2["latency"] == 5
    if alg != "hard":
        assert "scale" in [s["step"] for s in m2["pipeline"]]


def test_manifest_ports_and_files() -> None:
    d = derive(_spec(256, "3gpp-nr", demapper={"scale_width": 6, "llr_width": 7}, interface={"tuser_width": 4}))
    man = rtl.manifest(d)
    assert man["files"] == ["rtl/t_mapper.v", "rtl/t_demapper.v"]
    ports = {p["name"]: p for p in man["modules"]["demapper"]["ports"]}
    assert [p["name"] for p in man["modules"]["demapper"]["ports"]][:2] == ["aclk", "aresetn"]
    assert ports["s_axis_tdata"]["width"] == 2 * 12 + 6
    assert ports["m_axis_tdata"]["width"] == 8 * 7
    assert ports["m_axis_tuser"]["width"] == 4
    assert set(rtl.files(d)) == set(man["files"])


CASES = [(o, lab, alg) for o in (2, 16, 1024) for lab in ("gray", "3gpp-nr", "natural") for alg in ("maxlog", "hard")]


@pytest.mark.parametrize("order,labeling,alg", CASES)
def test_structure_and_determinism(order: int, labeling: str, alg: str) -> None:
    d = derive(_spec(order, labeling, alg))
    files = rtl.files(d)
    assert files == rtl.files(d)
    for path, text in files.items():
        assert text.startswith("// ")
        assert "Content hash:" in text.split("`timescale")[0]
        assert "`default_nettype none" in text and text.rstrip().endswith("`resetall")
        assert len(re.findall(r"^module ", text, re.M)) == 1
        # Verilog-2001: no SystemVerilog constructs
        assert not re.search(r"\b(logic|always_ff|always_comb|always_latch|interface|typedef)\b",
                             text.split("`timescale")[1])
        assert "12'sd-" not in text and not re.search(r"'sd-", text)
        assert re.search(r"input\s+wire\s+aclk,\s*\n\s*input\s+wire\s+aresetn", text)


@pytest.mark.parametrize("order", [16, 64, 256, 1024, 4096])
def test_maxlog_grows_with_log2_m(order: int) -> None:
    """Shift-add multiplies (at most m = log2(M)/2 partial products per LLR, none for the Gray LSB)
    and case tables of L entries: no general multiply, no search over the M points."""
    d = derive(_spec(order, "gray", "maxlog", demapper={"input_width": 16}))
    text = rtl.files(d)["rtl/t_demapper.v"]
    k = d.bits
    code = "\n".join(ln.split("//")[0] for ln in text.splitlines())
    assert " * " not in code
    pps = re.findall(r"wire \[\d+:0\] pp_([iq])(\d+)_(\d+) =", text)
    assert 0 < len(pps) <= k * (k // 2)
    # Gray: the nearest competitor of the axis LSB is always one level away, R = u (no partial products)
    assert not [p for p in pps if int(p[1]) == k // 2 - 1]
    # fixed part (ports, control, per-bit pipeline) plus case tables of L entries per axis bit
    assert len(text.splitlines()) < 600 + 40 * k * int(np.sqrt(order)) // 2
    assert "dd_" not in text  # no distance to every point


def test_search_for_non_product_tables() -> None:
    d = derive(_spec(2, "3gpp-nr"))
    text = rtl.files(d)["rtl/t_demapper.v"]
    assert text.count("wire [") and "dd_0" in text and "dd_1" in text


def test_rom_styles_and_logic() -> None:
    f = rtl.files(derive(_spec(64, mapper={"rom_style": "file"})))["rtl/t_mapper.v"]
    assert "$readmemh(ROM_I_FILE" in f and 'parameter ROM_Q_FILE = "rom/mapper_q.hex"' in f
    i = rtl.files(derive(_spec(64, mapper={"rom_style": "inline"})))["rtl/t_mapper.v"]
    assert "$readmemh" not in i and "level_i(idx_i)" in i
    g = rtl.files(derive(_spec(64, "3gpp-nr", mapper={"implementation": "logic"})))["rtl/t_mapper.v"]
    assert "$readmemh" not in g and "gray_i" in g and "acc_i" in g


def test_testbench_files() -> None:
    d = derive(_spec(16, interface={"tuser_width": 3}))
    files = testbench.files(d)
    assert set(files) == {"tb/t_harness.v", "tb/test_t.py", "tb/run.py"}
    compile(files["tb/test_t.py"], "test_t.py", "exec")
    compile(files["tb/run.py"], "run.py", "exec")
    assert "TUSER_W = 3" in files["tb/test_t.py"]


def test_skid_buffer_registers_tready() -> None:
    """interface.skid: s_axis_tready comes from a register, not from m_axis_tready (common practice)."""
    plain = derive(_spec(16, interface={"flow_control": "per-stage"}))
    skid = derive(_spec(16, interface={"skid": True, "tuser_width": 2, "flow_control": "per-stage"}))
    for role in ("mapper", "demapper"):
        assert "assign s_axis_tready = ce_s0;" in rtl.files(plain)[f"rtl/t_{role}.v"]
        text = rtl.files(skid)[f"rtl/t_{role}.v"]
        assert "assign s_axis_tready = !skid_valid_reg;" in text and "ce_s0;" not in text.split("s_axis_tready =")[1]
        assert rtl.manifest(skid)["modules"][role]["tready"].startswith("registered")
        # the skid buffer adds no latency
        assert rtl.manifest(skid)["modules"][role]["latency"] == rtl.manifest(plain)["modules"][role]["latency"]


def test_shared_enable_is_one_gate_from_m_axis_tready() -> None:
    """flow_control = shared: every stage's enable is the same signal (no chain through the stages)."""
    stages = {"mapper_stages": 2, "demapper_stages": 3}
    for role in ("mapper", "demapper"):
        shared = rtl.files(derive(_spec(64, interface=stages)))[f"rtl/t_{role}.v"]
        assert "wire ce_all = !valid_s" in shared and "|| m_axis_tready;" in shared
        assert all(line.strip().endswith("= ce_all;") for line in shared.splitlines() if line.strip().startswith("wire ce_s"))
        chained = rtl.files(derive(_spec(64, interface={"flow_control": "per-stage", **stages})))[f"rtl/t_{role}.v"]
        assert "ce_all" not in chained and "|| ce_s1;" in chained
