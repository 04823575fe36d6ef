"""Generated testbenches (out/<name>/tb/), rendered from templates/testbench/ with the manifest's numbers.

tb/<prefix>_harness.v    (Verilog designs) a simulation-only Verilog harness: streams hex files of
                         stimulus and expected words through both blocks with random gaps and
                         backpressure and counts mismatches (fast: no Python per clock)
tb/<prefix>_harness.vhd  (VHDL designs) the same check as a portable, self-checking VHDL testbench:
                         reads vectors/*.hex with std.textio, ends with a PASS or FAIL line; runs on
                         any VHDL simulator without Python
tb/test_<prefix>.py      cocotb tests: `bulk` (reads the Verilog harness counters) and the Python
                         source/sink/scoreboard benches `stream_mapper` / `stream_demapper` (either
                         language); it imports only names `qamsmith.__all__` documents as stable
tb/run.py                runner script, the same as `qamsmith verify out/<name>`
"""

from __future__ import annotations

from typing import Any

from ..hdl import render
from ..model import Design
from ..version import __version__
from .rtl import languages
from .texts import banner


def harness_module(design: Design) -> str:
    return f"{design.spec.prefix}_harness"


def test_module(design: Design) -> str:
    return f"test_{design.spec.prefix}"


def _context(design: Design, rtl: dict[str, Any]) -> dict[str, Any]:
    spec = design.spec
    i = spec.interface
    mods = rtl["modules"]
    width = {role: {p["name"]: p["width"] for p in mods[role]["ports"]} for role in ("mapper", "demapper")}
    params = mods["mapper"]["parameters"]
    tw = i.tuser_width
    blocks = [{"role": role, "p": short, "module": mods[role]["module"], "in_w": width[role]["s_axis_tdata"],
               "out_w": width[role]["m_axis_tdata"], "count": f"{short}_count",
               "params": list(mods[role]["parameters"])}
              for role, short in (("mapper", "map"), ("demapper", "dem"))]
    return {
        "name": spec.name, "prefix": spec.prefix, "version": __version__, "module": harness_module(design),
        "rom_params": list(params), "rom_defaults": params,
        "map_in_w": width["mapper"]["s_axis_tdata"], "map_out_w": width["mapper"]["m_axis_tdata"],
        "dem_in_w": width["demapper"]["s_axis_tdata"], "dem_out_w": width["demapper"]["m_axis_tdata"],
        "tlast": i.tlast, "tuser_w": tw, "side_w": max(tw, 1) + 1, "tuser_w_decl": max(tw, 1) - 1,
        "tuser_w_lit": f"{max(tw, 1)}'d0", "blocks": blocks,
    }


def testbench_manifest(design: Design) -> dict[str, Any]:
    """The manifest's entry of the testbenches: files and top modules, what `qamsmith verify` runs."""
    langs = languages(design)
    out: dict[str, Any] = {}
    if "verilog" in langs:
        out["harness"] = {"module": harness_module(design), "file": f"tb/{harness_module(design)}.v",
                          "doc": "Verilog harness: hex files through both blocks, random gaps and backpressure"}
    if "vhdl" in langs:
        out["vhdl_harness"] = {"entity": harness_module(design), "file": f"tb/{harness_module(design)}.vhd",
                               "doc": "self-checking VHDL testbench: vectors/*.hex through both entities, random gaps "
                                      "and backpressure, a PASS or FAIL line; generics MAP_IN MAP_OUT DEM_IN DEM_OUT "
                                      "IN_PCT OUT_PCT SEED STALL_MAX MAP_DUMP DEM_DUMP"}
    out["cocotb"] = {"module": test_module(design), "file": f"tb/{test_module(design)}.py",
                     "tests": (["bulk"] if "verilog" in langs else []) + ["stream_mapper", "stream_demapper"]}
    out["runner"] = "tb/run.py"
    return out


def testbench_files(design: Design, rtl: dict[str, Any]) -> dict[str, str]:
    """Generated testbench files, relative path -> text; `rtl` is the manifest's RTL entry."""
    ctx = _context(design, rtl)
    langs = languages(design)
    out = {}
    if "verilog" in langs:
        out[f"tb/{harness_module(design)}.v"] = (banner(design, "simulation harness (not for synthesis)", spec=False)
                                                 + render("testbench/harness.v.j2", **ctx))
    if "vhdl" in langs:
        out[f"tb/{harness_module(design)}.vhd"] = (banner(design, "self-checking testbench (not for synthesis)", "--",
                                                          spec=False) + render("testbench/harness.vhd.j2", **ctx))
    out[f"tb/{test_module(design)}.py"] = (banner(design, "cocotb testbench", "#", spec=False)
                                           + render("testbench/test.py.j2", **ctx))
    out["tb/run.py"] = render("testbench/run.py.j2", **ctx).replace(
        "\n", "\n" + banner(design, "testbench runner", "#", spec=False), 1)
    return out


__all__ = ["harness_module", "test_module", "testbench_files", "testbench_manifest"]
