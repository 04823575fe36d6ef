"""Lint and synthesis gates on generated modules (marked `synth`).

verilator --lint-only -Wall (Verilog-2001 language mode) must be silent on every generated
module; Yosys' generic `synth` must finish with no latch and no warning that matters.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from qamsmith import write_design
from qamsmith.artifacts import rtl_files
from qamsmith.flows.tools import lint_verilog, synthesis_gate
from qamsmith.errors import SpecError
from qamsmith.model import derive
from qamsmith.spec import ConstellationSpec, DemapperSpec, DesignSpec, InterfaceSpec, MapperSpec

from matrix import user_table

pytestmark = pytest.mark.synth

ORDERS = (2, 4, 16, 64, 256, 1024, 4096)
LABELINGS = ("gray", "3gpp-nr", "ieee-802.11", "natural", "table")


def _spec(order: int, labeling: str, alg: str, variant: int) -> DesignSpec:
    table = user_table(order) if labeling == "table" else ()
    levels = 2 if order == 2 else 1 << ((order.bit_length() - 1) // 2)
    w = ((levels - 1) << 2).bit_length() + 2
    mapper = (MapperSpec(implementation="rom", tables="readmemh"), MapperSpec(implementation="rom", tables="inline"),
              MapperSpec(implementation="logic"))[variant]
    dem = DemapperSpec(algorithm=alg, input_width=w, input_fraction=2, llr_width=6 + variant,
                       scale_width=(0, 5, 0)[variant], rounding=("half-away", "half-even", "toward-zero")[variant])
    spec = DesignSpec(name="lint", constellation=ConstellationSpec(order=order, labeling=labeling, table=table),
                      mapper=mapper, demapper=dem,
                      interface=InterfaceSpec(tlast=variant != 1, tuser_width=(0, 2, 7)[variant],
                                              mapper_stages=variant, demapper_stages=(0, 1, 5)[variant],
                                              skid=variant == 2,
                                              flow_control=("shared", "per-stage", "per-stage")[variant]))
    return spec


def _lint_cases():
    """Every order x labeling (the algorithm rotating), and every algorithm at every order (gray)."""
    algs = ("maxlog", "folded", "hard")
    seen = set()
    for i, o in enumerate(ORDERS):
        for j, lab in enumerate(LABELINGS):
            alg = algs[(i + j) % 3]
            if alg == "folded" and lab in ("natural", "table") and o > 4:
                alg = "maxlog"
            seen.add((o, lab, alg))
            yield pytest.param(o, lab, alg, (i + j) % 3, id=f"qam{o}-{lab}-{alg}")
        for n, alg in enumerate(algs):
            if (o, "gray", alg) not in seen:
                yield pytest.param(o, "gray", alg, n, id=f"qam{o}-gray-{alg}")


needs_verilator = pytest.mark.skipif(shutil.which("verilator") is None, reason="verilator not installed")
needs_yosys = pytest.mark.skipif(shutil.which("yosys") is None, reason="yosys not installed")


@needs_verilator
@pytest.mark.parametrize("order,labeling,alg,variant", list(_lint_cases()))
def test_verilator_lint_clean(order: int, labeling: str, alg: str, variant: int, tmp_path: Path) -> None:
    spec = _spec(order, labeling, alg, variant)
    try:
        design = derive(spec)
    except SpecError:
        try:
            spec = spec.with_settings({"mapper.implementation": "rom"})
            design = derive(spec)
        except SpecError:
            pytest.skip("the spec refuses this combination (asserted in test_sim)")
    for path, text in rtl_files(design).items():
        f = tmp_path / Path(path).name
        f.write_text(text)
        assert lint_verilog(f) == [], path


def test_lint_reports_a_warning(tmp_path: Path) -> None:
    """The gate can fail: an unused signal must be reported."""
    f = tmp_path / "bad_mod.v"
    f.write_text("`default_nettype none\nmodule bad_mod(input wire a, input wire b, output wire y);\n"
                 "  assign y = a;\nendmodule\n")
    assert any("UNUSED" in ln for ln in lint_verilog(f))


SYNTH = [(256, "3gpp-nr", "maxlog", 0), (4096, "gray", "maxlog", 2), (64, "ieee-802.11", "folded", 1),
         (1024, "gray", "folded", 0), (16, "natural", "maxlog", 1), (64, "gray", "hard", 2),
         (2, "3gpp-nr", "maxlog", 0), (2, "3gpp-nr", "hard", 1)]


@needs_yosys
@pytest.mark.parametrize("order,labeling,alg,variant", SYNTH, ids=[f"qam{o}-{lab}-{a}-v{v}" for o, lab, a, v in SYNTH])
def test_yosys_synth_no_latch(order: int, labeling: str, alg: str, variant: int, tmp_path: Path) -> None:
    spec = _spec(order, labeling, alg, variant)
    design = derive(spec)
    write_design(spec, tmp_path)
    d = tmp_path / spec.name
    for role in ("mapper", "demapper"):
        rep = synthesis_gate(d / "rtl" / f"{spec.prefix}_{role}.v", f"{spec.prefix}_{role}", cwd=d)
        assert rep["ok"], (role, rep["warnings"], rep["log"])
        assert not rep["latch"]
        assert rep["cells"] and rep["cells"] > 0
    del design
