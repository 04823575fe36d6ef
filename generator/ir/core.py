"""The datapath IR: typed signals, a small closed set of operations, steps, and their exact meaning.

A `Datapath` is what a mapper or demapper computes per symbol, independent of any HDL: the
fields of the input word, a sequence of `Step`s (each a list of `Assign`s, one operation per
signal) and the fields of the output word. Every `Signal` carries its width, its signedness and
the range of values it can take (from the model; `Builder` computes it). Constants are integers.

Meaning of an operation, shared by the evaluator below and every HDL back end: each operand is
extended to the destination's width by its own signedness (sign extension for signed operands,
zero extension for unsigned ones and for `Bits`) or truncated to it, the operation is applied,
and the result is taken modulo 2^width and read with the destination's signedness. `Compare`
and `Reduce` give one unsigned bit; `Concat` places its parts, first part most significant.
The evaluator implements exactly this on int64 numpy arrays, so a datapath can be checked
against the model without a simulator.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Iterator, Mapping, Union

import numpy as np

#: widest signal the evaluator handles exactly in int64 (products of the model stay below 2^62)
MAX_SIGNAL_WIDTH = 62


def value_range(width: int, signed: bool) -> tuple[int, int]:
    """All values of a `width`-bit word."""
    return (-(1 << (width - 1)), (1 << (width - 1)) - 1) if signed else (0, (1 << width) - 1)


def width_for(lo: int, hi: int) -> tuple[int, bool]:
    """Smallest (width, signed) holding every integer of [lo, hi]."""
    lo, hi = int(lo), int(hi)
    if lo >= 0:
        return max(1, hi.bit_length()), False
    return max((-lo - 1).bit_length(), hi.bit_length()) + 1, True


@dataclass(frozen=True)
class Signal:
    """A named value of `width` bits; every value it takes lies in [lo, hi]."""

    name: str
    width: int
    signed: bool
    lo: int
    hi: int

    def __post_init__(self) -> None:
        if not 1 <= self.width <= MAX_SIGNAL_WIDTH:
            raise ValueError(f"signal {self.name}: width {self.width} outside 1..{MAX_SIGNAL_WIDTH}")
        wlo, whi = value_range(self.width, self.signed)
        if not wlo <= self.lo <= self.hi <= whi:
            raise ValueError(f"signal {self.name}: range [{self.lo}, {self.hi}] does not fit "
                             f"{'signed' if self.signed else 'unsigned'} {self.width} bits")

    def __getitem__(self, index: int | slice) -> "Bits":
        """Bits of this signal: s[i] is one bit, s[hi:lo] bits hi down to lo (both included, as in HDL)."""
        if isinstance(index, slice):
            return Bits(self, int(index.start), int(index.stop))
        return Bits(self, int(index), int(index))

    @property
    def msb(self) -> "Bits":
        return Bits(self, self.width - 1, self.width - 1)


@dataclass(frozen=True)
class Const:
    """An integer constant of `width` bits."""

    value: int
    width: int
    signed: bool = False

    def __post_init__(self) -> None:
        lo, hi = value_range(self.width, self.signed)
        if self.width < 1 or not lo <= self.value <= hi:
            raise ValueError(f"constant {self.value} does not fit {'signed' if self.signed else 'unsigned'} "
                             f"{self.width} bits")

    @property
    def lo(self) -> int:
        return self.value

    @property
    def hi(self) -> int:
        return self.value

    @staticmethod
    def of(value: int) -> "Const":
        """The narrowest constant holding `value`."""
        width, signed = width_for(value, value)
        return Const(int(value), width, signed)


@dataclass(frozen=True)
class Bits:
    """Bits hi..lo of a signal, read as an unsigned operand."""

    signal: Signal
    hi: int
    lo: int

    def __post_init__(self) -> None:
        if not 0 <= self.lo <= self.hi < self.signal.width:
            raise ValueError(f"bits [{self.hi}:{self.lo}] outside {self.signal.name} of {self.signal.width} bits")

    @property
    def width(self) -> int:
        return self.hi - self.lo + 1

    @property
    def signed(self) -> bool:
        return False

    @property
    def name(self) -> str:
        return self.signal.name


Operand = Union[Signal, Const, Bits]


def operand_range(a: Operand) -> tuple[int, int]:
    if isinstance(a, Bits):
        s = a.signal
        if a.lo == 0 and a.hi == s.width - 1 and not s.signed:
            return s.lo, s.hi
        if a.lo == 0 and s.lo >= 0:          # low bits of a non-negative value
            return 0, min(s.hi, (1 << a.width) - 1)
        if s.lo >= 0 and a.hi == s.width - 1:  # high bits of a non-negative value: a shift
            return s.lo >> a.lo, s.hi >> a.lo
        return 0, (1 << a.width) - 1
    return a.lo, a.hi


# --------------------------------------------------------------------------- operations


class Op:
    """An operation; `operands` in order. Subclasses are the closed set below."""

    def operands(self) -> tuple[Operand, ...]:
        raise NotImplementedError


@dataclass(frozen=True)
class Resize(Op):
    """a, extended or truncated to the destination width (a copy, a slice or a sign extension)."""

    a: Operand

    def operands(self):
        return (self.a,)


@dataclass(frozen=True)
class Add(Op):
    a: Operand
    b: Operand

    def operands(self):
        return (self.a, self.b)


@dataclass(frozen=True)
class Sub(Op):
    a: Operand
    b: Operand

    def operands(self):
        return (self.a, self.b)


@dataclass(frozen=True)
class Mul(Op):
    a: Operand
    b: Operand

    def operands(self):
        return (self.a, self.b)


@dataclass(frozen=True)
class Concat(Op):
    """The parts side by side, the first in the most significant bits (no extension)."""

    parts: tuple[Operand, ...]

    def operands(self):
        return self.parts


@dataclass(frozen=True)
class Mux(Op):
    """if_true where the one-bit select is 1, else if_false."""

    select: Operand
    if_true: Operand
    if_false: Operand

    def operands(self):
        return (self.select, self.if_true, self.if_false)


RELATIONS = ("lt", "le", "eq", "ne", "ge", "gt")


@dataclass(frozen=True)
class Compare(Op):
    """One bit: a <relation> b, comparing the operands' values (each read with its own signedness)."""

    relation: str
    a: Operand
    b: Operand

    def __post_init__(self) -> None:
        if self.relation not in RELATIONS:
            raise ValueError(f"relation {self.relation!r}")

    def operands(self):
        return (self.a, self.b)


