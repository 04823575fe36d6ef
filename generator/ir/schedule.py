"""Register placement from the delay model: each operation goes into the earliest register stage whose
longest path stays within a time budget (as soon as possible, operation by operation).

The budget is a clock target (`interface.target_mhz`), the smallest that fits a requested stage count
(`interface.*_stages`), or by default 1.25 times the delay of the datapath's widest adder on the
chosen family (`interface.family`): then no register stage is placed without logic before it. A register stage k holds every signal computed in stages <= k
that a later stage (or the output word) reads, and the sideband carried beside the data; register k
of signal s is named `<s>_s<k>_reg` by the back ends.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Iterator, Mapping

from ..errors import SpecError
from .core import (Add, Assign, Bits, Compare, Concat, Const, Datapath, FlipIf, Gate, Logic, Lookup, Mux, Operand, Reduce,
                   Resize, Signal, Step, Sub)
from .timing import Calibration, op_delay


@dataclass(frozen=True)
class Bank:
    """One register stage: its number, the steps whose operations feed it, and the signals it holds."""

    stage: int
    steps: tuple[str, ...]
    signals: tuple[Signal, ...]


@dataclass(frozen=True)
class Schedule:
    """Where every operation of a datapath sits: the register stage it computes in, and each stage's bank."""

    #: stage of each assignment's destination (by signal name)
    stage_of: Mapping[str, int]
    banks: tuple[Bank, ...]
    #: sideband signals carried from the input to the output beside the data (tlast, tuser)
    carried: tuple[Signal, ...]
    #: predicted longest path of each stage's logic, ns (without the register hop)
    delays_ns: tuple[float, ...]

    @property
    def latency(self) -> int:
        """Cycles from an accepted input to its output (one per register stage)."""
        return len(self.banks)

    def in_stage(self, dp: Datapath, k: int) -> Iterator[tuple[Step, Assign]]:
        """The assignments computed in stage k, in the datapath's order, with their step."""
        for st in dp.steps:
            for a in st.assigns:
                if self.stage_of[a.dst.name] == k:
                    yield st, a


#: the default budget: the widest adder's delay times this (the Fmax goal is 0.9 of a bare adder's)
DEFAULT_SLACK = 1.25


def _reads(a: Assign) -> list[str]:
    return [x.name for x in a.op.operands() if isinstance(x, (Signal, Bits))]


#: operations computed bit by bit in LUTs (a chain of them merges into one LUT while it has few inputs)
_BITWISE = (Mux, Gate, FlipIf, Logic, Resize, Concat, Reduce, Lookup)
#: inputs of one LUT of the family (LUT4 on iCE40 and ECP5)
_LUT_INPUTS = 4


@dataclass
class _At:
    """Where a signal's value is ready within its stage: the start of its LUT cone, the LUT levels since,
    and the inputs of the cone's last LUT per output bit."""

    start: float
    levels: int
    cone: int

    def time(self, cal: Calibration) -> float:
        return self.start + self.levels * cal.lut_ns


def _timing(a: Assign, here: list[tuple[Operand, _At | None]], cal: Calibration) -> _At:
    """The arrival of an operation's result from its operands' arrivals in the same stage (None: a register)."""
    op = a.op
    fresh = [_At(0.0, 0, 1) if at is None else at for _, at in here]
    if not isinstance(op, _BITWISE):
        start = max((at.time(cal) for at in fresh), default=0.0)
        return _At(start + op_delay(op, a.dst, cal), 0, 1)
    cones = [0 if isinstance(x, Const) else at.cone * (x.width if isinstance(op, (Reduce, Lookup)) else 1)
             for (x, _), at in zip(here, fresh)]
    start = max((at.start for (x, _), at in zip(here, fresh) if not isinstance(x, Const)), default=0.0)
    levels = max((at.levels for (x, _), at in zip(here, fresh) if not isinstance(x, Const)), default=0)
    total = sum(cones)
    if isinstance(op, (Resize, Concat)):                  # wiring: the cones pass through
        return _At(start, levels, max(cones, default=1))
    if total <= _LUT_INPUTS:                              # merges into the LUT before it
        return _At(start, max(levels, 1), max(total, 1))
    if isinstance(op, (Reduce, Lookup)):
        width = op.a.width if isinstance(op, Reduce) else op.key.width
        return _At(start, levels + max(1, math.ceil(math.log(max(width, 2), _LUT_INPUTS))), 1)
    return _At(start, levels + 1, sum(1 for c in cones if c))


