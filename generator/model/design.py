"""`derive(spec) -> Design`: every number the model, the RTL and the manifest need, computed once.

A `Design` is immutable: its arrays are read-only and its tables are built before it is. For a
product labeling, each axis' demapper output is a function of that axis' input code alone, so
`derive` evaluates the integer steps (`model.steps`) once over every input code; those results
size the internal widths and become the fast path's per-axis tables.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import lru_cache
from types import MappingProxyType
from typing import Mapping

import numpy as np

from ..errors import SpecError
from ..numbers import Axis, Constellation, QFormat, bits_for_range, from_table, named, round_float
from ..spec import MAX_WIDTH, DesignSpec
from .cross import AXIS_NAMES, CrossDemap, axis_terms, cross_demap, magnitude_bound, term_ranges
from .cross import decide as cross_decide
from .modes import Mode, build_mode
from .steps import AxisDemap, OutputStage, axis_steps, decide, output

#: int64 products must stay below this (the model's exactness limit and a sane hardware limit)
_PRODUCT_LIMIT = 1 << 62


@dataclass(frozen=True, eq=False)
class Design:
    """Everything derived from a spec: constellation, formats, tables and internal widths."""

    spec: DesignSpec
    constellation: Constellation
    #: mapper output format and the value of one output LSB in normalized units
    mapper_format: QFormat
    mapper_lsb: float
    #: mapper I and Q codes of every label, shape (M,)
    point_i: np.ndarray
    point_q: np.ndarray
    #: per-axis mapper level codes, indexed by level n (product labelings); empty otherwise
    level_codes: tuple[np.ndarray, ...]
    input_format: QFormat
    input_lsb: float
    llr_format: QFormat
    llr_lsb: float
    scale_format: QFormat | None
    scale_lsb: float
    #: fraction bits of the LLR magnitude before the output stage
    metric_fraction: int
    output_stage: OutputStage
    #: per-axis demapper data of the axes that carry bits (product labelings)
    axes: tuple[AxisDemap, ...]
    #: input codes of every point (2-D search only), shape (M,)
    search_i: np.ndarray
    search_q: np.ndarray
    #: internal widths of the model's intermediates: name -> (width, signed)
    widths: Mapping[str, tuple[int, bool]]
    #: per-axis magnitude/negative tables over every input code (product labelings)
    tables: tuple[tuple[np.ndarray, np.ndarray], ...]
    #: per-axis final LLR tables (N_codes, k), when there is no reliability input
    llr_tables: tuple[np.ndarray, ...]
    hard_tables: tuple[np.ndarray, ...]
    #: a cross shape: the demapper's plan (model.cross), else None
    cross: CrossDemap | None = None
    #: a cross shape: every per-axis quantity over every input code, by axis name (the fast path's tables)
    cross_terms: Mapping[str, Mapping[str, np.ndarray]] = field(default_factory=lambda: MappingProxyType({}))
    #: an adaptive core (constellation.orders): its modes in the order of the mode field, else ()
    modes: tuple[Mode, ...] = ()

    @property
    def bits(self) -> int:
        return self.constellation.bits

    @property
    def mode_width(self) -> int:
        """Width of the mode field of each symbol (0: a single order)."""
        return max(1, (len(self.modes) - 1).bit_length()) if self.modes else 0

    @property
    def lanes(self) -> int:
        return self.spec.interface.lanes

    @property
    def per_axis(self) -> bool:
        return self.constellation.axes is not None

    @property
    def output_shift(self) -> int:
        """Right shift of the output stage (negative: an exact left shift)."""
        return self.output_stage.shift

    @property
    def input_codes(self) -> np.ndarray:
        """Every demapper input code of one axis, from the most negative up."""
        return np.arange(self.input_format.min_code, self.input_format.max_code + 1, dtype=np.int64)


def constellation_of(spec: DesignSpec) -> Constellation:
    c = spec.constellation
    if c.labeling == "table":
        return from_table(c.order, c.table)
    return named(c.order, c.labeling, c.shape)


def _frozen(*arrays: np.ndarray) -> None:
    for a in arrays:
        a.setflags(write=False)


@lru_cache(maxsize=64)
def derive(spec: DesignSpec) -> Design:
    """Derive and check everything the model, the RTL and the manifest need (raises SpecError).

    Each refusal names a key the user set (`DesignSpec.blame`) and the value that would fit.
    """
    try:
        const = constellation_of(spec)
    except SpecError as exc:                    # from_table says constellation.table; the user may have given a CSV
        key = spec.blame(exc.key, "constellation.table_file") if exc.key == "constellation.table" else exc.key
        if key == exc.key:
            raise
        raise SpecError(key, exc.value, exc.allowed) from None
    d = spec.demapper
    if d.algorithm == "folded" and not const.gray_type:
        raise SpecError("demapper.algorithm", "folded",
                        f"maxlog or hard for labeling {spec.constellation.labeling!r} at order "
                        f"{const.order} (folded needs a Gray-type product labeling)")
    if spec.mapper.implementation == "logic" and not _logic_capable(const):
        raise SpecError("mapper.implementation", "logic",
                        "rom for this labeling (logic needs a Gray-type or natural product labeling)")
    if spec.modes and spec.mapper.implementation == "logic":
        raise SpecError("mapper.implementation", "logic", "rom with constellation.orders (the level tables are keyed "
                        "by {mode, axis label})")
    mapper_modes = _mapper_modes(spec) if spec.modes else None
    mfmt, mlsb, pi, pq, levels = mapper_modes[-1] if mapper_modes else _mapper_tables(spec, const)
    ifmt = QFormat(d.input_width, d.input_fraction)
    f = d.input_fraction
    _check_input_range(spec, const, ifmt)
    lfmt = QFormat(d.llr_width, d.llr_fraction)
    sfmt = QFormat(d.scale_width, d.scale_fraction, signed=False) if d.scale_width else None
    kappa = const.kappa
    axes: tuple[AxisDemap, ...] = ()
    search_i = search_q = np.zeros(0, np.int64)
    if const.axes is not None:
        axes = tuple(_axis_demap(ax, f) for ax in const.axes if ax.bits)
        metric_fraction = f
    else:
        search_i = round_float(const.points.real * 2.0 ** f, "half-even")
        search_q = round_float(const.points.imag * 2.0 ** f, "half-even")
        if len(set(zip(search_i.tolist(), search_q.tolist()))) != const.order:
            raise _search_refusal(spec, const)
        metric_fraction = 2 * f + 2
    cross = cross_demap(const.cross) if const.cross is not None else None
    if cross is not None:                       # the cross demapper's metrics are the per-axis metric's R units
        metric_fraction = f
    _frozen(search_i, search_q)
    stage = OutputStage(shift=metric_fraction + (d.scale_fraction if sfmt else 0) - d.llr_fraction,
                        rounding=d.rounding, llr_max=lfmt.max_code)
    # the per-axis steps over every input code: they size the widths and become the fast path's tables
    codes = np.arange(ifmt.min_code, ifmt.max_code + 1, dtype=np.int64)
    steps = [axis_steps(ad, d.algorithm, f, codes) for ad in axes]
    cross_terms = _cross_terms(cross, codes, f) if cross is not None else MappingProxyType({})
    modes = tuple(build_mode(n, order, const.labeling, const, f, d.algorithm, _axis_demap, mapper_modes[n][2:],
                             codes, stage, sfmt is None) for n, order in enumerate(spec.modes))
    # the widths hold every mode: its metric (shifted into the largest order's units) and its competitor offsets
    wide = steps + [(mag, neg, hard) for m in modes for (mag, neg), hard in zip(m.tables, m.hard_tables)]
    widths = _widths(spec, ifmt, sfmt, axes, wide, search_i, search_q, codes, cross)
    tables, llr_tables, hard_tables = _tables(const.bits, axes, steps, stage, sfmt is None)
    return Design(
        spec=spec, constellation=const, mapper_format=mfmt, mapper_lsb=mlsb, point_i=pi, point_q=pq,
        level_codes=levels, input_format=ifmt, input_lsb=kappa * 2.0 ** -f, llr_format=lfmt,
        # one LLR LSB = 2^-llr_fraction metric units; a metric unit is (2 amplitude units)^2 = 4 kappa^2
        llr_lsb=4.0 * kappa * kappa * 2.0 ** -d.llr_fraction, scale_format=sfmt,
        scale_lsb=(2.0 ** -d.scale_fraction) if sfmt else 1.0, metric_fraction=metric_fraction,
        output_stage=stage, axes=axes, search_i=search_i, search_q=search_q,
        widths=MappingProxyType(widths), tables=tables, llr_tables=llr_tables, hard_tables=hard_tables,
        cross=cross, cross_terms=cross_terms, modes=modes)


def _mapper_modes(spec: DesignSpec) -> list[tuple]:
    """Each mode's mapper codes in one output format: normalized, its standard unit-power points at
    2^fraction codes per normalized unit; full-scale, every mode at the same average power, the outermost
    level over all modes mapper.backoff_db below full scale (each mode's own peak backoff is in the manifest)."""
    consts = [named(o, spec.constellation.labeling) for o in spec.modes]
    per_norm = None
    if spec.mapper.scaling == "full-scale":
        peak = max(float(np.max(np.abs(c.normalized.real))) for c in consts)
        per_norm = ((1 << (spec.mapper.width - 1)) - 1) * 10.0 ** (-spec.mapper.backoff_db / 20.0) / peak
    return [_mapper_tables(spec, c, None if per_norm is None else per_norm * c.kappa) for c in consts]


def _cross_terms(cross: CrossDemap, codes: np.ndarray, f: int) -> Mapping[str, Mapping[str, np.ndarray]]:
    """A cross's per-axis quantities (model.cross.axis_terms) over every input code, read-only, narrow dtypes."""
    out = {}
    for name in AXIS_NAMES:
        arrays = {}
        for key, v in axis_terms(cross, name, codes, f).items():
            dtype = np.int8 if key.startswith("h") else np.int32 if max(-int(v.min()), int(v.max())) < 2 ** 31 else np.int64
            arrays[key] = v.astype(dtype)
            arrays[key].setflags(write=False)
        out[name] = MappingProxyType(arrays)
    return MappingProxyType(out)


def _search_refusal(spec: DesignSpec, const: Constellation) -> SpecError:
    """Points of a searched table that collide on the input grid: the fraction (and width) that separates them."""
    d = spec.demapper
    f, w = d.input_fraction, d.input_width
    need = next((n for n in range(f + 1, MAX_WIDTH - 1) if len(set(zip(
        round_float(const.points.real * 2.0 ** n, "half-even").tolist(),
        round_float(const.points.imag * 2.0 ** n, "half-even").tolist()))) == const.order), None)
    key = spec.blame("demapper.input_fraction", "constellation.table_file", "constellation.table", "demapper.input_width")
    if need is None:
        return SpecError(key, spec.value(key), f"the table's points collide on every input grid up to "
                         f"{MAX_WIDTH} bits (points too close together for the outermost one)")
    wider = f" and demapper.input_width >= {need + 2}" if need + 2 > w else ""
    if key == "demapper.input_fraction":
        return SpecError(key, f, f"at least {need} fraction bits{wider.replace(' and', ' (and') + ')' if wider else ''}: "
                         "the table's points collide on the input grid")
    return SpecError(key, spec.value(key), f"the table's points collide on the input grid at demapper.input_fraction = "
                     f"{f}{spec.default_note('demapper.input_fraction')}: set demapper.input_fraction >= {need}{wider}")


def _check_input_range(spec: DesignSpec, const: Constellation, ifmt: QFormat) -> None:
    """The outermost level must be an input code (levels on the grid).

    The refusal names demapper.input_width with the width that holds the level, or, when the user set the
    fraction and not the width, demapper.input_fraction with the largest fraction that fits (either way the
    other fix as well); a table or order the user set when neither.
    """
    d = spec.demapper
    f, w = d.input_fraction, d.input_width
    peak = int(max(np.max(np.abs(const.points.real)), np.max(np.abs(const.points.imag))))
    if const.on_grid and peak and (peak << f) > ifmt.max_code:
        minimum = (max(peak, 1) << f).bit_length() + 1
        fits = [k for k in range(f) if (peak << k) <= ifmt.max_code]
        key = spec.blame("demapper.input_width", "demapper.input_fraction", "constellation.table_file",
                         "constellation.table", "constellation.order", "constellation.labeling")
        if key == "demapper.input_width":
            alt = f" (or demapper.input_fraction <= {fits[-1]})" if fits else ""
            raise SpecError(key, w, f"at least {minimum} bits to hold the outermost level at input_fraction {f}{alt}")
        if key == "demapper.input_fraction":
            note = spec.default_note("demapper.input_width")
            if not fits:
                raise SpecError(key, f, f"no fraction holds the outermost level ({peak} amplitude units) in "
                                f"demapper.input_width = {w}{note}: set demapper.input_width >= {minimum}")
            raise SpecError(key, f, f"at most {fits[-1]} to hold the outermost level ({peak} amplitude units) in "
                            f"demapper.input_width = {w}{note}, or set demapper.input_width >= {minimum}")
        alt = f" or demapper.input_fraction <= {fits[-1]}" if fits else ""
        raise SpecError(key, spec.value(key), f"its outermost level ({peak} amplitude units) needs demapper.input_width "
                        f">= {minimum} at demapper.input_fraction = {f}: set demapper.input_width >= {minimum}{alt}")


def _logic_capable(const: Constellation) -> bool:
    if const.axes is None:
        return False
    return all(a.gray_mask is not None or a.codes == tuple(range(a.levels)) for a in const.axes if a.bits)


def _mapper_tables(spec: DesignSpec, const: Constellation, per_amp: float | None = None):
    """Mapper output codes per label (and per-axis levels), checked for collisions and clipping.

    `per_amp`: output codes per amplitude unit when given (an adaptive core's full-scale modes), else from the spec.

    A refusal names the key the user set (`DesignSpec.blame`): mapper.fraction or mapper.width first,
    else the table or order that asks for more, and says the fraction or width that would fit.
    """
    m = spec.mapper
    fmt = QFormat(m.width, m.fraction if m.scaling == "normalized" else 0)
    kappa = const.kappa
    peak = float(max(np.max(np.abs(const.points.real)), np.max(np.abs(const.points.imag))))
    if per_amp is None and m.scaling == "normalized":
        per_amp = kappa * 2.0 ** m.fraction            # output codes per amplitude unit
    elif per_amp is None:
        per_amp = fmt.max_code * 10.0 ** (-m.backoff_db / 20.0) / peak

    def codes(x: np.ndarray) -> np.ndarray:
        return round_float(np.asarray(x, dtype=np.float64) * per_amp, m.rounding)

    ci, cq = codes(const.points.real), codes(const.points.imag)
    top = int(max(np.max(np.abs(ci)), np.max(np.abs(cq))))
    if top > fmt.max_code or -top < fmt.min_code:
        raise _clip_refusal(spec, const, peak, top, fmt)
    if len(set(zip(ci.tolist(), cq.tolist()))) != const.order or (
            const.axes is not None and any(len(set(codes(a.amplitudes).tolist())) != a.levels for a in const.axes)):
        raise _collide_refusal(spec, const, peak)
    levels = tuple(codes(a.amplitudes) for a in const.axes) if const.axes is not None else ()
    lsb = kappa / per_amp
    _frozen(ci, cq, *levels)
    return fmt, lsb, ci, cq, levels


def _mapper_at(spec: DesignSpec, const: Constellation, peak: float, n: int) -> tuple[int, bool]:
    """(largest |code|, every level distinct) at mapper.fraction n (normalized) or mapper.width n (full-scale)."""
    m = spec.mapper
    per_amp = (const.kappa * 2.0 ** n if m.scaling == "normalized"
               else ((1 << (n - 1)) - 1) * 10.0 ** (-m.backoff_db / 20.0) / peak)
    ci = round_float(const.points.real * per_amp, m.rounding)
    cq = round_float(const.points.imag * per_amp, m.rounding)
    distinct = len(set(zip(ci.tolist(), cq.tolist()))) == const.order and (const.axes is None or all(
        len(set(round_float(a.amplitudes * per_amp, m.rounding).tolist())) == a.levels for a in const.axes))
    return int(max(np.max(np.abs(ci)), np.max(np.abs(cq)))), distinct


def _mapper_minimum(spec: DesignSpec, const: Constellation, peak: float) -> int | None:
    """Smallest mapper.fraction (normalized) or mapper.width (full-scale) keeping every level distinct.

    None when no fraction a MAX_WIDTH-bit mapper holds (normalized) or no width up to MAX_WIDTH (full-scale)
    does: a table whose closest points are too close for its outermost one.
    """
    m = spec.mapper
    start = (m.fraction if m.scaling == "normalized" else m.width) + 1
    stop = MAX_WIDTH if m.scaling == "normalized" else MAX_WIDTH + 1
    return next((n for n in range(start, stop) if _mapper_at(spec, const, peak, n)[1]), None)


def _clip_refusal(spec: DesignSpec, const: Constellation, peak: float, top: int, fmt: QFormat) -> SpecError:
    """The outermost level beyond the output word: the fraction or the width that holds it, on the key the user set."""
    m = spec.mapper
    if m.scaling != "normalized":               # only a floor of the most negative level at 0 dB backoff gets here
        key = spec.blame("mapper.backoff_db", "mapper.rounding", "mapper.width", "mapper.scaling")
        return SpecError(key, spec.value(key), f"the outermost level ({top}) exceeds the {m.width}-bit output at "
                         f"mapper.backoff_db = {m.backoff_db} with {m.rounding} rounding: use a larger mapper.backoff_db")
    f, w = m.fraction, m.width
    if not _mapper_at(spec, const, peak, f)[1]:  # the levels collide as well: a finer fraction first, then its width
        return _collide_refusal(spec, const, peak)
    need = top.bit_length() + 1
    lower = next((n for n in range(f - 1, -1, -1) if _mapper_at(spec, const, peak, n)[0] <= fmt.max_code), None)
    fit = lower if lower is not None and _mapper_at(spec, const, peak, lower)[1] else None
    options = ([f"mapper.fraction <= {fit}"] if fit is not None else []) + ([f"mapper.width >= {need}"] if need <= MAX_WIDTH else [])
    key = spec.blame("mapper.fraction", "mapper.width", "constellation.table_file", "constellation.table",
                     "constellation.order", "constellation.labeling", "mapper.rounding")
    if not options:
        return SpecError(key, spec.value(key), f"the outermost level ({top}) exceeds the {w}-bit output and no "
                         f"fraction of a {MAX_WIDTH}-bit mapper keeps the levels distinct (points too close together "
                         "for the outermost one)")
    if key == "mapper.fraction":
        return SpecError(key, f, f"the outermost level ({top}) exceeds the {w}-bit output; use {' or '.join(options)}")
    if key == "mapper.width" and need <= MAX_WIDTH:
        alt = f", or set mapper.fraction <= {fit}" if fit is not None else ""
        return SpecError(key, w, f"at least {need} bits for the outermost level ({top}) at mapper.fraction = "
                         f"{f}{spec.default_note('mapper.fraction')}{alt}")
    return SpecError(key, spec.value(key), f"the outermost level ({top}) exceeds the {w}-bit output at mapper.fraction "
                     f"= {f}{spec.default_note('mapper.fraction')}: set {' or '.join(options)}")


def _collide_refusal(spec: DesignSpec, const: Constellation, peak: float) -> SpecError:
    """Mapper levels that round to the same code: the fraction (normalized) or width (full-scale) that separates them."""
    m = spec.mapper
    n = _mapper_minimum(spec, const, peak)
    if m.scaling != "normalized":
        key = spec.blame("mapper.width", "constellation.table_file", "constellation.table", "mapper.backoff_db",
                         "constellation.order", "mapper.scaling")
        if n is None:
            return SpecError(key, spec.value(key), f"mapper levels collide at every mapper.width up to {MAX_WIDTH} bits "
                             f"at mapper.backoff_db = {m.backoff_db} (less backoff, or points further apart)")
        if key == "mapper.width":
            return SpecError(key, m.width, f"at least {n} bits: mapper levels collide at this resolution")
        return SpecError(key, spec.value(key), f"mapper levels collide at mapper.width = "
                         f"{m.width}{spec.default_note('mapper.width')}: set mapper.width >= {n}")
    key = spec.blame("mapper.fraction", "constellation.table_file", "constellation.table", "mapper.width",
                     "constellation.order", "constellation.labeling", "mapper.rounding")
    need = max(n + 1, _mapper_at(spec, const, peak, n)[0].bit_length() + 1) if n is not None else None
    if need is None or need > MAX_WIDTH:
        return SpecError(key, spec.value(key), f"mapper levels collide at every fraction a {MAX_WIDTH}-bit mapper.width "
                         "holds (points too close together for the outermost one)")
    wider = f" and mapper.width >= {need}" if need > m.width else ""
    if key == "mapper.fraction":
        return SpecError(key, m.fraction, f"at least {n} fraction bits{' (' + wider[1:] + ')' if wider else ''}: "
                         "mapper levels collide at this resolution")
    return SpecError(key, spec.value(key), f"mapper levels collide at mapper.fraction = "
                     f"{m.fraction}{spec.default_note('mapper.fraction')}: set mapper.fraction >= {n}{wider}")


def _axis_demap(ax: Axis, f: int) -> AxisDemap:
    """Competitor tables by brute force over the axis labeling (exact for any labeling), and the level grid."""
    L, m = ax.levels, ax.bits
    codes = np.asarray(ax.codes)
    comp = np.zeros((m, L, 2), dtype=np.int64)
    for j in range(m):
        bit = ax.axis_bit(codes, j)
        for n in range(L):
            others = np.flatnonzero(bit != bit[n])
            left = others[others < n]
            right = others[others > n]
            kl = n - left.max() if left.size else None
            kr = right.min() - n if right.size else None
            for neg in (0, 1):
                if kr is None or (kl is not None and (kl < kr or (kl == kr and neg))):
                    comp[j, n, neg] = -kl
                else:
                    comp[j, n, neg] = kr
    uses_sign = tuple(bool(np.any(comp[j, :, 0] != comp[j, :, 1])) for j in range(m))
    mask = ax.gray_mask
    inverted = tuple(bool(mask is not None and (mask >> (m - 1 - j)) & 1) for j in range(m))
    comp.setflags(write=False)
    return AxisDemap(ax, comp, uses_sign, inverted,
                     level_input_codes=tuple(int(a) << f for a in ax.amplitudes),
                     boundaries=tuple((2 * n - L + 2) << f for n in range(L - 1)))


def _widths(spec: DesignSpec, ifmt: QFormat, sfmt: QFormat | None, axes: tuple[AxisDemap, ...], steps: list,
            search_i: np.ndarray, search_q: np.ndarray, codes: np.ndarray,
            cross: CrossDemap | None = None) -> dict[str, tuple[int, bool]]:
    """Widths of the model's intermediates from their exact range over every input code.

    A cross: the per-axis quantities exactly, the 2-D ones (X, D, the metric) by interval arithmetic on them.
    """
    d = spec.demapper
    w: dict[str, tuple[int, bool]] = {}
    smax = sfmt.max_code if sfmt else 1
    if cross is not None:
        f = d.input_fraction
        ranges = term_ranges(cross, codes, f)
        e = cross_decide(cross, codes, f)[1]
        w["residual"] = bits_for_range(int(e.min()), int(e.max()))
        dn_max = max(int(np.abs(m.competitor).max()) for ax in cross.axes.values() for m in ax.metrics)
        w["competitor"] = bits_for_range(-dn_max, dn_max)
        bound = magnitude_bound(cross, ranges)
        w["delta"] = bits_for_range(0, max(r["delta"][1] for r in ranges.values()))
        w["gap"] = bits_for_range(0, bound["gap"])
        mag_max = bound["magnitude"]
    elif axes:
        e_lo = e_hi = dn_max = mag_max = 0
        for ad, (mag, _, _) in zip(axes, steps):
            _, e = decide(ad, codes, d.input_fraction)
            e_lo, e_hi = min(e_lo, int(e.min())), max(e_hi, int(e.max()))
            dn_max = max(dn_max, int(np.abs(ad.competitor).max()))
            mag_max = max(mag_max, int(mag.max()))
        w["residual"] = bits_for_range(e_lo, e_hi)
        w["competitor"] = bits_for_range(-dn_max, dn_max)
        if d.algorithm == "folded":
            w["fold"] = (ifmt.width + 1, True)
    else:
        corner = max(abs(ifmt.min_code), ifmt.max_code)
        far = max(int(np.max(np.abs(search_i))), int(np.max(np.abs(search_q)))) + corner
        mag_max = 2 * far * far
        w["distance"] = bits_for_range(0, mag_max)
        w["difference"] = bits_for_range(-mag_max, mag_max)
    w["magnitude"] = bits_for_range(0, mag_max)
    product_max = mag_max * smax
    if product_max >= _PRODUCT_LIMIT:
        raise SpecError("demapper.scale_width", d.scale_width,
                        f"a narrower reliability input or demapper.input_width: the scaled metric needs "
                        f"{product_max.bit_length()} bits, at most 62 supported")
    w["product"] = bits_for_range(0, product_max)
    w["llr"] = (d.llr_width, True)
    return w


def _tables(k: int, axes: tuple[AxisDemap, ...], steps: list, stage: OutputStage, final: bool):
    """The fast path's tables: the per-axis steps over every input code, placed in label-bit columns."""
    tables, llr_tables, hard_tables = [], [], []
    for ad, (mag, neg, hard) in zip(axes, steps):
        cols = list(ad.axis.label_bits)
        tables.append((mag, neg))
        full = np.zeros((mag.shape[0], k), dtype=np.int32)
        if final:
            full[:, cols] = output(stage, mag, neg, None)
        llr_tables.append(full)
        hb = np.zeros((mag.shape[0], k), dtype=np.int8)
        hb[:, cols] = hard
        hard_tables.append(hb)
        _frozen(mag, neg, full, hb)
    return tuple(tables), tuple(llr_tables), tuple(hard_tables)


__all__ = ["Design", "constellation_of", "derive"]
