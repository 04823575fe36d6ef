"""The design-review report: `qamsmith analyze` writes out/<name>/report/ (PNG plots, report.md, JSON).

matplotlib is imported only here and only when a report is drawn (Agg backend, no display).
The directory is built in a temporary directory beside its target and renamed into place, so
an error leaves the previous report (or nothing) behind, never half a report.
"""

from __future__ import annotations

import tempfile
from pathlib import Path
from typing import Any

import numpy as np

from ..artifacts import probe_directory, replace_directory
from ..errors import SpecError
from ..model import Design, demap, derive
from ..spec import DesignSpec
from ..version import __version__
from . import analysis as an

#: received-cloud plot: symbols drawn
CLOUD_SYMBOLS = 4000
PLOTS = ("constellation.png", "cloud.png", "llr_transfer.png", "ber.png", "gmi.png", "loss_vs_width.png")


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


def _save(fig: Any, path: Path) -> None:
    # no Software/date metadata: same spec, same bytes
    fig.savefig(path, metadata={"Software": None}, bbox_inches="tight")
    fig.clf()


# --------------------------------------------------------------------------- plots


def plot_constellation(plt: Any, design: Design, path: Path) -> None:
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
    _save(fig, path)


def plot_cloud(plt: Any, design: Design, esn0_db: float, seed: int, path: Path) -> None:
    """A received cloud at one Es/N0 in demapper input codes, with the decision boundaries and full scale."""
    chain = an.Chain(design)
    _, kept = chain.run(esn0_db, CLOUD_SYMBOLS, seed, floats=False, keep=CLOUD_SYMBOLS)
    f = design.spec.demapper.input_fraction
    fig, ax = plt.subplots(figsize=(6.4, 6.4))
    ax.scatter(kept["i"], kept["q"], s=1.5, c=kept["labels"] % 10, cmap="tab10", alpha=0.6, zorder=2)
    const = design.constellation
    if const.axes is not None:
        for comp, axis in enumerate(const.axes):
            L = axis.levels
            for n in range(1, L):
                edge = (2 * n - L) << f          # midway between levels n-1 and n, in input codes
                if comp == 0:
                    ax.axvline(edge, color="k", lw=0.6, zorder=3)
                else:
                    ax.axhline(edge, color="k", lw=0.6, zorder=3)
    ifmt = design.input_format
    lo, hi = ifmt.min_code, ifmt.max_code
    ax.plot([lo, hi, hi, lo, lo], [lo, lo, hi, hi, lo], color="C3", lw=1.0, zorder=4, label="input full scale")
    reach = max(np.max(np.abs(kept["i"])), np.max(np.abs(kept["q"])), 1) * 1.1
    lim = min(max(reach, (max(np.max(np.abs(const.points.real)), 1) + 1) * 2 ** f), hi * 1.1)
    ax.set_xlim(-lim, lim)
    ax.set_ylim(-lim, lim)
    ax.set_aspect("equal")
    ax.set_title(f"received cloud at Es/N0 = {esn0_db:.2f} dB ({CLOUD_SYMBOLS} symbols), demapper input codes\n"
                 "lines: hard-decision boundaries" + ("" if const.axes is not None else " (2-D search: not drawn)"))
    ax.set_xlabel("I input code")
    ax.set_ylabel("Q input code")
    ax.legend(loc="upper right", fontsize=7)
    _save(fig, path)


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
    llr = demap(design, i, q, scale)
    const = design.constellation
    cols = list(const.axes[0].label_bits) if const.axes is not None else list(range(const.bits))
    return i, llr, cols


def plot_llr_transfer(plt: Any, design: Design, path: Path, esn0_db: float) -> None:
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
    ax.legend(fontsize=7, ncol=min(len(cols), 6))
    _save(fig, path)


def plot_ber(plt: Any, doc: dict[str, Any], path: Path) -> None:
    pts = doc["points"]
    x = np.array([p["esn0_db"] for p in pts])
    fig, ax = plt.subplots(figsize=(7.5, 4.8))
    fine = np.linspace(x.min(), x.max(), 200)
    if doc["theory"].startswith("K. Cho"):
        ax.semilogy(fine, an.ber_gray_qam(doc["order"], fine), color="k", lw=1.0, label="theory (Cho and Yoon 2002)")
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
    ax.legend(fontsize=7)
    _save(fig, path)


