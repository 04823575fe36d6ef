"""The manifest (every derived number the RTL, the testbenches and the reports read) and the ROM images."""

from __future__ import annotations

import hashlib
import math
from typing import Any

import numpy as np

from ..ir import rom_images
from ..model import Design
from ..numbers import QFormat
from ..version import __version__
from .kit import kit_entry
from .texts import GENERATOR, banner, content_hash
from .words import format_words, pack_words, packing


def rom_files(design: Design) -> dict[str, bytes]:
    """`$readmemh` images of the mapper level tables (see `rom_manifest`)."""
    out = {}
    w = design.mapper_format.width
    for entry, image in zip(rom_manifest(design), rom_images(design)):
        if entry["axis"] == "points":
            what = f"mapper point table: entry = label, word {{Q, I}} of two signed {w}-bit codes"
        else:
            what = (f"mapper {entry['axis'].upper()} level table: entry c = the signed {w}-bit code of the level "
                    f"whose {entry['axis'].upper()}-axis label is c")
        words = pack_words([(image["entries"], image["width"])])
        header = banner(design, what) + f"// {entry['index']}\n// entries: {entry['entries']}, width {entry['width']}\n"
        out[entry["path"]] = format_words(words, entry["width"], header)
    return out


def rom_manifest(design: Design) -> list[dict[str, Any]]:
    """Which ROM images exist, their size and how they are indexed."""
    out = []
    for image in rom_images(design):
        entry = {"path": image["path"], "axis": image["table"], "parameter": image["parameter"],
                 "entries": len(image["entries"]), "width": image["width"]}
        if image["table"] == "points":
            entry["index"] = "index: the label (b0 the MSB); word {Q, I}, I in the low half"
        else:
            bits = ", ".join(f"b{b}" for b in image["label_bits"])
            entry["label_bits"] = image["label_bits"]
            entry["index"] = f"index c: the label bits {bits} in this order, the first one the MSB of c"
        out.append(entry)
    return out


def _qformat(fmt: QFormat | None) -> dict[str, Any] | None:
    if fmt is None:
        return None
    return {"width": fmt.width, "fraction": fmt.fraction, "signed": fmt.signed, "name": str(fmt),
            "min_code": fmt.min_code, "max_code": fmt.max_code}


def _axis_entry(design: Design, n: int) -> dict[str, Any] | None:
    ax = design.constellation.axes[n]
    if not ax.bits:
        return None
    ad = next(a for a in design.axes if a.axis is ax)
    entry: dict[str, Any] = {
        "levels": ax.levels, "label_bits": list(ax.label_bits), "codes": list(ax.codes),
        "gray_mask": ax.gray_mask, "inverted": list(ad.inverted),
        "level_input_codes": list(ad.level_input_codes), "decision_boundaries": list(ad.boundaries),
        "mapper_level_codes": [int(c) for c in design.level_codes[n]],
    }
    if design.spec.demapper.algorithm == "maxlog":
        entry["competitor"] = ad.competitor.tolist()
        entry["competitor_uses_sign"] = list(ad.uses_sign)
    return entry


