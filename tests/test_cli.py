"""The `qamsmith` command: generate, list, run; exit status 2 with nothing written on bad input;
deterministic output; the committed out/ designs regenerate byte for byte."""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest

from qamsmith.artifacts import MANIFEST, build_files
from qamsmith.cli import COMMANDS
from qamsmith.spec import DEFAULT_EXAMPLE, examples
from qamsmith.spec import DesignSpec

REPO = Path(__file__).resolve().parent.parent


def _tree(root: Path) -> dict[str, bytes]:
    return {p.relative_to(root).as_posix(): p.read_bytes() for p in sorted(root.rglob("*")) if p.is_file()}


def test_generate_without_arguments_builds_the_default_example(cli, tmp_path: Path, monkeypatch) -> None:
    monkeypatch.chdir(tmp_path)
    r = cli("generate")
    assert r.code == 0, r.err
    target = tmp_path / "out" / DEFAULT_EXAMPLE
    assert (target / "design.toml").is_file() and (target / MANIFEST).is_file()
    assert r.out.startswith(f"qamsmith: wrote out/{DEFAULT_EXAMPLE}/: ") and len(r.out.splitlines()) == 2
    # a second run over its own, unmodified output is allowed and changes nothing
    before = _tree(target)
    assert cli("generate").code == 0
    assert _tree(target) == before


@pytest.mark.parametrize("argv,pattern", [
    (["--order", "32", "--labeling", "3gpp-nr"], r"constellation\.labeling = '3gpp-nr': gray, natural or table for order 32"),
    (["--labeling", "grey"], r"constellation\.labeling = 'grey': one of gray, 3gpp-nr"),
    (["--llr-width", "1"], r"demapper\.llr_width = 1: an integer from 2 to 32"),
    (["--input-fraction", "12"], r"demapper\.input_fraction = 12: an integer from 0 to 10"),
    (["--order", "256", "--input-width", "8", "--input-fraction", "4"], r"demapper\.input_width = 8: at least 9 bits"),
    (["--labeling", "natural", "--algorithm", "folded"], r"demapper\.algorithm = 'folded': maxlog or hard"),
    (["--set", "mapper.widht=12"], r"mapper\.widht = 12: a known key of \[mapper\]"),
    (["--set", "mapper.width"], r"--set = 'mapper\.width': section\.key=value"),
    (["--table", "missing.csv"], r"constellation\.table_file = 'missing\.csv': a readable CSV file"),
    (["no-such-example"], r"spec = 'no-such-example': a TOML file, a design directory or a built-in example: larkspur-"),
    (["--set", "constellation.order=16.0"], r"constellation\.order = 16\.0: one of 2, 4, 8, 16, 32, 64, 128, 256, 512, 1024, 2048, 4096 "
                                            r"\(an integer: 16, not 16\.0\)$"),
    (["--order", "16.0"], r"constellation\.order = 16\.0: one of 2, 4, 8, 16, 32, 64, 128, 256, 512, 1024, 2048, 4096 \(an integer: 16, not 16\.0\)$"),
    (["--order", "sixteen"], r"constellation\.order = 'sixteen': one of 2, 4, 8, 16, 32, 64, 128, 256, 512, 1024, 2048, 4096$"),
    (["--set", "mapper.width=" + "9" * 5000], r"mapper\.width = 9999999999999999… \(5000 digits\): an integer from 2 to 20$"),
    (["--mapper-width", "9" * 5000], r"mapper\.width = 9999999999999999… \(5000 digits\): an integer from 2 to 20$"),
    (["--set", "mapper.width=" + "[" * 3000 + "]" * 3000],
     r"mapper\.width = \[\[\[\[\[…\]\]\]\]\] \(1 item, nested 3000 deep\): an integer from 2 to 20$"),
    (["--set", "interface.target_mhz=" + "9" * 400],
     r"interface\.target_mhz = 9999999999999999… \(400 digits\): 0 \(off\) or a clock from 1 to 1000 MHz$"),
    (["--mapper-width", "2"], r"mapper\.width = 2: at least 11 bits for mapper\.fraction = 10 \(the default\), "
                              r"or set a smaller mapper\.fraction$"),
    (["--order", "64", "--input-width", "4"], r"demapper\.input_width = 4: at least 8 bits for demapper\.input_fraction = 4 "
                                              r"\(the default\), or set demapper\.input_fraction <= 0$"),
    (["--order", "4096", "--input-fraction", "6"], r"demapper\.input_fraction = 6: at most 5 to hold the outermost level "
                                                   r"\(63 amplitude units\) in demapper\.input_width = 12 \(the default\), "
                                                   r"or set demapper\.input_width >= 13$"),
], ids=["order32", "labeling", "llr-width", "fraction", "input-width", "folded-natural", "toml-key", "set-syntax",
        "table-file", "example", "set-float-order", "float-order", "word-order", "set-5000-digits", "flag-5000-digits",
        "set-3000-deep", "set-400-digits", "mapper-width-alone", "input-width-alone", "input-fraction-alone"])
