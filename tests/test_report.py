"""`qamsmith analyze` / `qamsmith widths`: the report directory, its JSON keys, determinism, bad input."""

from __future__ import annotations

import json
import os
from pathlib import Path

import pytest

pytest.importorskip("matplotlib")

#: the keys analysis.json must hold (issue 4, item 4)
POINT_KEYS = {"esn0_db", "ebn0_db", "ber_fixed", "ber_theory", "gmi_fixed", "gmi_maxlog", "gmi_exact"}
TOP_KEYS = {"evm_db", "evm_percent", "loss_db_vs_exact", "loss_db_vs_maxlog", "operating_point_esn0_db",
            "symbols", "seed"}
FAST = ("--symbols", "2048", "--widths-symbols", "2048")


@pytest.fixture(scope="module")
def report_dir(tmp_path_factory: pytest.TempPathFactory) -> Path:
    from qamsmith.cli import main

    root = tmp_path_factory.mktemp("out")
    assert main(["analyze", "larkspur-telemetry-qpsk", "--out", str(root), "--snr", "0:3:9", *FAST]) == 0
    return root / "larkspur-telemetry-qpsk" / "report"


def test_report_files(report_dir: Path) -> None:
    names = {p.name for p in report_dir.iterdir()}
    assert names == {"analysis.json", "widths.json", "report.md", "constellation.png", "cloud.png",
                     "llr_transfer.png", "ber.png", "gmi.png", "loss_vs_width.png"}
    for png in report_dir.glob("*.png"):
        assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    text = (report_dir / "report.md").read_text(encoding="utf-8")
    for png in report_dir.glob("*.png"):
        assert f"]({png.name})" in text
    assert "K. Cho and D. Yoon" in text and "**Recommended:**" in text
    # no leftovers of the staging directory beside the report
    assert not [p for p in report_dir.parent.iterdir() if p.name.startswith(".")]


def test_analysis_json_keys(report_dir: Path) -> None:
    doc = json.loads((report_dir / "analysis.json").read_text(encoding="utf-8"))
    assert TOP_KEYS <= set(doc)
    assert [p["esn0_db"] for p in doc["points"]] == [0.0, 3.0, 6.0, 9.0]
    for p in doc["points"]:
        assert POINT_KEYS <= set(p)
        assert p["ebn0_db"] == pytest.approx(p["esn0_db"] - 3.0103, abs=1e-3)
    assert doc["symbols"] == 2048 and doc["seed"] == 1
    assert doc["loss_db_vs_exact"] is not None


def test_report_is_deterministic(report_dir: Path, tmp_path: Path) -> None:
    from qamsmith.cli import main

    assert main(["analyze", "larkspur-telemetry-qpsk", "--out", str(tmp_path), "--snr", "0:3:9", *FAST]) == 0
    again = tmp_path / "larkspur-telemetry-qpsk" / "report"
    for p in report_dir.iterdir():
        assert (again / p.name).read_bytes() == p.read_bytes(), p.name


def test_analyze_a_generated_directory_with_ebn0(cli, tmp_path: Path) -> None:
    gen = cli("generate", "larkspur-spur-16", "--out", str(tmp_path))
    assert gen.code == 0, gen.err
    design = tmp_path / "larkspur-spur-16"
    res = cli("analyze", str(design), "--ebn0", "4,8", "--no-widths", "--symbols", "2048")
    assert res.code == 0, res.err
    assert res.err == ""                       # no progress bar when stderr is not a terminal
    doc = json.loads((design / "report" / "analysis.json").read_text(encoding="utf-8"))
    assert [p["ebn0_db"] for p in doc["points"]] == [4.0, 8.0]
    assert not (design / "report" / "widths.json").exists()
    # a second run replaces the report as a whole
    res = cli("analyze", str(design), "--snr", "5", "--no-widths", "--symbols", "2048")
    assert res.code == 0
    doc = json.loads((design / "report" / "analysis.json").read_text(encoding="utf-8"))
    assert [p["esn0_db"] for p in doc["points"]] == [5.0]


@pytest.mark.parametrize("args, message", [
    (("--snr", "10;12"), "--snr = '10;12': a list like 10,12,14 or a range start:step:stop"),
    (("--snr", "20:2:8"), "a non-empty range"),
    (("--ebn0", "1:0:4"), "a positive step"),
    # 100 expected bit errors at 2 bits per symbol and BER 1e-6: 100 / (2 * 1e-6) symbols
    (("--symbols", "100000", "--ber-floor", "1e-6"), "at least 50000000 to estimate a BER of 1e-06"),
    (("--symbols", "10"), "symbols = 10: an integer of at least 1024"),
    (("--gmi-target", "1.5"), "--gmi-target = 1.5"),
])
def test_bad_input_exit_2_nothing_written(cli, tmp_path: Path, args: tuple[str, ...], message: str) -> None:
    res = cli("analyze", "larkspur-telemetry-qpsk", "--out", str(tmp_path), *args)
    assert res.code == 2
    assert message in res.err and res.err.count("\n") == 1
    assert list(tmp_path.iterdir()) == []


