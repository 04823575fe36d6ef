"""The integration kit of a design: files an FPGA engineer drops into a vendor project or hands on.

Every file is written from the manifest alone (every entry but its file list, which is made last),
so the kit states the same numbers as the RTL, the testbenches and the reports:

kit/README.txt              what each file is; for `$readmemh` designs, how to pass the ROM paths
kit/<module>_inst<ext>      instantiation template per module and HDL (Verilog: nets and instance;
                            VHDL: component, signals and instance)
kit/<name>.<language>.f     file list per HDL, paths relative to the design directory
<name>.core                 FuseSoC CAPI2 core: RTL (and ROM images) and simulation targets running
                            the Verilog harness on Icarus (sim) and the VHDL testbench on GHDL
                            (sim_vhdl). It sits at the design root because FuseSoC deprecates
                            files outside the core file's directory.
kit/<module>.ipxact.xml     IP-XACT (IEEE 1685-2014) component per module: AXI4-Stream bus
                            interfaces, ports, ROM parameters, file sets
kit/<name>.h                C header: packing, widths, LSB values, LLR scale, latency, content hash
kit/<name>.sdc              the clock on aclk and notes on the ready/valid paths
"""

from __future__ import annotations

import json
import re
from typing import Any
from xml.sax.saxutils import escape

from ..hdl import render
from .words import BLOCKS

KIT_DIR = "kit"
#: FuseSoC library of every generated design: qamsmith:designs:<name>:<generator version>
CORE_LIBRARY = "qamsmith:designs"
#: IP-XACT vendor of the components (library: the design name)
IPXACT_VENDOR = "qamsmith"
#: ARM's AMBA 4 AXI4-Stream bus and RTL abstraction definitions (vendor:library:name:version), as ARM
#: publishes them for IP-XACT and as third-party components reference them
AXI4_STREAM_BUS = ("amba.com", "AMBA4", "AXI4Stream", "r0p0_1")
AXI4_STREAM_ABSTRACTION = ("amba.com", "AMBA4", "AXI4Stream_rtl", "r0p0_1")
#: ports shared by both modules, connected by name in the instantiation templates
SHARED_PORTS = ("aclk", "aresetn")
#: logical port of AXI4Stream_rtl that each shared port carries
_SHARED_LOGICAL = {"aclk": "ACLK", "aresetn": "ARESETn"}
#: the stream interfaces: port name prefix -> (bus interface, IP-XACT mode, what it is)
_STREAMS = {"s_axis_": ("s_axis", "slave", "sink: one input word per transfer"),
            "m_axis_": ("m_axis", "master", "source: one output word per transfer")}
#: clock period written into the constraints when interface.target_mhz is not set (a placeholder)
PLACEHOLDER_PERIOD_NS = 10.0

#: per HDL of the manifest: FuseSoC and IP-XACT file types, the instantiation template and its suffix
LANGUAGES: dict[str, dict[str, str]] = {
    "verilog": {"file_type": "verilogSource-2001", "template": "kit/instance.vh.j2", "suffix": "_inst.vh"},
    # .vho: the customary suffix of a VHDL instantiation template (a snippet, not a design unit)
    "vhdl": {"file_type": "vhdlSource", "template": "kit/instance.vho.j2", "suffix": "_inst.vho"},
}


def _language(language: str) -> dict[str, str]:
    try:
        return LANGUAGES[language]
    except KeyError:
        raise RuntimeError(f"the integration kit knows no HDL {language!r} (add it to kit.LANGUAGES and give it "
                           f"an instantiation template in templates/kit/)") from None


def _roles(m: dict[str, Any]) -> list[str]:
    """The modules' roles, mapper first."""
    return sorted(m["rtl"]["modules"], key=BLOCKS.index)


def _languages(m: dict[str, Any]) -> list[str]:
    """The HDLs of the RTL, in name order (the manifest's keys are sorted when written)."""
    return sorted(m["rtl"]["languages"])