def _cross_entry(design: Design) -> dict[str, Any]:
    """A cross's demapper structure: the enclosing square, the two product pieces, the per-axis tables, the plan."""
    cd = design.cross
    cross = cd.cross
    f = design.spec.demapper.input_fraction

    def piece(pc) -> dict[str, Any]:
        return {"i": {"amplitudes": list(pc.i.amplitudes), "label_bits": list(pc.i.label_bits), "codes": list(pc.i.codes)},
                "q": {"amplitudes": list(pc.q.amplitudes), "label_bits": list(pc.q.label_bits), "codes": list(pc.q.codes)},
                "constant_bits": {f"b{b}": v for b, v in pc.constants}}

    axes = {}
    for name, ax in cd.axes.items():
        axes[name] = {"input": "iq"[ax.component], "levels": list(ax.levels), "place": [int(x) for x in ax.place],
                      "metrics": {f"b{m.bit}": {"competitor": m.competitor.tolist(), "uses_sign": m.uses_sign,
                                                "level_bit": [int(x) for x in m.level_bit]} for m in ax.metrics}}
    plan = {}
    for pb in cd.bits:
        if pb.kind == "sign":
            plan[f"b{pb.bit}"] = {"kind": "sign", "axis": pb.core, "llr": f"R({pb.core}, b{pb.bit}) - X_min"}
        else:
            plan[f"b{pb.bit}"] = {"kind": "pieces", "core": pb.core, "arms": pb.arms,
                                  "arms_constant": None if pb.arms is not None else pb.arms_value,
                                  "llr": "min(R_W, D + (agree ? R_L : 0))"}
    s = cd.span
    return {
        "construction": ("Smith's cross (J. G. Smith, IEEE Trans. Commun. 23(3), 1975): the Gray 2N x N rectangle "
                         "with its N/4 outer columns per side folded onto the top and bottom, (I, Q) -> "
                         "(sgn(I)|Q|, sgn(Q)(|I| - N/2)), every point keeping its label"),
        "n": cross.n, "square_levels": s, "corner_levels": cross.corner,
        "square_level_input_codes": [(2 * n - (s - 1)) << f for n in range(s)],
        "square_decision_boundaries": [(2 * n - s + 2) << f for n in range(s - 1)],
        "pieces": {"core": piece(cross.core), "arms": piece(cross.arms)},
        "axes": axes,
        "bits": plan,
        "steps": [
            "per axis: n = clamp((y + (S << f)) >>> (f+1), 0, S-1), e = y - ((2n - (S-1)) << f): the enclosing square",
            "per piece axis: its level place[n], dn = place[n] - n, e_p = e - (2 dn << f), delta = dn ((dn << f) - e)",
            "per piece axis and bit: R = dn ((dn << f) - e_p), dn = competitor[place[n]][e_p < 0]; the decided bit",
            "X_core = delta(core_q), X_arms = delta(arms_i) + delta(arms_q); the arms win where X_arms < X_core; "
            "D = |X_arms - X_core|, X_min = min(X_core, X_arms)",
            "sign bits: |LLR| = R - X_min; other bits: |LLR| = min(R_W, D + (decided bits agree ? R_L : 0)), "
            "R infinite in a piece that holds the bit constant; negative: the winner's decided bit",
            "the output stage (P = |LLR| S, rounding shift, symmetric saturation, sign)",
        ],
        "units": "R, delta, X and D in the per-axis metric's units: (2 amplitude units)^2 with f fraction bits",
    }


