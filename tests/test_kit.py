"""The integration kit (kit/ and <name>.core) of every built-in example, and of a `$readmemh` variant.

Outside checks, each with its source:
- FuseSoC CAPI2 (the FuseSoC documentation's CAPI2 reference, and the JSON schema FuseSoC ships in
  fusesoc/capi2/json_schema.py): `fusesoc` from PyPI adds the design directory as a library, lists
  the core and runs its `sim` target (Icarus Verilog runs the generated harness over the vectors)
  and its `sim_vhdl` target (GHDL runs the generated VHDL testbench).
- IP-XACT, IEEE 1685-2014 (namespace http://www.accellera.org/XMLSchema/IPXACT/1685-2014): `ipyxact`
  parses each component back; the order of the component's elements follows the standard's schema
  (component.xsd; the same order as ipyxact's binding ipxact2014.py, generated from the 2014 index.xsd).
- C: gcc compiles the header (`-std=c99 -Wall -Werror -fsyntax-only`, and C89 with -pedantic) and a
  small program that prints every constant.
- Verilog / VHDL: the instantiation templates compile against the RTL (Icarus, `-Wall`, no warning:
  a port width that differs would warn; GHDL elaborates the VHDL ones against the VHDL entities).
"""

from __future__ import annotations

import copy
import json
import os
import re
import shutil
import subprocess
import xml.etree.ElementTree as ET
from pathlib import Path
from typing import Any

import pytest

from qamsmith.artifacts import MANIFEST, c_prefix, kit_entry, kit_files, write_design
from qamsmith.flows.tools import which
from qamsmith.spec import DesignSpec, examples

#: a design in both languages whose Verilog mapper reads `$readmemh` images, with tuser, a skid buffer
#: and a target clock
READMEMH = {"name": "kit-readmemh", "mapper.tables": "readmemh", "interface.tuser_width": 3, "interface.skid": True,
            "interface.target_mhz": 100.0, "interface.language": "both"}
#: a design in VHDL only; mapper.tables = readmemh is asked for, but the VHDL holds its tables as constants
VHDL_ONLY = {"name": "kit-vhdl", "interface.language": "vhdl", "interface.tuser_width": 2, "mapper.tables": "readmemh"}
NAMES = [*sorted(examples()), READMEMH["name"], VHDL_ONLY["name"]]
IPXACT_NS = "http://www.accellera.org/XMLSchema/IPXACT/1685-2014"
#: the content model of ipxact:component in IEEE 1685-2014 (component.xsd), in schema order
COMPONENT_ORDER = ["vendor", "library", "name", "version", "busInterfaces", "indirectInterfaces", "channels",
                   "remapStates", "addressSpaces", "memoryMaps", "model", "componentGenerators", "choices", "fileSets",
                   "whiteboxElements", "cpus", "otherClockDrivers", "resetTypes", "description", "parameters",
                   "assertions", "vendorExtensions"]


def _spec(name: str) -> DesignSpec:
    if name == READMEMH["name"]:
        return DesignSpec.from_toml(examples()["larkspur-backhaul-256"]).with_settings(READMEMH)
    if name == VHDL_ONLY["name"]:
        return DesignSpec.from_toml(examples()["larkspur-spur-16"]).with_settings(VHDL_ONLY)
    return DesignSpec.from_toml(examples()[name])


