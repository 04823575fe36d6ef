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
    """How labels, I/Q codes, reliability codes and LLRs sit in the stream words (fields with lsb/width)."""
    k = design.bits
    w = design.mapper_format.width
    wi = design.input_format.width
    ws = design.scale_format.width if design.scale_format else 0
    wl = design.llr_format.width
    hard = design.spec.demapper.algorithm == "hard"
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
    return {
        "mapper_input": {"width": k, "doc": f"{k}-bit label, b0 (first bit in time) is the MSB",
                         "fields": [_field(f"b{j}", k - 1 - j, 1, False, f"label bit b{j}") for j in range(k)]},
        "mapper_output": {"width": 2 * w, "doc": f"{{Q, I}}: signed {w}-bit I in the low half",
                          "fields": [_field("i", 0, w, True, "I output code"), _field("q", w, w, True, "Q output code")]},
        "demapper_input": {"width": 2 * wi + ws,
                           "doc": f"{{S, Q, I}}: signed {wi}-bit I in the low bits, Q above it"
                                  + (f", unsigned {ws}-bit reliability S on top" if ws else ""),
                           "fields": dem_in},
        "demapper_output": {"width": k if hard else k * wl, "doc": out_doc, "fields": dem_out},
    }


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


def mapper_words(design: Design, labels: np.ndarray) -> list[int]:
    """Expected mapper output words {Q, I} of labels."""
    i, q = map_labels(design, labels)
    w = design.mapper_format.width
    return pack_words([(q, w), (i, w)])


def demapper_words(design: Design, i: np.ndarray, q: np.ndarray, scale: np.ndarray | None) -> list[int]:
    """Expected demapper output words (LLRs, b0 in the most significant field; or hard bits)."""
    out = demap(design, i, q, scale)
    width = 1 if design.spec.demapper.algorithm == "hard" else design.llr_format.width
    return pack_words([(out[:, j], width) for j in range(design.bits)])


def demapper_input_words(design: Design, i: np.ndarray, q: np.ndarray, scale: np.ndarray | None) -> list[int]:
    """Demapper input words {S, Q, I} of codes."""
    wi = design.input_format.width
    cols = [(q, wi), (i, wi)]
    if design.scale_format is not None:
        cols.insert(0, (scale, design.scale_format.width))
    return pack_words(cols)


def run_block(design: Design, block: str, words: Sequence[int]) -> list[int]:
    """The model on input words of `block` ('mapper' or 'demapper'): the expected output words."""
    if block == "mapper":
        labels = np.asarray(words, dtype=np.int64)
        if labels.size and labels.max() >= design.constellation.order:
            raise SpecError("--input", f"label {int(labels.max()):#x}", f"labels 0..{design.constellation.order - 1}")
        return mapper_words(design, labels)
    if block != "demapper":
        raise SpecError("--block", block, f"one of {', '.join(BLOCKS)}")
    fields = unpack_words(words, packing(design)["demapper_input"]["fields"])
    return demapper_words(design, fields["i"], fields["q"], fields.get("s"))


def random_words(design: Design, block: str, n: int, seed: int) -> list[int]:
    """n seeded random input words of `block`: labels, or I, Q (and reliability) codes over their whole range."""
    rng = np.random.default_rng(seed)
    if block == "mapper":
        return [int(v) for v in rng.integers(0, design.constellation.order, n)]
    fmt = design.input_format
    i = rng.integers(fmt.min_code, fmt.max_code + 1, n)
    q = rng.integers(fmt.min_code, fmt.max_code + 1, n)
    s = rng.integers(0, design.scale_format.max_code + 1, n) if design.scale_format else None
    return demapper_input_words(design, i, q, s)


__all__ = ["BLOCKS", "demapper_input_words", "demapper_words", "format_words", "hex_digits", "mapper_words",
           "pack_words", "packing", "parse_words", "random_words", "read_words", "run_block", "unpack_words"]