def kit_entry(manifest: dict[str, Any]) -> dict[str, Any]:
    """The manifest's "kit" entry: the kit's files by role and the names it registers (FuseSoC, IP-XACT)."""
    name = manifest["spec"]["name"]
    version = manifest["generator"]["version"]
    langs = _languages(manifest)
    mods = manifest["rtl"]["modules"]
    return {
        "doc": "integration kit: instantiation templates, file lists, FuseSoC core, IP-XACT components, C header "
               "and constraints, each written from this manifest",
        "readme": f"{KIT_DIR}/README.txt",
        "instances": {role: {lang: f"{KIT_DIR}/{e['module']}{_language(lang)['suffix']}" for lang in langs}
                      for role, e in mods.items()},
        "filelists": {lang: f"{KIT_DIR}/{name}.{lang}.f" for lang in langs},
        "core": {"file": f"{name}.core", "vlnv": f"{CORE_LIBRARY}:{name}:{version}",
                 "targets": {target: fileset for target, fileset, _ in _core_targets(langs, manifest["testbench"])}},
        "ipxact": {role: {"file": f"{KIT_DIR}/{e['module']}.ipxact.xml",
                          "vlnv": f"{IPXACT_VENDOR}:{name}:{e['module']}:{version}"} for role, e in mods.items()},
        "bus_definition": {"bus": ":".join(AXI4_STREAM_BUS), "abstraction": ":".join(AXI4_STREAM_ABSTRACTION)},
        "c_header": f"{KIT_DIR}/{name}.h",
        "constraints": f"{KIT_DIR}/{name}.sdc",
    }


def _core_targets(langs: list[str], testbench: dict[str, Any]) -> list[tuple[str, str, str]]:
    """(target, RTL file set, HDL) of the FuseSoC core: default (Verilog if listed), one per other HDL, sim
    (the Verilog harness on Icarus) and sim_vhdl (the VHDL testbench on GHDL) when the design has them."""
    first = "verilog" if "verilog" in langs else langs[0]
    out = [("default", f"rtl_{first}", first)]
    out += [(f"rtl_{lang}", f"rtl_{lang}", lang) for lang in langs if lang != first]
    if "verilog" in langs and "harness" in testbench:
        out.append(("sim", "rtl_verilog", "verilog"))
    if "vhdl" in langs and "vhdl_harness" in testbench:
        out.append(("sim_vhdl", "rtl_vhdl", "vhdl"))
    return out


def kit_files(manifest: dict[str, Any]) -> dict[str, str]:
    """Every file of the kit, relative path -> text, from the manifest (its "kit" entry names them).

    The manifest is read as written (keys sorted), so the kit rebuilt from a manifest.json is the same."""
    m = json.loads(json.dumps(manifest, sort_keys=True))
    kit = m["kit"]
    out: dict[str, str] = {kit["readme"]: _readme(m)}
    for role in _roles(m):
        for lang in _languages(m):
            out[kit["instances"][role][lang]] = _instance(m, role, lang)
        out[kit["ipxact"][role]["file"]] = _ipxact(m, role)
    for lang in _languages(m):
        out[kit["filelists"][lang]] = _filelist(m, lang)
    out[kit["core"]["file"]] = _core(m)
    out[kit["c_header"]] = _c_header(m)
    out[kit["constraints"]] = _constraints(m)
    return out


# --------------------------------------------------------------------------- shared pieces


def _banner(m: dict[str, Any], what: str) -> list[str]:
    """Header lines of a kit file (without comment markers): what it is, generator, content hash."""
    gen = m["generator"]
    return [what, f"Generated by {gen['name']} {gen['version']} from design {m['spec']['name']!r}; edit the spec "
                  "and regenerate instead of editing this file.", f"Content hash: {m['content_hash']}"]


