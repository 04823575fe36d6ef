"""Emission: the Jinja2 environment, banners, the manifest, ROM images, test vectors, atomic writes.

Everything here reads numbers from `model.derive(spec)`; nothing is computed twice. The
files of one design (`build_files`) are a pure function of the spec and the generator
version, so two runs give byte-identical output and `design.toml` regenerates all of it.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import tempfile
from pathlib import Path
from typing import Any, Iterable, Sequence

import numpy as np
from jinja2 import Environment, PackageLoader, StrictUndefined

from . import __version__
from .errors import SpecError
from .fixed import QFormat
from .model import Design, demap, derive, map_labels
from .spec import DesignSpec, field_docs

GENERATOR = "qamsmith"
MANIFEST = "manifest.json"
#: where `qamsmith analyze` and `qamsmith cost` write about a design (kept while the design is unchanged)
REPORT_DIR = "report"
#: mapper vectors: every label once, then seeded random labels up to this count (at least 1024 random)
MAPPER_VECTORS = 4096
#: random demapper vectors after the exhaustive and extreme sections
RANDOM_VECTORS = 4096
#: an axis input sweep is exhaustive up to this many codes, sampled evenly beyond
MAX_SWEEP = 1 << 16
#: extreme I x Q codes are crossed exhaustively up to this many pairs, paired beyond
MAX_CROSS = 4096

# Verilog-2005 (IEEE 1364-2005 annex B) and SystemVerilog-2017 (IEEE 1800-2017 annex B) keywords.
VERILOG_KEYWORDS = frozenset("""
accept_on alias always always_comb always_ff always_latch and assert assign assume automatic before begin
bind bins binsof bit break buf bufif0 bufif1 byte case casex casez cell chandle checker class clocking cmos
config const constraint context continue cover covergroup coverpoint cross deassign default defparam design
disable dist do edge else end endcase endchecker endclass endclocking endconfig endfunction endgenerate
endgroup endinterface endmodule endpackage endprimitive endprogram endproperty endspecify endsequence
endtable endtask enum event eventually expect export extends extern final first_match for force foreach
forever fork forkjoin function generate genvar global highz0 highz1 if iff ifnone ignore_bins illegal_bins
implements implies import incdir include initial inout input inside instance int integer interconnect
interface intersect join join_any join_none large let liblist library local localparam logic longint
macromodule matches medium modport module nand negedge nettype new nexttime nmos nor noshowcancelled not
notif0 notif1 null or output package packed parameter pmos posedge primitive priority program property
protected pull0 pull1 pulldown pullup pulsestyle_ondetect pulsestyle_onevent pure rand randc randcase
randsequence rcmos real realtime ref reg reject_on release repeat restrict return rnmos rpmos rtran
rtranif0 rtranif1 s_always s_eventually s_nexttime s_until s_until_with scalared sequence shortint
shortreal showcancelled signed small soft solve specify specparam static string strong strong0 strong1
struct super supply0 supply1 sync_accept_on sync_reject_on table tagged task this throughout time
timeprecision timeunit tran tranif0 tranif1 tri tri0 tri1 triand trior trireg type typedef union unique
unique0 unsigned until until_with untyped use uwire var vectored virtual void wait wait_order wand weak
weak0 weak1 while wildcard wire with within wor xnor xor
""".split())


# --------------------------------------------------------------------------- Jinja2


def vlit(value: int, width: int, signed: bool = True) -> str:
    """A sized Verilog literal: `12'sd5`, `-12'sd5` (never `12'sd-5`), `12'sh800` for the most negative code."""
    value, width = int(value), int(width)
    if width < 1:
        raise ValueError(f"literal width must be >= 1, got {width}")
    if signed:
        lo, hi = -(1 << (width - 1)), (1 << (width - 1)) - 1
        if not lo <= value <= hi:
            raise ValueError(f"{value} does not fit a signed {width}-bit literal")
        if value == lo:
            return f"{width}'sh{-lo:x}"
        return f"-{width}'sd{-value}" if value < 0 else f"{width}'sd{value}"
    if not 0 <= value < (1 << width):
        raise ValueError(f"{value} does not fit an unsigned {width}-bit literal")
    return f"{width}'d{value}"


def vname(name: str) -> str:
    """A Verilog identifier: names that are Verilog/SystemVerilog keywords get a trailing '_'."""
    return f"{name}_" if name in VERILOG_KEYWORDS else name


def jinja_env() -> Environment:
    """The templates/ environment (package `qamsmith.templates`), strict about undefined names."""
    env = Environment(loader=PackageLoader("qamsmith.templates", "."), undefined=StrictUndefined,
                      trim_blocks=True, lstrip_blocks=True, keep_trailing_newline=True, autoescape=False)
    env.filters["vlit"] = vlit
    env.filters["vname"] = vname
    return env


# --------------------------------------------------------------------------- banner, hash, TOML


def content_hash(spec: DesignSpec) -> str:
    """First 16 hex digits of sha256(generator version + canonical JSON of the resolved spec)."""
    canon = json.dumps(spec.to_dict(), sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(f"{GENERATOR} {__version__}\n{canon}".encode()).hexdigest()[:16]


def toml_value(value: Any) -> str:
    """A TOML literal of a resolved spec value (bool, int, float, str or list)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        text = repr(value)
        return text if any(c in text for c in ".en") else text + ".0"
    if isinstance(value, str):
        return json.dumps(value)
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    raise TypeError(f"no TOML form for {value!r}")