@pytest.fixture(scope="module")
def designs(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """Each design written by `write_design` into a temporary out/ directory."""
    out = tmp_path_factory.mktemp("out")
    return {name: write_design(_spec(name), out) for name in NAMES}


def _manifest(root: Path) -> dict[str, Any]:
    return json.loads((root / MANIFEST).read_text(encoding="utf-8"))


def _kit_paths(kit: dict[str, Any]) -> list[str]:
    """Every file the manifest's kit entry names."""
    paths = [kit["readme"], kit["core"]["file"], kit["c_header"], kit["constraints"], *kit["filelists"].values()]
    paths += [p for by_lang in kit["instances"].values() for p in by_lang.values()]
    paths += [e["file"] for e in kit["ipxact"].values()]
    return paths


def _tool_env(tmp_path: Path) -> dict[str, str]:
    """The environment of a FuseSoC run: its cache, data and config directories inside tmp_path."""
    return {**os.environ, **{f"XDG_{k}_HOME": str(tmp_path / k.lower()) for k in ("CACHE", "DATA", "CONFIG")}}


# --------------------------------------------------------------------------- the files


@pytest.mark.parametrize("name", NAMES)
def test_kit_files_exist_are_listed_and_follow_from_the_manifest_alone(designs: dict[str, Path], name: str) -> None:
    root = designs[name]
    m = _manifest(root)
    paths = _kit_paths(m["kit"])
    listed = {e["path"] for e in m["files"]}
    assert len(set(paths)) == len(paths)
    for path in paths:
        assert (root / path).is_file(), path
        assert path in listed, path
    # every kit file is a function of the manifest: rebuilt from the written manifest.json, byte for byte
    rebuilt = kit_files(m)
    assert sorted(rebuilt) == sorted(paths)
    for path, text in rebuilt.items():
        assert (root / path).read_text(encoding="utf-8") == text, path


def test_the_kit_entry_names_the_core_and_components(designs: dict[str, Path]) -> None:
    m = _manifest(designs["larkspur-backhaul-256"])
    kit = m["kit"]
    assert kit == kit_entry({k: v for k, v in m.items() if k not in ("kit", "files")})
    assert kit["core"]["vlnv"] == f"qamsmith:designs:larkspur-backhaul-256:{m['generator']['version']}"
    assert kit["core"]["file"] == "larkspur-backhaul-256.core"                 # FuseSoC: files at or below the core
    assert set(kit["core"]["targets"]) == {"default", "sim"}
    assert kit["bus_definition"]["bus"] == "amba.com:AMBA4:AXI4Stream:r0p0_1"


@pytest.mark.parametrize("name", NAMES)
def test_file_lists_hold_the_rtl_and_compile_from_the_design_directory(designs: dict[str, Path], name: str) -> None:
    root = designs[name]
    m = _manifest(root)
    for lang, path in m["kit"]["filelists"].items():
        lines = (root / path).read_text(encoding="utf-8").splitlines()
        sources = [line for line in lines if line.strip() and not line.startswith("//")]
        assert sources == m["rtl"]["files"][lang]
        images = [im["path"] for im in m["mapper"]["rom"]["images"]]
        commented = "\n".join(line for line in lines if line.startswith("//"))
        for image in images:       # ROM images travel with the list (as comments: they are data, not sources)
            assert (image in commented) == (m["mapper"]["rom"]["style"] == "readmemh"), image
    if shutil.which("iverilog") and "verilog" in m["kit"]["filelists"]:
        f = root / m["kit"]["filelists"]["verilog"]
        proc = subprocess.run(["iverilog", "-g2005", "-o", os.devnull, "-c", str(f)], cwd=root, capture_output=True,
                              text=True, timeout=120)
        assert proc.returncode == 0, proc.stderr


# --------------------------------------------------------------------------- FuseSoC


@pytest.mark.parametrize("name", NAMES)
def test_fusesoc_lists_the_core_and_its_sim_targets_pass(designs: dict[str, Path], name: str, tmp_path: Path) -> None:
    """FuseSoC CAPI2 (FuseSoC documentation, CAPI2 reference): the core parses, Icarus runs the Verilog harness
    (target sim) and GHDL the VHDL testbench (target sim_vhdl)."""
    fusesoc_exe = which("fusesoc")                    # in the scripts folder of .ci/run's virtual environment
    assert fusesoc_exe, "fusesoc is in the test extra"
    root = designs[name]
    m = _manifest(root)
    vlnv = m["kit"]["core"]["vlnv"]
    env = _tool_env(tmp_path)
    conf = tmp_path / "fusesoc.conf"
    conf.write_text("")

    def fusesoc(*args: str) -> subprocess.CompletedProcess[str]:
        return subprocess.run([fusesoc_exe, "--config", str(conf), *args], cwd=tmp_path, env=env, capture_output=True,
                              text=True, timeout=600)

    added = fusesoc("library", "add", name, str(root))                   # as kit/README.txt says
    assert added.returncode == 0, added.stdout + added.stderr
    listed = fusesoc("core", "list")
    assert listed.returncode == 0 and vlnv in listed.stdout, listed.stdout + listed.stderr
    shown = fusesoc("core", "show", vlnv)
    assert shown.returncode == 0, shown.stderr
    targets = m["kit"]["core"]["targets"]
    for target in targets:
        assert re.search(rf"^{target}\s*:", shown.stdout, re.M), (target, shown.stdout)
    assert ("sim" in targets) == ("verilog" in m["rtl"]["languages"])
    assert ("sim_vhdl" in targets) == ("vhdl" in m["rtl"]["languages"])
    counts = [m["vectors"]["mapper"]["count"], 0, m["vectors"]["demapper"]["count"], 0]
    for target in ("sim", "sim_vhdl"):
        if target not in targets or (target == "sim" and not shutil.which("iverilog")) or (
                target == "sim_vhdl" and not shutil.which("ghdl")):
            continue
        run = fusesoc("run", "--target", target, vlnv)
        out = run.stdout + run.stderr
        assert run.returncode == 0, out[-3000:]
        assert "not within the directory containing the core file" not in out       # no deprecated ../ paths
        res = re.search(r"RESULT map_compared=(\d+) map_bad=(\d+) dem_compared=(\d+) dem_bad=(\d+)", out)
        assert res, out[-3000:]
        assert [int(g) for g in res.groups()] == counts, target
        assert ": PASS mapper" in out, target


# --------------------------------------------------------------------------- IP-XACT


@pytest.mark.parametrize("name", NAMES)
def test_ipxact_components_parse_back_and_equal_the_manifest(designs: dict[str, Path], name: str) -> None:
    """IP-XACT, IEEE 1685-2014: ipyxact reads ports, widths, parameters and file sets back."""
    Component = pytest.importorskip("ipyxact.ipyxact", reason="ipyxact (PyPI) is not installed").Component
    root = designs[name]
    m = _manifest(root)
    for role, entry in m["kit"]["ipxact"].items():
        mod = m["rtl"]["modules"][role]
        path = root / entry["file"]
        comp = Component()
        comp.load(str(path))
        assert comp.nsversion == "2014"
        assert ":".join([comp.vendor, comp.library, comp.name, comp.version]) == entry["vlnv"]
        assert comp.name == mod["module"]
        ports = []
        for p in comp.model.ports.port:
            vec = p.wire.vectors.vector if p.wire.vectors else []
            width = vec[0].left - vec[0].right + 1 if vec else 1
            ports.append({"name": p.name, "dir": {"in": "input", "out": "output"}[p.wire.direction], "width": width})
        assert ports == mod["ports"]
        params = {p.name: p.value for p in comp.parameters.parameter} if comp.parameters else {}
        # string values are quoted literals; only the Verilog has the image parameters
        verilog_params = mod["parameters"] if "verilog" in m["rtl"]["languages"] else {}
        assert {k: json.loads(v) for k, v in params.items()} == verilog_params
        files = {fs.name: [(path.parent / f.name).resolve() for f in fs.file] for fs in comp.fileSets.fileSet}
        for lang in m["rtl"]["languages"]:
            assert files[f"rtl_{lang}"] == [(root / mod["files"][lang]).resolve()]
        assert files.get("rom_images", []) == [(root / v).resolve() for v in verilog_params.values()]
        assert all(f.is_file() for fs in files.values() for f in fs)


@pytest.mark.parametrize("name", NAMES)
def test_ipxact_bus_interfaces_and_schema_order(designs: dict[str, Path], name: str) -> None:
    """IEEE 1685-2014: element order of ipxact:component; AXI4-Stream interfaces as ARM's AXI4Stream_rtl."""
    ns = {"ipxact": IPXACT_NS}
    root = designs[name]
    m = _manifest(root)
    for role, entry in m["kit"]["ipxact"].items():
        mod = m["rtl"]["modules"][role]
        tree = ET.parse(root / entry["file"]).getroot()
        assert tree.tag == f"{{{IPXACT_NS}}}component"
        order = [child.tag.split("}")[1] for child in tree]
        assert order == sorted(order, key=COMPONENT_ORDER.index)
        names = {p["name"] for p in mod["ports"]}
        buses = {}
        for bus in tree.findall("ipxact:busInterfaces/ipxact:busInterface", ns):
            bt = bus.find("ipxact:busType", ns).attrib
            assert ":".join(bt[k] for k in ("vendor", "library", "name", "version")) == m["kit"]["bus_definition"]["bus"]
            mode = [c.tag.split("}")[1] for c in bus if c.tag.split("}")[1] in ("master", "slave")]
            maps = {pm.find("ipxact:logicalPort/ipxact:name", ns).text: pm.find("ipxact:physicalPort/ipxact:name",
                                                                                    ns).text
                    for pm in bus.findall(".//ipxact:portMap", ns)}
            buses[bus.find("ipxact:name", ns).text] = (mode, maps)
        assert buses["s_axis"][0] == ["slave"] and buses["m_axis"][0] == ["master"]
        for bus, (_, maps) in buses.items():
            assert maps["ACLK"] == "aclk" and maps["ARESETn"] == "aresetn"
            assert {k: v for k, v in maps.items() if k not in ("ACLK", "ARESETn")} == \
                   {n[len(bus) + 1:].upper(): n for n in names if n.startswith(bus + "_")}
            assert set(maps.values()) <= names


# --------------------------------------------------------------------------- C header


def _expected_c_constants(m: dict[str, Any]) -> dict[str, int | float | str]:
    """Every macro the header must define, with its value, named by the header's rule (prefix from the design)."""
    p = c_prefix(m)
    out: dict[str, int | float | str] = {f"{p}_CONTENT_HASH": m["content_hash"],
                                         f"{p}_GENERATOR_VERSION": m["generator"]["version"],
                                         f"{p}_DESIGN_NAME": m["spec"]["name"]}
    for role, e in m["rtl"]["modules"].items():
        out[f"{p}_{role.upper()}_LATENCY"] = e["latency"]
        out[f"{p}_{role.upper()}_INITIATION_INTERVAL"] = e["initiation_interval"]
    if "modes" in m:                                   # an adaptive core: the modes and each mode's bits
        out[f"{p}_MODES"] = len(m["modes"]["orders"])
        for n, e in enumerate(m["modes"]["list"]):
            out[f"{p}_MODE{n}_BITS"] = e["bits"]
    for word, w in m["packing"].items():
        out[f"{p}_{word.upper()}_WORD_WIDTH"] = w["width"]
        if w.get("lanes", 1) > 1:                      # lanes: their count and each word's lane width
            out[f"{p}_LANES"] = w["lanes"]
            out[f"{p}_{word.upper()}_LANE_WIDTH"] = w["lane_width"]
        for f in w["fields"]:
            for key in ("lsb", "width", "signed"):
                out[f"{p}_{word.upper()}_{f['name'].upper()}_{key.upper()}"] = int(f[key])
    for key, fmt in m["qformats"].items():
        if fmt is not None:
            for k in ("width", "fraction", "min_code", "max_code"):
                out[f"{p}_QFORMAT_{key.upper()}_{k.upper()}"] = fmt[k]
    out[f"{p}_LLR_MAX"] = m["demapper"]["llr_max"]
    out[f"{p}_LLR_MIN"] = m["demapper"]["llr_min"]
    out[f"{p}_MAPPER_LSB_VALUE"] = m["mapper"]["lsb"]
    out[f"{p}_INPUT_LSB_VALUE"] = m["demapper"]["input_lsb"]
    out[f"{p}_LLR_LSB_VALUE"] = m["demapper"]["llr_lsb"]
    out[f"{p}_SCALE_LSB_VALUE"] = m["demapper"]["scale_lsb"]
    return out


@pytest.mark.parametrize("name", NAMES)
def test_c_header_compiles_and_states_the_manifest(designs: dict[str, Path], name: str, tmp_path: Path) -> None:
    """C (ISO C99 / C89, gcc): the header compiles alone and a program prints every constant as the manifest."""
    if not shutil.which("gcc"):
        pytest.skip("gcc not on PATH")
    root = designs[name]
    m = _manifest(root)
    header = root / m["kit"]["c_header"]
    text = header.read_text(encoding="utf-8")
    defined = re.findall(r"^#define (\w+)", text, re.M)
    guard = f"QAMSMITH_{c_prefix(m)}_H"
    assert defined[0] == guard and text.startswith("/*") and f"#ifndef {guard}" in text
    expected = _expected_c_constants(m)
    assert sorted(defined[1:]) == sorted(expected)                      # no macro missing, none twice
    proc = subprocess.run(["gcc", "-std=c99", "-Wall", "-Werror", "-fsyntax-only", "-x", "c", str(header)],
                          capture_output=True, text=True, timeout=60)
    assert proc.returncode == 0, proc.stderr
    unit = tmp_path / "c89.c"
    unit.write_text(f'#include "{header}"\n#include "{header}"\nint kit_check_c89 = {c_prefix(m)}_LLR_MAX;\n')
    proc = subprocess.run(["gcc", "-std=c89", "-pedantic", "-Wall", "-Wextra", "-Werror", "-c", "-o", os.devnull,
                           str(unit)], capture_output=True, text=True, timeout=60)
    assert proc.returncode == 0, proc.stderr
    lines = []
    for macro, value in expected.items():
        if isinstance(value, str):
            lines.append(f'  printf("%s=%s\\n", "{macro}", {macro});')
        elif isinstance(value, float):
            lines.append(f'  printf("%s=%.17g\\n", "{macro}", (double)({macro}));')
        else:
            lines.append(f'  printf("%s=%lld\\n", "{macro}", (long long)({macro}));')
    prog = tmp_path / "print_constants.c"
    prog.write_text(f'#include <stdio.h>\n#include "{header}"\nint main(void)\n{{\n' + "\n".join(lines)
                    + "\n  return 0;\n}\n")
    exe = tmp_path / "print_constants"
    proc = subprocess.run(["gcc", "-std=c99", "-Wall", "-Werror", "-pedantic", "-o", str(exe), str(prog)],
                          capture_output=True, text=True, timeout=60)
    assert proc.returncode == 0, proc.stderr
    run = subprocess.run([str(exe)], capture_output=True, text=True, timeout=60, check=True)
    got = dict(line.split("=", 1) for line in run.stdout.splitlines())
    assert set(got) == set(expected)
    for macro, value in expected.items():
        if isinstance(value, str):
            assert got[macro] == value, macro
        elif isinstance(value, float):
            assert float(got[macro]) == value, macro                     # the double reads back exactly
        else:
            assert int(got[macro]) == value, macro


# --------------------------------------------------------------------------- instantiation templates


@pytest.mark.parametrize("name", NAMES)
def test_verilog_instantiation_templates_bind_to_the_rtl(designs: dict[str, Path], name: str, tmp_path: Path) -> None:
    """Verilog: each template, included in a module, elaborates against the RTL with no warning (Icarus -Wall)."""
    if not shutil.which("iverilog"):
        pytest.skip("iverilog not on PATH")
    root = designs[name]
    m = _manifest(root)
    if "verilog" not in m["rtl"]["languages"]:
        return
    for role, by_lang in m["kit"]["instances"].items():
        wrapper = tmp_path / f"{role}_check.v"
        wrapper.write_text("`timescale 1ns / 1ps\nmodule kit_check;\n  reg aclk = 1'b0;\n  reg aresetn = 1'b0;\n"
                           f'`include "{root / by_lang["verilog"]}"\nendmodule\n')
        rtl = root / m["rtl"]["modules"][role]["files"]["verilog"]
        proc = subprocess.run(["iverilog", "-g2005", "-Wall", "-s", "kit_check", "-o", os.devnull, str(wrapper),
                               str(rtl)], cwd=root, capture_output=True, text=True, timeout=120)
        assert proc.returncode == 0 and "warning" not in proc.stderr.lower(), proc.stderr


def _vhdl_wrapper(template: str) -> str:
    """An entity whose architecture holds the template's declarations and instance (split at "-- Instance")."""
    decl, body = template.split("\n-- Instance", 1)
    return ("library ieee;\nuse ieee.std_logic_1164.all;\nentity kit_check is\nend entity kit_check;\n"
            "architecture check of kit_check is\n  signal aclk, aresetn : std_logic := '0';\n"
            f"{decl}\nbegin\n-- Instance{body}end architecture check;\n")


@pytest.mark.parametrize("name", NAMES)
def test_vhdl_instantiation_templates_bind_to_the_rtl(designs: dict[str, Path], name: str, tmp_path: Path) -> None:
    """VHDL: the file list and core hold the VHDL; each template (component, signals, instance) in an
    architecture elaborates against the generated entity in VHDL-93 and VHDL-2008 (GHDL). A design in
    Verilog only is given a VHDL listing in a copy of its manifest: the kit covers any listed HDL."""
    root = designs[name]
    m = copy.deepcopy(_manifest(root))
    generated = "vhdl" in m["rtl"]["languages"]
    if not generated:
        m["rtl"]["languages"]["vhdl"] = "VHDL-93"
        m["rtl"]["files"]["vhdl"] = []
        for e in m["rtl"]["modules"].values():
            e["files"]["vhdl"] = f"rtl/{e['module']}.vhd"
            m["rtl"]["files"]["vhdl"].append(e["files"]["vhdl"])
        m["kit"] = kit_entry(m)
    files = kit_files(m)
    assert files[m["kit"]["filelists"]["vhdl"]].count(".vhd\n") == len(m["rtl"]["modules"])
    core = files[m["kit"]["core"]["file"]]
    assert "  rtl_vhdl:\n    file_type: vhdlSource\n" in core
    if not generated or not shutil.which("ghdl"):
        return
    for role, by_lang in m["kit"]["instances"].items():
        wrapper = tmp_path / f"{role}_check.vhd"
        wrapper.write_text(_vhdl_wrapper(files[by_lang["vhdl"]]))
        rtl = root / m["rtl"]["modules"][role]["files"]["vhdl"]
        for std in ("93c", "08"):
            work = tmp_path / f"{role}-{std}"
            work.mkdir()
            for cmd in (["-a", str(rtl), str(wrapper)], ["-e", "kit_check"]):
                proc = subprocess.run(["ghdl", cmd[0], f"--std={std}", f"--workdir={work}", *cmd[1:]],
                                      capture_output=True, text=True, timeout=120, cwd=work)
                assert proc.returncode == 0, (std, cmd, proc.stderr)


# --------------------------------------------------------------------------- constraints and README


@pytest.mark.parametrize("name", NAMES)
def test_constraints_clock_and_ready_paths(designs: dict[str, Path], name: str) -> None:
    root = designs[name]
    m = _manifest(root)
    sdc = (root / m["kit"]["constraints"]).read_text(encoding="utf-8")
    clocks = re.findall(r"^create_clock -name aclk -period ([0-9.]+) \[get_ports aclk\]$", sdc, re.M)
    mhz = m["spec"]["interface"]["target_mhz"]
    assert len(clocks) == 1
    if mhz:
        assert float(clocks[0]) == pytest.approx(1000.0 / mhz, abs=5e-4)
        assert "PLACEHOLDER" not in sdc
    else:
        assert "PLACEHOLDER" in sdc
    for e in m["rtl"]["modules"].values():
        assert f"{e['module']}: latency {e['latency']} " in sdc and e["tready"] in sdc
    assert ("set_output_delay" in sdc) == (not m["spec"]["interface"]["skid"])


@pytest.mark.parametrize("name", NAMES)
def test_readme_tells_how_to_pass_the_rom_paths(designs: dict[str, Path], name: str) -> None:
    root = designs[name]
    m = _manifest(root)
    readme = (root / m["kit"]["readme"]).read_text(encoding="utf-8")
    for path in _kit_paths(m["kit"]):
        assert path in readme or path == m["kit"]["readme"], path
    params = {k: v for e in m["rtl"]["modules"].values() for k, v in e["parameters"].items()}
    assert bool(params) == (m["mapper"]["rom"]["style"] == "readmemh")
    for param, path in params.items():
        assert f"{path}: parameter {param}" in readme
    assert ("ROM images ($readmemh)" in readme) == bool(params)
