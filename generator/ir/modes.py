"""An adaptive core's run-time mode in the IR: selections keyed by the mode field, and the mode input.

The mode is a field of every symbol; tables keyed by {mode, ...} carry what differs between modes (the
competitor offsets, the mapper levels), and where a value itself differs (a shifted magnitude, an LLR routed to
another field, a field that is zero in a small mode) a tree of 2:1 multiplexers on the mode bits selects it.
Leaves that are the same operand share a branch, so a selection that does not depend on the mode costs nothing.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np

from ..model import Design
from .build import Builder
from .core import Operand, Signal


def mode_input(b: Builder, design: Design, lsb: int, domains: dict[str, int]) -> Signal:
    """The mode field, traced in each domain given (domain -> how many values each mode code is paired with)."""
    codes = np.arange(1 << design.mode_width, dtype=np.int64)
    orders = ", ".join(str(m.order) for m in design.modes)
    return b.input("mode", design.mode_width, False, lsb, doc=f"mode: index into the orders {orders}",
                   domains={d: np.repeat(codes, n) for d, n in domains.items()})


def mode_of_code(design: Design, code: int) -> int:
    """The mode index of a mode code (a code past the list acts as the last mode)."""
    return min(code, len(design.modes) - 1)


def mode_select(b: Builder, name: str, mode: Signal, leaves: Sequence[Operand], *, width: int | None = None,
                signed: bool | None = None, note: str = "") -> Operand:
    """leaves[mode code], as a tree of 2:1 multiplexers on the mode bits (the most significant at the root)."""
    count = [0]

    def tree(part: Sequence[Operand], bit: int) -> Operand:
        if all(x == part[0] for x in part):
            return part[0]
        half = len(part) // 2
        low, high = tree(part[:half], bit - 1), tree(part[half:], bit - 1)
        if low == high:
            return low
        count[0] += 1
        last = len(part) == len(leaves)
        return b.mux(name if last else f"{name}_m{count[0]}", mode[bit], high, low, width=width, signed=signed,
                     note=note if last else "")

    if len(leaves) != 1 << mode.width:
        raise ValueError(f"{name}: {len(leaves)} leaves for a {mode.width}-bit mode")
    return tree(list(leaves), mode.width - 1)


__all__ = ["mode_input", "mode_of_code", "mode_select"]