def test_unwritable_report_directory(cli, tmp_path: Path) -> None:
    (tmp_path / "larkspur-telemetry-qpsk").write_text("a file in the way\n")
    res = cli("analyze", "larkspur-telemetry-qpsk", "--out", str(tmp_path), "--snr", "5", "--symbols", "2048")
    assert res.code == 2 and "report" in res.err and "writable directory" in res.err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["larkspur-telemetry-qpsk"]


@pytest.mark.skipif(os.geteuid() == 0, reason="root writes into read-only directories")
def test_read_only_directory(cli, tmp_path: Path) -> None:
    (tmp_path / "ro").mkdir()
    os.chmod(tmp_path / "ro", 0o500)
    try:
        res = cli("analyze", "larkspur-telemetry-qpsk", "--out", str(tmp_path / "ro"), "--snr", "5", "--symbols", "2048")
    finally:
        os.chmod(tmp_path / "ro", 0o700)
    assert res.code == 2 and "writable directory" in res.err


def test_widths_command(cli, tmp_path: Path) -> None:
    out = tmp_path / "w.json"
    res = cli("widths", "larkspur-telemetry-qpsk", "--symbols", "2048", "--budget", "0.3", "--json", str(out))
    assert res.code == 0, res.err
    assert "recommended:" in res.out and "llr" in res.out
    data = json.loads(out.read_text(encoding="utf-8"))
    assert data["budget_db"] == 0.3 and data["recommended"]["settings"]
    bad = cli("widths", "larkspur-telemetry-qpsk", "--budget", "-1", "--json", str(tmp_path / "x.json"))
    assert bad.code == 2 and "budget_db = -1.0" in bad.err
    assert not (tmp_path / "x.json").exists()
    (tmp_path / "file").write_text("in the way\n")
    blocked = cli("widths", "larkspur-telemetry-qpsk", "--json", str(tmp_path / "file" / "w.json"))
    assert blocked.code == 2 and "a writable location" in blocked.err


def _analyzed(root: Path, *extra: str) -> Path:
    """A fresh QPSK report directory (analyze, small Monte-Carlo), its path."""
    from qamsmith.cli import main

    assert main(["analyze", "larkspur-telemetry-qpsk", "--out", str(root), "--snr", "0:3:6", *FAST, *extra]) == 0
    return root / "larkspur-telemetry-qpsk" / "report"


HW_MD = "## Hardware cost\n\n| module | LUTs |\n| --- | ---: |\n| mapper | 17 |\n"


def test_hardware_figures_join_the_report_and_survive_a_new_analysis(tmp_path: Path) -> None:
    """What `qamsmith cost` wrote joins report.md on a rebuild; a later `analyze` keeps it, byte for byte."""
    from qamsmith.flows.report import rebuild_report

    report = _analyzed(tmp_path)
    assert "Not measured yet: `qamsmith cost" in (report / "report.md").read_text(encoding="utf-8")
    (report / "hardware.md").write_text(HW_MD, encoding="utf-8")
    (report / "hardware.json").write_text('{"design": "larkspur-telemetry-qpsk"}\n', encoding="utf-8")
    assert rebuild_report(report) == report / "report.md"
    text = (report / "report.md").read_text(encoding="utf-8")
    assert text.count("| mapper | 17 |") == 1 and "Not measured yet" not in text
    assert text.index("## Widths against") < text.index("## Hardware cost") < text.index("## Method")
    assert "Data (this directory): analysis.json, hardware.json, widths.json." in text
    _analyzed(tmp_path)
    assert (report / "hardware.md").read_text(encoding="utf-8") == HW_MD
    assert (report / "hardware.json").read_text(encoding="utf-8") == '{"design": "larkspur-telemetry-qpsk"}\n'
    assert (report / "report.md").read_text(encoding="utf-8") == text