def place(dp: Datapath, budget_ns: float, cal: Calibration) -> tuple[dict[str, int], list[float]]:
    """Stage of every assignment, as soon as possible within `budget_ns` of logic per stage, and each stage's delay."""
    stage: dict[str, int] = {f.value.name: 0 for f in dp.inputs if isinstance(f.value, Signal)}
    at: dict[str, _At | None] = dict.fromkeys(stage)    # None: straight from a register (or an input)
    placed: dict[str, int] = {}
    delays: dict[int, float] = {}
    for a in dp.assigns():
        operands = [x for x in a.op.operands() if isinstance(x, (Signal, Bits, Const))]
        k = max((stage[x.name] for x in operands if not isinstance(x, Const)), default=0)

        def arrivals(k_: int) -> list[tuple[Operand, _At | None]]:
            return [(x, None if isinstance(x, Const) or stage[x.name] < k_ else at[x.name]) for x in operands]

        t = _timing(a, arrivals(k), cal)
        if t.time(cal) > budget_ns and any(v is not None for _, v in arrivals(k)):
            k += 1                                        # this operation starts after a register
            t = _timing(a, arrivals(k), cal)
        stage[a.dst.name] = placed[a.dst.name] = k
        at[a.dst.name] = t
        delays[k] = max(delays.get(k, 0.0), t.time(cal))
    count = max(placed.values(), default=0) + 1
    return placed, [delays.get(k, 0.0) for k in range(count)]


def widest_adder_ns(dp: Datapath, cal: Calibration) -> float:
    """The delay of the datapath's widest adder, subtractor or compare (the default budget)."""
    adders = [op_delay(a.op, a.dst, cal) for a in dp.assigns() if isinstance(a.op, (Add, Sub, Compare))]
    return max(adders, default=max((op_delay(a.op, a.dst, cal) for a in dp.assigns()), default=0.0))


def _budget_for_stages(dp: Datapath, stages: int, cal: Calibration) -> float:
    """The smallest budget (ns) whose schedule needs at most `stages` register stages."""
    delays = sorted({op_delay(a.op, a.dst, cal) for a in dp.assigns()} - {0.0})
    lo, hi = (delays[-1] if delays else 0.0), sum(delays) * len(list(dp.assigns())) + 1.0
    if len(place(dp, lo, cal)[1]) <= stages:
        return lo
    for _ in range(60):                         # bisection on the budget
        mid = (lo + hi) / 2
        if len(place(dp, mid, cal)[1]) <= stages:
            hi = mid
        else:
            lo = mid
    return hi


def schedule(dp: Datapath, cal: Calibration, *, stages: int = 0, target_mhz: float = 0.0, role: str = "module",
             carried: tuple[Signal, ...] = ()) -> Schedule:
    """Place the registers: for a clock target, for a stage count, or (both 0) one widest adder per stage."""
    if target_mhz > 0:
        budget = 1000.0 / target_mhz - cal.register_ns
        slowest = max((op_delay(a.op, a.dst, cal), a.dst.name) for a in dp.assigns())
        if slowest[0] > budget:
            raise SpecError("interface.target_mhz", target_mhz,
                            f"at most {math.floor(1000.0 / (slowest[0] + cal.register_ns))} MHz for this design "
                            f"on {cal.part} (the {role} operation '{slowest[1]}' alone takes "
                            f"{slowest[0] + cal.register_ns:.1f} ns)")
    elif stages > 0:
        budget = _budget_for_stages(dp, stages, cal)
    else:
        budget = DEFAULT_SLACK * widest_adder_ns(dp, cal)
    placed, delays = place(dp, budget, cal)
    count = max(len(delays), stages)           # a requested count beyond the logic: registers at the output
    delays += [0.0] * (count - len(delays))
    return Schedule(placed, _banks(dp, placed, count, carried), tuple(carried), tuple(delays))


def _banks(dp: Datapath, placed: Mapping[str, int], count: int, carried: tuple[Signal, ...]) -> tuple[Bank, ...]:
    """Each stage's register bank: the signals computed by then that a later stage or the output reads."""
    last_read: dict[str, int] = {}
    for a in dp.assigns():
        for n in _reads(a):
            last_read[n] = max(last_read.get(n, -1), placed[a.dst.name])
    for f in dp.outputs:
        if isinstance(f.value, Signal):
            last_read[f.value.name] = count
    for s in carried:
        last_read[s.name] = count
    signals = [f.value for f in dp.inputs if isinstance(f.value, Signal)] + list(carried)
    defined_at = {s.name: -1 for s in signals}
    for a in dp.assigns():
        signals.append(a.dst)
        defined_at[a.dst.name] = placed[a.dst.name]
    banks = []
    for k in range(count):
        held = tuple(s for s in signals if defined_at[s.name] <= k < last_read.get(s.name, -1))
        steps = tuple(dict.fromkeys(st.name for st in dp.steps for a in st.assigns if placed[a.dst.name] == k))
        banks.append(Bank(k, steps, held))
    return tuple(banks)


def segments_ns(schedule_: Schedule, cal: Calibration) -> list[float]:
    """Register-to-register delays (ns) of a schedule: each stage's logic plus the register hop."""
    return [d + cal.register_ns for d in schedule_.delays_ns]


def predicted_fmax(schedule_: Schedule, cal: Calibration) -> float:
    """The model's Fmax (MHz) of a schedule."""
    return 1000.0 / max(segments_ns(schedule_, cal))


__all__ = ["Bank", "Schedule", "place", "predicted_fmax", "schedule", "segments_ns", "widest_adder_ns"]
