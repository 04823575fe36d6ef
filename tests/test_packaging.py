"""Packaging: a plain (non-editable) wheel ships the templates and the built-in examples as package
data, and the package works from it (templates load, examples generate)."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parent.parent
SOURCES = ("pyproject.toml", "README.md", "LICENSE", "generator", "templates")


@pytest.fixture(scope="module")
def wheel(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A wheel built from a copy of the source tree (the checkout itself is left untouched)."""
    root = tmp_path_factory.mktemp("pkg")
    src = root / "src"
    src.mkdir()
    for name in SOURCES:
        path = REPO / name
        if path.is_dir():
            shutil.copytree(path, src / name, ignore=shutil.ignore_patterns("__pycache__", "*.pyc"))
        else:
            shutil.copy2(path, src / name)
    dist = root / "dist"
    proc = subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation", "--no-index",
                           "-q", ".", "-w", str(dist)], cwd=src, capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stdout + proc.stderr
    (whl,) = dist.glob("qamsmith-*.whl")
    return whl


def test_wheel_holds_templates_and_examples(wheel: Path) -> None:
    names = set(zipfile.ZipFile(wheel).namelist())
    templates = sorted(p.relative_to(REPO / "templates").as_posix() for p in (REPO / "templates").glob("*/*.j2"))
    examples = sorted(p.name for p in (REPO / "generator" / "spec" / "examples").iterdir() if p.suffix in (".toml", ".csv"))
    assert templates, "templates/ holds no *.j2"
    assert {f"qamsmith/templates/{t}" for t in templates} <= names
    assert {f"qamsmith/spec/examples/{e}" for e in examples} <= names
    assert "larkspur-backhaul-256.toml" in examples and "larkspur-telemetry-qpsk.toml" in examples
    entry = next(n for n in names if n.endswith(".dist-info/entry_points.txt"))
    assert "qamsmith = qamsmith.cli:main" in zipfile.ZipFile(wheel).read(entry).decode()


def test_installed_layout_loads_templates_and_generates(wheel: Path, tmp_path: Path) -> None:
    site = tmp_path / "site"
    zipfile.ZipFile(wheel).extractall(site)
    script = (
        "import sys, qamsmith, qamsmith.hdl as h, qamsmith.cli as c\n"
        "print(qamsmith.__file__)\n"
        "assert any(n.endswith('.j2') for n in h.environment().list_templates())\n"
        "sys.exit(c.main(['generate', 'larkspur-telemetry-qpsk', '--out', 'out']))\n"
    )
    env = {**os.environ, "PYTHONPATH": str(site)}
    proc = subprocess.run([sys.executable, "-c", script], cwd=tmp_path, env=env, capture_output=True, text=True,
                          timeout=120)
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert proc.stdout.splitlines()[0].startswith(str(site))           # the wheel's copy, not the checkout
    assert (tmp_path / "out" / "larkspur-telemetry-qpsk" / "manifest.json").is_file()
