"""VHDL tier: the VHDL back end checked by GHDL and against the Verilog of the same design (marked `sim`).

- Every order x labeling x algorithm at both width settings (tests/matrix.py) is generated in
  VHDL, synthesized by `ghdl --synth` (no latch) and simulated by the generated VHDL testbench on
  GHDL against the bit-exact model: vectors/ plus random words at the first setting; a strided
  subset of vectors/ at the second (CI time), and for the 2-D search designs, which simulate
  slowly, at both.
- The text is analyzed and elaborated with every GHDL warning on, in VHDL-93 and VHDL-2008.
- Both languages of one design give the same output words on the same stimulus, word for word.
- GHDL's synthesis of the VHDL is proven equivalent to the Verilog by Yosys.
- Mutation checks show each of these can fail.
"""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import pytest

from qamsmith import write_design
from qamsmith.artifacts import DesignDirectory
from qamsmith.errors import SpecError
from qamsmith.flows import tools, verify
from qamsmith.spec import DesignSpec, examples

from matrix import CASES, MODE_CASES, accepted_spec, case_id, expect_refusal, mode_spec

pytestmark = [pytest.mark.sim,
              pytest.mark.skipif(shutil.which("ghdl") is None, reason="GHDL not installed (.ci/run installs it)")]

#: random words per block on top of vectors/ at the first width setting
RANDOM = 200
#: demapper words of vectors/ kept at the second width setting, and for the 2-D search designs
THIN, SEARCH = 600, 150


def _write(spec: DesignSpec | str, root: Path) -> DesignDirectory:
    assert not isinstance(spec, str), spec
    return DesignDirectory.open(write_design(spec, root))


# --------------------------------------------------------------------------- the matrix on GHDL


@pytest.mark.parametrize("case", CASES, ids=[case_id(*c) for c in CASES])
def test_vhdl_matrix(case: tuple[int, str, str, int], tmp_path: Path) -> None:
    order, labeling, alg, setting = case
    spec = accepted_spec(case, language="vhdl")
    refusal = expect_refusal(order, labeling, alg)
    if refusal:
        assert isinstance(spec, str) and re.search(refusal, spec), spec
        return
    dd = _write(spec, tmp_path)
    for role in ("mapper", "demapper"):
        synth = tools.ghdl_synth([dd.rtl_file(role, "vhdl")], dd.module(role)["module"], work=tmp_path / "synth")
        assert synth["ok"] and not synth["latches"], (role, synth["errors"], synth["latches"])
    search = labeling == "table" and order > 4
    limit = SEARCH if search else THIN if setting == 1 else None
    res = verify.run_ghdl(dd.root, n_random=0 if limit else RANDOM, seed=1 + CASES.index(case), in_pct=75,
                          out_pct=75, vector_limit=limit, build_dir=tmp_path / "build")
    assert res.mismatches == 0, res.details
    assert res.compared == sum(c["vectors"] + c["random"] for c in res.counts.values()) > 0


@pytest.mark.parametrize("name", list(MODE_CASES))
def test_vhdl_modes_and_lanes_matrix(name: str, tmp_path: Path) -> None:
    """Adaptive cores and lanes on GHDL: ghdl --synth without latches, then vectors/ (thinned) and random words."""
    dd = _write(mode_spec(name, language="vhdl"), tmp_path)
    for role in ("mapper", "demapper"):
        synth = tools.ghdl_synth([dd.rtl_file(role, "vhdl")], dd.module(role)["module"], work=tmp_path / "synth")
        assert synth["ok"] and not synth["latches"], (role, synth["errors"], synth["latches"])
    res = verify.run_ghdl(dd.root, n_random=150, seed=5, in_pct=70, out_pct=70, vector_limit=THIN,
                          build_dir=tmp_path / "build")
    assert res.mismatches == 0, res.details
    assert res.compared == sum(c["vectors"] + c["random"] for c in res.counts.values()) > THIN


# --------------------------------------------------------------------------- GHDL's gates


def _examples(root: Path, language: str = "both") -> list[DesignDirectory]:
    return [_write(DesignSpec.from_toml(path).with_settings({"interface.language": language}), root)
            for path in examples().values()]