def _render(template: str, m: dict[str, Any], what: str, comment: str, **context: Any) -> str:
    """A kit template with the banner as comment lines (`comment` their prefix; "" for plain text and XML)."""
    lines = _banner(m, what)
    if not comment:   # plain text, or inside an XML comment (which may not hold "--")
        lines = [line.replace("--", "- -") for line in lines]
    banner = "".join((f"{comment} {line}" if comment else line).rstrip() + "\n" for line in lines)
    return render(template, banner=banner, name=m["spec"]["name"], content_hash=m["content_hash"], **context)


def _rom_images(m: dict[str, Any], role: str) -> list[dict[str, Any]]:
    """The `$readmemh` images a module reads (its ROM parameters): parameter, default path, size."""
    params = m["rtl"]["modules"][role]["parameters"]
    return [{"parameter": im["parameter"], "path": params[im["parameter"]], "entries": im["entries"],
             "width": im["width"], "axis": im["axis"]}
            for im in m["mapper"]["rom"]["images"] if im["parameter"] in params]


def _all_rom_images(m: dict[str, Any]) -> list[dict[str, Any]]:
    return [dict(im, module=m["rtl"]["modules"][role]["module"]) for role in _roles(m) for im in _rom_images(m, role)]


def _modules(m: dict[str, Any]) -> list[dict[str, Any]]:
    mods = m["rtl"]["modules"]
    return [{"role": role, "module": mods[role]["module"], "latency": mods[role]["latency"],
             "tready": mods[role]["tready"]} for role in _roles(m)]


# --------------------------------------------------------------------------- instantiation templates


def _vhdl_type(port: dict[str, Any]) -> str:
    """The VHDL port type, as the VHDL back end declares it: vectors for tdata/tuser, std_logic otherwise."""
    if port["name"].endswith(("tdata", "tuser")):
        return f"std_logic_vector({port['width'] - 1} downto 0)"
    return "std_logic"


def _instance(m: dict[str, Any], role: str, language: str) -> str:
    e = m["rtl"]["modules"][role]
    ports = []
    for p in e["ports"]:
        shared = p["name"] in SHARED_PORTS
        ports.append({"name": p["name"], "dir": p["dir"], "width": p["width"], "net": p["name"] if shared
                      else f"{role}_{p['name']}", "shared": shared,
                      "range": f"[{p['width'] - 1}:0] " if p["width"] > 1 else "",
                      "vhdl_dir": "in" if p["dir"] == "input" else "out", "vhdl_type": _vhdl_type(p)})
    # the ROM image parameters are the Verilog's: the VHDL holds its tables as constants
    params = ([{"name": k, "value": json.dumps(v)} for k, v in sorted(e["parameters"].items())]
              if language == "verilog" else [])
    comment = "//" if language == "verilog" else "--"
    what = f"instantiation template of {e['module']} ({role}), {m['rtl']['languages'][language]}"
    return _render(_language(language)["template"], m, what, comment, module=e["module"], role=role, ports=ports,
                   params=params, latency=e["latency"], tready=e["tready"], rtl_file=e["files"][language],
                   readme=m["kit"]["readme"])


# --------------------------------------------------------------------------- file lists


def _filelist(m: dict[str, Any], language: str) -> str:
    what = (f"file list of design {m['spec']['name']!r}, {m['rtl']['languages'][language]} (paths relative to the "
            "design directory)")
    return _render("kit/filelist.f.j2", m, what, "//", files=m["rtl"]["files"][language], roms=_all_rom_images(m),
                   readme=m["kit"]["readme"])


# --------------------------------------------------------------------------- FuseSoC core


def _yaml(text: str) -> str:
    """A YAML double-quoted scalar (JSON strings are YAML)."""
    return json.dumps(text)