def plot_gmi(plt: Any, doc: dict[str, Any], path: Path) -> None:
    pts = doc["points"]
    x = np.array([p["esn0_db"] for p in pts])
    fig, ax = plt.subplots(figsize=(7.5, 4.8))
    fine = np.linspace(x.min(), x.max(), 200)
    k = doc["bits_per_symbol"]
    ax.plot(fine, np.minimum(an.shannon_capacity(fine), 1e9), color="0.6", lw=1.0, label="Shannon log2(1 + Es/N0)")
    ax.axhline(k, color="0.6", ls=":", lw=0.8)
    for key, style, name in (("gmi_exact", "-", "float exact log-MAP"), ("gmi_maxlog", "--", "float max-log"),
                             ("gmi_fixed", "o", "fixed point (bit-exact)")):
        y = [p[key] for p in pts]
        if style == "o":
            ax.plot(x, y, "o", ms=4, label=name)
        else:
            ax.plot(x, y, style, lw=1.2, label=name)
    ax.axvline(doc["operating_point_esn0_db"], color="C3", ls="--", lw=0.8, label="operating point")
    ax.axhline(doc["operating_point_gmi"], color="C3", ls=":", lw=0.6)
    ax.set_ylim(0, k * 1.08)
    ax.set_xlabel("Es/N0 (dB)")
    ax.set_ylabel("BICM GMI (bits/symbol)")
    ax.set_title(f"{doc['design']}: GMI (LLRs scaled by their best factor)")
    ax.legend(fontsize=7, loc="lower right")
    _save(fig, path)


def plot_widths(plt: Any, widths: dict[str, Any], path: Path) -> None:
    stages = [s for s in ("mapper", "input", "llr") if widths.get(f"{s}_best")]
    fig, axes = plt.subplots(1, len(stages), figsize=(4.6 * len(stages), 3.8), squeeze=False,
                             constrained_layout=True)
    names = {"mapper": "mapper width (bits)", "input": "demapper input width (best fraction)",
             "llr": "LLR width (best fraction)"}
    for ax, s in zip(axes[0], stages):
        rows = widths[f"{s}_best"]
        w = np.array([r["width"] for r in rows])
        loss = np.array([r["loss_db"] for r in rows])
        ci = np.array([r["loss_db_ci95"] for r in rows])
        shown = np.maximum(loss, 1e-4)
        ax.errorbar(w, shown, yerr=[np.maximum(shown - np.maximum(ci[:, 0], 1e-5), 0),
                                    np.maximum(ci[:, 1] - shown, 0)], fmt="o-", ms=3, capsize=2)
        ax.set_yscale("log")
        ax.axhline(widths["stage_share_db"], color="C3", ls="--", lw=0.8, label="stage share of budget")
        ax.axhline(widths["budget_db"], color="C3", ls=":", lw=0.8, label="budget")
        pick = widths["chosen"].get(s)
        if pick:
            ax.axvline(pick["width"], color="C2", lw=0.8, label="chosen")
        ax.set_xlabel(names[s])
        ax.set_ylabel("loss at operating point (dB, floor 1e-4)")
        ax.legend(fontsize=6)
    fig.suptitle(f"loss against width at Es/N0 = {widths['operating_point_esn0_db']:.2f} dB (vs wide reference)")
    _save(fig, path)


# --------------------------------------------------------------------------- report.md


def _f(x: Any, fmt: str = ".4f") -> str:
    if x is None:
        return "n/a"
    return format(x, fmt)


def _ci(ci: Any, fmt: str = ".4f") -> str:
    return "n/a" if not ci else f"[{format(ci[0], fmt)}, {format(ci[1], fmt)}]"


#: files `qamsmith cost` writes into report/; `qamsmith analyze` keeps them when it rewrites the report
HARDWARE_FILES = ("hardware.json", "hardware.md")
_HW_BEGIN = "<!-- hardware: from qamsmith cost -->"
_HW_END = "<!-- /hardware -->"


def hardware_section(hardware_md: str | None) -> str:
    """The report's hardware part: report/hardware.md between markers, or how to produce it."""
    body = hardware_md.strip() if hardware_md else (
        "## Hardware cost\n\nNot measured yet: `qamsmith cost <design>` runs Yosys and nextpnr and fills this in.")
    return f"{_HW_BEGIN}\n{body}\n{_HW_END}\n"


def splice_hardware(report_md: str, hardware_md: str) -> str:
    """report.md with its hardware part replaced by hardware_md (used by `qamsmith cost`)."""
    head, sep, rest = report_md.partition(_HW_BEGIN)
    _, sep2, tail = rest.partition(_HW_END + "\n")
    if not sep or not sep2:
        return report_md.rstrip("\n") + "\n\n" + hardware_section(hardware_md)
    return head + hardware_section(hardware_md) + tail


def _f_ci(doc: dict[str, Any], key: str, sep: str = " ") -> str:
    """A loss in dB and its 95 % interval, from doc[key] and doc[key + '_ci95']."""
    return f"{_f(doc[key])} dB{sep}{_ci(doc[key + '_ci95'])}"


