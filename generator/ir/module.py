"""Modules: a datapath with its register plan, its ports, parameters and stream interface.

`design_modules(design)` gives the mapper and the demapper of a design: everything an HDL back end
prints (names, widths, tables, constants, latency) and everything the manifest records about the
RTL. The back ends add only syntax and the shell (ports, stream control, register banks).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

from ..model import Design
from .core import Datapath, Signal, value_range
from .demapper import demapper_datapath
from .lanes import replicate
from .mapper import mapper_datapath, rom_images
from .schedule import Schedule, schedule
from .timing import FAMILIES

ROLES = ("mapper", "demapper")


@dataclass(frozen=True)
class Port:
    name: str
    direction: str            # "input" or "output"
    width: int
    group: str                # "clock and reset", "sink" or "source"


@dataclass(frozen=True)
class Parameter:
    """A module parameter (a ROM image path): name, default value, what it is."""

    name: str
    default: str
    doc: str


@dataclass(frozen=True)
class Module:
    """One generated module: its datapath, register plan and interface."""

    name: str
    role: str
    #: header lines: what the module does, its input and output words
    summary: tuple[str, ...]
    datapath: Datapath
    schedule: Schedule
    ports: tuple[Port, ...]
    parameters: tuple[Parameter, ...] = ()
    #: stream handshake (tvalid/tready); False: a bare registered datapath (the cost flow's adder)
    handshake: bool = True
    flow_control: str = "shared"
    skid: bool = False
    #: symbols per transfer (interface.lanes)
    lanes: int = 1

    @property
    def group_docs(self) -> dict[str, str]:
        """The comment above each port group."""
        what = "one symbol" if self.lanes == 1 else f"{self.lanes} symbols (lanes)"
        return {"clock and reset": "clock and reset", "sink": f"sink (s_axis): {what} per transfer",
                "source": f"source (m_axis): {'one result' if self.lanes == 1 else f'{self.lanes} results'} per transfer"}

    @property
    def latency(self) -> int:
        return self.schedule.latency

    @property
    def carried(self) -> tuple[Signal, ...]:
        return self.schedule.carried

    def port(self, name: str) -> Port:
        return next(p for p in self.ports if p.name == name)


def stream_ports(in_width: int, out_width: int, tlast: bool, tuser_width: int) -> tuple[Port, ...]:
    """aclk, aresetn, then the sink (s_axis_*) and the source (m_axis_*) of an AXI4-Stream style block."""
    ports = [Port("aclk", "input", 1, "clock and reset"), Port("aresetn", "input", 1, "clock and reset"),
             Port("s_axis_tdata", "input", in_width, "sink"), Port("s_axis_tvalid", "input", 1, "sink"),
             Port("s_axis_tready", "output", 1, "sink")]
    if tlast:
        ports.append(Port("s_axis_tlast", "input", 1, "sink"))
    if tuser_width:
        ports.append(Port("s_axis_tuser", "input", tuser_width, "sink"))
    ports += [Port("m_axis_tdata", "output", out_width, "source"), Port("m_axis_tvalid", "output", 1, "source"),
              Port("m_axis_tready", "input", 1, "source")]
    if tlast:
        ports.append(Port("m_axis_tlast", "output", 1, "source"))
    if tuser_width:
        ports.append(Port("m_axis_tuser", "output", tuser_width, "source"))
    return tuple(ports)


def sideband(tlast: bool, tuser_width: int) -> tuple[Signal, ...]:
    """The signals carried beside each symbol from the input to the output."""
    out = []
    if tlast:
        out.append(Signal("tlast", 1, False, 0, 1))
    if tuser_width:
        out.append(Signal("tuser", tuser_width, False, *value_range(tuser_width, False)))
    return tuple(out)


def _schedule(design: Design, role: str, dp: Datapath, carried: tuple[Signal, ...]) -> Schedule:
    """Registers for interface.target_mhz, interface.<role>_stages, or by default one widest adder per stage."""
    i = design.spec.interface
    return schedule(dp, FAMILIES[i.family], stages=getattr(i, f"{role}_stages"), target_mhz=float(i.target_mhz),
                    role=role, carried=carried)


def _summary(design: Design, role: str, latency: int) -> tuple[str, ...]:
    lines = _one_summary(design, role, latency)
    spec = design.spec
    extra = []
    if design.modes:
        orders = ", ".join(str(m.order) for m in design.modes)
        extra.append(f"Modes: a {design.mode_width}-bit mode field on top of each symbol indexes the orders {orders} "
                     "(a code past the list acts as the largest);")
        extra.append("       the mode may change on every symbol; see the manifest's modes and packing.")
        if role == "demapper":
            extra.append("       Every mode takes its input on the largest order's grid; mode m's LLRs fill the first "
                         "k_m fields, the rest are zero,")
            extra.append("       the mode passes through on top of the output; the LLR lsb is the same in every mode.")
        else:
            extra.append("       A mode of k_m bits reads the top k_m bits of the label field.")
    if spec.interface.lanes > 1:
        extra.append(f"Lanes: {spec.interface.lanes} symbols per transfer, lane l in bits "
                     f"[{design_lane_width(design, role)}l +: {design_lane_width(design, role)}] of tdata (lane 0 the "
                     "least significant), one tvalid/tready.")
    if not extra:
        return lines
    last = lines[-1].replace("one symbol per clock", f"{spec.interface.lanes} symbols per clock") \
        if spec.interface.lanes > 1 else lines[-1]
    return lines[:-1] + tuple(extra) + (last,)


def design_lane_width(design: Design, role: str) -> int:
    """Input bits of one lane of the module's input word."""
    k, mw = design.bits, design.mode_width
    if role == "mapper":
        return k + mw
    sw = design.scale_format.width if design.scale_format else 0
    return 2 * design.input_format.width + sw + mw


