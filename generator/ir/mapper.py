"""Mapper datapaths: label in, {Q, I} out.

* rom: per axis, the axis label gathered from the label bits indexes a table of level codes
  (the table is spelled out, or loaded from a `$readmemh` image named by a module parameter);
* logic: per axis, the level index n from the axis label (a Gray decode where the labeling is
  Gray-type), then the level code as one constant multiply, a constant add and a shift;
* points: a table of {Q, I} words indexed by the label (tables without per-axis structure).
"""

from __future__ import annotations

import numpy as np

from ..errors import SpecError
from ..model import Design
from .build import Builder
from .core import Const, Datapath, Field, Signal, width_for
from .modes import mode_input, mode_of_code, mode_select

#: module parameters naming the `$readmemh` images, by table
ROM_PARAMETERS = {"i": "ROM_I_FILE", "q": "ROM_Q_FILE", "points": "ROM_POINTS_FILE"}


def _mode_positions(design: Design, c: int, code: int) -> tuple[int, ...]:
    """Label-field bits (k_max-bit field, the mode's label in its top bits) of axis c's label in the mode of `code`,
    axis MSB first, padded with the largest order's positions below the mode's own."""
    k = design.bits
    top = design.constellation.axes[c]
    m = design.modes[mode_of_code(design, code)]
    own = [k - 1 - lb for lb in m.constellation.axes[c].label_bits]
    return tuple(own + [k - 1 - lb for lb in top.label_bits[len(own):]])


def _mode_entries(design: Design, c: int) -> list[int]:
    """Level codes keyed by {mode code, axis label field}: a mode of m_m bits on this axis reads the top m_m bits."""
    mb = design.constellation.axes[c].bits
    out = []
    for code in range(1 << design.mode_width):
        m = design.modes[mode_of_code(design, code)]
        ax = m.constellation.axes[c]
        for idx in range(1 << mb):
            out.append(int(m.level_codes[c][ax.index_of_code[idx >> (mb - ax.bits)]]) if ax.bits
                       else int(m.level_codes[c][0]))
    return out


def rom_images(design: Design) -> list[dict]:
    """The mapper's ROM images: table name, parameter, file, entries (signed codes or {Q, I} words), width."""
    w = design.mapper_format.width
    const = design.constellation
    if design.modes:
        return [{"table": name, "parameter": ROM_PARAMETERS[name], "path": f"rom/mapper_{name}.hex",
                 "entries": _mode_entries(design, c), "width": w, "signed": True,
                 "label_bits": list(const.axes[c].label_bits), "modes": True}
                for c, name in enumerate("iq")]
    if const.axes is None:
        words = [((int(q) & ((1 << w) - 1)) << w) | (int(i) & ((1 << w) - 1))
                 for i, q in zip(design.point_i, design.point_q)]
        return [{"table": "points", "parameter": ROM_PARAMETERS["points"], "path": "rom/mapper_points.hex",
                 "entries": words, "width": 2 * w, "signed": False}]
    out = []
    for name, ax, lv in zip("iq", const.axes, design.level_codes):
        if ax.bits:
            out.append({"table": name, "parameter": ROM_PARAMETERS[name], "path": f"rom/mapper_{name}.hex",
                        "entries": [int(lv[ax.index_of_code[c]]) for c in range(ax.levels)], "width": w,
                        "signed": True, "label_bits": list(ax.label_bits)})
    return out