def _md_header(spec: DesignSpec, design: Design, doc: dict[str, Any]) -> list[str]:
    """Title and one paragraph naming the constellation and every word format."""
    d, m = spec.demapper, spec.mapper
    reliability = (f", reliability input {d.scale_width}-bit (driven with {doc['reliability_rule']})"
                   if doc.get("reliability_rule") else "")
    return [f"# Design review: {spec.name}\n",
            f"qamsmith {__version__}. {doc['order']}-point {doc['labeling']} constellation, "
            f"{doc['bits_per_symbol']} bits per symbol; mapper {m.width}-bit {design.mapper_format} ({m.scaling}); "
            f"demapper {d.algorithm}, input {d.input_width}-bit {design.input_format}, LLR {d.llr_width}-bit "
            f"{design.llr_format}{reliability}.\n"]


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


def _md_points(doc: dict[str, Any]) -> list[str]:
    """The BER and GMI plots and a table of every Es/N0 point (dB), with what the figures mean."""
    out = ["## BER and GMI against Es/N0\n", "![BER](ber.png)\n\n![GMI](gmi.png)\n",
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
            "![mapper constellation](constellation.png)\n\n![received cloud](cloud.png)\n\n"
            "![LLR transfer](llr_transfer.png)\n"]
    return out


def _md_widths(widths: dict[str, Any]) -> list[str]:
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
           "![loss against width](loss_vs_width.png)\n",
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


def _md_method(doc: dict[str, Any], widths: dict[str, Any] | None) -> list[str]:
    """How the figures were obtained (channel, input quantization, bit-exact model) and where the data is."""
    return ["## Method\n",
            f"{doc['method']}. Es/N0 is the mean energy of the mapper's actual output codes over N0; the demapper "
            "input is quantized as the AGC/equalizer would deliver it (levels at odd multiples of 2^input_fraction "
            "codes, round half to even, saturation). Fixed-point LLRs come from the bit-exact model "
            "(`qamsmith.model.demap`), the same function the RTL is checked against. The float references use the "
            "ideal constellation on the same noise. Data: analysis.json (this directory)"
            + (", widths.json" if widths else "") + ".\n"]


def report_markdown(spec: DesignSpec, design: Design, doc: dict[str, Any], widths: dict[str, Any] | None,
                    hardware_md: str | None = None) -> str:
    """The design-review text: what was simulated, what it cost, which widths to pick."""
    out = _md_header(spec, design, doc) + _md_summary(doc) + _md_points(doc)
    if widths:
        out += _md_widths(widths)
    out.append(hardware_section(hardware_md))
    out += _md_method(doc, widths)
    return "\n".join(out)



# --------------------------------------------------------------------------- writing


def write_report(spec: DesignSpec, target: Path, doc: dict[str, Any], widths: dict[str, Any] | None, *,
                 cloud_esn0_db: float | None = None, seed: int = an.DEFAULT_SEED) -> Path:
    """Write report/ (plots, report.md, analysis.json, widths.json) at `target` as a whole, atomically.

    What `qamsmith cost` measured (hardware.json, hardware.md) stays with the report."""
    design = derive(spec)
    plt = _pyplot()
    files: dict[str, bytes] = {}
    plots = {"constellation.png": lambda path: plot_constellation(plt, design, path),
             "cloud.png": lambda path: plot_cloud(plt, design, cloud_esn0_db if cloud_esn0_db is not None
                                                  else doc["operating_point_esn0_db"], seed, path),
             "llr_transfer.png": lambda path: plot_llr_transfer(plt, design, path, doc["operating_point_esn0_db"]),
             "ber.png": lambda path: plot_ber(plt, doc, path),
             "gmi.png": lambda path: plot_gmi(plt, doc, path)}
    if widths:
        plots["loss_vs_width.png"] = lambda path: plot_widths(plt, widths, path)
    with tempfile.TemporaryDirectory(prefix="qamsmith-plots-") as tmp:
        for name, draw in plots.items():
            draw(Path(tmp) / name)
            files[name] = (Path(tmp) / name).read_bytes()
    plt.close("all")
    files["analysis.json"] = an.to_json(doc).encode()
    if widths:
        files["widths.json"] = an.to_json(widths).encode()
    kept = [name for name in HARDWARE_FILES if (target / name).is_file()]
    hardware_md = (target / "hardware.md").read_text(encoding="utf-8") if "hardware.md" in kept else None
    files["report.md"] = report_markdown(spec, design, doc, widths, hardware_md).encode()
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


__all__ = ["PLOTS", "analyze", "report_markdown", "splice_hardware", "write_report"]