def test_report_md_follows_widths(tmp_path: Path) -> None:
    """`qamsmith widths` into report/ (report.write_widths): report.md and loss_vs_width.png follow the new
    widths.json; the other plots stay as they were, byte for byte."""
    from qamsmith.flows.report import SOURCE_KEY, _png_text, write_widths
    from qamsmith.spec import load_spec

    report = _analyzed(tmp_path)
    before = {p.name: p.read_bytes() for p in report.iterdir()}
    assert "Budget 0.1 dB" in before["report.md"].decode()
    result = write_widths(load_spec("larkspur-telemetry-qpsk"), report / "widths.json", budget_db=0.3, symbols=4096,
                          seed=2)
    text = (report / "report.md").read_text(encoding="utf-8")
    assert "Budget 0.3 dB" in text and "Budget 0.1 dB" not in text and "4096 symbols per candidate" in text
    for s in ("mapper", "input", "llr"):                       # the table is the new widths.json's
        for r in result[f"{s}_best"]:
            assert f" | {r['width']} | {'-' if r['fraction'] is None else r['fraction']} | {r['loss_db']:.4f} |" in text
    assert json.loads((report / "widths.json").read_text(encoding="utf-8"))["budget_db"] == 0.3
    assert _png_text((report / "loss_vs_width.png").read_bytes())[SOURCE_KEY].startswith("widths.json sha256:")
    assert (report / "loss_vs_width.png").read_bytes() != before["loss_vs_width.png"]
    for name in ("analysis.json", "ber.png", "gmi.png", "cloud.png", "constellation.png", "llr_transfer.png"):
        assert (report / name).read_bytes() == before[name], name
    assert not [p for p in report.iterdir() if p.name.startswith(".")]