def level_multiply(levels: np.ndarray, max_shift: int = 40) -> tuple[int, int, int]:
    """(C, K, G) with floor((n*C + K) / 2^G) == levels[n] for every level n, smallest G first.

    The `logic` mapper computes each level as one constant multiply of the level index, a
    constant add and a shift. Raises SpecError when no such constants exist up to `max_shift`.
    """
    lv = np.asarray(levels, dtype=np.int64)
    n = np.arange(lv.size, dtype=np.int64)
    if lv.size == 1:
        return 0, int(lv[0]), 0
    a, b = np.triu_indices(lv.size, 1)
    dn = (b - a).astype(object)
    dl = (lv[b] - lv[a]).astype(object)
    for g in range(max_shift + 1):
        one = 1 << g
        # every pair of levels bounds the slope: floor differences must match exactly
        c_lo = max(-((-((dl - 1) * one + 1)) // dn))
        c_hi = min(((dl + 1) * one - 1) // dn)
        if c_lo <= c_hi:
            c = int((c_lo + c_hi) // 2)
            lo = int(np.max((lv << g) - n * c))
            hi = int(np.min(((lv + 1) << g) - n * c)) - 1
            if lo <= hi:
                return c, lo, g
    raise SpecError("mapper.implementation", "logic",
                    "rom for these levels (no constant multiply reproduces them exactly)")


def mapper_datapath(design: Design, *, inline: bool) -> Datapath:
    """The mapper's datapath; `inline` spells the level tables out instead of naming a ROM image."""
    k = design.bits
    W = design.mapper_format.width
    const = design.constellation
    b = Builder()
    if design.modes:
        return _modes_datapath(b, design, inline)
    label = b.input("lab", k, False, 0, doc="the label, b0 (first bit in time) in the MSB",
                    domain="label", values=np.arange(const.order))
    if const.axes is None:
        b.step("lookup", "the point table: {Q, I} by label")
        rom = rom_images(design)[0]
        word = b.lookup("point_word", label, rom["entries"], image=None if inline else rom["parameter"],
                        width=2 * W, signed=False)
        lvl = {"i": b.resize("lvl_i", word[W - 1:0], W, True), "q": b.resize("lvl_q", word[2 * W - 1:W], W, True)}
    elif design.spec.mapper.implementation == "rom":
        b.step("lookup", "per axis: the axis label gathered from the label bits, the level code from a table")
        lvl = {}
        images = {r["table"]: r for r in rom_images(design)}
        for name, ax, lv in zip("iq", const.axes, design.level_codes):
            if not ax.bits:
                lvl[name] = Const(int(lv[0]), W, True)
                continue
            idx = _axis_label(b, name, label, ax.label_bits, k)
            r = images[name]
            lvl[name] = b.lookup(f"lvl_{name}", idx, [e & ((1 << W) - 1) for e in r["entries"]],
                                 image=None if inline else r["parameter"], width=W, signed=True,
                                 note=f"{name.upper()} level code by axis label")
    else:
        lvl = _logic(b, design, label, k, W)
    return b.build([Field(lvl["i"], 0, "I output code"), Field(lvl["q"], W, "Q output code")], 2 * W, k)


def _modes_datapath(b: Builder, design: Design, inline: bool) -> Datapath:
    """An adaptive core: per axis, the mode's axis label from the label field (a selection by mode where the
    modes take different bits), then one table keyed by {mode, axis label}."""
    k, W, mw = design.bits, design.mapper_format.width, design.mode_width
    codes = np.arange(1 << mw, dtype=np.int64)
    label = b.input("lab", k, False, 0, doc="the label field: a mode of k_m bits in its top k_m bits, b0 the MSB",
                    domain="label", values=np.tile(np.arange(1 << k), codes.size))
    mode = mode_input(b, design, k, {"label": 1 << k})
    b.step("lookup", "per axis: the mode's axis label from the label field, the level code from a table keyed by "
                     "{mode, axis label}")
    lvl = {}
    images = {r["table"]: r for r in rom_images(design)}
    for c, name in enumerate("iq"):
        spots = [_mode_positions(design, c, code) for code in codes]
        concats: dict[tuple[int, ...], Signal] = {}
        for n, pos in enumerate(dict.fromkeys(spots)):
            what = ", ".join(f"field bit {p}" for p in pos)
            concats[pos] = b.concat(f"idx_{name}" if len(set(spots)) == 1 else f"idx_{name}{n}",
                                    *[label[p] for p in pos], note=f"{name.upper()} axis label: {what}")
        idx = mode_select(b, f"idx_{name}", mode, [concats[p] for p in spots],
                          note=f"{name.upper()} axis label of the symbol's mode")
        key = b.concat(f"key_{name}", mode, idx, note="table key {mode, axis label}")
        r = images[name]
        lvl[name] = b.lookup(f"lvl_{name}", key, [e & ((1 << W) - 1) for e in r["entries"]],
                             image=None if inline else r["parameter"], width=W, signed=True,
                             note=f"{name.upper()} level code by {{mode, axis label}}")
    return b.build([Field(lvl["i"], 0, "I output code"), Field(lvl["q"], W, "Q output code")], 2 * W, k + mw)


def _axis_label(b: Builder, name: str, label: Signal, label_bits: tuple[int, ...], k: int) -> Signal:
    parts = [label[k - 1 - lb] for lb in label_bits]
    bits = ", ".join(f"b{lb}" for lb in label_bits)
    if len(parts) == 1:
        return b.resize(f"idx_{name}", parts[0], 1, False, note=f"{name.upper()} axis label: {bits}")
    return b.concat(f"idx_{name}", *parts, note=f"{name.upper()} axis label: {bits}, the first the MSB")


def _logic(b: Builder, design: Design, label: Signal, k: int, W: int) -> dict[str, Signal | Const]:
    const = design.constellation
    b.step("decode", "per axis: the level index n from the axis label (a Gray decode where the labeling is Gray-type)")
    index: dict[str, Signal] = {}
    for name, ax in zip("iq", const.axes):
        if not ax.bits:
            continue
        idx = _axis_label(b, name, label, ax.label_bits, k)
        mask = ax.gray_mask
        if mask is None or ax.codes == tuple(range(ax.levels)):
            index[name] = idx                                   # natural binary: n is the axis label
            continue
        gray = b.logic(f"gray_{name}", "xor", idx, Const(mask, ax.bits), width=ax.bits, signed=False,
                       note="the binary-reflected Gray code after the inversion mask") if mask else idx
        nbits = [b.reduce(f"n_{name}{j}", "xor", gray[ax.bits - 1:ax.bits - 1 - j]) for j in range(ax.bits)]
        index[name] = (b.concat(f"n_{name}", *nbits, note="n: bit j is the XOR of the Gray bits above it")
                       if len(nbits) > 1 else nbits[0])
    b.step("level", "per axis: level code = (n * C + K) >>> G, exact for every level")
    lvl: dict[str, Signal | Const] = {}
    for name, ax, lv in zip("iq", const.axes, design.level_codes):
        if not ax.bits:
            lvl[name] = Const(int(lv[0]), W, True)
            continue
        c, kk, g = level_multiply(lv)
        prod = b.mul(f"prod_{name}", index[name], c, note=f"{name.upper()} axis: n * {c} + {kk}, then >>> {g}")
        need = width_for(prod.lo + kk, prod.hi + kk)[0]
        acc = b.add(f"acc_{name}", prod, kk, width=max(need, g + W), signed=True)
        lvl[name] = b.resize(f"lvl_{name}", acc[g + W - 1:g], W, True)
    return lvl


__all__ = ["ROM_PARAMETERS", "level_multiply", "mapper_datapath", "rom_images"]
