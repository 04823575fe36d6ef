"""The register plan: how many registers follow each step, and which signals each register stage holds.

A module is a chain of steps; `place_registers` spreads a stage count over them (0: one register
after every step; extra registers beyond the steps go after the last one, so the output always
comes from flops). `schedule` then works out liveness: a register stage after step b holds
exactly the signals that a later step or the output reads, plus the sideband (tlast, tuser)
that travels with every symbol. Register k of signal s is named `<s>_s<k>_reg` by the back ends.
"""

from __future__ import annotations

from dataclasses import dataclass

from .core import Bits, Datapath, Signal


def place_registers(steps: int, stages: int) -> list[int]:
    """Registers after each of `steps` steps for `stages` register stages (0: one per step).

    The last step always gets at least one (outputs come from flops); surplus registers go
    after the last step; otherwise at most one register sits between two steps.
    """
    if steps < 1:
        raise ValueError("a module has at least one step")
    if stages == 0:
        return [1] * steps
    plan = [0] * steps
    if stages >= steps:
        plan = [1] * steps
        plan[-1] += stages - steps
        return plan
    for s in range(stages):
        plan[min(steps - 1, round((s + 1) * steps / stages) - 1)] += 1
    plan[-1] = max(plan[-1], 1)
    # collisions (several registers after one step) move to the next free boundary
    while sum(plan) > stages or any(p > 1 for p in plan[:-1]):
        for b, p in enumerate(plan[:-1]):
            if p > 1:
                plan[b] -= 1
                plan[b + 1] += 1
                break
        else:
            break
    return plan


@dataclass(frozen=True)
class Bank:
    """One register stage: its number, the step it follows, and the signals it holds."""

    stage: int
    after_step: int
    signals: tuple[Signal, ...]


@dataclass(frozen=True)
class Schedule:
    """The register plan of a datapath: registers after each step, and every register stage's contents."""

    plan: tuple[int, ...]
    banks: tuple[Bank, ...]
    #: sideband signals carried from the input to the output beside the data (tlast, tuser)
    carried: tuple[Signal, ...]

    @property
    def latency(self) -> int:
        """Cycles from an accepted input to its output (one per register stage)."""
        return len(self.banks)

    def banks_after(self, step: int) -> tuple[Bank, ...]:
        return tuple(b for b in self.banks if b.after_step == step)


def schedule(dp: Datapath, stages: int, carried: tuple[Signal, ...] = ()) -> Schedule:
    """Place `stages` register stages (0: one per step) and fill each with the signals still needed."""
    plan = place_registers(len(dp.steps), stages)
    last_read: dict[str, int] = {}
    for b, st in enumerate(dp.steps):
        for x in st.reads():
            if isinstance(x, (Signal, Bits)):
                last_read[x.name] = b
    end = len(dp.steps)
    for f in dp.outputs:
        if isinstance(f.value, Signal):
            last_read[f.value.name] = end
    for s in carried:
        last_read[s.name] = end
    alive: list[Signal] = [f.value for f in dp.inputs if isinstance(f.value, Signal)] + list(carried)
    banks: list[Bank] = []
    stage = 0
    for b, st in enumerate(dp.steps):
        alive += list(st.defines())
        alive = [s for s in alive if last_read.get(s.name, -1) > b]
        for _ in range(plan[b]):
            banks.append(Bank(stage, b, tuple(alive)))
            stage += 1
    return Schedule(tuple(plan), tuple(banks), tuple(carried))


__all__ = ["Bank", "Schedule", "place_registers", "schedule"]
