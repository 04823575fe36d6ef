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


def test_hardware_figures_join_the_report_and_survive_a_new_analysis(tmp_path: Path) -> None:
    """`qamsmith cost` splices report/hardware.md into report.md; a later `analyze` keeps both."""
    from qamsmith.cli import main
    from qamsmith.flows.report import splice_hardware

    assert main(["analyze", "larkspur-telemetry-qpsk", "--out", str(tmp_path), "--snr", "0:3:6", *FAST]) == 0
    report = tmp_path / "larkspur-telemetry-qpsk" / "report"
    text = (report / "report.md").read_text(encoding="utf-8")
    assert "Not measured yet: `qamsmith cost" in text
    hw = "## Hardware cost\n\n| module | LUTs |\n| --- | ---: |\n| mapper | 17 |\n"
    (report / "hardware.md").write_text(hw, encoding="utf-8")
    (report / "hardware.json").write_text("{}\n", encoding="utf-8")
    spliced = splice_hardware(text, hw)
    assert "| mapper | 17 |" in spliced and "Not measured yet" not in spliced
    assert splice_hardware(spliced, hw) == spliced          # idempotent: one hardware part, replaced in place
    assert main(["analyze", "larkspur-telemetry-qpsk", "--out", str(tmp_path), "--snr", "0:3:6", *FAST]) == 0
    assert (report / "hardware.md").read_text(encoding="utf-8") == hw
    assert (report / "hardware.json").read_text(encoding="utf-8") == "{}\n"
    assert "| mapper | 17 |" in (report / "report.md").read_text(encoding="utf-8")
