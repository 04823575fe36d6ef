"""Test vectors: seeded stimulus for both blocks and the model's expected words (vectors/*.hex).

Mapper: every label once, then seeded random labels. Demapper: every input code of each axis
(an even sample above 2^16 codes) with the other axis random, the extreme codes of both axes
crossed (min, max, 0, +-1, the levels, the decision boundaries and the clamp points, +-1), every
reliability code, then seeded random inputs. A cross adds I x Q pairs around its four cut corners
(the codes near the corner's edges crossed, and the diagonal where the core's and the arms' nearest
points tie). The seed is the design's content hash.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ..model import Design
from ..numbers import QFormat
from ..spec import DesignSpec
from .texts import banner, content_hash
from .words import (demapper_input_words, demapper_words, format_words, lane_words, mapper_input_words, mapper_words,
                    packing)

#: mapper vectors: every label once, then seeded random labels up to this count (at least 1024 random)
MAPPER_VECTORS = 4096
#: random demapper vectors after the exhaustive and extreme sections
RANDOM_VECTORS = 4096
#: an axis input sweep is exhaustive up to this many codes, sampled evenly beyond
MAX_SWEEP = 1 << 16
#: extreme I x Q codes are crossed exhaustively up to this many pairs, paired beyond
MAX_CROSS = 4096
#: a cross: I x Q pairs around the cut corners (edges crossed, diagonals) up to this many
MAX_CORNER = 4096


def output_header(design: Design, block: str, count: int) -> str:
    """Header of an expected-output vector file (the same for `vectors/` and `qamsmith run`)."""
    pack = packing(design)[f"{block}_output"]
    return (banner(design, f"{block} expected output words from the bit-exact model, one per input word")
            + f"// packing: {pack['width']}-bit word, {pack['doc']}\n// words: {count}\n")


def _input_header(design: Design, block: str, count: int, sections: str) -> str:
    pack = packing(design)[f"{block}_input"]
    return (banner(design, f"{block} stimulus words")
            + f"// packing: {pack['width']}-bit word, {pack['doc']}\n// words: {count} ({sections})\n")


def _rng(spec: DesignSpec) -> np.random.Generator:
    return np.random.default_rng(int(content_hash(spec), 16))


def mapper_stimulus(design: Design, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray | None, str]:
    """Every label once, then seeded random labels; an adaptive core: every label of every mode (and of each
    mode code past the list), then a random mode and label on every symbol. Returns (labels, modes, what)."""
    m = design.constellation.order
    n_random = max(MAPPER_VECTORS - m, 1024)
    if not design.modes:
        labels = np.concatenate([np.arange(m, dtype=np.int64), rng.integers(0, m, n_random, dtype=np.int64)])
        return labels, None, f"every label 0..{m - 1} once, then {n_random} seeded random labels"
    codes = np.arange(1 << design.mode_width, dtype=np.int64)
    orders = np.asarray([design.modes[min(c, len(design.modes) - 1)].order for c in codes], dtype=np.int64)
    modes = np.concatenate([np.repeat(codes, orders), rng.integers(0, codes.size, n_random, dtype=np.int64)])
    order_of = orders[modes]
    labels = np.concatenate([np.arange(o, dtype=np.int64) for o in orders]
                            + [(rng.random(n_random) * order_of[-n_random:]).astype(np.int64)])
    return labels, modes, (f"every label of every mode code 0..{codes.size - 1} once, then {n_random} seeded random "
                           "modes and labels (the mode changes from symbol to symbol)")


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
        ad = next((a for a in design.axes if a.axis is ax), None)
        if ad is not None:
            centres |= set(ad.level_input_codes) | set(ad.boundaries)         # the levels, decision boundaries
        centres |= {ax.levels << f, -(ax.levels << f)}                        # where the decision clamps
    else:
        pts = np.unique(design.search_i if axis == 0 else design.search_q)
        centres |= {int(p) for p in pts}
        centres |= {int(a + b) // 2 for a, b in zip(pts[:-1], pts[1:])}      # midpoints
        if design.cross is not None:                                          # where the square's decision clamps
            centres |= {design.cross.span << f, -(design.cross.span << f)}
    codes = base | {c + d for c in centres for d in (-1, 0, 1)}
    return np.asarray(sorted(c for c in codes if fmt.min_code <= c <= fmt.max_code), dtype=np.int64)


def corner_codes(design: Design, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """A cross: (I, Q) pairs around the four cut corners, where the demapper's 2-D step decides.

    Per quadrant, the codes near the corner's edges (the boundary N between the core and the corner, the
    outermost level S-1 and the square's clamp S, each +-1 and +-2^f, and the level N+1 and N-1) crossed
    with each other, and the diagonal |I| = |Q| (+-1) from the corner's edge out to the largest code, where
    the core's and the arms' nearest points are equally far. At most MAX_CORNER pairs (evenly sampled)."""
    fmt = design.input_format
    f = design.spec.demapper.input_fraction
    cross = design.cross.cross
    n, s = cross.n, cross.span
    edges = {n << f, (n - 1) << f, (n + 1) << f, (s - 1) << f, s << f, (n + 2) << f}
    near = sorted({c + d for c in edges for d in (-(1 << f), -1, 0, 1, 1 << f)})
    near = np.asarray([c for c in near if 0 < c <= fmt.max_code], dtype=np.int64)
    gi, gq = np.meshgrid(near, near, indexing="ij")
    diag = np.arange(max((n << f) - (1 << f), 0), fmt.max_code + 1, dtype=np.int64)
    if diag.size > MAX_CORNER // 16:
        diag = np.unique(np.linspace(diag[0], diag[-1], MAX_CORNER // 16).round().astype(np.int64))
    ai = np.concatenate([gi.ravel(), diag, diag, np.minimum(diag + 1, fmt.max_code)])
    aq = np.concatenate([gq.ravel(), diag, np.minimum(diag + 1, fmt.max_code), diag])
    # the four quadrants: the mirror of a positive code c is -c (every one of them is an input code)
    ci = np.concatenate([ai, -ai, ai, -ai])
    cq = np.concatenate([aq, aq, -aq, -aq])
    if ci.size > MAX_CORNER:
        keep = np.sort(rng.choice(ci.size, MAX_CORNER, replace=False))
        ci, cq = ci[keep], cq[keep]
    return ci, cq


def demapper_stimulus(design: Design, rng: np.random.Generator
                      ) -> tuple[np.ndarray, np.ndarray, np.ndarray | None, np.ndarray | None, str]:
    """Per-axis sweeps, extreme codes crossed, reliability sweep, then seeded random inputs.

    An adaptive core: the sweeps once per mode code (past the list too), the other sections with a random
    mode on every symbol, then a section whose mode steps through every code on consecutive symbols.
    Returns (i, q, scale, modes, what)."""
    if design.modes:
        return _demapper_modes(design, rng)
    i, q, scale, note = _demapper_stimulus(design, rng)
    return i, q, scale, None, note


def _demapper_modes(design: Design, rng: np.random.Generator
                    ) -> tuple[np.ndarray, np.ndarray, np.ndarray | None, np.ndarray, str]:
    codes = 1 << design.mode_width
    parts = [_demapper_stimulus(design, rng) for _ in range(codes)]
    fmt = design.input_format
    sweep = _sweep(fmt).size * (2 if design.constellation.axes[1].bits else 1)
    # the sweeps of copy c under mode c; everything after them under random modes
    modes = [np.concatenate([np.full(sweep, c, np.int64), rng.integers(0, codes, p[0].size - sweep)])
             for c, p in enumerate(parts)]
    n_step = RANDOM_VECTORS
    step = np.arange(n_step, dtype=np.int64) % codes
    i = np.concatenate([p[0] for p in parts] + [rng.integers(fmt.min_code, fmt.max_code + 1, n_step)])
    q = np.concatenate([p[1] for p in parts] + [rng.integers(fmt.min_code, fmt.max_code + 1, n_step)])
    scale = None
    if design.scale_format is not None:
        scale = np.concatenate([p[2] for p in parts] + [rng.integers(0, design.scale_format.max_code + 1, n_step)])
    note = (f"per mode code 0..{codes - 1} (past the list too): {parts[0][3]} (the sweeps under that mode, the rest "
            f"under random modes); then {n_step} random inputs with the mode stepping through every code on "
            "consecutive symbols")
    return i, q, scale, np.concatenate(modes + [step]), note


def _demapper_stimulus(design: Design, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray, np.ndarray | None, str]:
    """Per-axis sweeps, extreme codes crossed, reliability sweep, then seeded random inputs (one mode)."""
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
    if design.cross is not None:
        ci, cq = corner_codes(design, rng)
        parts_i.append(ci)
        parts_q.append(cq)
        notes.append(f"{ci.size} I x Q pairs around the cross's cut corners (edges crossed, diagonals)")
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


def _lanes(symbols: list[int], entry: dict[str, Any]) -> list[int]:
    """Symbols packed into words of `entry`'s lanes; a last partial word is filled with the first symbols again."""
    n = entry.get("lanes", 1)
    return lane_words(symbols + symbols[:(-len(symbols)) % n], entry)