def test_bad_input_exits_2_and_writes_nothing(cli, tmp_path: Path, argv: list[str], pattern: str) -> None:
    r = cli("generate", *argv, "--out", str(tmp_path / "out"))
    assert r.code == 2 and r.out == ""
    assert len(r.err.splitlines()) == 1
    assert re.match(r"qamsmith: error: " + pattern, r.err), r.err
    assert not (tmp_path / "out").exists()


def test_table_csv_sets_the_order_from_its_rows(cli, tmp_path: Path) -> None:
    """--table without --order: the order is the CSV's row count, and a count that is no order names the CSV."""
    csv = tmp_path / "qpsk.csv"
    csv.write_text("label,i,q\n0,-1,-1\n1,-1,1\n2,1,-1\n3,1,1\n")
    r = cli("generate", "--table", str(csv), "--out", str(tmp_path / "out"))
    assert r.code == 0, r.err
    assert json.loads((tmp_path / "out" / "qam4-table-maxlog" / MANIFEST).read_text())["spec"]["constellation"]["order"] == 4
    csv.write_text("label,i,q\n0,-1,-1\n1,-1,1\n2,1,-1\n")
    r = cli("generate", "--table", str(csv), "--out", str(tmp_path / "bad"))
    assert r.code == 2 and r.err == ("qamsmith: error: constellation.table_file = '3 rows': one row per label: 2, 4, 8, "
                                     "16, 32, 64, 128, 256, 512, 1024, 2048, 4096 rows (constellation.order, not set, is "
                                     "the number of rows)\n")
    assert not (tmp_path / "bad").exists()


def test_spec_file_errors_are_one_line(cli, tmp_path: Path) -> None:
    """A spec file that is not UTF-8, an integer of 5,000 digits, an array 3,000 deep: one line, exit 2."""
    cases = {b"[mapper]\nwidth = 12 # \xff\n": r"spec = '.*spec\.toml': a UTF-8 text file \(byte 0xff on line 2 is not UTF-8\)",
             b"[mapper]\nwidth = " + b"9" * 5000 + b"\n": r"mapper\.width = 9999999999999999… \(5000 digits\): an integer",
             b"[mapper]\nwidth = " + b"[" * 3000 + b"]" * 3000 + b"\n": r"mapper\.width = \[\[\[\[\[…\]\]\]\]\] \(1 item",
             b"[constellation]\norder = 16.0\n": r"constellation\.order = 16\.0: one of .* \(an integer: 16, not 16\.0\)",
             b'[constellation]\nlabeling = "table"\ntable = 1.5\n': r"constellation\.table = 1\.5: an array of rows"}
    for text, pattern in cases.items():
        path = tmp_path / "spec.toml"
        path.write_bytes(text)
        r = cli("generate", str(path), "--out", str(tmp_path / "out"))
        assert r.code == 2 and len(r.err.splitlines()) == 1, r.err
        assert re.match(r"qamsmith: error: " + pattern, r.err), r.err
        assert not (tmp_path / "out").exists()


def test_argparse_errors_exit_2(cli) -> None:
    assert cli("generate", "--order", "sixteen").code == 2
    assert cli("frobnicate").code == 2
    assert cli().code == 2
    assert cli("run", "somewhere").code == 2              # --block is required


def test_foreign_files_refused_then_kept_with_force(cli, tmp_path: Path) -> None:
    out = tmp_path / "out"
    assert cli("generate", "larkspur-telemetry-qpsk", "--out", str(out)).code == 0
    target = out / "larkspur-telemetry-qpsk"
    (target / "lab-notes.md").write_text("scope shots\n")
    before = _tree(target)
    r = cli("generate", "larkspur-telemetry-qpsk", "--llr-width", "6", "--out", str(out))
    assert r.code == 2 and "qamsmith did not write, e.g. 'lab-notes.md'" in r.err and "--force" in r.err
    assert _tree(target) == before
    assert cli("generate", "larkspur-telemetry-qpsk", "--llr-width", "6", "--out", str(out), "--force").code == 0
    assert (target / "lab-notes.md").read_text() == "scope shots\n"
    assert json.loads((target / MANIFEST).read_text())["spec"]["demapper"]["llr_width"] == 6


def test_out_naming_a_file_names_the_file_in_the_way(cli, tmp_path: Path) -> None:
    (tmp_path / "links").write_text("site list\n")
    r = cli("generate", "larkspur-telemetry-qpsk", "--out", str(tmp_path / "links"))
    assert r.code == 2 and len(r.err.strip().splitlines()) == 1
    assert f"a writable directory (the file '{tmp_path / 'links'}' is in the way)" in r.err
    assert (tmp_path / "links").read_text() == "site list\n"