@pytest.mark.parametrize("std", tools.VHDL_STANDARDS)
def test_vhdl_analyzes_and_elaborates_with_every_warning(std: str, tmp_path: Path) -> None:
    """GHDL 2.0 has no -Wall: every -W switch it documents is on, and any warning fails."""
    designs = _examples(tmp_path / "out", "vhdl")
    designs.append(_write(accepted_spec((64, "table", "maxlog", 1), language="vhdl"), tmp_path / "out"))
    designs += [_write(mode_spec(name, language="vhdl"), tmp_path / "out")
                for name in ("wlan-2to256-folded-scale-tuser", "gray-2to64-hard-x3-skid")]
    for dd in designs:
        sources = [dd.rtl_file(r, "vhdl") for r in ("mapper", "demapper")] + [dd.path(dd.testbench["vhdl_harness"]["file"])]
        tops = [dd.module(r)["module"] for r in ("mapper", "demapper")] + [dd.testbench["vhdl_harness"]["entity"]]
        assert tools.lint_vhdl(sources, tops, std=std, work=tmp_path / dd.root.name / std) == []


def test_the_vhdl_lint_reports_a_warning(tmp_path: Path) -> None:
    """Mutation check: an unused signal added to a generated entity is reported (-Wunused)."""
    dd = _write(accepted_spec((16, "gray", "maxlog", 0), language="vhdl"), tmp_path)
    path = dd.rtl_file("mapper", "vhdl")
    text = path.read_text()
    path.write_text(text.replace("\nbegin\n", "\n  signal never_read : std_logic;\nbegin\n", 1))
    problems = tools.lint_vhdl([path], [dd.module("mapper")["module"]], std="08", work=tmp_path / "work")
    assert any("never_read" in p for p in problems), problems


def test_ghdl_synth_refuses_a_latch(tmp_path: Path) -> None:
    """The synthesis gate can fail: GHDL names an inferred latch (it refuses one without --latches)."""
    src = tmp_path / "latch.vhd"
    src.write_text("library ieee;\nuse ieee.std_logic_1164.all;\nentity latch is\n  port (e, d : in std_logic; "
                   "q : out std_logic);\nend entity latch;\narchitecture rtl of latch is\nbegin\n  process (e, d)\n"
                   "  begin\n    if e = '1' then\n      q <= d;\n    end if;\n  end process;\nend architecture rtl;\n")
    rep = tools.ghdl_synth([src], "latch", work=tmp_path / "work")
    assert not rep["ok"] and rep["latches"]


def test_the_vhdl_testbench_catches_a_wrong_expected_word(tmp_path: Path) -> None:
    """Mutation check: one corrupted expected word is reported with its index, and the run fails."""
    dd = _write(accepted_spec((64, "3gpp-nr", "maxlog", 0), language="vhdl"), tmp_path)
    path = dd.path("vectors/demapper_out.hex")
    lines = path.read_text().splitlines()
    n = next(i for i, ln in enumerate(lines) if not ln.startswith("//")) + 10
    lines[n] = format(int(lines[n], 16) ^ 1, f"0{len(lines[n])}x")
    path.write_text("\n".join(lines) + "\n")
    res = verify.run_ghdl(dd.root, n_random=0, build_dir=tmp_path / "build")
    assert res.mismatches == 1
    assert res.details[0].startswith("BAD demapper word 10 ")


def test_the_vhdl_testbench_catches_a_wrong_rtl_constant(tmp_path: Path) -> None:
    """Mutation check: a changed table entry in the generated VHDL is caught in simulation."""
    dd = _write(accepted_spec((64, "3gpp-nr", "maxlog", 0), language="vhdl"), tmp_path)
    path = dd.rtl_file("demapper", "vhdl")
    text = path.read_text()
    m = re.search(r"to_unsigned\((\d+), (\d+)\),  -- 1\n", text)
    assert m, "no multi-bit table in the demapper"
    wrong = (int(m.group(1)) + 1) % (1 << int(m.group(2)))
    path.write_text(text.replace(m.group(0), f"to_unsigned({wrong}, {m.group(2)}),  -- 1\n", 1))
    res = verify.run_ghdl(dd.root, n_random=0, build_dir=tmp_path / "build")
    assert res.mismatches > 0