def vector_files(design: Design) -> tuple[dict[str, bytes], dict[str, Any]]:
    """Stimulus and expected words of both blocks, and their manifest entry."""
    rng = _rng(design.spec)
    pack = packing(design)
    labels, modes, note = mapper_stimulus(design, rng)
    lanes = design.lanes
    if lanes > 1:
        note += f"; {lanes} symbols a word, the last word filled with the first symbols again"
    map_in = _lanes(mapper_input_words(design, labels, modes), pack["mapper_input"])
    map_out = _lanes(mapper_words(design, labels, modes), pack["mapper_output"])
    files = {
        "vectors/mapper_in.hex": format_words(map_in, pack["mapper_input"]["width"],
                                              _input_header(design, "mapper", len(map_in), note)),
        "vectors/mapper_out.hex": format_words(map_out, pack["mapper_output"]["width"],
                                               output_header(design, "mapper", len(map_out))),
    }
    i, q, scale, dmodes, dnote = demapper_stimulus(design, rng)
    if lanes > 1:
        dnote += f"; {lanes} symbols a word, the last word filled with the first symbols again"
    dem_in = _lanes(demapper_input_words(design, i, q, scale, dmodes), pack["demapper_input"])
    dem_out = _lanes(demapper_words(design, i, q, scale, dmodes), pack["demapper_output"])
    files["vectors/demapper_in.hex"] = format_words(dem_in, pack["demapper_input"]["width"],
                                                    _input_header(design, "demapper", len(dem_in), dnote))
    files["vectors/demapper_out.hex"] = format_words(dem_out, pack["demapper_output"]["width"],
                                                     output_header(design, "demapper", len(dem_out)))
    entry = {
        "mapper": {"input": "vectors/mapper_in.hex", "expected": "vectors/mapper_out.hex", "count": len(map_in),
                   "stimulus": note},
        "demapper": {"input": "vectors/demapper_in.hex", "expected": "vectors/demapper_out.hex", "count": len(dem_in),
                     "stimulus": dnote},
        "format": "one fixed-width lower-case hex word a line after // comment lines ($readmemh)",
    }
    return files, entry


__all__ = ["corner_codes", "demapper_stimulus", "mapper_stimulus", "output_header", "special_codes", "vector_files"]
