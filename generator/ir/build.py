"""`Builder`: writes a `Datapath` one operation at a time and sizes every signal from its values.

Where the inputs of an operation are known over a whole domain (for a per-axis demapper: every
input code of that axis), the builder evaluates the operation on it and takes the signal's
range, hence its width, from the values themselves: the exact range the model gives. Elsewhere
(a product with an independent reliability code, the 2-D search) it uses interval arithmetic,
which always contains the true range. An explicit width asks for the result modulo 2^width.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np

from .core import (MAX_SIGNAL_WIDTH, Add, Assign, Bits, Compare, Concat, Const, Datapath, Field, FlipIf, Gate,
                   Logic, Lookup, Mul, Mux, Op, Operand, Reduce, Resize, Signal, Step, Sub, evaluate_op,
                   operand_range, value_range, width_for)

Value = Operand | int


def interval(op: Op) -> tuple[int, int] | None:
    """The range of op's exact (unwrapped) result from its operands' ranges; None when unknown."""
    rs = [operand_range(a) for a in op.operands()]
    if isinstance(op, Resize):
        return rs[0]
    if isinstance(op, Add):
        return rs[0][0] + rs[1][0], rs[0][1] + rs[1][1]
    if isinstance(op, Sub):
        return rs[0][0] - rs[1][1], rs[0][1] - rs[1][0]
    if isinstance(op, Mul):
        (alo, ahi), (blo, bhi) = rs
        if op.a == op.b:                                  # a square
            top = max(alo * alo, ahi * ahi)
            return (0 if alo <= 0 <= ahi else min(alo * alo, ahi * ahi)), top
        corners = (alo * blo, alo * bhi, ahi * blo, ahi * bhi)
        return min(corners), max(corners)
    if isinstance(op, Concat):
        if any(getattr(p, "signed", False) and operand_range(p)[0] < 0 for p in op.parts):
            return None
        lo = hi = 0
        for p, (plo, phi) in zip(op.parts, rs):
            lo, hi = (lo << p.width) | plo, (hi << p.width) | phi
        return lo, hi
    if isinstance(op, Mux):
        return min(rs[1][0], rs[2][0]), max(rs[1][1], rs[2][1])
    if isinstance(op, (Compare, Reduce)):
        return 0, 1
    if isinstance(op, Lookup):
        klo, khi = rs[0]
        reach = [op.entries[k] if k < len(op.entries) else 0 for k in range(klo, khi + 1)]
        return min(reach), max(reach)
    if isinstance(op, Logic):
        (alo, ahi), (blo, bhi) = rs
        if alo < 0 or blo < 0:
            return None
        if op.function == "and":
            return 0, min(ahi, bhi)
        return 0, (1 << max(ahi, bhi).bit_length()) - 1
    if isinstance(op, Gate):
        return min(rs[1][0], 0), max(rs[1][1], 0)
    if isinstance(op, FlipIf):
        lo, hi = rs[1]
        return min(lo, -hi - 1), max(hi, -lo - 1)
    raise TypeError(f"unknown operation {type(op).__name__}")


class Builder:
    """Collects input fields and steps of assignments into a `Datapath`."""

    def __init__(self) -> None:
        self._inputs: list[Field] = []
        self._steps: list[tuple[str, str, list[Assign]]] = []
        self._names: set[str] = set()
        #: signal name -> {domain: its values over that domain}; a signal may be traced in several domains (an
        #: adaptive core's mode input: in each axis' domain, paired with that axis' codes)
        self._trace: dict[str, dict[str, np.ndarray]] = {}
        self._notes: dict[str, str] = {}

    # ---- inputs and steps ------------------------------------------------------------------

    def input(self, name: str, width: int, signed: bool, lsb: int, *, doc: str = "",
              domain: str | None = None, values: np.ndarray | None = None,
              domains: dict[str, np.ndarray] | None = None) -> Signal:
        """A field of the input word. `values` (every value the field takes, under `domain`) enables exact ranges;
        `domains` traces it in several domains at once (domain -> values)."""
        lo, hi = value_range(width, signed)
        sig = self._new(Signal(name, width, signed, lo, hi))
        self._inputs.append(Field(sig, lsb, doc))
        if values is not None:
            self._trace[name] = {domain or name: np.asarray(values, dtype=np.int64)}
        for dom, vals in (domains or {}).items():
            self._trace.setdefault(name, {})[dom] = np.asarray(vals, dtype=np.int64)
        return sig

    def step(self, name: str, doc: str) -> None:
        """Start a step: the assignments that follow belong to it."""
        self._steps.append((name, doc, []))

    def note(self, signal: Signal, doc: str) -> None:
        self._notes[signal.name] = doc

    # ---- assignments ---------------------------------------------------------------------

    def assign(self, name: str, op: Op, *, width: int | None = None, signed: bool | None = None,
               note: str = "") -> Signal:
        """dst = op, sized from its values (or the interval of its operands); `width` asks for modulo 2^width."""
        if not self._steps:
            raise ValueError("an assignment before the first step")
        traced = self._traced(op)
        if width is None:
            if traced is not None:
                exact = evaluate_op(op, traced[1], (MAX_SIGNAL_WIDTH, True))
                lo, hi = int(exact.min()), int(exact.max())
            else:
                span = interval(op)
                if span is None:
                    raise ValueError(f"{name}: give a width (the operation's range is unknown)")
                lo, hi = span
            width, is_signed = width_for(lo, hi)
            if signed and not is_signed:
                width, is_signed = width + 1, True
            values = None if traced is None else evaluate_op(op, traced[1], (width, is_signed))
        else:
            is_signed = bool(signed)
            values = None if traced is None else evaluate_op(op, traced[1], (width, is_signed))
            if values is not None:
                lo, hi = int(values.min()), int(values.max())
            else:
                span = interval(op)
                wlo, whi = value_range(width, is_signed)
                lo, hi = span if span is not None and wlo <= span[0] and span[1] <= whi else (wlo, whi)
        sig = self._new(Signal(name, width, is_signed, lo, hi))
        self._steps[-1][2].append(Assign(sig, op, note))
        if values is not None:
            self._trace[name] = {traced[0]: values}
        return sig

    def add(self, name: str, a: Value, b: Value, **kw) -> Signal:
        return self.assign(name, Add(self._op(a), self._op(b)), **kw)

    def sub(self, name: str, a: Value, b: Value, **kw) -> Signal:
        return self.assign(name, Sub(self._op(a), self._op(b)), **kw)

    def mul(self, name: str, a: Value, b: Value, **kw) -> Signal:
        return self.assign(name, Mul(self._op(a), self._op(b)), **kw)

    def mux(self, name: str, select: Value, if_true: Value, if_false: Value, **kw) -> Signal:
        return self.assign(name, Mux(self._op(select), self._op(if_true), self._op(if_false)), **kw)

    def compare(self, name: str, relation: str, a: Value, b: Value, **kw) -> Signal:
        return self.assign(name, Compare(relation, self._op(a), self._op(b)), **kw)

    def lookup(self, name: str, key: Operand, entries: Sequence[int], *, image: str | None = None, **kw) -> Signal:
        if getattr(key, "signed", False):
            raise ValueError(f"{name}: a table key must be unsigned")
        return self.assign(name, Lookup(key, tuple(int(e) for e in entries), image), **kw)

    def concat(self, name: str, *parts: Value, **kw) -> Signal:
        return self.assign(name, Concat(tuple(self._op(p) for p in parts)), **kw)

    def resize(self, name: str, a: Value, width: int, signed: bool, **kw) -> Signal:
        return self.assign(name, Resize(self._op(a)), width=width, signed=signed, **kw)

    def logic(self, name: str, function: str, a: Value, b: Value, **kw) -> Signal:
        return self.assign(name, Logic(function, self._op(a), self._op(b)), **kw)

    def gate(self, name: str, enable: Value, a: Value, **kw) -> Signal:
        return self.assign(name, Gate(self._op(enable), self._op(a)), **kw)

    def flip_if(self, name: str, condition: Value, a: Value, **kw) -> Signal:
        return self.assign(name, FlipIf(self._op(condition), self._op(a)), **kw)

    def invert(self, name: str, bit: Value, **kw) -> Signal:
        """NOT of one bit (a one-bit FlipIf by a constant 1)."""
        return self.assign(name, FlipIf(Const(1, 1), self._op(bit)), width=1, signed=False, **kw)

    def reduce(self, name: str, function: str, a: Value, **kw) -> Signal:
        return self.assign(name, Reduce(function, self._op(a)), **kw)

    # ---- what the builder knows --------------------------------------------------------------

    def values(self, a: Operand) -> np.ndarray | None:
        """The traced values of a signal (None: not traced)."""
        got = self._traced(Resize(a))
        return None if got is None else got[1][0]

    def forget(self) -> None:
        """Drop every traced value (memory) once a part of the datapath is built."""
        inputs = {f.value.name for f in self._inputs}
        self._trace = {k: v for k, v in self._trace.items() if k in inputs}

    def build(self, outputs: Sequence[Field], out_width: int, in_width: int) -> Datapath:
        """The datapath; checks that every signal is defined before it is read and read at least once."""
        # a step left without operations (e.g. no clamp to decide) is dropped: no register without logic
        steps = tuple(Step(name, doc, tuple(assigns)) for name, doc, assigns in self._steps if assigns)
        dp = Datapath(in_width=in_width, inputs=tuple(self._inputs), steps=steps, out_width=out_width,
                      outputs=tuple(outputs), notes=dict(self._notes))
        _check(dp)
        return dp

    # ---- internals -----------------------------------------------------------------------------

    def _new(self, sig: Signal) -> Signal:
        if sig.name in self._names:
            raise ValueError(f"signal {sig.name!r} defined twice")
        self._names.add(sig.name)
        return sig

    @staticmethod
    def _op(a: Value) -> Operand:
        return Const.of(int(a)) if isinstance(a, (int, np.integer)) else a

    def _traced(self, op: Op) -> tuple[str, list[np.ndarray]] | None:
        """The first domain every signal operand is traced in, and the operands' values there (None: no such domain)."""
        traces = [self._trace.get(a.name) for a in op.operands() if not isinstance(a, Const)]
        if not traces or any(t is None for t in traces):
            return None
        common = [d for d in traces[0] if all(d in t for t in traces[1:])]
        if not common:
            return None
        domain = common[0]
        args = []
        for a in op.operands():
            if isinstance(a, Const):
                args.append(np.asarray(a.value, dtype=np.int64))
                continue
            got = self._trace[a.name][domain]
            args.append(got if isinstance(a, Signal) else (got >> a.lo) & np.int64((1 << a.width) - 1))
        return domain, args


def _check(dp: Datapath) -> None:
    defined = {f.value.name for f in dp.inputs if isinstance(f.value, Signal)}
    read: set[str] = set()
    for st in dp.steps:
        for a in st.assigns:
            for x in a.op.operands():
                if isinstance(x, (Signal, Bits)):
                    if x.name not in defined:
                        raise ValueError(f"{a.dst.name} reads {x.name} before it is defined")
                    read.add(x.name)
            defined.add(a.dst.name)
    for f in dp.outputs:
        if isinstance(f.value, Signal):
            if f.value.name not in defined:
                raise ValueError(f"output {f.value.name} is never defined")
            read.add(f.value.name)
    dead = [a.dst.name for a in dp.assigns() if a.dst.name not in read]
    if dead:
        raise ValueError(f"signals computed but never used: {', '.join(dead)}")


__all__ = ["Builder", "Value", "interval"]