def _core(m: dict[str, Any]) -> str:
    rtl = m["rtl"]
    langs = _languages(m)
    filesets = [{"name": f"rtl_{lang}", "file_type": _language(lang)["file_type"], "files": rtl["files"][lang]}
                for lang in langs]
    roms = [im["path"] for im in _all_rom_images(m)]
    vec = m["vectors"]
    plusargs = []
    for block, short in zip(BLOCKS, ("map", "dem")):         # the harness's plusargs: +map_count= ... +dem_out=
        v = vec[block]
        plusargs += [{"name": f"{short}_count", "datatype": "int", "default": v["count"],
                      "doc": f"{block} words to compare (all of {v['input']})"},
                     {"name": f"{short}_in", "datatype": "str", "default": v["input"], "doc": f"{block} input words"},
                     {"name": f"{short}_out", "datatype": "str", "default": v["expected"],
                      "doc": f"expected {block} output words"}]
    plusargs += [{"name": "finish", "datatype": "bool", "default": "true",
                  "doc": "end the run and print the RESULT line (always on outside cocotb)"},
                 {"name": "seed", "datatype": "int", "default": None, "doc": "seed of the random gaps and backpressure"},
                 {"name": "in_pct", "datatype": "int", "default": None,
                  "doc": "percent of cycles the harness offers an input word (harness default 100)"},
                 {"name": "out_pct", "datatype": "int", "default": None,
                  "doc": "percent of cycles the harness is ready for an output word (harness default 100)"}]
    for p in plusargs:
        p["doc"] = _yaml(p["doc"])
    targets = [{"name": t, "fileset": fs, "language": rtl["languages"][lang]}
               for t, fs, lang in _core_targets(langs, m["testbench"])]
    sim = sim_vhdl = None
    tb = m["testbench"]
    if any(t["name"] == "sim" for t in targets):
        sim = {"harness": tb["harness"]["file"], "top": tb["harness"]["module"],
               # the harness's stimulus memories must hold every word of the longest vector file
               "depth": max(vec[blk]["count"] for blk in BLOCKS), "plusargs": plusargs}
    if any(t["name"] == "sim_vhdl" for t in targets):
        sim_vhdl = {"harness": tb["vhdl_harness"]["file"], "top": tb["vhdl_harness"]["entity"]}
    vectors = sorted({vec[blk][key] for blk in BLOCKS for key in ("input", "expected")})
    what = f"FuseSoC CAPI2 core of design {m['spec']['name']!r}"
    description = (f"qamsmith design {m['spec']['name']}: {m['constellation']['order']}-point mapper and "
                   f"{m['demapper']['algorithm']} demapper, content hash {m['content_hash']}")
    return _render("kit/core.j2", m, what, "#", vlnv=m["kit"]["core"]["vlnv"], description=_yaml(description),
                   filesets=filesets, targets=targets, roms=roms, sim=sim, sim_vhdl=sim_vhdl, vectors=vectors,
                   readme=m["kit"]["readme"])


# --------------------------------------------------------------------------- IP-XACT