def test_the_vhdl_testbench_runs_without_python(tmp_path: Path) -> None:
    """As the README says: analyze and run from the design directory; a PASS line and exit status 0."""
    dd = _write(DesignSpec.from_toml(examples()["larkspur-spur-16"]).with_settings({"interface.language": "vhdl"}),
                tmp_path)
    tb = dd.testbench["vhdl_harness"]
    work = tmp_path / "work"
    work.mkdir()
    rtl = [str(dd.rtl_file(r, "vhdl").relative_to(dd.root)) for r in ("mapper", "demapper")]
    analyze = subprocess.run(["ghdl", "-a", f"--workdir={work}", *rtl, tb["file"]], cwd=dd.root, capture_output=True,
                             text=True)
    assert analyze.returncode == 0, analyze.stderr
    run = subprocess.run(["ghdl", "-r", f"--workdir={work}", tb["entity"]], cwd=dd.root, capture_output=True,
                         text=True)
    counts = {b: dd.manifest["vectors"][b]["count"] for b in ("mapper", "demapper")}
    assert run.returncode == 0, run.stdout + run.stderr
    assert f"{tb['entity']}: PASS mapper {counts['mapper']} words, demapper {counts['demapper']} words" in run.stdout


# --------------------------------------------------------------------------- across the languages

#: one design per order and algorithm family, and the options that change the stream words
CROSS = [(2, "gray", "maxlog", 1), (4, "3gpp-nr", "hard", 0), (16, "table", "maxlog", 0), (64, "ieee-802.11", "folded", 1),
         (256, "gray", "maxlog", 0), (1024, "natural", "hard", 1), (4096, "gray", "folded", 0)]


@pytest.mark.parametrize("case", CROSS, ids=[case_id(*c) for c in CROSS])
def test_both_languages_give_the_same_words(case: tuple[int, str, str, int], tmp_path: Path) -> None:
    """The Verilog harness (Icarus) and the VHDL testbench (GHDL) on the same stimulus write the same
    output words, tlast and tuser, in the same order (and each equals the model)."""
    dd = _write(accepted_spec(case, language="both"), tmp_path)
    search = case[1] == "table" and case[0] > 4
    kw = {"n_random": 300, "seed": 7, "vector_limit": SEARCH if search else THIN, "dump": True}
    v = verify.run_direct(dd.root, build_dir=tmp_path / "verilog", **kw)
    h = verify.run_ghdl(dd.root, build_dir=tmp_path / "vhdl", **kw)
    assert v.ok and h.ok, (v.details, h.details)
    for name in verify.DUMPS.values():
        assert (tmp_path / "verilog" / name).read_bytes() == (tmp_path / "vhdl" / name).read_bytes()
    cross = verify.compare_dumps(tmp_path / "verilog", tmp_path / "vhdl", "icarus and ghdl")
    assert cross.ok and cross.compared == v.compared == h.compared


@pytest.mark.parametrize("name", ["nr-4to256-maxlog-x4", "gray-2to64-hard-x3-skid"])
def test_both_languages_give_the_same_words_with_modes_and_lanes(name: str, tmp_path: Path) -> None:
    dd = _write(mode_spec(name, language="both"), tmp_path)
    kw = {"n_random": 200, "seed": 9, "vector_limit": THIN, "dump": True}
    v = verify.run_direct(dd.root, build_dir=tmp_path / "verilog", **kw)
    h = verify.run_ghdl(dd.root, build_dir=tmp_path / "vhdl", **kw)
    assert v.ok and h.ok, (v.details, h.details)
    cross = verify.compare_dumps(tmp_path / "verilog", tmp_path / "vhdl", "icarus and ghdl")
    assert cross.ok and cross.compared == v.compared == h.compared


def test_the_cross_language_check_reports_a_difference(tmp_path: Path) -> None:
    """Mutation check: one word changed in one language's dump is reported, with its index."""
    for lang in ("verilog", "vhdl"):
        (tmp_path / lang).mkdir()
        for name in verify.DUMPS.values():
            (tmp_path / lang / name).write_text("".join(f"{k:04x} 0 0\n" for k in range(20)))
    (tmp_path / "vhdl" / verify.DUMPS["dem"]).write_text(
        "".join(f"{k ^ (k == 13):04x} 0 0\n" for k in range(20)))
    cross = verify.compare_dumps(tmp_path / "verilog", tmp_path / "vhdl", "test")
    assert cross.mismatches == 1 and "word 13" in cross.details[0]