@dataclass(frozen=True)
class Lookup(Op):
    """entries[key] (a table of integers indexed by the unsigned key; keys past the end give 0).

    `image` names a module parameter holding a `$readmemh`-style file of the same table, for a
    back end that loads it from a file instead of spelling it out.
    """

    key: Operand
    entries: tuple[int, ...]
    image: str | None = None

    def operands(self):
        return (self.key,)


LOGIC_FUNCTIONS = ("and", "or", "xor")


@dataclass(frozen=True)
class Logic(Op):
    """Bitwise and/or/xor of the operands extended to the destination width."""

    function: str
    a: Operand
    b: Operand

    def __post_init__(self) -> None:
        if self.function not in LOGIC_FUNCTIONS:
            raise ValueError(f"logic function {self.function!r}")

    def operands(self):
        return (self.a, self.b)


@dataclass(frozen=True)
class Gate(Op):
    """a where the one-bit enable is 1, else 0 (an AND with the replicated enable)."""

    enable: Operand
    a: Operand

    def operands(self):
        return (self.enable, self.a)


@dataclass(frozen=True)
class FlipIf(Op):
    """~a (every bit inverted) where the one-bit condition is 1, else a (an XOR with the replicated condition)."""

    condition: Operand
    a: Operand

    def operands(self):
        return (self.condition, self.a)


@dataclass(frozen=True)
class Reduce(Op):
    """One bit: and/or/xor of every bit of a."""

    function: str
    a: Operand

    def __post_init__(self) -> None:
        if self.function not in LOGIC_FUNCTIONS:
            raise ValueError(f"reduce function {self.function!r}")

    def operands(self):
        return (self.a,)


OPERATIONS: tuple[type[Op], ...] = (Resize, Add, Sub, Mul, Concat, Mux, Compare, Lookup, Logic, Gate, FlipIf, Reduce)


# --------------------------------------------------------------------------- structure


@dataclass(frozen=True)
class Assign:
    """dst = op; `note` is a comment a back end prints above it."""

    dst: Signal
    op: Op
    note: str = ""


@dataclass(frozen=True)
class Step:
    """A group of assignments that a register stage may follow; `doc` says what it computes."""

    name: str
    doc: str
    assigns: tuple[Assign, ...]

    def defines(self) -> tuple[Signal, ...]:
        return tuple(a.dst for a in self.assigns)

    def reads(self) -> Iterator[Operand]:
        for a in self.assigns:
            yield from a.op.operands()


@dataclass(frozen=True)
class Field:
    """A field of a stream word: a signal (or a constant) at bit `lsb`."""

    value: Signal | Const
    lsb: int
    doc: str = ""

    @property
    def width(self) -> int:
        return self.value.width


@dataclass(frozen=True)
class Datapath:
    """What a module computes per symbol: input fields, steps, output fields."""

    in_width: int
    inputs: tuple[Field, ...]
    steps: tuple[Step, ...]
    out_width: int
    outputs: tuple[Field, ...]
    #: name -> doc of the signals worth a comment where they are declared
    notes: Mapping[str, str] = field(default_factory=dict)

    def signals(self) -> list[Signal]:
        """Every signal: the input fields, then each assignment's destination in order."""
        out = [f.value for f in self.inputs if isinstance(f.value, Signal)]
        for st in self.steps:
            out.extend(st.defines())
        return out

    def assigns(self) -> Iterator[Assign]:
        for st in self.steps:
            yield from st.assigns