def test_widths_join_a_report_analyzed_without_them(tmp_path: Path) -> None:
    from qamsmith.flows.report import write_widths
    from qamsmith.spec import load_spec

    report = _analyzed(tmp_path, "--no-widths")
    text = (report / "report.md").read_text(encoding="utf-8")
    assert "## Widths" not in text and not (report / "loss_vs_width.png").exists()
    write_widths(load_spec("larkspur-telemetry-qpsk"), report / "widths.json", symbols=2048)
    text = (report / "report.md").read_text(encoding="utf-8")
    assert "## Widths against the loss budget" in text and "![loss against width](loss_vs_width.png)" in text
    assert (report / "loss_vs_width.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    # a new analysis without widths keeps the explorer's table: nothing another command wrote is lost
    _analyzed(tmp_path, "--no-widths")
    assert "## Widths against the loss budget" in (report / "report.md").read_text(encoding="utf-8")
    assert (report / "widths.json").is_file() and (report / "loss_vs_width.png").is_file()


def test_widths_elsewhere_leave_the_report_alone(tmp_path: Path) -> None:
    from qamsmith.flows.report import write_widths
    from qamsmith.spec import load_spec

    report = _analyzed(tmp_path, "--no-widths")
    before = (report / "report.md").read_bytes()
    write_widths(load_spec("larkspur-telemetry-qpsk"), tmp_path / "w" / "widths.json", symbols=2048)
    assert (report / "report.md").read_bytes() == before and not (report / "widths.json").exists()


def test_a_later_section_joins_without_code(tmp_path: Path) -> None:
    """A <name>.json with its <name>.md (e.g. the design-space explorer's) joins report.md, before the method,
    and a new analysis keeps it."""
    from qamsmith.flows.report import rebuild_report

    report = _analyzed(tmp_path)
    (report / "explore.json").write_text('{"design": "larkspur-telemetry-qpsk", "candidates": []}\n')
    (report / "explore.md").write_text("## Design space\n\nthree candidates\n")
    (report / "explore-cache").mkdir()
    (report / "explore-cache" / "a.json").write_text("{}\n")
    rebuild_report(report)
    text = (report / "report.md").read_text(encoding="utf-8")
    assert text.index("## Hardware cost") < text.index("## Design space\n\nthree candidates") < text.index("## Method")
    assert "explore.json" in text.split("## Method")[1]
    _analyzed(tmp_path)
    assert "three candidates" in (report / "report.md").read_text(encoding="utf-8")
    assert (report / "explore-cache" / "a.json").read_text() == "{}\n"


def test_rebuild_without_analysis(tmp_path: Path) -> None:
    """`qamsmith cost` before any analysis: report.md still tells what there is and what is missing."""
    from qamsmith.flows.report import rebuild_report

    report = tmp_path / "d" / "report"
    report.mkdir(parents=True)
    (report / "hardware.json").write_text('{"design": "lvt-x"}\n')
    (report / "hardware.md").write_text(HW_MD)
    text = rebuild_report(report).read_text(encoding="utf-8")
    assert text.startswith("# Design review: lvt-x\n") and "Not analyzed yet: `qamsmith analyze" in text
    assert "| mapper | 17 |" in text and "Data (this directory): hardware.json." in text
    assert sorted(p.name for p in report.iterdir()) == ["hardware.json", "hardware.md", "report.md"]


def test_rebuild_of_an_up_to_date_report_draws_nothing(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Each plot drawn from a JSON names that JSON's hash: a rebuild with nothing changed needs no matplotlib
    and changes no byte."""
    from qamsmith.flows import report as rp

    report = _analyzed(tmp_path)
    before = {p.name: p.read_bytes() for p in report.iterdir()}

    def refuse():
        raise AssertionError("nothing to draw")

    monkeypatch.setattr(rp, "_pyplot", refuse)
    rp.rebuild_report(report)
    assert {p.name: p.read_bytes() for p in report.iterdir()} == before


def test_a_plot_that_cannot_be_redrawn_is_removed(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Without matplotlib, a plot whose JSON changed is not left beside it out of date: removed, and said so."""
    from qamsmith.flows import report as rp

    report = _analyzed(tmp_path)
    widths = json.loads((report / "widths.json").read_text(encoding="utf-8"))
    widths["budget_db"] = 0.25
    (report / "widths.json").write_text(json.dumps(widths), encoding="utf-8")
    monkeypatch.setattr(rp, "_have_matplotlib", lambda: False)
    rp.rebuild_report(report)
    text = (report / "report.md").read_text(encoding="utf-8")
    assert not (report / "loss_vs_width.png").exists() and (report / "gmi.png").exists()
    assert "*loss against width: no plot (loss_vs_width.png; matplotlib is not installed" in text
    assert "Budget 0.25 dB" in text and "![GMI](gmi.png)" in text


def test_a_broken_json_is_refused_in_one_line(tmp_path: Path, cli) -> None:
    report = _analyzed(tmp_path)
    (report / "hardware.json").write_text("{not json\n")
    (report / "hardware.md").write_text(HW_MD)
    res = cli("analyze", "larkspur-telemetry-qpsk", "--out", str(tmp_path), "--snr", "3", "--no-widths", *FAST[:2])
    assert res.code == 2 and res.err.count("\n") == 1
    assert "hardware.json" in res.err and "a JSON object as qamsmith writes it" in res.err
    assert (report / "hardware.json").read_text() == "{not json\n"           # nothing replaced


def test_gmi_gap_intervals(report_dir: Path) -> None:
    """analysis.json holds the loss itself per point: float exact minus fixed (and max-log) GMI, paired intervals."""
    doc = json.loads((report_dir / "analysis.json").read_text(encoding="utf-8"))
    for p in doc["points"]:
        for name in ("fixed", "maxlog"):
            lo, hi = p[f"gmi_gap_{name}_vs_exact_ci95"]
            gap = p["gmi_exact"] - p[f"gmi_{name}"]
            assert lo - 1e-6 <= gap <= hi + 1e-6
            # paired batches: never wider than the two intervals side by side
            w = [p[f"gmi_{n}_ci95"][1] - p[f"gmi_{n}_ci95"][0] for n in ("exact", name)]
            assert hi - lo <= w[0] + w[1] + 1e-9



def test_report_names_every_word_format(report_dir: Path) -> None:
    """The first paragraph comes from analysis.json's "words", so a rebuild needs no spec."""
    from qamsmith.model import derive
    from qamsmith.spec import load_spec

    spec = load_spec("larkspur-telemetry-qpsk")
    d = derive(spec)
    words = json.loads((report_dir / "analysis.json").read_text(encoding="utf-8"))["words"]
    assert words == {"mapper_width": spec.mapper.width, "mapper_format": str(d.mapper_format),
                     "mapper_scaling": spec.mapper.scaling, "input_width": spec.demapper.input_width,
                     "input_format": str(d.input_format), "llr_width": spec.demapper.llr_width,
                     "llr_format": str(d.llr_format), "scale_width": spec.demapper.scale_width}
    assert (f"mapper {spec.mapper.width}-bit {d.mapper_format} ({spec.mapper.scaling}); demapper "
            f"{spec.demapper.algorithm}, input {spec.demapper.input_width}-bit {d.input_format}, LLR "
            f"{spec.demapper.llr_width}-bit {d.llr_format}") in (report_dir / "report.md").read_text(encoding="utf-8")


def test_plots_record_their_data(report_dir: Path) -> None:
    from qamsmith.flows.report import SOURCE_KEY, _png_text

    import hashlib

    for png, data in (("ber.png", "analysis.json"), ("gmi.png", "analysis.json"), ("loss_vs_width.png", "widths.json")):
        digest = hashlib.sha256((report_dir / data).read_bytes()).hexdigest()[:16]
        assert _png_text((report_dir / png).read_bytes())[SOURCE_KEY].startswith(f"{data} sha256:{digest};")
    for png in ("cloud.png", "constellation.png", "llr_transfer.png"):
        assert SOURCE_KEY not in _png_text((report_dir / png).read_bytes())
        assert "Software" not in _png_text((report_dir / png).read_bytes())