PROOF = [(2, "gray", "maxlog", 0), (16, "gray", "maxlog", 0), (64, "3gpp-nr", "folded", 1), (16, "table", "maxlog", 1)]


@pytest.mark.synth
@pytest.mark.parametrize("case", PROOF, ids=[case_id(*c) for c in PROOF])
def test_ghdl_synthesis_is_proven_equal_to_the_verilog(case: tuple[int, str, str, int], tmp_path: Path) -> None:
    """Yosys equivalence (equiv_make / equiv_simple / equiv_induct) of GHDL's netlist and our Verilog."""
    if tools.which("yosys") is None:
        pytest.skip("yosys not installed")
    dd = _write(accepted_spec(case, language="both"), tmp_path)
    proven, problems = verify.prove_languages(dd, tmp_path / "proof")
    assert problems == [] and len(proven) == 2, problems


@pytest.mark.synth
def test_the_equivalence_proof_catches_a_changed_constant(tmp_path: Path) -> None:
    """Mutation check: an adder constant changed in the VHDL leaves equivalence points unproven."""
    if tools.which("yosys") is None:
        pytest.skip("yosys not installed")
    dd = _write(accepted_spec((16, "gray", "maxlog", 0), language="both"), tmp_path)
    path = dd.rtl_file("demapper", "vhdl")
    text = path.read_text()
    m = re.search(r"\+ to_signed\((\d+), (\d+)\);", text)
    assert m, "no constant adder in the demapper"
    path.write_text(text.replace(m.group(0), f"+ to_signed({int(m.group(1)) + 1}, {m.group(2)});", 1))
    proven, problems = verify.prove_languages(dd, tmp_path / "proof")
    assert len(proven) == 1 and len(problems) == 1 and "unproven" in problems[0], (proven, problems)


# --------------------------------------------------------------------------- qamsmith verify, both languages


def test_verify_runs_every_generated_language(cli, tmp_path: Path) -> None:
    """`qamsmith verify` of a design in both languages: a line per language and one across them."""
    dd = _write(DesignSpec.from_toml(examples()["larkspur-telemetry-qpsk"]).with_settings(
        {"interface.language": "both"}), tmp_path / "out")
    r = cli("verify", str(dd.root), "--vectors", "300", "--stream", "200", "--build-dir", str(tmp_path / "b"))
    assert r.code == 0, r.out + r.err
    name = dd.root.name
    assert re.search(rf"verify {name} \[verilog\]: \d+ vectors compared, 0 mismatches, simulator icarus", r.out)
    assert re.search(rf"verify {name} \[vhdl\]: \d+ vectors compared, 0 mismatches, simulator ghdl", r.out)
    assert re.search(rf"verify {name} \[verilog = vhdl\]: \d+ output words compared between the languages, 0 differ",
                     r.out)
    if tools.which("yosys"):
        assert r.out.count("equivalence points proven (yosys)") == 2, r.out


def test_verify_of_a_vhdl_only_design_runs_ghdl_and_the_stream_benches(tmp_path: Path) -> None:
    dd = _write(accepted_spec((16, "3gpp-nr", "maxlog", 1), language="vhdl"), tmp_path / "out")
    results, problems = verify.verify(dd.root, vectors=300, stream=300, build_dir=tmp_path / "b", lint=True)
    assert problems == [] and [r.language for r in results] == ["vhdl"]
    res = results[0]
    assert res.ok, res.details
    # the harness words plus two stream benches of 300 words (less what the mid-stream reset drops)
    assert res.compared > res.harness_compared + 2 * 250


def test_verilog_simulation_of_a_vhdl_only_design_names_the_key(tmp_path: Path) -> None:
    dd = _write(accepted_spec((16, "gray", "maxlog", 0), language="vhdl"), tmp_path / "out")
    with pytest.raises(SpecError, match=r"interface\.language"):
        verify.run_direct(dd.root)