# --------------------------------------------------------------------------- meaning


def wrap(x: np.ndarray, width: int, signed: bool) -> np.ndarray:
    """x modulo 2^width, read as a signed or unsigned word."""
    x = np.asarray(x, dtype=np.int64) & np.int64((1 << width) - 1)
    if signed:
        x = np.where(x >= (1 << (width - 1)), x - (1 << width), x)
    return x.astype(np.int64)


def _pattern(x: np.ndarray, width: int) -> np.ndarray:
    return np.asarray(x, dtype=np.int64) & np.int64((1 << width) - 1)


def _parity(x: np.ndarray) -> np.ndarray:
    x = x.copy()
    out = np.zeros_like(x)
    while np.any(x):
        out ^= x & 1
        x >>= 1
    return out


def evaluate_op(op: Op, args: list[np.ndarray], dst: Signal | tuple[int, bool]) -> np.ndarray:
    """The value of `op` given its operands' values (each as its own signedness reads it)."""
    width, signed = (dst.width, dst.signed) if isinstance(dst, Signal) else dst
    if isinstance(op, Resize):
        r = args[0]
    elif isinstance(op, Add):
        r = args[0] + args[1]
    elif isinstance(op, Sub):
        r = args[0] - args[1]
    elif isinstance(op, Mul):
        r = args[0] * args[1]
    elif isinstance(op, Concat):
        r = np.zeros(np.broadcast(*args).shape, dtype=np.int64)
        for part, v in zip(op.parts, args):
            r = (r << part.width) | _pattern(v, part.width)
    elif isinstance(op, Mux):
        r = np.where(args[0] != 0, args[1], args[2])
    elif isinstance(op, Compare):
        a, b = args
        r = {"lt": a < b, "le": a <= b, "eq": a == b, "ne": a != b, "ge": a >= b, "gt": a > b}[op.relation]
        r = r.astype(np.int64)
    elif isinstance(op, Lookup):
        table = np.zeros(max(len(op.entries), 1 << op.key.width), dtype=np.int64)
        table[:len(op.entries)] = op.entries
        r = table[args[0]]
    elif isinstance(op, Logic):
        a, b = _pattern(args[0], width), _pattern(args[1], width)
        r = {"and": a & b, "or": a | b, "xor": a ^ b}[op.function]
    elif isinstance(op, Gate):
        r = np.where(args[0] != 0, args[1], 0)
    elif isinstance(op, FlipIf):
        r = np.where(args[0] != 0, ~args[1], args[1])
    elif isinstance(op, Reduce):
        a = _pattern(args[0], op.a.width)
        if op.function == "or":
            r = (a != 0).astype(np.int64)
        elif op.function == "and":
            r = (a == (1 << op.a.width) - 1).astype(np.int64)
        else:
            r = _parity(a)
    else:
        raise TypeError(f"unknown operation {type(op).__name__}")
    return wrap(r, width, signed)


def operand_value(a: Operand, values: Mapping[str, np.ndarray]) -> np.ndarray:
    if isinstance(a, Const):
        return np.asarray(a.value, dtype=np.int64)
    if isinstance(a, Bits):
        return (values[a.signal.name] >> a.lo) & np.int64((1 << a.width) - 1)
    return values[a.name]


def evaluate(dp: Datapath, inputs: Mapping[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Every signal's value for the given input-field values (name -> array); registers are transparent."""
    values = {name: np.asarray(v, dtype=np.int64) for name, v in inputs.items()}
    for f in dp.inputs:
        if isinstance(f.value, Signal):
            values[f.value.name] = wrap(values[f.value.name], f.value.width, f.value.signed)
    for a in dp.assigns():
        args = [operand_value(x, values) for x in a.op.operands()]
        values[a.dst.name] = evaluate_op(a.op, args, a.dst)
    return values


def output_words(dp: Datapath, values: Mapping[str, np.ndarray]) -> np.ndarray:
    """The output word (as Python ints: it can be wider than 64 bits) of evaluated values."""
    n = max((np.asarray(values[f.value.name]).size for f in dp.outputs if isinstance(f.value, Signal)), default=1)
    words = [0] * n
    for f in dp.outputs:
        v = f.value
        vals = [v.value] * n if isinstance(v, Const) else np.broadcast_to(values[v.name], (n,)).tolist()
        mask = (1 << v.width) - 1
        words = [w | ((int(x) & mask) << f.lsb) for w, x in zip(words, vals)]
    return np.asarray(words, dtype=object)


__all__ = ["MAX_SIGNAL_WIDTH", "OPERATIONS", "RELATIONS", "Add", "Assign", "Bits", "Compare", "Concat", "Const",
           "Datapath", "Field", "FlipIf", "Gate", "Logic", "Lookup", "Mul", "Mux", "Op", "Operand", "Reduce",
           "Resize", "Signal", "Step", "Sub", "evaluate", "evaluate_op", "operand_range", "operand_value",
           "output_words", "value_range", "width_for", "wrap"]