def _ipxact(m: dict[str, Any], role: str) -> str:
    e = m["rtl"]["modules"][role]
    ports = [{"name": p["name"], "direction": "in" if p["dir"] == "input" else "out", "width": p["width"],
              "left": p["width"] - 1} for p in e["ports"]]
    buses = []
    for prefix, (bus, mode, doc) in _STREAMS.items():
        # (AXI4Stream_rtl logical port, physical port): ACLK, ARESETn, then s_axis_tdata -> TDATA and so on
        maps = [(_SHARED_LOGICAL[p["name"]], p["name"]) for p in e["ports"] if p["name"] in _SHARED_LOGICAL]
        maps += [(p["name"][len(prefix):].upper(), p["name"]) for p in e["ports"] if p["name"].startswith(prefix)]
        buses.append({"name": bus, "mode": mode, "doc": escape(f"AXI4-Stream {doc}"), "maps": maps})
    langs = _languages(m)
    # only the Verilog reads images (the VHDL holds its tables as constants whatever mapper.tables says)
    roms = _rom_images(m, role) if "verilog" in langs else []
    files = [{"name": f"rtl_{lang}", "language": lang, "path": f"../{e['files'][lang]}",
              "file_type": _language(lang)["file_type"]} for lang in langs]
    # a parameter's value is an expression (IEEE 1685-2014): a string value is a quoted literal
    params = [{"name": im["parameter"], "value": escape(json.dumps(im["path"])),
               "doc": escape(f"$readmemh image of the {im['axis']} table ({im['entries']} words of {im['width']} "
                             "bits), a path the simulator or synthesis tool resolves from its working directory")}
              for im in roms]
    what = f"IP-XACT (IEEE 1685-2014) component of {e['module']} ({role})"
    description = (f"{e['module']}: the {role} of qamsmith design {m['spec']['name']}; latency {e['latency']} clock "
                   f"cycle(s), one word per clock; s_axis_tready is {e['tready']}; content hash {m['content_hash']}")
    bus_ref, abs_ref = (dict(zip(("vendor", "library", "name", "version"), v))
                        for v in (AXI4_STREAM_BUS, AXI4_STREAM_ABSTRACTION))
    return _render("kit/component.xml.j2", m, what, "", vendor=IPXACT_VENDOR, module=e["module"],
                   version=m["generator"]["version"], buses=buses, bus_ref=bus_ref, abs_ref=abs_ref, ports=ports,
                   files=files, roms=[dict(im, path=f"../{im['path']}") for im in roms], params=params,
                   description=escape(description))


# --------------------------------------------------------------------------- C header


def c_prefix(m: dict[str, Any]) -> str:
    """The prefix of every macro of the C header: the design name as an upper-case C identifier."""
    return re.sub(r"[^A-Za-z0-9]", "_", m["spec"]["name"]).upper()


def _c_header(m: dict[str, Any]) -> str:
    p = c_prefix(m)
    dem = m["demapper"]
    ints: list[tuple[str, int, str]] = []
    for role in _roles(m):
        e = m["rtl"]["modules"][role]
        ints.append((f"{p}_{role.upper()}_LATENCY", e["latency"], f"cycles from an accepted {role} input word to "
                                                                  "its output word"))
        ints.append((f"{p}_{role.upper()}_INITIATION_INTERVAL", e["initiation_interval"], "cycles between input words"))
    if "modes" in m:
        orders = m["modes"]["orders"]
        ints.append((f"{p}_MODES", len(orders), f"modes of the adaptive core, orders {orders} by mode code"))
        ints += [(f"{p}_MODE{n}_BITS", e["bits"], f"label bits (valid LLR fields) of mode {n}, {e['order']} points")
                 for n, e in enumerate(m["modes"]["list"])]
    lanes = m["packing"]["demapper_input"].get("lanes", 1)
    if lanes > 1:
        ints.append((f"{p}_LANES", lanes, "symbols per transfer, lane 0 in the least significant bits"))
    words = []
    for word in sorted(m["packing"], key=lambda k: (BLOCKS.index(k.split("_")[0]), k)):
        w = m["packing"][word]
        stem = f"{p}_{word.upper()}"
        if lanes > 1:
            ints.append((f"{stem}_LANE_WIDTH", w["lane_width"], f"bits of one lane of the {word.replace('_', ' ')} "
                                                               "word; the field positions below are within a lane"))
        fields = [{"doc": f["doc"], "defs": [(f"{stem}_{f['name'].upper()}_{key.upper()}", _c_int(int(f[key])))
                                             for key in ("lsb", "width", "signed")]} for f in w["fields"]]
        words.append({"doc": f"{word.replace('_', ' ')} word: {w['doc']}",
                      "width": (f"{stem}_WORD_WIDTH", _c_int(w["width"])),
                      "fields": fields})
    formats = []
    for key, fmt in sorted(m["qformats"].items()):
        if fmt is not None:
            sign = "signed" if fmt["signed"] else "unsigned"
            formats.append({"doc": f"{key.replace('_', ' ')}: {fmt['name']}, {sign}",
                            "defs": [(f"{p}_QFORMAT_{key.upper()}_{k.upper()}", _c_int(fmt[k]))
                                     for k in ("width", "fraction", "min_code", "max_code")]})
    llr = [(f"{p}_LLR_MAX", dem["llr_max"], "largest LLR code produced"),
           (f"{p}_LLR_MIN", dem["llr_min"], "smallest LLR code produced (saturation is symmetric)")]
    lsbs = [(f"{p}_MAPPER_LSB_VALUE", m["mapper"]["lsb"], "normalized value of one mapper output LSB"),
            (f"{p}_INPUT_LSB_VALUE", dem["input_lsb"], "normalized value of one demapper input LSB"),
            (f"{p}_LLR_LSB_VALUE", dem["llr_lsb"], "LLR scale: one LLR LSB in normalized metric units; natural-log "
                                                   "LLR = code * this * scale / N0"),
            (f"{p}_SCALE_LSB_VALUE", dem["scale_lsb"], "value of one reliability (scale) LSB; 1 without a scale "
                                                       "input")]
    strings = [(f"{p}_CONTENT_HASH", m["content_hash"], "identifies the spec and generator of this design"),
               (f"{p}_GENERATOR_VERSION", m["generator"]["version"], f"{m['generator']['name']} version"),
               (f"{p}_DESIGN_NAME", m["spec"]["name"], "design name")]
    what = f"C header of design {m['spec']['name']!r}: packing of the stream words, widths, LSB values, latency"
    return _render("kit/header.h.j2", m, what, " *", guard=f"QAMSMITH_{p}_H",
                   strings=[(n, json.dumps(v), d) for n, v, d in strings],
                   ints=[(n, _c_int(v), d) for n, v, d in ints], words=words, formats=formats,
                   llr=[(n, _c_int(v), d) for n, v, d in llr], doubles=[(n, _c_double(v), d) for n, v, d in lsbs])