def _spec_lines(spec: DesignSpec) -> list[str]:
    """`key = value` lines of the resolved spec (a user table is summarized; design.toml has it)."""
    lines = []
    for key, value in _flat(spec.to_dict()):
        if key == "constellation.table" and value:
            lines.append(f"{key} = [{len(value)} rows, see design.toml]")
        else:
            lines.append(f"{key} = {toml_value(value)}")
    return lines


def _flat(data: dict[str, Any], prefix: str = "") -> list[tuple[str, Any]]:
    out = []
    for key, value in data.items():
        if isinstance(value, dict):
            out.extend(_flat(value, f"{prefix}{key}."))
        else:
            out.append((f"{prefix}{key}", value))
    return out


def banner(design: Design, what: str, comment: str = "//", *, spec: bool = True) -> str:
    """Header of a generated file: what it is, generator version, resolved spec, content hash."""
    c = comment
    lines = [f"{c} {what}", f"{c} Generated by {GENERATOR} {__version__} from design {design.spec.name!r}; "
             "edit the spec and regenerate instead of editing this file."]
    if spec:
        lines.append(f"{c} Resolved spec:")
        lines += [f"{c}   {line}" for line in _spec_lines(design.spec)]
    lines.append(f"{c} Content hash: {content_hash(design.spec)}")
    return "\n".join(lines) + "\n"


def design_toml(design: Design) -> str:
    """The fully resolved spec as TOML, one comment per key; it regenerates the design byte for byte."""
    spec = design.spec
    docs = field_docs()
    out = [banner(design, f"{GENERATOR} design spec (fully resolved): `qamsmith generate design.toml` "
                          "rebuilds every file of this design byte for byte.", "#", spec=False), "\n"]
    data = spec.to_dict()
    out.append(f"# {docs['name']}\nname = {toml_value(data['name'])}\n")
    for section, values in data.items():
        if section == "name":
            continue
        out.append(f"\n[{section}]\n")
        for key, value in values.items():
            out.append(f"# {docs[f'{section}.{key}']}\n")
            if key == "table" and value:
                rows = "".join(f"    {toml_value(row)},\n" for row in value)
                out.append(f"{key} = [\n{rows}]\n")
            else:
                out.append(f"{key} = {toml_value(value)}\n")
    return "".join(out)


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
        vals = [(w >> f["lsb"]) & mask for w in words]
        arr = np.asarray(vals, dtype=np.int64)
        if f["signed"]:
            arr = np.where(arr >= (1 << (f["width"] - 1)), arr - (1 << f["width"]), arr)
        out[f["name"]] = arr
    return out


