"""Verilog generation: template context from a Design, rendered from templates/*.v.j2."""

from __future__ import annotations

from typing import Any


def manifest(design: Any) -> dict[str, Any]:
    """Manifest entries of the RTL: modules, ports, latency (filled in by the RTL work)."""
    return {}


def files(design: Any) -> dict[str, str]:
    """Generated RTL files, relative path -> text (filled in by the RTL work)."""
    return {}
