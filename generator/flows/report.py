"""The design-review report: out/<name>/report/ (PNG plots, report.md and the JSON behind them).

Several commands write into report/: `qamsmith analyze` (analysis.json, widths.json, the plots),
`qamsmith widths` (widths.json), `qamsmith cost` (hardware.json, hardware.md) and any later command
with a section in `SECTIONS`. None of them removes what another wrote, and report.md is assembled
again from every JSON present (`rebuild_report`) each time one of them writes, so it never lags
behind its data.

matplotlib is imported only here and only when a plot is drawn (Agg backend, no display). A plot
drawn from a JSON file carries that file's hash in its PNG text, so a rebuild redraws it only when
the data changed (and needs no matplotlib otherwise). `analyze` builds the whole directory beside
its target and renames it into place; the other commands replace single files, each atomically.
"""

from __future__ import annotations

import hashlib
import importlib.util
import json
import tempfile
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable, Iterable

import numpy as np

from ..artifacts import REPORT_DIR, probe_directory, replace_directory, write_file
from ..errors import SpecError
from ..model import Design, demap, derive, hard_decisions
from ..numbers import label_bits
from ..spec import DesignSpec
from ..version import __version__
from . import analysis as an

#: received-cloud plot: symbols drawn
CLOUD_SYMBOLS = 4000
#: the cloud plot widens its view to the input full scale when that is at most this many times the cloud's reach
CLOUD_FULL_SCALE_REACH = 1.5
PLOTS = ("constellation.png", "cloud.png", "llr_transfer.png", "ber.png", "gmi.png", "loss_vs_width.png", "modes.png")
#: PNG text key naming the JSON (and its hash) a plot was drawn from
SOURCE_KEY = "Source"


def _pyplot():
    """matplotlib.pyplot with the Agg backend (imported lazily: matplotlib is the optional 'report' extra)."""
    try:
        import matplotlib
    except ImportError:
        raise SpecError("report", "matplotlib", "matplotlib installed (pip install 'qamsmith[report]')") from None
    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    plt.rcParams.update({"figure.dpi": 100, "savefig.dpi": 110, "font.size": 9, "axes.grid": True,
                         "grid.alpha": 0.3, "svg.hashsalt": "qamsmith"})
    return plt


def _have_matplotlib() -> bool:
    return importlib.util.find_spec("matplotlib") is not None


def _save(fig: Any, path: Path, source: str | None = None) -> None:
    # no Software/date metadata: same spec, same bytes; `source` names the data the plot was drawn from
    metadata: dict[str, str | None] = {"Software": None}
    if source is not None:
        metadata[SOURCE_KEY] = source
    fig.savefig(path, metadata=metadata, bbox_inches="tight")
    fig.clf()


def _png_text(data: bytes) -> dict[str, str]:
    """The tEXt entries of a PNG file's bytes (empty when it is not a PNG)."""
    out: dict[str, str] = {}
    if data[:8] != b"\x89PNG\r\n\x1a\n":
        return out
    pos = 8
    while pos + 8 <= len(data):
        length = int.from_bytes(data[pos:pos + 4], "big")
        kind = data[pos + 4:pos + 8]
        if kind == b"IEND":
            break
        if kind == b"tEXt":
            key, _, value = data[pos + 8:pos + 8 + length].partition(b"\0")
            out[key.decode("latin-1")] = value.decode("latin-1")
        pos += 12 + length
    return out


def _linear_threshold(half_widths: Iterable[float | None], default: float) -> float:
    """The linear range of a symlog axis: the power of ten at or below the median 95 % half-width (the
    Monte-Carlo resolution), so differences the simulation cannot resolve are drawn on a linear scale."""
    h = [float(v) for v in half_widths if v is not None and np.isfinite(v) and v > 0]
    if not h:
        return default
    return float(10.0 ** np.clip(np.floor(np.log10(np.median(h))), -6, -1))


def _values(points: list[dict[str, Any]], key: str) -> np.ndarray:
    return np.array([np.nan if p.get(key) is None else p[key] for p in points], dtype=float)


# --------------------------------------------------------------------------- plots of the design (analyze only)


def _largest_mode(design: Design, n: int) -> np.ndarray | None:
    """An adaptive core's mode codes of n symbols in its largest mode (the mode the single-mode plots show)."""
    return np.full(n, len(design.modes) - 1, dtype=np.int64) if design.modes else None


def plot_constellation(plt: Any, design: Design) -> Any:
    """The fixed-point mapper's output codes with their labels (binary, b0 first)."""
    const = design.constellation
    k = const.bits
    fig, ax = plt.subplots(figsize=(6.4, 6.4) if const.order <= 64 else (9, 9))
    pi, pq = design.point_i, design.point_q
    ax.scatter(pi, pq, s=12 if const.order <= 256 else 3, color="C0", zorder=3)
    if const.order <= 256:
        size = {2: 10, 4: 10, 16: 9, 64: 7, 256: 4.5}.get(const.order, 4)
        for lab in range(const.order):
            ax.annotate(format(lab, f"0{k}b"), (pi[lab], pq[lab]), textcoords="offset points", xytext=(0, 4),
                        ha="center", fontsize=size, family="monospace")
    fmt = design.mapper_format
    ax.set_title(f"{design.spec.name}: mapper output codes ({const.order}-point {const.labeling}, "
                 f"{design.spec.mapper.width}-bit {fmt})" + ("" if const.order <= 256 else ", labels omitted"))
    ax.set_xlabel("I code")
    ax.set_ylabel("Q code")
    ax.set_aspect("equal")
    lim = max(np.max(np.abs(pi)), np.max(np.abs(pq)), 1) * 1.15
    ax.set_xlim(-lim, lim)
    ax.set_ylim(-lim, lim)
    return fig