def _c_int(value: int) -> str:
    """A C integer constant of this value, parenthesized, valid in C89 and later (long beyond 16 bits)."""
    if -32767 <= value <= 32767:
        return f"({value})"
    if value == -(1 << 31):       # 2147483648L need not fit a 32-bit long
        return "(-2147483647L - 1)"
    return f"({value}L)"


def _c_double(value: float) -> str:
    """A C double literal that reads back as exactly this value (Python's shortest round-trip repr)."""
    text = repr(float(value))
    return text if any(c in text for c in ".eE") else text + ".0"


# --------------------------------------------------------------------------- constraints


def _constraints(m: dict[str, Any]) -> str:
    i = m["spec"]["interface"]
    mhz = i["target_mhz"]
    period = 1000.0 / mhz if mhz else PLACEHOLDER_PERIOD_NS
    what = f"timing constraints (SDC) of design {m['spec']['name']!r}: the clock aclk, notes on the stream paths"
    return _render("kit/constraints.sdc.j2", m, what, "#", period=f"{period:.3f}", target_mhz=mhz,
                   skid=i["skid"], modules=_modules(m))


# --------------------------------------------------------------------------- README


def _readme(m: dict[str, Any]) -> str:
    kit = m["kit"]
    what = f"integration kit of design {m['spec']['name']!r}"
    return _render("kit/readme.txt.j2", m, what, "", kit=kit, roles=_roles(m), langs=_languages(m),
                   modules=_modules(m), roms=_all_rom_images(m),
                   languages=m["rtl"]["languages"], header=kit["c_header"], c_prefix=c_prefix(m),
                   rom_style="readmemh" if _all_rom_images(m) else "inline", tb=m["testbench"].get("harness"),
                   vhdl_tb=m["testbench"].get("vhdl_harness"),
                   skid=m["spec"]["interface"]["skid"], target_mhz=m["spec"]["interface"]["target_mhz"])


__all__ = ["CORE_LIBRARY", "KIT_DIR", "LANGUAGES", "c_prefix", "kit_entry", "kit_files"]
