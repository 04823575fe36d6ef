"""Generated cocotb testbenches (out/<name>/tb/), rendered from templates/tb_*.j2."""

from __future__ import annotations

from typing import Any


def files(design: Any) -> dict[str, str]:
    """Generated testbench files, relative path -> text (filled in by the RTL work)."""
    return {}