def test_two_generates_are_byte_identical(cli, tmp_path: Path) -> None:
    for run in ("a", "b"):
        assert cli("generate", "--order", "64", "--labeling", "gray", "--set", "demapper.scale_width=4",
                   "--out", str(tmp_path / run)).code == 0
    a, b = _tree(tmp_path / "a"), _tree(tmp_path / "b")
    assert a == b and "qam64-gray-maxlog/manifest.json" in a


def test_design_toml_regenerates_every_file(cli, tmp_path: Path) -> None:
    first = tmp_path / "first"
    assert cli("generate", "--order", "16", "--table", str(REPO / "generator/spec/examples/larkspur-spur-16.csv"),
               "--name", "spur", "--out", str(first)).code == 0
    second = tmp_path / "second"
    assert cli("generate", str(first / "spur" / "design.toml"), "--out", str(second)).code == 0
    assert _tree(first) == _tree(second)
    # and over itself, in place
    assert cli("generate", str(first / "spur" / "design.toml"), "--out", str(first)).code == 0
    assert _tree(first) == _tree(second)


def test_flags_override_a_spec_file(cli, tmp_path: Path) -> None:
    assert cli("generate", "larkspur-backhaul-256", "--algorithm", "folded", "--name", "bh-folded",
               "--set", 'interface.prefix="bhf"', "--out", str(tmp_path)).code == 0
    spec = json.loads((tmp_path / "bh-folded" / MANIFEST).read_text())["spec"]
    assert spec["demapper"]["algorithm"] == "folded" and spec["constellation"]["order"] == 256
    assert spec["interface"]["prefix"] == "bhf"


def test_list_shows_what_is_supported(cli) -> None:
    r = cli("list")
    assert r.code == 0
    for text in ("2, 4, 8, 16, 32, 64, 128, 256, 512, 1024, 2048, 4096", "gray, 3gpp-nr, ieee-802.11, natural, table", "maxlog, folded, hard",
                 "half-even, half-away, floor", "demapper.llr_width", "[default 8]", f"{DEFAULT_EXAMPLE} (default)",
                 "larkspur-telemetry-qpsk"):
        assert text in r.out, text


@pytest.mark.parametrize("name", ["larkspur-telemetry-qpsk", "larkspur-spur-16"])
@pytest.mark.parametrize("block", ["mapper", "demapper"])
def test_run_reproduces_the_expected_vectors(cli, tmp_path: Path, name: str, block: str) -> None:
    assert cli("generate", name, "--out", str(tmp_path)).code == 0
    design = tmp_path / name
    expected = (design / "vectors" / f"{block}_out.hex").read_bytes()
    r = cli("run", str(design), "--block", block, "--input", str(design / "vectors" / f"{block}_in.hex"))
    assert r.code == 0 and r.out.encode() == expected
    out = tmp_path / "result.hex"
    assert cli("run", str(design / "design.toml"), "--block", block, "--output", str(out)).code == 0
    assert out.read_bytes() == expected


def test_run_refuses_malformed_words(cli, tmp_path: Path) -> None:
    assert cli("generate", "larkspur-telemetry-qpsk", "--out", str(tmp_path)).code == 0
    bad = tmp_path / "bad.hex"
    bad.write_text("// two labels\n1\n7\n")
    r = cli("run", str(tmp_path / "larkspur-telemetry-qpsk"), "--block", "mapper", "--input", str(bad))
    assert r.code == 2 and r.err.startswith("qamsmith: error: --input = ") and "at most 2 bits" in r.err
    bad.write_text("zz\n")
    assert cli("run", str(tmp_path / "larkspur-telemetry-qpsk"), "--block", "demapper", "--input", str(bad)).code == 2


def test_one_static_table_of_commands(cli) -> None:
    assert [c.name for c in COMMANDS] == ["generate", "list", "run", "verify", "analyze", "widths", "cost", "explore"]
    r = cli("--help")
    assert r.code == 0 and all(c.name in r.out for c in COMMANDS)


@pytest.mark.parametrize("name", sorted(examples()))
def test_committed_out_designs_regenerate_byte_for_byte(name: str) -> None:
    """Golden files: out/<name>/ holds exactly what the current generator writes for that example."""
    target = REPO / "out" / name
    assert target.is_dir(), f"out/{name} is missing: run `qamsmith generate {name}` and commit it"
    spec = DesignSpec.from_toml(target / "design.toml")
    assert spec == DesignSpec.from_toml(REPO / "generator" / "spec" / "examples" / f"{name}.toml")
    files = build_files(spec)
    listed = {e["path"] for e in json.loads((target / MANIFEST).read_text())["files"]} | {MANIFEST}
    assert listed == set(files)
    stale = [path for path, data in files.items() if (target / path).read_bytes() != data]
    assert not stale, f"out/{name} is stale ({stale[:3]}): regenerate with `qamsmith generate {name} --force`"
