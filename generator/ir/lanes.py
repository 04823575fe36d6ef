"""Lanes (`interface.lanes`): N symbols per transfer, each lane a copy of the one-symbol datapath.

A lane is the per-symbol subgraph with every signal renamed (`<name>_l<n>`) and its input and output fields
moved up by n times the one-lane word width (lane 0 in the least significant part). The copies share the
steps, so the register placement puts each lane's operations in the same stages, and the stream control
(one tvalid/tready, tlast and tuser) is the module's, shared by all lanes. Every back end prints it unchanged.
"""

from __future__ import annotations

from dataclasses import fields, replace

from .core import Assign, Bits, Datapath, Field, Op, Signal, Step


def _renamed(x, names: dict[str, Signal]):
    if isinstance(x, Signal):
        return names[x.name]
    if isinstance(x, Bits):
        return Bits(names[x.signal.name], x.hi, x.lo)
    if isinstance(x, tuple):
        return tuple(_renamed(v, names) for v in x)
    return x


def rename_op(op: Op, names: dict[str, Signal]) -> Op:
    """The same operation reading the renamed signals (constants, tables and relations unchanged)."""
    return replace(op, **{f.name: _renamed(getattr(op, f.name), names) for f in fields(op)})


def replicate(dp: Datapath, lanes: int) -> Datapath:
    """`lanes` copies of a one-symbol datapath side by side in one word (lane 0 the least significant)."""
    if lanes == 1:
        return dp
    inputs: list[Field] = []
    outputs: list[Field] = []
    steps: list[list[Assign]] = [[] for _ in dp.steps]
    notes: dict[str, str] = {}
    for n in range(lanes):
        names = {s.name: replace(s, name=f"{s.name}_l{n}") for s in dp.signals()}
        inputs += [Field(names[f.value.name], f.lsb + n * dp.in_width, f"lane {n}: {f.doc}" if f.doc else f"lane {n}")
                   for f in dp.inputs]
        for k, st in enumerate(dp.steps):
            steps[k] += [Assign(names[a.dst.name], rename_op(a.op, names), a.note) for a in st.assigns]
        outputs += [Field(_renamed(f.value, names), f.lsb + n * dp.out_width, f.doc) for f in dp.outputs]
        notes.update({f"{name}_l{n}": doc for name, doc in dp.notes.items()})
    return Datapath(in_width=lanes * dp.in_width, inputs=tuple(inputs),
                    steps=tuple(Step(st.name, st.doc, tuple(a)) for st, a in zip(dp.steps, steps)),
                    out_width=lanes * dp.out_width, outputs=tuple(outputs), notes=notes)


__all__ = ["rename_op", "replicate"]
