"""Shared fixtures: the repository layout and an in-process `qamsmith` command runner."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parent.parent


@dataclass
class CliResult:
    code: int
    out: str
    err: str


@pytest.fixture
def repo() -> Path:
    """The repository root (pyproject.toml, generator/, templates/, out/)."""
    return REPO


@pytest.fixture
def cli(capsys: pytest.CaptureFixture[str]):
    """Run `qamsmith ARGS...` in-process; returns its exit status, stdout and stderr."""
    from qamsmith.cli import main

    def run(*argv: str) -> CliResult:
        capsys.readouterr()
        try:
            code = main(list(argv))
        except SystemExit as exc:            # argparse usage errors and --help
            code = int(exc.code or 0)
        captured = capsys.readouterr()
        return CliResult(code, captured.out, captured.err)

    return run
