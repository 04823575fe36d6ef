"""Stream words: the packing of every port's tdata, hex files of words, and the model run on words.

`packing(design)` is the one description of where labels, I/Q codes, reliability codes, LLRs and
hard bits sit in the words (fields with lsb and width); the manifest records it, the testbenches
and `qamsmith run` use it. Hex files are `$readmemh` images: `//` comment lines, then one
fixed-width lower-case hex word a line.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any, Iterable, Sequence

import numpy as np

from ..errors import SpecError
from ..model import Design, demap, map_labels

BLOCKS = ("mapper", "demapper")


# --------------------------------------------------------------------------- packing


def _field(name: str, lsb: int, width: int, signed: bool, doc: str) -> dict[str, Any]:
    return {"name": name, "lsb": lsb, "width": width, "signed": signed, "doc": doc}


def packing(design: Design) -> dict[str, Any]:
    """How labels, I/Q codes, reliability codes, modes and LLRs sit in the stream words (fields with lsb/width).

    With interface.lanes = N every word holds N symbols: lane l's fields at l * lane_width plus their lsb,
    lane 0 in the least significant part. An adaptive core adds a mode field on top of each lane.
    """
    k = design.bits
    w = design.mapper_format.width
    wi = design.input_format.width
    ws = design.scale_format.width if design.scale_format else 0
    wl = design.llr_format.width
    wm = design.mode_width
    hard = design.spec.demapper.algorithm == "hard"
    orders = [m.order for m in design.modes]
    mode_doc = (f"mode: index into constellation.orders {orders} (a code past the list acts as the last mode)"
                if wm else "")
    dem_in = [_field("i", 0, wi, True, "equalized I input code"),
              _field("q", wi, wi, True, "equalized Q input code")]
    if ws:
        dem_in.append(_field("s", 2 * wi, ws, False, "unsigned reliability code (scale = s * scale_lsb)"))
    if hard:
        dem_out = [_field(f"b{j}", k - 1 - j, 1, False, f"hard decision of label bit b{j}") for j in range(k)]
        out_doc = f"{k}-bit hard-decided label, b0 (first bit in time) is the MSB"
    else:
        dem_out = [_field(f"llr_b{j}", (k - 1 - j) * wl, wl, True, f"LLR of label bit b{j}, positive: bit 0 more likely")
                   for j in range(k)]
        out_doc = f"{k} two's-complement LLR fields of {wl} bits, the LLR of b0 in the most significant field"
    map_in = [_field(f"b{j}", k - 1 - j, 1, False, f"label bit b{j}") for j in range(k)]
    map_doc = f"{k}-bit label, b0 (first bit in time) is the MSB"
    dem_doc = (f"{{S, Q, I}}: signed {wi}-bit I in the low bits, Q above it"
               + (f", unsigned {ws}-bit reliability S on top" if ws else ""))
    if wm:
        map_in.append(_field("mode", k, wm, False, mode_doc))
        dem_in.append(_field("mode", 2 * wi + ws, wm, False, mode_doc))
        dem_out.append(_field("mode", k if hard else k * wl, wm, False, "the input's mode, passed through with the symbol"))
        map_doc = (f"{{mode, label}}: the {wm}-bit mode above a {k}-bit label field; a mode of k_m bits takes the top "
                   f"k_m bits of the field (b0 its MSB) and ignores the bits below")
        dem_doc = f"{{mode, {'S, ' if ws else ''}Q, I}}: " + dem_doc.split(": ", 1)[1] + f", the {wm}-bit mode on top"
        out_doc = (f"{{mode, {k} fields}}: " + out_doc + "; a mode of k_m bits fills the first k_m fields (b0 .. "
                   "b(k_m - 1)) and the fields below are zero; the mode passed through on top")
    blocks = {
        "mapper_input": {"width": k + wm, "doc": map_doc, "fields": map_in},
        "mapper_output": {"width": 2 * w, "doc": f"{{Q, I}}: signed {w}-bit I in the low half",
                          "fields": [_field("i", 0, w, True, "I output code"), _field("q", w, w, True, "Q output code")]},
        "demapper_input": {"width": 2 * wi + ws + wm, "doc": dem_doc, "fields": dem_in},
        "demapper_output": {"width": (k if hard else k * wl) + wm, "doc": out_doc, "fields": dem_out},
    }
    n = design.lanes
    if n > 1:
        for entry in blocks.values():
            lane = entry["width"]
            entry.update(lanes=n, lane_width=lane, width=n * lane,
                         doc=f"{n} lanes of {lane} bits, lane l at bits [{lane}l + {lane - 1} : {lane}l] (lane 0 the "
                             f"least significant); each lane: " + entry["doc"])
    return blocks


def lane_symbols(words: Sequence[int], entry: dict[str, Any]) -> list[int]:
    """Words of a packing entry to per-symbol values, lane 0 of word 0 first."""
    n, width = entry.get("lanes", 1), entry.get("lane_width", entry["width"])
    if n == 1:
        return [int(w) for w in words]
    mask = (1 << width) - 1
    return [(int(w) >> (width * lane)) & mask for w in words for lane in range(n)]


def lane_words(symbols: Sequence[int], entry: dict[str, Any]) -> list[int]:
    """Per-symbol values to words of a packing entry (N per word, lane 0 the least significant)."""
    n, width = entry.get("lanes", 1), entry.get("lane_width", entry["width"])
    if n == 1:
        return [int(v) for v in symbols]
    if len(symbols) % n:
        raise ValueError(f"{len(symbols)} symbols do not fill words of {n} lanes")
    mask = (1 << width) - 1
    return [sum((int(symbols[x + lane]) & mask) << (width * lane) for lane in range(n))
            for x in range(0, len(symbols), n)]


def pack_words(columns: Sequence[tuple[Iterable[int], int]]) -> list[int]:
    """Concatenate fields into words, the first column in the most significant bits (two's complement)."""
    words: list[int] | None = None
    for values, width in columns:
        mask = (1 << width) - 1
        vals = [int(v) & mask for v in values]
        words = vals if words is None else [(a << width) | b for a, b in zip(words, vals)]
    return words or []


def unpack_words(words: Sequence[int], fields: Sequence[dict[str, Any]]) -> dict[str, np.ndarray]:
    """Split words into named int64 fields (sign-extended where the field is signed)."""
    out = {}
    for f in fields:
        mask = (1 << f["width"]) - 1
        arr = np.asarray([(w >> f["lsb"]) & mask for w in words], dtype=np.int64)
        if f["signed"]:
            arr = np.where(arr >= (1 << (f["width"] - 1)), arr - (1 << f["width"]), arr)
        out[f["name"]] = arr
    return out


# --------------------------------------------------------------------------- hex files


def hex_digits(width: int) -> int:
    return max(1, (width + 3) // 4)


def format_words(words: Sequence[int], width: int, header: str = "") -> bytes:
    """A `$readmemh` file: `//` header lines, then one fixed-width lower-case hex word a line."""
    n = hex_digits(width)
    return (header + "".join(f"{w:0{n}x}\n" for w in words)).encode()


def parse_words(text: str, width: int | None = None, source: str = "words", key: str = "--input") -> list[int]:
    """Hex words of a vector file (`//` comments and blank lines skipped); each must fit `width` bits."""
    words = []
    limit = None if width is None else 1 << width
    for lineno, line in enumerate(text.splitlines(), 1):
        word = line.split("//", 1)[0].strip()
        if not word:
            continue
        try:
            value = int(word, 16) if not word.startswith(("0x", "0X", "+", "-")) else -1
        except ValueError:
            value = -1
        if value < 0 or (limit is not None and value >= limit):
            raise SpecError(key, f"{source}:{lineno}: {line.strip()}",
                            f"one hex word{'' if width is None else f' of at most {width} bits'} a line")
        words.append(value)
    return words


def read_words(path: str | Path, width: int | None = None, key: str = "--input") -> list[int]:
    """The words of a hex file (SpecError naming `key` when it cannot be read or parsed)."""
    try:
        text = Path(path).read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise SpecError(key, str(path), f"a readable vector file ({getattr(exc, 'strerror', None) or exc})") from None
    return parse_words(text, width, str(path), key)


# --------------------------------------------------------------------------- the model on words


def mapper_words(design: Design, labels: np.ndarray, modes: np.ndarray | None = None) -> list[int]:
    """Expected mapper output symbols {Q, I} of labels (an adaptive core: each mode's own labels)."""
    i, q = map_labels(design, labels, modes)
    w = design.mapper_format.width
    return pack_words([(q, w), (i, w)])


def mapper_input_words(design: Design, labels: np.ndarray, modes: np.ndarray | None = None) -> list[int]:
    """Mapper input symbols {mode, label}: a mode's label in the top k_m bits of the label field."""
    labels = np.asarray(labels, dtype=np.int64)
    if modes is None:
        return pack_words([(labels, design.bits)])
    ks = np.asarray([m.bits for m in design.modes], dtype=np.int64)[_mode_index(design, modes)]
    return pack_words([(modes, design.mode_width), (labels << (design.bits - ks), design.bits)])


def _mode_index(design: Design, modes: np.ndarray) -> np.ndarray:
    return np.minimum(np.asarray(modes, dtype=np.int64), len(design.modes) - 1)


def demapper_words(design: Design, i: np.ndarray, q: np.ndarray, scale: np.ndarray | None,
                   modes: np.ndarray | None = None) -> list[int]:
    """Expected demapper output symbols (LLRs, b0 in the most significant field; or hard bits; the mode on top)."""
    out = demap(design, i, q, scale, modes)
    width = 1 if design.spec.demapper.algorithm == "hard" else design.llr_format.width
    cols = [(out[:, j], width) for j in range(design.bits)]
    if modes is not None:
        cols.insert(0, (modes, design.mode_width))
    return pack_words(cols)


def demapper_input_words(design: Design, i: np.ndarray, q: np.ndarray, scale: np.ndarray | None,
                         modes: np.ndarray | None = None) -> list[int]:
    """Demapper input symbols {mode, S, Q, I} of codes."""
    wi = design.input_format.width
    cols = [(q, wi), (i, wi)]
    if design.scale_format is not None:
        cols.insert(0, (scale, design.scale_format.width))
    if modes is not None:
        cols.insert(0, (modes, design.mode_width))
    return pack_words(cols)


def run_block(design: Design, block: str, words: Sequence[int]) -> list[int]:
    """The model on input words of `block` ('mapper' or 'demapper'): the expected output words."""
    if block not in BLOCKS:
        raise SpecError("--block", block, f"one of {', '.join(BLOCKS)}")
    pack = packing(design)
    symbols = lane_symbols(words, pack[f"{block}_input"])
    fields = unpack_words(symbols, pack[f"{block}_input"]["fields"])
    modes = fields.get("mode")
    if block == "mapper":
        labels = np.asarray(symbols, dtype=np.int64) & ((1 << design.bits) - 1)
        if modes is not None:
            ks = np.asarray([m.bits for m in design.modes], dtype=np.int64)[_mode_index(design, modes)]
            labels = labels >> (design.bits - ks)
        elif labels.size and labels.max() >= design.constellation.order:
            raise SpecError("--input", f"label {int(labels.max()):#x}", f"labels 0..{design.constellation.order - 1}")
        out = mapper_words(design, labels, modes)
    else:
        out = demapper_words(design, fields["i"], fields["q"], fields.get("s"), modes)
    return lane_words(out, pack[f"{block}_output"])


def random_words(design: Design, block: str, n: int, seed: int) -> list[int]:
    """n seeded random input words of `block`: labels, or I, Q (and reliability) codes over their whole range;
    an adaptive core: every mode code of the field (past the list too) and every bit of the label field."""
    rng = np.random.default_rng(seed)
    pack = packing(design)
    count = n * design.lanes
    if block == "mapper":
        if not design.modes:
            symbols = [int(v) for v in rng.integers(0, design.constellation.order, count)]
        else:
            width = pack["mapper_input"].get("lane_width", pack["mapper_input"]["width"])
            symbols = [int(v) for v in rng.integers(0, 1 << width, count)]
        return lane_words(symbols, pack["mapper_input"])
    fmt = design.input_format
    i = rng.integers(fmt.min_code, fmt.max_code + 1, count)
    q = rng.integers(fmt.min_code, fmt.max_code + 1, count)
    s = rng.integers(0, design.scale_format.max_code + 1, count) if design.scale_format else None
    modes = rng.integers(0, 1 << design.mode_width, count) if design.modes else None
    return lane_words(demapper_input_words(design, i, q, s, modes), pack["demapper_input"])


__all__ = ["BLOCKS", "demapper_input_words", "demapper_words", "format_words", "hex_digits", "lane_symbols",
           "lane_words", "mapper_input_words", "mapper_words", "pack_words", "packing", "parse_words", "random_words", "read_words", "run_block", "unpack_words"]