def _modes_entry(design: Design) -> dict[str, Any]:
    """An adaptive core: the mode field, the input-scaling contract and every mode's points and declared grid."""
    spec = design.spec
    f = spec.demapper.input_fraction
    full = spec.mapper.scaling == "full-scale"
    max_code = design.mapper_format.max_code
    modes = []
    for m in design.modes:
        levels = [m.constellation.axes[0].levels, max(1, m.constellation.axes[1].levels)]
        peak = max(max(abs(int(v)) for v in m.point_i), max(abs(int(v)) for v in m.point_q))
        entry = {
            "code": m.index, "order": m.order, "bits": m.bits, "kappa": m.kappa, "shift": m.shift,
            "gain": m.gain, "gain_db": 20.0 * math.log10(m.gain),
            "levels_per_axis": levels,
            "declared_levels": (f"level n of an L-level axis (L = {levels[0]}) at input code (2n - (L-1)) * "
                                f"2^{f + m.shift}: one level step is {2 << (f + m.shift)} codes"),
            "llr_fields": [f"llr_b{j}" for j in range(m.bits)] if spec.demapper.algorithm != "hard" else
                          [f"b{j}" for j in range(m.bits)],
            "points": [[int(lab), int(a), int(b)] for lab, a, b in zip(range(m.order), m.point_i, m.point_q)],
        }
        if full:
            entry["peak_backoff_db"] = 20.0 * math.log10(max_code / peak)
        modes.append(entry)
    return {
        "orders": [m.order for m in design.modes], "field_width": design.mode_width,
        "codes": (f"the mode field indexes the orders; a code past the list ({len(design.modes)} .. "
                  f"{(1 << design.mode_width) - 1}) acts as the last mode, the largest order"
                  if len(design.modes) < 1 << design.mode_width else "the mode field indexes the orders"),
        "llr_lsb": design.llr_lsb,
        "input_scaling": (
            "one input format for every mode: the largest order's grid (one input LSB = input_lsb normalized "
            f"units, its levels at odd multiples of 2^{f} codes), i.e. every mode's unit-average-power "
            "constellation at the same scale. Mode m of L_m levels per axis is demapped on declared levels at "
            f"(2n - (L_m - 1)) 2^({f} + s_m) codes, s_m = log2(L_max / L_m): its standard points sit at gain_m "
            "(<= 1) of its declared levels. Its decision is the largest order's n_hat >> s_m, its max-log "
            "metric (exact for the declared levels) is shifted left by s_m, so llr_lsb is the same for every "
            "mode."),
        "mapper_output": ("normalized: every mode's standard unit-average-power points at the common mapper lsb"
                          if not full else "full-scale: every mode at the same average power, the outermost level "
                          f"over all modes mapper.backoff_db = {spec.mapper.backoff_db} dB below full scale; each "
                          "mode's own peak backoff is peak_backoff_db"),
        "output": ("the largest order's fields; mode m fills the first k_m (b0 .. b(k_m - 1)), the fields after "
                   "them are zero; the mode is passed through with the symbol (packing: field mode)"),
        "list": modes,
    }


def build_manifest(design: Design, files: dict[str, bytes], vectors: dict[str, Any], rtl: dict[str, Any],
                   testbench: dict[str, Any]) -> dict[str, Any]:
    """The manifest: every derived number the RTL, testbenches and reports read, the kit's files, the file list."""
    spec = design.spec
    d = spec.demapper
    const = design.constellation
    labels = np.arange(const.order)
    dem: dict[str, Any] = {
        "algorithm": d.algorithm,
        "structure": "per-axis" if design.per_axis else "cross" if design.cross is not None else "2-D search",
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
        "search_points": (None if design.per_axis or design.cross is not None else
                          [[int(lab), int(a), int(b)] for lab, a, b in zip(labels, design.search_i, design.search_q)]),
    }
    if design.cross is not None:
        dem["cross"] = _cross_entry(design)
    elif not design.per_axis:
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
                          "axes": ("per-axis (product labeling)" if design.per_axis else
                                   "none: Smith's cross, two product pieces" if design.cross is not None else
                                   "none (2-D search)"),
                          **({"shape": const.shape} if design.bits % 2 and const.order > 2 else {})},
        "mapper": {
            "points": [[int(lab), int(a), int(b)] for lab, a, b in zip(labels, design.point_i, design.point_q)],
            "lsb": design.mapper_lsb, "width": design.mapper_format.width, "scaling": spec.mapper.scaling,
            "rounding": spec.mapper.rounding, "implementation": spec.mapper.implementation,
            "rom": {"style": spec.mapper.tables, "images": rom_manifest(design)},
        },
        "demapper": dem,
        **({"modes": _modes_entry(design)} if design.modes else {}),
        "packing": packing(design),
        "vectors": vectors,
        "rtl": rtl,
        "testbench": testbench,
    }
    manifest["kit"] = kit_entry(manifest)
    manifest["files"] = [{"path": p, "sha256": hashlib.sha256(b).hexdigest()} for p, b in sorted(files.items())]
    return manifest


__all__ = ["build_manifest", "rom_files", "rom_manifest"]