def plot_cloud(plt: Any, design: Design, esn0_db: float, seed: int) -> Any:
    """A received cloud at one Es/N0 in demapper input codes: symbols whose nearest point is not the one
    sent in red, the decision boundaries, and the input full scale when it is near the cloud."""
    chain = an.Chain(design)
    _, kept = chain.run(esn0_db, CLOUD_SYMBOLS, seed, floats=False, keep=CLOUD_SYMBOLS)
    f = design.spec.demapper.input_fraction
    const = design.constellation
    wrong = np.any(hard_decisions(design, kept["i"], kept["q"], _largest_mode(design, kept["i"].size)) != label_bits(kept["labels"], const.bits), axis=1)
    n, n_wrong = int(wrong.size), int(np.count_nonzero(wrong))
    fig, ax = plt.subplots(figsize=(6.4, 7.0), constrained_layout=True)
    ax.scatter(kept["i"][~wrong], kept["q"][~wrong], s=2, color="C0", alpha=0.6, zorder=2, linewidths=0,
               label=f"nearest point is the one sent ({n - n_wrong})")
    ax.scatter(kept["i"][wrong], kept["q"][wrong], s=3, color="C3", alpha=0.9, zorder=3, linewidths=0,
               label=f"symbol error ({n_wrong}, {100.0 * n_wrong / max(n, 1):.1f} %)")
    if const.axes is not None:
        for comp, axis in enumerate(const.axes):
            L = axis.levels
            for m in range(1, L):
                edge = (2 * m - L) << f          # midway between levels m-1 and m, in input codes
                if comp == 0:
                    ax.axvline(edge, color="k", lw=0.6, zorder=4)
                else:
                    ax.axhline(edge, color="k", lw=0.6, zorder=4)
    ifmt = design.input_format
    lo, hi = ifmt.min_code, ifmt.max_code
    reach = max(np.max(np.abs(kept["i"])), np.max(np.abs(kept["q"])), 1) * 1.1
    lim = min(max(reach, (max(np.max(np.abs(const.points.real)), 1) + 1) * 2 ** f), hi * 1.1)
    scale_note = ""
    if hi <= CLOUD_FULL_SCALE_REACH * lim:       # the full scale is near the cloud: widen the view to show it
        lim = max(lim, hi * 1.06)
        ax.plot([lo, hi, hi, lo, lo], [lo, lo, hi, hi, lo], color="C1", lw=1.2, zorder=5,
                label=f"input full scale ({lo} to {hi})")
    else:
        scale_note = f"; input full scale {lo} to {hi}, outside this view"
    ax.set_xlim(-lim, lim)
    ax.set_ylim(-lim, lim)
    ax.set_aspect("equal")
    ax.set_title(f"received cloud at Es/N0 = {esn0_db:.2f} dB ({n} symbols), demapper input codes\n"
                 + ("black lines: hard-decision boundaries" if const.axes is not None
                    else "2-D search: boundaries not drawn") + scale_note)
    ax.set_xlabel("I input code")
    ax.set_ylabel("Q input code")
    fig.legend(loc="outside lower center", ncol=3, fontsize=8, markerscale=4, frameon=False)
    return fig