def _one_summary(design: Design, role: str, latency: int) -> tuple[str, ...]:
    spec = design.spec
    c = spec.constellation
    k = design.bits
    if role == "mapper":
        w = design.mapper_format.width
        kind = ("a table of {Q, I} points" if design.constellation.axes is None
                else spec.mapper.implementation + (f" ({'inline tables' if spec.mapper.tables == 'inline' else '$readmemh images'})"
                                                   if spec.mapper.implementation == "rom" else ""))
        return (f"QAM mapper, {c.order} points, labeling {c.labeling}.",
                f"Input: a {k}-bit label per transfer, b0 (the first bit in time) in the MSB.",
                f"Output: {{Q, I}}, each a signed {w}-bit code, I in the low half.",
                f"Implementation: {kind}; latency {latency} cycles, one symbol per clock.")
    d = spec.demapper
    f = d.input_fraction
    sw = design.scale_format.width if design.scale_format else 0
    lines = [f"QAM soft demapper, {c.order} points, labeling {c.labeling}, algorithm {d.algorithm}.",
             (f"Input: {{S, Q, I}}: S the unsigned {sw}-bit reliability code above " if sw else "Input: {Q, I}: ")
             + f"signed {d.input_width}-bit codes, I in the low half,",
             f"       {f} fraction bits: level n of an axis sits at (2n - (L-1)) * 2^{f} codes."]
    if d.algorithm == "hard":
        lines.append(f"Output: the {k} hard-decided bits, b0 in the MSB.")
    else:
        lines += [f"Output: {k} signed {d.llr_width}-bit LLRs (positive: bit 0 more likely), b0 in the most "
                  "significant field;", f"        saturated symmetrically to +-{design.llr_format.max_code}."]
    arch = ("per axis (decide by shift and clamp, nearest competitor from a table)" if design.per_axis
            else "Smith's cross (per-axis metrics of its two pieces, then min(R_W, D + R_L) per bit)"
            if design.cross is not None else f"2-D search over every point ({c.order})")
    lines.append(f"Architecture: {arch}; latency {latency} cycles, one symbol per clock.")
    return tuple(lines)


def build_module(design: Design, role: str) -> Module:
    """The mapper or the demapper of a design."""
    spec = design.spec
    i = spec.interface
    if role == "mapper":
        inline = spec.mapper.tables == "inline" or spec.mapper.implementation == "logic"
        dp = mapper_datapath(design, inline=inline)
        params = () if inline else tuple(
            Parameter(r["parameter"], r["path"], f"$readmemh image of the {r['table']} table "
                                                f"({len(r['entries'])} words of {r['width']} bits)")
            for r in rom_images(design))
    else:
        dp = demapper_datapath(design)
        params = ()
    dp = replicate(dp, i.lanes)
    carried = sideband(i.tlast, i.tuser_width)
    sched = _schedule(design, role, dp, carried)
    return Module(name=f"{spec.prefix}_{role}", role=role, summary=_summary(design, role, sched.latency),
                  datapath=dp, schedule=sched, ports=stream_ports(dp.in_width, dp.out_width, i.tlast, i.tuser_width),
                  parameters=params, flow_control=i.flow_control, skid=i.skid, lanes=i.lanes)


@lru_cache(maxsize=32)
def design_modules(design: Design) -> dict[str, Module]:
    """Both modules of a design: {'mapper': ..., 'demapper': ...} (built once per design)."""
    return {role: build_module(design, role) for role in ROLES}


__all__ = ["ROLES", "Module", "Parameter", "Port", "build_module", "design_modules", "sideband", "stream_ports"]
