"""Layer 4, the datapath IR: what the mapper and demapper compute, as typed signals and operations.

Builders turn a `Design` into `Module`s (datapath, register plan, interface); the evaluator runs a
datapath on integer arrays with exactly the meaning the HDL back ends print; the timing model
gives every operation a delay. Nothing here knows HDL syntax.
"""

from __future__ import annotations

from .build import Builder
from .core import (OPERATIONS, Add, Assign, Bits, Compare, Concat, Const, Datapath, Field, FlipIf, Gate, Logic,
                   Lookup, Mul, Mux, Op, Operand, Reduce, Resize, Signal, Step, Sub, evaluate, output_words)
from .mapper import ROM_PARAMETERS, level_multiply, rom_images
from .module import ROLES, Module, Parameter, Port, build_module, design_modules, sideband, stream_ports
from .schedule import Bank, Schedule, schedule

__all__ = ["OPERATIONS", "ROLES", "ROM_PARAMETERS", "Add", "Assign", "Bank", "Bits", "Builder", "Compare", "Concat",
           "Const", "Datapath", "Field", "FlipIf", "Gate", "Logic", "Lookup", "Module", "Mul", "Mux", "Op", "Operand",
           "Parameter", "Port", "Reduce", "Resize", "Schedule", "Signal", "Step", "Sub", "build_module",
           "design_modules", "evaluate", "level_multiply", "output_words", "rom_images",
           "schedule", "sideband", "stream_ports"]