def hex_digits(width: int) -> int:
    return max(1, (width + 3) // 4)


def format_words(words: Sequence[int], width: int, header: str) -> bytes:
    """A `$readmemh` file: `//` header, then one fixed-width lower-case hex word per line."""
    n = hex_digits(width)
    body = "".join(f"{w:0{n}x}\n" for w in words)
    return (header + body).encode()


def parse_words(text: str, width: int, source: str) -> list[int]:
    """Hex words of a vector file (`//` comments and blank lines skipped); each must fit `width` bits."""
    words = []
    for lineno, line in enumerate(text.splitlines(), 1):
        word = line.split("//", 1)[0].strip()
        if not word:
            continue
        try:
            value = int(word, 16)
        except ValueError:
            value = -1
        if value < 0 or value >= (1 << width) or word.startswith(("0x", "0X", "+", "-")):
            raise SpecError("--input", f"{source}:{lineno}: {line.strip()}", f"one hex word of at most {width} bits a line")
        words.append(value)
    return words


# --------------------------------------------------------------------------- model on words


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
    wi = design.input_format.width
    cols = [(q, wi), (i, wi)]
    if design.scale_format is not None:
        cols.insert(0, (scale, design.scale_format.width))
    return pack_words(cols)


def run_block(design: Design, block: str, words: Sequence[int]) -> list[int]:
    """The model on input words of `block` ('mapper' or 'demapper'): expected output words."""
    if block == "mapper":
        return mapper_words(design, np.asarray(words, dtype=np.int64))
    fields = unpack_words(words, packing(design)["demapper_input"]["fields"])
    return demapper_words(design, fields["i"], fields["q"], fields.get("s"))


def output_header(design: Design, block: str, count: int) -> str:
    """Header of an expected-output vector file (the same for `vectors/` and `qamsmith run`)."""
    pack = packing(design)[f"{block}_output"]
    return (banner(design, f"{block} expected output words from the bit-exact model, one per input word")
            + f"// packing: {pack['width']}-bit word, {pack['doc']}\n// words: {count}\n")


def _input_header(design: Design, block: str, count: int, sections: str) -> str:
    pack = packing(design)[f"{block}_input"]
    return (banner(design, f"{block} stimulus words")
            + f"// packing: {pack['width']}-bit word, {pack['doc']}\n// words: {count} ({sections})\n")


# --------------------------------------------------------------------------- stimulus


def _rng(spec: DesignSpec) -> np.random.Generator:
    return np.random.default_rng(int(content_hash(spec), 16))


def mapper_stimulus(design: Design, rng: np.random.Generator) -> tuple[np.ndarray, str]:
    """Every label once, then seeded random labels."""
    m = design.constellation.order
    n_random = max(MAPPER_VECTORS - m, 1024)
    labels = np.concatenate([np.arange(m, dtype=np.int64), rng.integers(0, m, n_random, dtype=np.int64)])
    return labels, f"every label 0..{m - 1} once, then {n_random} seeded random labels"


def _sweep(fmt: QFormat) -> np.ndarray:
    """Every input code, or an even sample of MAX_SWEEP codes of a wider input."""
    n = fmt.max_code - fmt.min_code + 1
    if n <= MAX_SWEEP:
        return np.arange(fmt.min_code, fmt.max_code + 1, dtype=np.int64)
    return np.unique(np.linspace(fmt.min_code, fmt.max_code, MAX_SWEEP).round().astype(np.int64))


def special_codes(design: Design, axis: int) -> np.ndarray:
    """Extreme input codes of one axis: min, max, 0, +-1, the levels, decision boundaries and clamp points, +-1."""
    fmt = design.input_format
    f = design.spec.demapper.input_fraction
    base = {fmt.min_code, fmt.min_code + 1, fmt.max_code, fmt.max_code - 1, 0, 1, -1}
    centres: set[int] = set()
    if design.per_axis:
        ax = design.constellation.axes[axis]
        L = ax.levels
        centres |= {int(a) << f for a in ax.amplitudes}                       # the levels
        centres |= {(2 * n - L + 2) << f for n in range(L - 1)}               # decision boundaries
        centres |= {L << f, -(L << f)}                                        # where the decision clamps
    else:
        pts = np.unique(design.search_i if axis == 0 else design.search_q)
        centres |= {int(p) for p in pts}
        centres |= {int(a + b) // 2 for a, b in zip(pts[:-1], pts[1:])}      # midpoints
    codes = base | {c + d for c in centres for d in (-1, 0, 1)}
    return np.asarray(sorted(c for c in codes if fmt.min_code <= c <= fmt.max_code), dtype=np.int64)


def demapper_stimulus(design: Design, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray, np.ndarray | None, str]:
    """Per-axis sweeps, extreme codes crossed, reliability sweep, then seeded random inputs."""
    fmt = design.input_format
    lo, hi = fmt.min_code, fmt.max_code + 1
    const = design.constellation
    q_used = const.axes is None or const.axes[1].bits > 0
    parts_i, parts_q, notes = [], [], []
    sweep = _sweep(fmt)
    exhaustive = "every" if sweep.size == hi - lo else f"{sweep.size} evenly spaced"
    parts_i.append(sweep)
    parts_q.append(rng.integers(lo, hi, sweep.size))
    notes.append(f"{exhaustive} I code with random Q")
    if q_used:
        parts_i.append(rng.integers(lo, hi, sweep.size))
        parts_q.append(sweep)
        notes.append(f"{exhaustive} Q code with random I")
    si, sq = special_codes(design, 0), special_codes(design, 1)
    if si.size * sq.size <= MAX_CROSS:
        gi, gq = np.meshgrid(si, sq, indexing="ij")
        parts_i.append(gi.ravel())
        parts_q.append(gq.ravel())
        notes.append(f"{gi.size} extreme I x Q pairs (min, max, 0, +-1, levels, boundaries)")
    else:
        for a, b in ((si, sq), (sq, si)):
            n = max(a.size, b.size)
            parts_i.append(np.resize(a, n))
            parts_q.append(rng.permutation(np.resize(b, n)))
        notes.append("extreme codes (min, max, 0, +-1, levels, boundaries) paired at random")
    scale = None
    sfmt = design.scale_format
    if sfmt is not None:
        n_sweep = min(sfmt.max_code + 1, MAX_SWEEP)
        parts_i.append(rng.integers(lo, hi, n_sweep))
        parts_q.append(rng.integers(lo, hi, n_sweep))
        notes.append("every reliability code with random I, Q" if n_sweep == sfmt.max_code + 1
                     else f"{n_sweep} reliability codes")
    parts_i.append(rng.integers(lo, hi, RANDOM_VECTORS))
    parts_q.append(rng.integers(lo, hi, RANDOM_VECTORS))
    notes.append(f"{RANDOM_VECTORS} seeded random inputs")
    i = np.concatenate(parts_i).astype(np.int64)
    q = np.concatenate(parts_q).astype(np.int64)
    if sfmt is not None:
        scale = rng.integers(0, sfmt.max_code + 1, i.size, dtype=np.int64)
        scale[0::7] = sfmt.max_code          # full scale and erasures throughout every section
        scale[3::7] = 0
        start = i.size - RANDOM_VECTORS - n_sweep
        scale[start:start + n_sweep] = np.linspace(0, sfmt.max_code, n_sweep).round().astype(np.int64)
        notes.append("random reliability codes with 0 and the maximum among them")
    return i, q, scale, "; ".join(notes)


# --------------------------------------------------------------------------- files


def rom_files(design: Design) -> dict[str, bytes]:
    """`$readmemh` images of the mapper level tables (see `rom_manifest`)."""
    out = {}
    w = design.mapper_format.width
    for entry in rom_manifest(design):
        if entry["axis"] == "points":
            words = pack_words([(design.point_q, w), (design.point_i, w)])
            what = f"mapper point table: entry = label, word {{Q, I}} of two signed {w}-bit codes"
        else:
            ax_n = 0 if entry["axis"] == "i" else 1
            ax = design.constellation.axes[ax_n]
            codes = design.level_codes[ax_n][list(ax.index_of_code)]
            words = pack_words([(codes, w)])
            what = (f"mapper {entry['axis'].upper()} level table: entry c = the signed {w}-bit code of the level "
                    f"whose {entry['axis'].upper()}-axis label is c")
        header = banner(design, what) + f"// {entry['index']}\n// entries: {entry['entries']}, width {entry['width']}\n"
        out[entry["path"]] = format_words(words, entry["width"], header)
    return out


def rom_manifest(design: Design) -> list[dict[str, Any]]:
    """Which ROM images exist, their size and how they are indexed."""
    w = design.mapper_format.width
    const = design.constellation
    if const.axes is None:
        return [{"path": "rom/mapper_points.hex", "axis": "points", "entries": const.order, "width": 2 * w,
                 "index": "index: the label (b0 the MSB); word {Q, I}, I in the low half"}]
    out = []
    for name, ax in zip(("i", "q"), const.axes):
        if not ax.bits:
            continue
        bits = ", ".join(f"b{b}" for b in ax.label_bits)
        out.append({"path": f"rom/mapper_{name}.hex", "axis": name, "entries": ax.levels, "width": w,
                    "label_bits": list(ax.label_bits),
                    "index": f"index c: the label bits {bits} in this order, the first one the MSB of c"})
    return out


def vector_files(design: Design) -> tuple[dict[str, bytes], dict[str, Any]]:
    """Stimulus and expected words of both blocks, and their manifest entry."""
    rng = _rng(design.spec)
    pack = packing(design)
    labels, note = mapper_stimulus(design, rng)
    files = {
        "vectors/mapper_in.hex": format_words(pack_words([(labels, design.bits)]), design.bits,
                                              _input_header(design, "mapper", labels.size, note)),
        "vectors/mapper_out.hex": format_words(mapper_words(design, labels), pack["mapper_output"]["width"],
                                               output_header(design, "mapper", labels.size)),
    }
    i, q, scale, dnote = demapper_stimulus(design, rng)
    files["vectors/demapper_in.hex"] = format_words(
        demapper_input_words(design, i, q, scale), pack["demapper_input"]["width"],
        _input_header(design, "demapper", i.size, dnote))
    files["vectors/demapper_out.hex"] = format_words(
        demapper_words(design, i, q, scale), pack["demapper_output"]["width"],
        output_header(design, "demapper", i.size))
    entry = {
        "mapper": {"input": "vectors/mapper_in.hex", "expected": "vectors/mapper_out.hex", "count": int(labels.size),
                   "stimulus": note},
        "demapper": {"input": "vectors/demapper_in.hex", "expected": "vectors/demapper_out.hex", "count": int(i.size),
                     "stimulus": dnote},
        "format": "one fixed-width lower-case hex word a line after // comment lines ($readmemh)",
    }
    return files, entry


def _qformat(fmt: QFormat | None) -> dict[str, Any] | None:
    if fmt is None:
        return None
    return {"width": fmt.width, "fraction": fmt.fraction, "signed": fmt.signed, "name": str(fmt),
            "min_code": fmt.min_code, "max_code": fmt.max_code}


def _axis_entry(design: Design, n: int) -> dict[str, Any] | None:
    ax = design.constellation.axes[n]
    if not ax.bits:
        return None
    f = design.spec.demapper.input_fraction
    ad = next(a for a in design.axes if a.axis is ax)
    entry: dict[str, Any] = {
        "levels": ax.levels, "label_bits": list(ax.label_bits), "codes": list(ax.codes),
        "gray_mask": ax.gray_mask, "inverted": list(ad.inverted),
        "level_input_codes": [int(a) << f for a in ax.amplitudes],
        "decision_boundaries": [(2 * m - ax.levels + 2) << f for m in range(ax.levels - 1)],
        "mapper_level_codes": [int(c) for c in design.level_codes[n]],
    }
    if design.spec.demapper.algorithm == "maxlog":
        entry["competitor"] = ad.competitor.tolist()
        entry["competitor_uses_sign"] = list(ad.uses_sign)
    return entry


def build_manifest(design: Design, files: dict[str, bytes] | None = None,
                   vectors: dict[str, Any] | None = None) -> dict[str, Any]:
    """The manifest: every derived number the RTL, testbenches and reports read, and the file list."""
    spec = design.spec
    d = spec.demapper
    const = design.constellation
    if files is None or vectors is None:
        files, vectors = _content_files(design)
    labels = np.arange(const.order)
    dem: dict[str, Any] = {
        "algorithm": d.algorithm,
        "structure": "per-axis" if design.per_axis else "2-D search",
        "input_lsb": design.input_lsb, "llr_lsb": design.llr_lsb, "scale_lsb": design.scale_lsb,
        "input_format": _qformat(design.input_format), "llr_format": _qformat(design.llr_format),
        "scale_format": _qformat(design.scale_format),
        "output_shift": design.output_shift, "metric_fraction": design.metric_fraction, "rounding": d.rounding,
        "widths": {k: {"width": w, "signed": s} for k, (w, s) in sorted(design.widths.items())},
        "llr_max": design.llr_format.max_code, "llr_min": -design.llr_format.max_code,
        "sign": "positive LLR: bit 0 more likely; saturation is symmetric, the most negative code is never produced",
        "input_scale": (f"level n of an L-level axis sits at input code (2n - (L-1)) * 2^{d.input_fraction}: one level "
                        f"step is {2 << d.input_fraction} codes, the scale the upstream AGC/equalizer must deliver"),
        "scale_behaviour": (f"LLR = metric * S * scale_lsb; scale code 0 gives LLR 0 (an erasure); the field is "
                            f"{d.scale_width} bits, so no out-of-range code exists" if design.scale_format else
                            "no reliability input (demapper.scale_width = 0): scale = 1"),
        "per_axis": ({"i": _axis_entry(design, 0), "q": _axis_entry(design, 1)} if design.per_axis else None),
        "search_points": (None if design.per_axis else
                          [[int(lab), int(a), int(b)] for lab, a, b in zip(labels, design.search_i, design.search_q)]),
    }
    if not design.per_axis:
        m, k = const.order, design.bits
        dem["search_cost"] = {"points": m, "distances_per_symbol": m,
                              "min_trees_per_symbol": 2 * k, "compares_per_symbol": 2 * k * (m // 2 - 1),
                              "doc": "exact 2-D search: a squared distance to every point, two minima per bit"}
    manifest: dict[str, Any] = {
        "generator": {"name": GENERATOR, "version": __version__},
        "content_hash": content_hash(spec),
        "spec": spec.to_dict(),
        "qformats": {"mapper_output": _qformat(design.mapper_format), "demapper_input": _qformat(design.input_format),
                     "llr": _qformat(design.llr_format), "scale": _qformat(design.scale_format)},
        "constellation": {"order": const.order, "bits": design.bits, "labeling": const.labeling,
                          "kappa": const.kappa, "energy": const.energy,
                          "axes": "per-axis (product labeling)" if design.per_axis else "none (2-D search)"},
        "mapper": {
            "points": [[int(lab), int(a), int(b)] for lab, a, b in zip(labels, design.point_i, design.point_q)],
            "lsb": design.mapper_lsb, "width": design.mapper_format.width, "scaling": spec.mapper.scaling,
            "rounding": spec.mapper.rounding, "implementation": spec.mapper.implementation,
            "rom": {"style": spec.mapper.rom_style, "images": rom_manifest(design)},
        },
        "demapper": dem,
        "packing": packing(design),
        "vectors": vectors,
        "rtl": _rtl_manifest(design),
        "files": [{"path": p, "sha256": hashlib.sha256(b).hexdigest()} for p, b in sorted(files.items())],
    }
    return manifest


def _rtl_manifest(design: Design) -> dict[str, Any]:
    from . import rtl
    return rtl.manifest(design)


def _as_bytes(content: str | bytes) -> bytes:
    return content if isinstance(content, bytes) else content.encode()


def _content_files(design: Design) -> tuple[dict[str, bytes], dict[str, Any]]:
    from . import rtl, testbench
    files: dict[str, bytes] = {"design.toml": design_toml(design).encode()}
    files.update(rom_files(design))
    vec, entry = vector_files(design)
    files.update(vec)
    for extra in (rtl.files(design), testbench.files(design)):
        for path, content in extra.items():
            if path in files or path == MANIFEST:
                raise RuntimeError(f"two generators write {path!r}")
            files[path] = _as_bytes(content)
    return files, entry


def build_files(spec: DesignSpec) -> dict[str, bytes]:
    """Every file of `out/<name>/`: relative path -> content (raises SpecError before anything is written)."""
    design = derive(spec)
    files, vectors = _content_files(design)
    manifest = build_manifest(design, files, vectors)
    files[MANIFEST] = (json.dumps(manifest, sort_keys=True, indent=2) + "\n").encode()
    return files


# --------------------------------------------------------------------------- writing


def _entries(root: Path) -> list[str]:
    """Relative paths of the files, links and empty directories under root."""
    out = []
    for dirpath, dirnames, filenames in os.walk(root):
        here = Path(dirpath)
        for name in list(dirnames):
            if (here / name).is_symlink():
                dirnames.remove(name)
                filenames.append(name)
        if not dirnames and not filenames and here != root:
            out.append(here.relative_to(root).as_posix())
        out.extend((here / name).relative_to(root).as_posix() for name in filenames)
    return sorted(out)


def _owned(target: Path) -> dict[str, str]:
    """Files the tool wrote into target earlier (path -> sha256), from its manifest; {} if none."""
    try:
        data = json.loads((target / MANIFEST).read_text(encoding="utf-8"))
        if data["generator"]["name"] != GENERATOR:
            return {}
        return {str(e["path"]): str(e["sha256"]) for e in data["files"]}
    except (OSError, ValueError, KeyError, TypeError):
        return {}


def _old_hash(target: Path) -> str | None:
    """Content hash recorded in an earlier manifest of target, if any."""
    try:
        return str(json.loads((target / MANIFEST).read_text(encoding="utf-8"))["content_hash"])
    except (OSError, ValueError, KeyError, TypeError):
        return None


def generated_files(target: str | Path) -> list[str]:
    """Relative paths of the files qamsmith wrote into a design directory (manifest.json included)."""
    owned = _owned(Path(target))
    return sorted([*owned, MANIFEST]) if owned else []


def _sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def write_design(spec: DesignSpec, out_root: str | Path, *, force: bool = False) -> Path:
    """Write `out_root/<name>/` atomically (a temporary directory beside it, then a rename).

    An existing directory is replaced only when it holds nothing but unmodified files of an
    earlier run; with `force`, generated files (also modified ones) are replaced and stale ones
    removed, while files the tool did not write are kept. Raises SpecError, writing nothing.
    """
    files = build_files(spec)
    root = Path(out_root)
    target = root / spec.name
    if target.exists() and not target.is_dir():
        raise SpecError("--out", str(target), "a directory (a file of that name is in the way)")
    foreign: list[str] = []
    kept: list[str] = []
    if target.exists():
        owned = _owned(target)
        present = _entries(target)
        dirs = {str(Path(p).parent) for p in [*owned, *files]}
        dirs = {d_ for p in dirs for d_ in [p, *map(str, Path(p).parents)]}
        foreign = [p for p in present if p not in owned and p != MANIFEST and p not in dirs
                   and not p.startswith(REPORT_DIR + "/")]
        # report/ holds what `qamsmith analyze` / `cost` wrote about this design: it stays while the
        # design is the same (same content hash) and goes with the old design otherwise
        if _old_hash(target) == content_hash(spec):
            kept = [p for p in present if p.startswith(REPORT_DIR + "/")]
        modified = [p for p in present if p in owned and _sha(target / p) != owned[p]]
        clash = [p for p in foreign if p in files or any(g.startswith(p + "/") for g in files)]
        if clash:
            raise SpecError("--out", str(target), f"a directory qamsmith generated: {clash[0]!r} there was not written "
                            "by qamsmith and would be overwritten (move it away; --force keeps such files, so it "
                            "cannot help)")
        if (foreign or modified) and not force:
            what = (f"{len(foreign)} file(s) qamsmith did not write, e.g. {foreign[0]!r}" if foreign
                    else f"{len(modified)} generated file(s) changed since, e.g. {modified[0]!r}")
            raise SpecError("--out", str(target), f"a new directory or one qamsmith generated; it holds {what} "
                            "(use --force to replace only the generated files)")
    try:
        root.mkdir(parents=True, exist_ok=True)
        staging = Path(tempfile.mkdtemp(prefix=f".{spec.name}.", suffix=".new", dir=root))
    except OSError as exc:
        raise SpecError("--out", str(root), f"a writable directory ({exc.strerror})") from None
    moved: list[str] = []
    old: Path | None = None
    try:
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(staging, 0o777 & ~umask)
        for rel, content in files.items():
            path = staging / rel
            path.parent.mkdir(parents=True, exist_ok=True)
            path.write_bytes(content)
        for rel in foreign + kept:                # keep what the user put there, untouched
            (staging / rel).parent.mkdir(parents=True, exist_ok=True)
            os.rename(target / rel, staging / rel)
            moved.append(rel)
        if target.exists():
            old = Path(tempfile.mkdtemp(prefix=f".{spec.name}.", suffix=".old", dir=root))
            os.rename(target, old / "d")
        os.rename(staging, target)
    except OSError as exc:
        if old is not None and not target.exists():
            os.rename(old / "d", target)
        for rel in moved:
            if (staging / rel).exists() or (staging / rel).is_symlink():
                os.rename(staging / rel, target / rel)
        shutil.rmtree(staging, ignore_errors=True)
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)
        raise SpecError("--out", str(target), f"a writable directory ({exc.strerror or exc})") from None
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)
    return target


__all__ = ["GENERATOR", "MANIFEST", "VERILOG_KEYWORDS", "banner", "build_files", "build_manifest", "content_hash",
           "design_toml", "format_words", "generated_files", "jinja_env", "packing", "pack_words", "parse_words", "run_block",
           "output_header", "unpack_words", "vlit", "vname", "write_design"]