def llr_transfer(design: Design, scale_code: int | None = None) -> tuple[np.ndarray, np.ndarray, list[int]]:
    """LLR codes of every I input code with Q = 0: (i codes, llr (N, k), the label bits that depend on I)."""
    ifmt = design.input_format
    i = np.arange(ifmt.min_code, ifmt.max_code + 1, dtype=np.int64)
    step = max(1, i.size // 4096)
    i = i[::step]
    q = np.zeros_like(i)
    scale = None
    if design.scale_format is not None:
        if scale_code is None:
            scale_code = min(1 << design.spec.demapper.scale_fraction, design.scale_format.max_code)
        scale = np.full(i.shape, scale_code)
    llr = demap(design, i, q, scale, _largest_mode(design, i.size))
    const = design.constellation
    cols = list(const.axes[0].label_bits) if const.axes is not None else list(range(const.bits))
    return i, llr, cols


def plot_llr_transfer(plt: Any, design: Design, esn0_db: float) -> Any:
    """LLR code of each I bit against the I input code (Q input 0), the hardware's transfer curves."""
    code = an.Chain(design).reliability(10.0 ** (-esn0_db / 10.0))
    i, llr, cols = llr_transfer(design, code)
    fig, ax = plt.subplots(figsize=(7.5, 4.8))
    for c in cols:
        ax.step(i, llr[:, c], where="mid", lw=1.0, label=f"b{c}")
    lfmt = design.llr_format
    ax.axhline(lfmt.max_code, color="0.5", ls=":", lw=0.8)
    ax.axhline(-lfmt.max_code, color="0.5", ls=":", lw=0.8)
    f = design.spec.demapper.input_fraction
    const = design.constellation
    if const.axes is not None:
        for a in const.axes[0].amplitudes:
            ax.axvline(int(a) << f, color="0.8", lw=0.6, zorder=0)
    alg = design.spec.demapper.algorithm
    ax.set_title(f"LLR transfer per I bit ({alg}, {design.spec.demapper.llr_width}-bit {lfmt} LLR, "
                 f"input {design.input_format}); grey: levels, dotted: saturation"
                 + ("" if code is None else f"\nreliability code {code} (1/N0 at Es/N0 {esn0_db:.2f} dB)"))
    ax.set_xlabel("I input code (Q input = 0)")
    ax.set_ylabel("hard bit" if alg == "hard" else "LLR code (positive: bit 0)")
    ax.legend(fontsize=8, ncol=min(len(cols), 6))
    return fig


# --------------------------------------------------------------------------- plots of a JSON (redrawn by rebuild_report)


def plot_ber(plt: Any, doc: dict[str, Any]) -> Any:
    """BER of the fixed point (95 % intervals) against theory and the float nearest-point decision."""
    pts = doc["points"]
    x = np.array([p["esn0_db"] for p in pts])
    fig, ax = plt.subplots(figsize=(7.5, 4.8))
    fine = np.linspace(x.min(), x.max(), 200)
    square = doc["order"] == 2 or (doc["order"].bit_length() - 1) % 2 == 0
    theory = [(p["esn0_db"], p["ber_theory"]) for p in pts if p.get("ber_theory")]
    if doc["theory"].startswith("K. Cho") and square:
        ax.semilogy(fine, an.ber_gray_qam(doc["order"], fine), color="k", lw=1.0, label="theory (Cho and Yoon 2002)")
    elif theory:                # rectangles and crosses: the closed form at the simulated points (analysis.json)
        ax.semilogy(*zip(*theory), color="k", lw=1.0, label=f"theory ({doc['theory'].split(',')[0]})")
    ber = np.array([p["ber_fixed"] if p["ber_fixed"] else np.nan for p in pts], dtype=float)
    lo = np.array([max(p["ber_fixed_ci95"][0], 1e-300) if p["ber_fixed_ci95"] and p["ber_fixed"] else np.nan
                   for p in pts], dtype=float)
    hi = np.array([p["ber_fixed_ci95"][1] if p["ber_fixed_ci95"] and p["ber_fixed"] else np.nan for p in pts],
                  dtype=float)
    ax.errorbar(x, ber, yerr=[ber - lo, hi - ber], fmt="o", ms=4, color="C0", capsize=2,
                label="fixed point (Monte-Carlo, 95 %)")
    up = [(p["esn0_db"], p["ber_fixed_upper95"]) for p in pts if p["ber_fixed_upper95"]]
    if up:
        ax.plot(*zip(*up), "v", color="C0", mfc="none", label="no errors: 95 % upper bound")
    ml = np.array([p["ber_maxlog"] if p["ber_maxlog"] else np.nan for p in pts], dtype=float)
    ax.semilogy(x, ml, "x", color="C2", label="float nearest point (Monte-Carlo)")
    ax.axvline(doc["operating_point_esn0_db"], color="C3", ls="--", lw=0.8, label="operating point")
    ax.set_xlabel("Es/N0 (dB)")
    ax.set_ylabel("bit error rate (hard decisions)")
    ax.set_title(f"{doc['design']}: BER, {doc['symbols']} symbols per point")
    ax.legend(fontsize=8)
    return fig


def plot_gmi(plt: Any, doc: dict[str, Any]) -> Any:
    """GMI against Es/N0 (top) and what is lost (below): the GMI gap to float exact log-MAP with 95 % intervals."""
    pts = doc["points"]
    x = np.array([p["esn0_db"] for p in pts], dtype=float)
    k = doc["bits_per_symbol"]
    op = doc["operating_point_esn0_db"]
    fig, (ax, gap_ax) = plt.subplots(2, 1, figsize=(7.5, 7.8), sharex=True, height_ratios=(3, 2),
                                     constrained_layout=True)
    fine = np.linspace(x.min(), x.max(), 200)
    ax.plot(fine, an.shannon_capacity(fine), color="0.6", lw=1.0, label="Shannon log2(1 + Es/N0)")
    ax.axhline(k, color="0.6", ls=":", lw=0.8)
    for key, style, color, name in (("gmi_exact", "-", "C0", "float exact log-MAP"),
                                    ("gmi_maxlog", "--", "C1", "float max-log"),
                                    ("gmi_fixed", "o", "C2", "fixed point (bit-exact)")):
        y = _values(pts, key)
        if style == "o":
            ax.plot(x, y, "o", ms=4, color=color, label=name)
        else:
            ax.plot(x, y, style, lw=1.2, color=color, label=name)
    ax.axvline(op, color="C3", ls="--", lw=0.8, label="operating point")
    ax.axhline(doc["operating_point_gmi"], color="C3", ls=":", lw=0.6)
    shown = np.concatenate([_values(pts, key) for key in ("gmi_exact", "gmi_maxlog", "gmi_fixed")])
    low = float(np.nanmin(shown)) if np.isfinite(shown).any() else 0.0
    ax.set_ylim(max(0.0, low - 0.06 * k), k * 1.04)
    ax.set_ylabel("BICM GMI (bits/symbol)")
    ax.set_title(f"{doc['design']}: GMI (LLRs scaled by their best factor)")
    ax.legend(fontsize=8, loc="lower right")

    exact = _values(pts, "gmi_exact")
    series = (("fixed", "gmi_fixed", "o", "C2", "float exact - fixed point"),
              ("maxlog", "gmi_maxlog", "s", "C1", "float exact - float max-log"))
    halves: list[float | None] = []
    for name, key, marker, color, label in series:
        gap = exact - _values(pts, key)
        cis = [p.get(f"gmi_gap_{name}_vs_exact_ci95") for p in pts]
        lo = np.array([np.nan if c is None else c[0] for c in cis], dtype=float)
        hi = np.array([np.nan if c is None else c[1] for c in cis], dtype=float)
        halves += list((hi - lo) / 2)
        err = [np.where(np.isnan(lo), 0.0, gap - lo), np.where(np.isnan(hi), 0.0, hi - gap)]
        gap_ax.errorbar(x, gap, yerr=err, fmt=marker + "-", ms=3.5, lw=0.8, capsize=2.5, color=color,
                        label=label + (", 95 %" if np.isfinite(lo).any() else " (no interval in analysis.json)"))
    lt = _linear_threshold(halves, 1e-4)
    gap_ax.set_yscale("symlog", linthresh=lt)
    gap_ax.axhspan(-lt, lt, color="0.9", zorder=0, lw=0, label=f"linear part of the axis (|gap| < {lt:g})")
    gap_ax.axhline(0.0, color="0.4", lw=0.6)
    gap_ax.axvline(op, color="C3", ls="--", lw=0.8)
    gap_ax.set_xlabel("Es/N0 (dB)")
    gap_ax.set_ylabel("GMI gap (bits/symbol, symlog)")
    gap_ax.set_title(f"loss at the operating point ({op:.2f} dB, horizontal distance): "
                     f"{_f(doc.get('loss_db_vs_exact'))} dB {_ci(doc.get('loss_db_vs_exact_ci95'))} vs float "
                     f"exact,\n{_f(doc.get('loss_db_vs_maxlog'))} dB {_ci(doc.get('loss_db_vs_maxlog_ci95'))} "
                     "vs float max-log (95 % intervals)", fontsize=9)
    gap_ax.legend(fontsize=8, loc="upper right")
    return fig


def plot_modes(plt: Any, doc: dict[str, Any]) -> Any:
    """An adaptive core: each mode's implementation loss (dB, 95 % intervals) and its GMI gap around its own
    operating point (float exact minus fixed point), every symbol in that mode through the common input format."""
    modes = doc["modes"]
    fig, (ax, gap_ax) = plt.subplots(1, 2, figsize=(11.0, 4.6), constrained_layout=True)
    x = np.arange(len(modes))
    for off, key, color, name in ((-0.18, "loss_db_vs_exact", "C0", "vs float exact log-MAP"),
                                  (0.18, "loss_db_vs_maxlog", "C1", "vs float max-log")):
        v = np.array([np.nan if m[key] is None else m[key] for m in modes], dtype=float)
        cis = [m.get(f"{key}_ci95") for m in modes]
        lo = np.array([np.nan if c is None else c[0] for c in cis], dtype=float)
        hi = np.array([np.nan if c is None else c[1] for c in cis], dtype=float)
        err = [np.where(np.isnan(lo), 0.0, v - lo), np.where(np.isnan(hi), 0.0, hi - v)]
        ax.bar(x + off, v, width=0.34, color=color, label=name + ", 95 %")
        ax.errorbar(x + off, v, yerr=err, fmt="none", ecolor="k", capsize=3, lw=0.8)
    ax.axhline(0.0, color="0.4", lw=0.6)
    ax.set_xticks(x, [f"{m['order']}-QAM\n{m['operating_point_esn0_db']:.1f} dB" if m["order"] > 2
                      else f"BPSK\n{m['operating_point_esn0_db']:.1f} dB" for m in modes])
    ax.set_ylabel("implementation loss (dB of Es/N0, GMI)")
    ax.set_title(f"{doc['design']}: loss per mode at its operating point\n(float exact GMI = "
                 f"{modes[0]['operating_point_gmi'] / modes[0]['bits']:.2f} x bits of the mode)", fontsize=9)
    ax.legend(fontsize=8)
    for n, m in enumerate(modes):
        grid = m["loss_grid"]
        gx = np.array([p["esn0_db"] for p in grid], dtype=float) - m["operating_point_esn0_db"]
        gap = _values(grid, "gmi_exact") - _values(grid, "gmi_fixed")
        gap_ax.plot(gx, gap / m["bits"], "o-", ms=3, lw=0.9, color=f"C{n}", label=f"{m['order']}-point mode")
    gap_ax.axvline(0.0, color="C3", ls="--", lw=0.8)
    gap_ax.axhline(0.0, color="0.4", lw=0.6)
    gap_ax.set_xlabel("Es/N0 - the mode's operating point (dB)")
    gap_ax.set_ylabel("GMI gap per bit (float exact - fixed point)")
    gap_ax.set_title("GMI gap around each mode's operating point", fontsize=9)
    gap_ax.legend(fontsize=8)
    return fig


def plot_widths(plt: Any, widths: dict[str, Any]) -> Any:
    """Loss (dB, 95 % intervals) against each stage's width on a symlog axis, so losses at or below zero show."""
    stages = [s for s in ("mapper", "input", "llr") if widths.get(f"{s}_best")]
    fig, axes = plt.subplots(1, len(stages), figsize=(4.6 * len(stages), 4.4), squeeze=False,
                             constrained_layout=True)
    names = {"mapper": "mapper width (bits)", "input": "demapper input width (best fraction)",
             "llr": "LLR width (best fraction)"}
    cis = [r.get("loss_db_ci95") for s in stages for r in widths[f"{s}_best"]]
    lt = _linear_threshold([(c[1] - c[0]) / 2 for c in cis if c], 1e-4)
    legend: dict[str, Any] = {}
    for ax, s in zip(axes[0], stages):
        rows = widths[f"{s}_best"]
        w = np.array([r["width"] for r in rows])
        loss = np.array([r["loss_db"] for r in rows], dtype=float)
        lo = np.array([r["loss_db_ci95"][0] if r.get("loss_db_ci95") else np.nan for r in rows], dtype=float)
        hi = np.array([r["loss_db_ci95"][1] if r.get("loss_db_ci95") else np.nan for r in rows], dtype=float)
        ax.errorbar(w, loss, yerr=[np.where(np.isnan(lo), 0.0, loss - lo), np.where(np.isnan(hi), 0.0, hi - loss)],
                    fmt="o-", ms=3.5, capsize=2.5, color="C0", label="loss against the reference, 95 % interval")
        ax.set_yscale("symlog", linthresh=lt)
        ax.axhspan(-lt, lt, color="0.9", zorder=0, lw=0, label=f"linear part of the axis (|loss| < {lt:g} dB)")
        ax.axhline(0.0, color="0.4", lw=0.6)
        ax.axhline(widths["stage_share_db"], color="C3", ls="--", lw=0.9, label="stage share of the budget")
        ax.axhline(widths["budget_db"], color="C3", ls=":", lw=0.9, label="budget")
        pick = widths["chosen"].get(s)
        if pick:
            ax.axvline(pick["width"], color="C2", lw=0.9, label="chosen width")
        ax.xaxis.set_major_locator(plt.MaxNLocator(integer=True))
        ax.set_xlabel(names[s])
        ax.set_ylabel("loss at the operating point (dB, symlog)")
        for handle, label in zip(*ax.get_legend_handles_labels()):
            legend.setdefault(label, handle)
    fig.suptitle(f"loss against width at Es/N0 = {widths['operating_point_esn0_db']:.2f} dB (vs wide reference)")
    fig.legend(list(legend.values()), list(legend), loc="outside lower center", ncol=3, fontsize=9, frameon=False)
    return fig


# --------------------------------------------------------------------------- report.md


def _f(x: Any, fmt: str = ".4f") -> str:
    if x is None:
        return "n/a"
    return format(x, fmt)


def _ci(ci: Any, fmt: str = ".4f") -> str:
    return "n/a" if not ci else f"[{format(ci[0], fmt)}, {format(ci[1], fmt)}]"


#: an image in report.md: (file, alt text) -> its markdown, or a line saying why it is not there
Image = Callable[[str, str], str]


def _f_ci(doc: dict[str, Any], key: str, sep: str = " ") -> str:
    """A loss in dB and its 95 % interval, from doc[key] and doc[key + '_ci95']."""
    return f"{_f(doc[key])} dB{sep}{_ci(doc[key + '_ci95'])}"


def words(spec: DesignSpec, design: Design) -> dict[str, Any]:
    """The word formats of a design, as analysis.json records them for the report's first paragraph."""
    d, m = spec.demapper, spec.mapper
    return {"mapper_width": m.width, "mapper_format": str(design.mapper_format), "mapper_scaling": m.scaling,
            "input_width": d.input_width, "input_format": str(design.input_format), "llr_width": d.llr_width,
            "llr_format": str(design.llr_format), "scale_width": d.scale_width}


def _md_header(name: str, doc: dict[str, Any] | None) -> list[str]:
    """Title and one paragraph naming the constellation and every word format (from analysis.json)."""
    out = [f"# Design review: {name}\n"]
    if doc is None:
        return out + [f"qamsmith {__version__}.\n"]
    w = doc.get("words")
    if not w:
        return out + [f"qamsmith {__version__}. {doc['order']}-point {doc['labeling']} constellation, "
                      f"{doc['bits_per_symbol']} bits per symbol; demapper {doc['algorithm']}.\n"]
    reliability = (f", reliability input {w['scale_width']}-bit (driven with {doc['reliability_rule']})"
                   if doc.get("reliability_rule") else "")
    return out + [f"qamsmith {__version__}. {doc['order']}-point {doc['labeling']} constellation, "
                  f"{doc['bits_per_symbol']} bits per symbol; mapper {w['mapper_width']}-bit {w['mapper_format']} "
                  f"({w['mapper_scaling']}); demapper {doc['algorithm']}, input {w['input_width']}-bit "
                  f"{w['input_format']}, LLR {w['llr_width']}-bit {w['llr_format']}{reliability}.\n"]


def _md_summary(doc: dict[str, Any]) -> list[str]:
    """The summary table: operating point, implementation losses (dB), EVM, input noise, Monte-Carlo size."""
    out = ["## Summary\n", "| figure | value |\n| --- | --- |",
           f"| operating point ({doc['operating_point_rule']}) | Es/N0 {_f(doc['operating_point_esn0_db'], '.2f')} dB, "
           f"Eb/N0 {_f(doc['operating_point_ebn0_db'], '.2f')} dB, GMI {_f(doc['operating_point_gmi'], '.3f')} bits |",
           f"| implementation loss vs float exact log-MAP (GMI) | {_f_ci(doc, 'loss_db_vs_exact', ', 95 % ')} |",
           f"| implementation loss vs float max-log (GMI) | {_f_ci(doc, 'loss_db_vs_maxlog', ', 95 % ')} |",
           f"| BER loss vs float exact / max-log hard decisions at BER {_f(doc['ber_at_operating_point'], '.3g')} | "
           f"{_f_ci(doc, 'ber_loss_db_vs_exact')} / {_f_ci(doc, 'ber_loss_db_vs_maxlog')} |",
           f"| mapper quantization EVM | {_f(doc['evm_db'], '.2f')} dB ({_f(doc['evm_percent'], '.4f')} %); "
           f"uniform-noise estimate {_f(doc['evm_uniform_model_db'], '.2f')} dB; output power "
           f"{_f(doc['mapper_power_db'], '.4f')} dB |",
           f"| demapper input quantization noise | {_f(doc['input_noise_db'], '.2f')} dB re unit symbol power, "
           f"{_f(doc['input_noise_to_n0_db'], '.2f')} dB re N0 at the operating point; full scale "
           f"{_f(doc['input_headroom_db'], '.2f')} dB above the outermost level |",
           f"| Monte-Carlo | {doc['symbols']} symbols per point, seed {doc['seed']}, {doc['batches']} batches |\n"]
    if doc.get("loss_note"):
        out.append(f"**Note:** {doc['loss_note']}.\n")
    return out


def _md_points(doc: dict[str, Any], image: Image) -> list[str]:
    """The BER and GMI plots and a table of every Es/N0 point (dB), with what the figures mean."""
    out = ["## BER and GMI against Es/N0\n", f"{image('ber.png', 'BER')}\n\n{image('gmi.png', 'GMI')}\n",
           "The lower panel of the GMI plot is the fixed point's loss itself: float exact minus fixed-point GMI "
           "(and float exact minus float max-log) at each point, with 95 % intervals by paired batch means.\n",
           "| Es/N0 dB | Eb/N0 dB | BER fixed | BER theory | GMI fixed | GMI max-log | GMI exact | LLR factor fixed "
           "| input clip % |",
           "| ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: |"]
    for p in doc["points"]:
        ber = _f(p["ber_fixed"], ".3e") if p["bit_errors_fixed"] else f"< {_f(p['ber_fixed_upper95'], '.1e')}"
        out.append(f"| {p['esn0_db']:.2f} | {p['ebn0_db']:.2f} | {ber} | {_f(p['ber_theory'], '.3e')} | "
                   f"{_f(p['gmi_fixed'])} | {_f(p['gmi_maxlog'])} | {_f(p['gmi_exact'])} | "
                   f"{_f(p['llr_factor_fixed'], '.3f')} | {_f(p['input_clip_percent'], '.3f')} |")
    out += ["",
            f"BER theory: {doc['theory']}. GMI: {doc['gmi_definition']}. The fixed-point LLR factor is the decoder "
            "input scaling (relative to code x llr_lsb / N0 nats) that maximizes the GMI; "
            "`nats_per_llr_code` in analysis.json gives it in nats per LLR code.\n",
            "## Constellation, received cloud and LLR transfer\n",
            f"{image('constellation.png', 'mapper constellation')}\n\n{image('cloud.png', 'received cloud')}\n\n"
            f"{image('llr_transfer.png', 'LLR transfer')}\n"]
    return out


def _md_modes(doc: dict[str, Any], image: Image) -> list[str]:
    """An adaptive core: the implementation loss of every mode (dB, 95 % intervals) at its own operating point."""
    if not doc.get("modes"):
        return []
    out = ["## Implementation loss per mode\n",
           "Every symbol sent and demapped in one mode, through the common input format (the largest order's grid); "
           "each mode at its own operating point (float exact GMI = the same fraction of its bits). The summary "
           "above is the largest mode's. Gain: the mode's standard points relative to its declared levels.\n",
           "| mode | order | gain (dB) | Es/N0 dB | GMI target | loss vs exact (dB, 95 %) | loss vs max-log (dB, 95 %) "
           "| BER loss vs exact / max-log (dB) |",
           "| ---: | ---: | ---: | ---: | ---: | --- | --- | --- |"]
    for m in doc["modes"]:
        out.append(f"| {m['mode']} | {m['order']} | {_f(m['gain_db'], '.3f')} | {_f(m['operating_point_esn0_db'], '.2f')} | "
                   f"{_f(m['operating_point_gmi'], '.3f')} | {_f_ci(m, 'loss_db_vs_exact')} | "
                   f"{_f_ci(m, 'loss_db_vs_maxlog')} | {_f(m['ber_loss_db_vs_exact'])} / "
                   f"{_f(m['ber_loss_db_vs_maxlog'])} |")
    notes = [f"{m['order']}-point mode: {m['loss_note']}" for m in doc["modes"] if m.get("loss_note")]
    out += [""] + [f"**Note:** {n}.\n" for n in notes] + [f"{image('modes.png', 'loss per mode')}\n"]
    return out


def _md_analysis(doc: dict[str, Any], image: Image) -> list[str]:
    """The analysis.json part: summary table, the modes' losses, BER/GMI plots and table, the design's plots."""
    return _md_summary(doc) + _md_modes(doc, image) + _md_points(doc, image)


def _md_widths(widths: dict[str, Any], image: Image) -> list[str]:
    """The width explorer's part: its reference, the loss (dB) of each stage's widths, and the recommendation."""
    ref = widths["reference"]
    out = ["## Widths against the loss budget\n",
           f"Budget {widths['budget_db']:g} dB at Es/N0 {widths['operating_point_esn0_db']:.2f} dB, "
           f"{widths['stage_share_db']:.3f} dB per stage; {widths['symbols']} symbols per candidate. Loss here is "
           f"against the same algorithm with wide words (reference: ideal mapper, input "
           f"{ref['demapper.input_width']}-bit with fraction {ref['demapper.input_fraction']}, exact LLR words), "
           f"linearized at the operating point; "
           f"the reference itself is {widths['reference_loss_db_vs_exact']:.4f} dB from float exact log-MAP. "
           "The mapper row counts quantization only: keep whatever headroom the transmit filter or DAC needs "
           "on top of the width shown.\n",
           f"{image('loss_vs_width.png', 'loss against width')}\n",
           "| stage | width | fraction | loss dB | 95 % interval |\n| --- | ---: | ---: | ---: | --- |"]
    for s in ("mapper", "input", "llr"):
        for r in widths.get(f"{s}_best", []):
            mark = " (chosen)" if widths["chosen"].get(s, {}).get("width") == r["width"] else ""
            frac = "-" if r["fraction"] is None else r["fraction"]
            out.append(f"| {s}{mark} | {r['width']} | {frac} | {r['loss_db']:.4f} | {_ci(r['loss_db_ci95'])} |")
    rec = widths["recommended"]
    out += ["",
            "**Recommended:** " + ", ".join(f"`{key} = {v}`" for key, v in rec["settings"].items())
            + f": loss {rec['loss_db']:.4f} dB {_ci(rec.get('loss_db_ci95'))} against the reference "
            f"({'within' if rec['within_budget'] else 'over'} budget); against float exact log-MAP "
            f"{_f(rec.get('loss_db_vs_exact'))} dB, float max-log {_f(rec.get('loss_db_vs_maxlog'))} dB. "
            f"The current spec: {_f(widths['current'].get('loss_db'))} dB against the reference.\n"]
    return out


def _md_method(doc: dict[str, Any] | None, data: list[str]) -> list[str]:
    """How the figures were obtained (channel, input quantization, bit-exact model) and where the data is."""
    how = "" if doc is None else (
        f"{doc['method']}. Es/N0 is the mean energy of the mapper's actual output codes over N0; the demapper "
        "input is quantized as the AGC/equalizer would deliver it (levels at odd multiples of 2^input_fraction "
        "codes, round half to even, saturation). Fixed-point LLRs come from the bit-exact model "
        "(`qamsmith.model.demap`), the same function the RTL is checked against. The float references use the "
        "ideal constellation on the same noise. ")
    return ["## Method\n", f"{how}Data (this directory): {', '.join(data) or 'none'}. This file is assembled "
            "from them again whenever a qamsmith command writes one.\n"]


# --------------------------------------------------------------------------- the sections of report.md


@dataclass(frozen=True)
class Section:
    """One part of report.md, there when `data` (a JSON file some command writes into report/) is.

    The text is `render(doc, image)` of the JSON, or the markdown file `fragment` the command writes
    beside it (as `qamsmith cost` writes hardware.md from hardware.json); `plots` are drawn from the
    JSON alone, so a rebuild redraws them when it changes. `absent`: the text while `data` is missing
    (None: the section is left out)."""

    data: str
    render: Callable[[dict[str, Any], Image], list[str]] | None = None
    fragment: str | None = None
    plots: tuple[tuple[str, Callable[[Any, dict[str, Any]], Any]], ...] = ()
    absent: str | None = None


#: report.md in this order, after the title. Another command's section joins with one line here (its JSON
#: and, for text it renders itself, the markdown file it writes beside it, e.g. Section("explore.json",
#: fragment="explore.md")). A <name>.json with a <name>.md beside it that is not listed here still joins,
#: after these, in name order.
SECTIONS: tuple[Section, ...] = (
    Section("analysis.json", render=_md_analysis, plots=(("ber.png", plot_ber), ("gmi.png", plot_gmi)),
            absent="## Summary\n\nNot analyzed yet: `qamsmith analyze <design>` simulates BER, GMI and the "
                   "implementation loss and fills this in.\n"),
    Section("widths.json", render=_md_widths, plots=(("loss_vs_width.png", plot_widths),)),
    Section("hardware.json", fragment="hardware.md",
            absent="## Hardware cost\n\nNot measured yet: `qamsmith cost <design>` runs Yosys and nextpnr and "
                   "fills this in.\n"),
)


def _source_tag(name: str, content: bytes) -> str:
    """What a plot drawn from the JSON `name` records in its PNG text: the file and its hash."""
    return f"{name} sha256:{hashlib.sha256(content).hexdigest()[:16]}; qamsmith {__version__}"


def _load(where: Path, name: str, content: bytes) -> dict[str, Any]:
    try:
        doc = json.loads(content)
    except ValueError:
        doc = None
    if not isinstance(doc, dict):
        raise SpecError("report", str(where / name), "a JSON object as qamsmith writes it (move the file away "
                                                     "or run the command that writes it again)")
    return doc


@dataclass(frozen=True)
class _Present:
    """What report/ holds: its data files (JSON and markdown, report.md aside), its plots, every entry."""

    data: dict[str, bytes]
    pngs: dict[str, bytes]
    entries: list[str]


def _present(folder: Path) -> _Present:
    if not folder.is_dir():
        return _Present({}, {}, [])
    data: dict[str, bytes] = {}
    pngs: dict[str, bytes] = {}
    entries = []
    try:
        for p in sorted(folder.iterdir()):
            if p.name.startswith("."):                # a temporary file of an interrupted write
                continue
            entries.append(p.name)
            if not p.is_file() or p.name == "report.md":
                continue
            if p.suffix in (".json", ".md"):
                data[p.name] = p.read_bytes()
            elif p.suffix == ".png":
                pngs[p.name] = p.read_bytes()
    except OSError as exc:
        raise SpecError("report", str(folder), f"a readable directory ({exc.strerror or exc})") from None
    return _Present(data, pngs, entries)


def _assemble(present: _Present, where: Path, name: str) -> tuple[dict[str, bytes], list[str]]:
    """report.md and the plots of JSON files that are missing or older than their JSON; and the plots to
    remove (their JSON is gone, or it changed and matplotlib is not there to redraw them)."""
    data, pngs = present.data, present.pngs
    drawn: dict[str, bytes] = {}
    stale: list[str] = []
    shown = set(pngs)
    undrawable: set[str] = set()
    docs: dict[str, dict[str, Any]] = {}
    plt = None
    with tempfile.TemporaryDirectory(prefix="qamsmith-plots-") as tmp:
        for sec in SECTIONS:
            if sec.data not in data:
                stale += [png for png, _ in sec.plots if png in pngs]
                shown -= {png for png, _ in sec.plots}
                continue
            doc = docs[sec.data] = _load(where, sec.data, data[sec.data])
            tag = _source_tag(sec.data, data[sec.data])
            for png, draw in sec.plots:
                if _png_text(pngs.get(png, b"")).get(SOURCE_KEY) == tag:
                    continue
                if not _have_matplotlib():
                    stale += [png] if png in pngs else []
                    shown.discard(png)
                    undrawable.add(png)
                    continue
                plt = plt or _pyplot()
                path = Path(tmp) / png
                _save(draw(plt, doc), path, tag)
                drawn[png] = path.read_bytes()
                shown.add(png)
        if plt is not None:
            plt.close("all")

    def image(file: str, alt: str) -> str:
        if file in shown:
            return f"![{alt}]({file})"
        why = ("matplotlib is not installed: pip install 'qamsmith[report]'" if file in undrawable
               else "`qamsmith analyze` draws it")
        return f"*{alt}: no plot ({file}; {why}).*"

    registered = {s.data for s in SECTIONS} | {s.fragment for s in SECTIONS if s.fragment}
    title = next((d["design"] for d in docs.values() if isinstance(d.get("design"), str)), None)
    analysis = docs.get("analysis.json")
    out = _md_header(title or name, analysis)
    for sec in SECTIONS:
        if sec.data in docs and sec.render is not None:
            out += sec.render(docs[sec.data], image)
        elif sec.data in data and sec.fragment in data:
            out.append(data[sec.fragment].decode("utf-8", "replace").strip() + "\n")
        elif sec.absent is not None:
            out.append(sec.absent)
    for json_name in sorted(data):                     # a later command's <name>.json with its <name>.md
        md = json_name[:-len(".json")] + ".md"
        if json_name.endswith(".json") and json_name not in registered and md in data and md not in registered:
            out.append(data[md].decode("utf-8", "replace").strip() + "\n")
    out += _md_method(analysis, [n for n in sorted(data) if n.endswith(".json")])
    drawn["report.md"] = "\n".join(out).encode()
    return drawn, stale


def rebuild_report(report_dir: Path) -> Path:
    """Assemble report_dir/report.md again from every JSON in report_dir (and redraw the plots whose JSON
    changed); each file is replaced atomically. Every command that writes into report/ calls it."""
    report_dir = Path(report_dir)
    present = _present(report_dir)
    files, stale = _assemble(present, report_dir, report_dir.parent.name)
    for name in sorted(files, key=lambda n: n == "report.md"):     # report.md last, after what it shows
        write_file(report_dir / name, files[name], key="report")
    for name in stale:
        try:
            (report_dir / name).unlink(missing_ok=True)
        except OSError as exc:
            raise SpecError("report", str(report_dir / name), f"a removable file ({exc.strerror or exc})") from None
    return report_dir / "report.md"


# --------------------------------------------------------------------------- writing


def write_report(spec: DesignSpec, target: Path, doc: dict[str, Any], widths: dict[str, Any] | None, *,
                 cloud_esn0_db: float | None = None, seed: int = an.DEFAULT_SEED) -> Path:
    """Write report/ at `target` as a whole, atomically: the design's plots, analysis.json, widths.json
    (when given) and report.md, with everything other commands wrote there kept (and in report.md)."""
    design = derive(spec)
    plt = _pyplot()
    op = doc["operating_point_esn0_db"]
    figures = {"constellation.png": lambda: plot_constellation(plt, design),
               "cloud.png": lambda: plot_cloud(plt, design, cloud_esn0_db if cloud_esn0_db is not None else op, seed),
               "llr_transfer.png": lambda: plot_llr_transfer(plt, design, op)}
    if doc.get("modes"):
        figures["modes.png"] = lambda: plot_modes(plt, doc)
    files: dict[str, bytes] = {}
    with tempfile.TemporaryDirectory(prefix="qamsmith-plots-") as tmp:
        for name, draw in figures.items():
            _save(draw(), Path(tmp) / name)
            files[name] = (Path(tmp) / name).read_bytes()
    plt.close("all")
    files["analysis.json"] = an.to_json({**doc, "words": words(spec, design)}).encode()
    if widths:
        files["widths.json"] = an.to_json(widths).encode()
    old = _present(target)
    present = _Present({**old.data, **{n: b for n, b in files.items() if n.endswith(".json")}},
                       {**old.pngs, **{n: b for n, b in files.items() if n.endswith(".png")}}, old.entries)
    derived, stale = _assemble(present, target, spec.name)
    files.update(derived)
    kept = [n for n in old.entries if n not in files and n not in stale]
    return replace_directory(target, files, keep=kept, key="report")


def analyze(spec: DesignSpec, target: Path, *, esn0_db: list[float] | None = None, symbols: int = an.DEFAULT_SYMBOLS,
            seed: int = an.DEFAULT_SEED, operating_point_db: float | None = None,
            gmi_fraction: float = an.DEFAULT_GMI_FRACTION, ber_floor: float | None = None, widths: bool = True,
            budget_db: float = an.DEFAULT_BUDGET_DB, widths_symbols: int = an.DEFAULT_EXPLORE_SYMBOLS,
            cloud_esn0_db: float | None = None) -> tuple[dict[str, Any], dict[str, Any] | None]:
    """`qamsmith analyze`: check the arguments, run the sweep (and the width explorer), write report/ at target."""
    design = derive(spec)
    k = design.bits
    an.check_seed(seed)
    if operating_point_db is None and not 0 < gmi_fraction < 1:
        raise SpecError("--gmi-target", gmi_fraction, "a fraction of log2(M) between 0 and 1")
    an.check_symbols(symbols, k, ber_floor)
    if widths:
        an.check_symbols(widths_symbols, k)
    if cloud_esn0_db is not None and not an.SNR_LIMITS_DB[0] <= cloud_esn0_db <= an.SNR_LIMITS_DB[1]:
        raise SpecError("--cloud-snr", cloud_esn0_db, "an Es/N0 from -30 to 80 dB")
    if budget_db <= 0 or budget_db > 10:
        raise SpecError("--budget", budget_db, "a loss budget in dB, above 0 and at most 10")
    probe_directory(target, key="report")        # fail early (exit 2) when the report cannot be written
    _pyplot()
    doc = an.run_analysis(spec, esn0_db=esn0_db, symbols=symbols, seed=seed, operating_point_db=operating_point_db,
                          gmi_fraction=gmi_fraction, ber_floor=ber_floor)
    explored = None
    if widths:
        explored = an.explore_widths(spec, budget_db=budget_db, symbols=widths_symbols, seed=seed,
                                     operating_point_db=doc["operating_point_esn0_db"])
        explored["design"] = spec.name
    write_report(spec, target, doc, explored, cloud_esn0_db=cloud_esn0_db, seed=seed)
    return doc, explored


def write_widths(spec: DesignSpec, path: Path, *, budget_db: float = an.DEFAULT_BUDGET_DB,
                 symbols: int = an.DEFAULT_EXPLORE_SYMBOLS, seed: int = an.DEFAULT_SEED,
                 operating_point_db: float | None = None,
                 gmi_fraction: float = an.DEFAULT_GMI_FRACTION) -> dict[str, Any]:
    """`qamsmith widths`: explore and write the JSON at `path` (analysis.widths_run); when `path` is a
    design's report/widths.json, report.md and loss_vs_width.png follow it."""
    path = Path(path)
    result = an.widths_run(spec, path, budget_db=budget_db, symbols=symbols, seed=seed,
                           operating_point_db=operating_point_db, gmi_fraction=gmi_fraction)
    if path.name == "widths.json" and path.parent.name == REPORT_DIR:
        rebuild_report(path.parent)
    return result


__all__ = ["PLOTS", "SECTIONS", "Section", "analyze", "rebuild_report", "words", "write_report", "write_widths"]
