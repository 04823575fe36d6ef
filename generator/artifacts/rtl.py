"""RTL files of a design and the manifest's description of them, from the IR modules.

Every number in the RTL (module names, ports, latency, register plan, the width and range of
every internal signal, every table) comes from `ir.design_modules`; the back end prints it and
`rtl_manifest` records the same objects, so the manifest and the RTL cannot disagree.
"""

from __future__ import annotations

from typing import Any

from ..hdl import BACKENDS
from ..ir import Lookup, Module, design_modules
from ..model import Design
from .texts import banner

#: what drives s_axis_tready, by (skid, flow_control)
_TREADY = {(True, "shared"): "registered: a two-entry skid buffer at the input",
           (True, "per-stage"): "registered: a two-entry skid buffer at the input",
           (False, "shared"): "combinational from m_axis_tready through one gate",
           (False, "per-stage"): "combinational from m_axis_tready through one OR gate per stage"}


def languages(design: Design) -> tuple[str, ...]:
    """The HDLs this design is generated in (interface.language)."""
    chosen = design.spec.interface.language
    return ("verilog", "vhdl") if chosen == "both" else (chosen,)


def rtl_path(module: Module, language: str) -> str:
    return f"rtl/{module.name}{BACKENDS[language].SUFFIX}"


def rtl_files(design: Design) -> dict[str, str]:
    """Generated RTL files, relative path -> text (banner with the resolved spec first)."""
    out = {}
    for language in languages(design):
        backend = BACKENDS[language]
        for role, module in design_modules(design).items():
            what = f"{role} of design {design.spec.name}: synthesizable {backend.LANGUAGE}"
            out[rtl_path(module, language)] = banner(design, what, backend.COMMENT) + backend.module_text(module)
    return out


def _signals(module: Module) -> list[dict[str, Any]]:
    out = []
    for b, st in enumerate(module.datapath.steps):
        for a in st.assigns:
            s = a.dst
            out.append({"name": s.name, "step": st.name, "width": s.width, "signed": s.signed, "min": s.lo, "max": s.hi})
    return out


def _tables(module: Module) -> dict[str, Any]:
    return {a.dst.name: {"key": a.op.key.name, "key_width": a.op.key.width, "entries": list(a.op.entries),
                         "image": a.op.image}
            for a in module.datapath.assigns() if isinstance(a.op, Lookup)}


def rtl_manifest(design: Design) -> dict[str, Any]:
    """Manifest entries of the RTL: modules, ports, latency, register plan, internal signals, tables, files."""
    i = design.spec.interface
    langs = languages(design)
    out: dict[str, Any] = {"languages": {lang: BACKENDS[lang].LANGUAGE for lang in langs}, "modules": {},
                           "files": {lang: [] for lang in langs}}
    for role, module in design_modules(design).items():
        files = {lang: rtl_path(module, lang) for lang in langs}
        entry: dict[str, Any] = {
            "module": module.name, "files": files,
            "ports": [{"name": p.name, "dir": p.direction, "width": p.width} for p in module.ports],
            "parameters": {p.name: p.default for p in module.parameters},
            "latency": module.latency, "initiation_interval": 1,
            "pipeline": [{"stage": b.stage, "steps": list(b.steps), "logic_ns": round(d, 3)}
                         for b, d in zip(module.schedule.banks, module.schedule.delays_ns)],
            "flow_control": i.flow_control, "tready": _TREADY[(i.skid, i.flow_control)],
            "input_fields": [{"name": f.value.name, "lsb": f.lsb, "width": f.width} for f in module.datapath.inputs],
            "signals": _signals(module), "tables": _tables(module),
        }
        if role == "mapper":
            entry["implementation"] = (design.spec.mapper.implementation if design.per_axis else "points")
        else:
            entry["algorithm"] = design.spec.demapper.algorithm
            entry["architecture"] = ("per-axis" if design.per_axis else "cross (two per-axis pieces)"
                                     if design.cross is not None else f"2-D search over {design.constellation.order} points")
            if design.scale_format:
                entry["scale"] = ("unsigned code in tdata above Q; LLR = rounded(metric x scale); "
                                  "scale 0 gives LLR 0, every code up to the maximum is exact (no range check needed)")
        out["modules"][role] = entry
        for lang in langs:
            out["files"][lang].append(files[lang])
    return out


__all__ = ["languages", "rtl_files", "rtl_manifest", "rtl_path"]
