"""Generated cocotb testbenches (out/<name>/tb/), rendered from templates/tb_*.j2.

tb/<prefix>_harness.v  a simulation-only Verilog harness: streams hex files of stimulus and
                       expected words through both blocks with random gaps and backpressure
                       and counts mismatches (fast: no Python per clock)
tb/test_<prefix>.py    cocotb tests: `bulk` (reads the harness counters) and the Python
                       monitor/scoreboard benches `stream_mapper` / `stream_demapper`
tb/run.py              runner script, the same as `qamsmith verify out/<name>`
"""

from __future__ import annotations

from typing import Any

from . import __version__
from .rtl import _ports, contexts


def harness_module(design: Any) -> str:
    return f"{design.spec.prefix}_harness"


def test_module(design: Any) -> str:
    return f"test_{design.spec.prefix}"


def rom_params(design: Any) -> list[str]:
    """ROM path parameters of the mapper ($readmemh images), empty for the inline style."""
    c = contexts(design)["mapper"]
    if c["inline"]:
        return []
    return [r["param"] for r in c["roms"]]


def _context(design: Any) -> dict[str, Any]:
    spec = design.spec
    p = spec.prefix
    i = spec.interface
    ports = {role: {x["name"]: x["width"] for x in _ports(design, role)} for role in ("mapper", "demapper")}
    mctx = contexts(design)["mapper"]
    params = rom_params(design)
    tw = i.tuser_width
    blocks = []
    for role, short in (("mapper", "map"), ("demapper", "dem")):
        blocks.append({"role": role, "p": short, "module": f"{p}_{role}",
                       "in_w": ports[role]["s_axis_tdata"], "out_w": ports[role]["m_axis_tdata"],
                       "count": f"{short}_count", "params": params if role == "mapper" else []})
    return {
        "name": spec.name, "prefix": p, "version": __version__, "module": harness_module(design),
        "rom_params": params, "rom_defaults": {r["param"]: r["file"] for r in mctx["roms"]},
        "map_in_w": ports["mapper"]["s_axis_tdata"], "map_out_w": ports["mapper"]["m_axis_tdata"],
        "dem_in_w": ports["demapper"]["s_axis_tdata"], "dem_out_w": ports["demapper"]["m_axis_tdata"],
        "tlast": i.tlast, "tuser_w": tw, "side_w": max(tw, 1) + 1, "tuser_w_decl": max(tw, 1) - 1,
        "tuser_w_lit": f"{max(tw, 1)}'d0", "blocks": blocks,
    }


def files(design: Any) -> dict[str, str]:
    """Generated testbench files, relative path -> text."""
    from .emit import banner, jinja_env
    env = jinja_env()
    ctx = _context(design)
    out = {}
    v = env.get_template("tb_harness.v.j2").render(**ctx)
    out[f"tb/{harness_module(design)}.v"] = banner(design, "simulation harness (not for synthesis)", spec=False) + v
    t = env.get_template("tb_test.py.j2").render(**ctx)
    out[f"tb/{test_module(design)}.py"] = banner(design, "cocotb testbench", "#", spec=False) + t
    r = env.get_template("tb_run.py.j2").render(**ctx)
    out["tb/run.py"] = r.replace("\n", "\n" + banner(design, "testbench runner", "#", spec=False), 1)
    return out


__all__ = ["files", "harness_module", "test_module", "rom_params"]
