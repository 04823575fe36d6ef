"""Layer 5, the HDL back ends: printers of IR modules (syntax only) and the shells in templates/."""

from __future__ import annotations

from . import verilog, vhdl
from .names import KEYWORDS, hdl_name
from .render import environment, render

#: back ends by the value of interface.language they serve
BACKENDS = {"verilog": verilog, "vhdl": vhdl}

__all__ = ["BACKENDS", "KEYWORDS", "environment", "hdl_name", "render", "verilog", "vhdl"]
