"""What `qamsmith explore` concludes and writes: the Pareto front, the recommendation, the effect of each knob.

Works on the plain rows of explore.json (one per candidate: settings, status, loss in dB with its
95 % interval, LUTs, FFs, DSP, BRAM summed over mapper and demapper, Fmax of the slower module,
latency per module), so every conclusion can be checked from the JSON alone. Writes
report/explore.json, explore.md and explore.png (matplotlib, Agg; imported only here, when drawn), then
report.md through `report.rebuild_report` (explore.md is the section of explore.json there).
"""

from __future__ import annotations

import math
import statistics
import tempfile
from pathlib import Path
from typing import Any, Sequence

from ..artifacts import content_hash, write_file
from ..errors import SpecError
from ..spec import DesignSpec
from ..version import __version__
from . import analysis as an
from .report import rebuild_report
from .tools import part_title

INSTALL = "pip install 'qamsmith[explore]'"
#: the loss step that the knob table prices LUTs in, dB
LOSS_STEP_DB = 0.01
#: losses closer than this (dB, the resolution the tables show) count as equal: candidates that share
#: their random numbers and differ in a few LLR codes differ by 1e-6 dB, which is no trade
LOSS_RESOLUTION_DB = 1e-4
_REFERENCE_TITLES = {"exact": "float exact log-MAP", "maxlog": "float max-log"}
_FAMILY_TITLES = {"ice40": "iCE40", "ecp5": "ECP5"}


# --------------------------------------------------------------------------- conclusions


def measured(rows: Sequence[dict[str, Any]]) -> list[dict[str, Any]]:
    """The candidates with a loss and a cost (duplicates of an earlier candidate's spec left out)."""
    return [r for r in rows if r["status"] == "done" and r.get("loss_db") is not None and "same_as" not in r]


def loss_steps(loss_db: float) -> int:
    """A loss in units of LOSS_RESOLUTION_DB (the resolution at which losses are compared)."""
    return round(loss_db / LOSS_RESOLUTION_DB)


def dominates(a: dict[str, Any], b: dict[str, Any]) -> bool:
    """a is at least as good as b in loss (dB, to LOSS_RESOLUTION_DB) and LUTs, and better in one of them; only
    on the same FPGA family (LUTs of different fabrics, one with DSP blocks, are not the same currency)."""
    if a.get("family") != b.get("family"):
        return False
    la, lb = loss_steps(a["loss_db"]), loss_steps(b["loss_db"])
    return a["luts"] <= b["luts"] and la <= lb and (a["luts"] < b["luts"] or la < lb)


def pareto_front(rows: Sequence[dict[str, Any]]) -> list[str]:
    """Ids of the candidates no other candidate of their family dominates in (loss, LUTs): by family, in
    increasing LUTs."""
    pts = measured(rows)
    front = [r for r in pts if not any(dominates(o, r) for o in pts)]
    return [r["id"] for r in sorted(front, key=lambda r: (r.get("family") or "", r["luts"], loss_steps(r["loss_db"]),
                                                          r["id"]))]


def _rank(r: dict[str, Any]) -> tuple[Any, ...]:
    """Fewest LUTs first; then least loss (to LOSS_RESOLUTION_DB), highest Fmax, the plan's order."""
    return (r["luts"], loss_steps(r["loss_db"]), -(r.get("fmax_mhz") or 0.0), r["id"])


def _latency(r: dict[str, Any]) -> int:
    return sum(r["latency_cycles"].values())


def _delta(a: dict[str, Any], b: dict[str, Any]) -> dict[str, Any]:
    """What b has more than a: LUTs, FFs, loss (dB), Fmax (MHz), latency (cycles, both modules)."""
    fmax = None if a.get("fmax_mhz") is None or b.get("fmax_mhz") is None else b["fmax_mhz"] - a["fmax_mhz"]
    return {"luts": b["luts"] - a["luts"], "ffs": b["ffs"] - a["ffs"], "loss_db": b["loss_db"] - a["loss_db"],
            "fmax_mhz": fmax, "latency_cycles": _latency(b) - _latency(a)}


def _brief(r: dict[str, Any]) -> dict[str, Any]:
    keys = ("id", "settings", "loss_db", "loss_db_ci95", "luts", "ffs", "fmax_mhz", "latency_cycles")
    return {k: r.get(k) for k in keys}


def recommend(rows: Sequence[dict[str, Any]], budget_db: float, clock_mhz: float | None) -> dict[str, Any]:
    """The smallest candidate (LUTs) whose loss is within `budget_db` and whose Fmax reaches `clock_mhz`, and the
    runner-up (the next by the same rule) with what choosing it instead would change."""
    pts = measured(rows)
    rule = f"fewest LUTs with loss <= {budget_db:g} dB" + ("" if clock_mhz is None
                                                           else f" and Fmax >= {clock_mhz:g} MHz")
    within = [r for r in pts if r["loss_db"] <= budget_db]
    eligible = sorted((r for r in within if clock_mhz is None or (r.get("fmax_mhz") or 0.0) >= clock_mhz), key=_rank)
    out: dict[str, Any] = {"rule": rule, "eligible": len(eligible)}
    if not eligible:
        out["id"] = None
        if not pts:
            out["reason"] = "no candidate was measured"
        elif not within:
            best = min(pts, key=lambda r: (r["loss_db"], r["luts"], r["id"]))
            out["reason"] = (f"no candidate is within {budget_db:g} dB (least loss: {best['id']} at "
                             f"{best['loss_db']:.4f} dB)")
            out["closest"] = _brief(best)
        else:
            fastest = max(within, key=lambda r: (r.get("fmax_mhz") or 0.0, -r["luts"]))
            out["reason"] = (f"no candidate within {budget_db:g} dB reaches {clock_mhz:g} MHz (fastest: "
                             f"{fastest['id']} at {fastest.get('fmax_mhz') or 0:.1f} MHz)")
            out["closest"] = _brief(fastest)
        return out
    rec = eligible[0]
    out.update(_brief(rec))
    ci = rec.get("loss_db_ci95")
    out["interval_over_budget"] = bool(ci and ci[1] > budget_db)
    if len(eligible) > 1:
        out["runner_up"] = {**_brief(eligible[1]), "delta": _delta(rec, eligible[1])}
    return out


def _median(values: list[float]) -> float:
    return float(statistics.median(values))


def knob_effects(rows: Sequence[dict[str, Any]], axes: Sequence[dict[str, Any]]) -> list[dict[str, Any]]:
    """For each axis and each step between neighbouring values: the median change of LUTs and of loss (dB) over
    the pairs of candidates that differ in that axis only, and the LUTs the cheaper side saves per 0.01 dB it costs."""
    pts = measured(rows)
    out = []
    for axis in axes:
        keys = axis["keys"]
        values = [v if len(keys) > 1 else [v] for v in axis["values"]]
        if len(values) < 2:
            continue
        groups: dict[str, dict[int, dict[str, Any]]] = {}
        for r in pts:
            here = [r["settings"][k] for k in keys]
            if here not in values:
                continue
            rest = repr(sorted((k, v) for k, v in r["settings"].items() if k not in keys))
            groups.setdefault(rest, {})[values.index(here)] = r
        for n in range(len(values) - 1):
            pairs = [(g[n], g[n + 1]) for g in groups.values() if n in g and n + 1 in g]
            step = {"axis": ",".join(keys), "from": ":".join(map(_value, values[n])),
                    "to": ":".join(map(_value, values[n + 1])), "pairs": len(pairs)}
            if pairs:
                dl = _median([b["luts"] - a["luts"] for a, b in pairs])
                dd = _median([b["loss_db"] - a["loss_db"] for a, b in pairs])
                dc = _median([_latency(b) - _latency(a) for a, b in pairs])
                step.update({"luts_change": dl, "loss_db_change": dd, "latency_change": dc, **_price(dl, dd)})
            out.append(step)
    return out


def _price(dl: float, dd: float) -> dict[str, Any]:
    """LUTs the cheaper side of a step saves per LOSS_STEP_DB of loss it adds (None: no trade)."""
    if dl == 0:
        return {"cheaper": None, "luts_per_step": None, "trade": "same LUTs"}
    saved, added = abs(dl), (dd if dl < 0 else -dd)      # loss the cheaper value adds over the dearer one
    cheaper = "to" if dl < 0 else "from"
    if loss_steps(added) <= 0:
        return {"cheaper": cheaper, "luts_per_step": None, "trade": "cheaper and no worse"}
    return {"cheaper": cheaper, "luts_per_step": saved / (added / LOSS_STEP_DB), "trade": "trade"}


def _tools(rows: Sequence[dict[str, Any]]) -> dict[str, str]:
    seen: dict[str, set[str]] = {}
    for r in rows:
        for k, v in (r.get("tools") or {}).items():
            seen.setdefault(k, set()).add(v)
    return {k: " | ".join(sorted(v)) for k, v in sorted(seen.items())}


def document(base: DesignSpec, plan: dict[str, Any], rows: list[dict[str, Any]]) -> dict[str, Any]:
    """explore.json: the plan, every candidate, the front, the recommendation and the knob table (no timings)."""
    c, d = base.constellation, base.demapper
    families = sorted({r["family"] for r in rows if r.get("family")})
    base_hash = content_hash(base)
    return {
        "design": base.name, "base_content_hash": base_hash, "qamsmith": __version__,
        "base_id": next((r["id"] for r in rows if r.get("hash") == base_hash and "same_as" not in r), None),
        "base": (f"{c.order}-point {c.labeling}, mapper {base.mapper.width}-bit, demapper {d.algorithm} "
                 f"{d.input_width}-bit in (fraction {d.input_fraction}), {d.llr_width}-bit LLR (fraction "
                 f"{d.llr_fraction}), {_FAMILY_TITLES.get(base.interface.family, base.interface.family)}"),
        "plan": plan, "candidates": rows,
        "counts": {"candidates": len(rows), "done": sum(r["status"] == "done" for r in rows),
                   "failed": sum(r["status"] != "done" for r in rows)},
        "parts": {f: part_title(f) for f in families},
        "tools": _tools(rows),
        "front": pareto_front(rows),
        "recommended": recommend(rows, plan["budget_db"], plan["clock_mhz"]),
        "recommended_by_family": ({f: recommend([r for r in rows if r.get("family") == f], plan["budget_db"],
                                                plan["clock_mhz"]) for f in families} if len(families) > 1 else {}),
        "knobs": knob_effects(rows, plan["axes"]),
        "loss_definition": (f"implementation loss (dB of Es/N0) of the bit-exact chain against the "
                            f"{_REFERENCE_TITLES[plan['loss_reference']]} GMI curve (analysis.implementation_loss), "
                            "with its 95 % batch-means interval"),
        "cost_definition": ("Yosys on the flow of interface.family for mapper and demapper (summed), nextpnr Fmax of "
                            "each inside a register wrapper (the slower one shown) (cost.estimate)"),
    }


# --------------------------------------------------------------------------- text


def _f(x: Any, fmt: str = ".4f") -> str:
    return "-" if x is None else format(x, fmt)


def _ci(ci: Any) -> str:
    return "-" if not ci else f"[{ci[0]:.4f}, {ci[1]:.4f}]"


def _value(v: Any) -> str:
    return ("true" if v else "false") if isinstance(v, bool) else str(v)


def _settings_text(settings: dict[str, Any]) -> str:
    return ", ".join(f"`{k} = {_value(v)}`" for k, v in settings.items()) or "the base"


def _lat(r: dict[str, Any]) -> str:
    lat = r.get("latency_cycles")
    return "-" if not lat else f"{lat['mapper']} + {lat['demapper']}"


def _signed(x: float | None, fmt: str, unit: str) -> str:
    return "-" if x is None else f"{x:+{fmt}}{unit}"


def runner_up_text(rec: dict[str, Any]) -> str:
    """One sentence: what choosing the runner-up instead of the recommendation would change."""
    ru = rec["runner_up"]
    d = ru["delta"]
    pct = 100.0 * d["luts"] / rec["luts"] if rec["luts"] else math.nan
    loss = ("the same loss" if d["loss_db"] == 0 else
            f"{abs(d['loss_db']):.4f} dB {'more' if d['loss_db'] > 0 else 'less'} loss")
    fmax = ("" if d["fmax_mhz"] is None else
            f", Fmax {abs(d['fmax_mhz']):.1f} MHz {'higher' if d['fmax_mhz'] >= 0 else 'lower'}")
    lat = ("same latency" if d["latency_cycles"] == 0 else
           f"{abs(d['latency_cycles'])} cycle{'s' if abs(d['latency_cycles']) != 1 else ''} "
           f"{'more' if d['latency_cycles'] > 0 else 'less'} latency")
    luts = "the same LUTs" if d["luts"] == 0 else f"{d['luts']} more LUTs (+{pct:.1f} %)"
    return f"{ru['id']} ({_settings_text(ru['settings'])}): {luts}, {loss}{fmax}, {lat}"


def recommendation_lines(doc: dict[str, Any]) -> list[str]:
    """The recommendation and its runner-up as text (markdown inline code)."""
    rec, plan = doc["recommended"], doc["plan"]
    if rec["id"] is None:
        return [f"**No recommendation** ({rec['rule']}): {rec['reason']}."]
    clock = "" if plan["clock_mhz"] is None else f" and reaching {plan['clock_mhz']:g} MHz"
    lines = [f"**Recommended: {rec['id']}** ({_settings_text(rec['settings'])}): loss {rec['loss_db']:.4f} dB "
             f"{_ci(rec['loss_db_ci95'])}, {rec['luts']} LUTs, {rec['ffs']} FFs, "
             + ("" if rec["fmax_mhz"] is None else f"Fmax {rec['fmax_mhz']:.1f} MHz, ")
             + f"latency {_lat(rec)} cycles: the smallest of {rec['eligible']} candidate(s) within the "
             f"{plan['budget_db']:g} dB budget{clock}."]
    if rec.get("interval_over_budget"):
        lines.append(f"Its 95 % interval reaches {rec['loss_db_ci95'][1]:.4f} dB, above the budget: more --symbols "
                     "would settle it.")
    if "runner_up" in rec:
        lines.append(f"**Runner-up:** {runner_up_text(rec)}.")
    else:
        lines.append("No runner-up: no other candidate meets the budget" + (" and the clock." if clock else "."))
    by_family = doc.get("recommended_by_family") or {}
    if by_family:
        lines.append("LUTs of different FPGA families do not compare (one may use DSP blocks), so per family: "
                     + "; ".join(f"{_FAMILY_TITLES.get(f, f)} {r['id']} ({r['luts']} LUTs, loss {r['loss_db']:.4f} dB)"
                                 if r["id"] else f"{_FAMILY_TITLES.get(f, f)} none ({r['reason']})"
                                 for f, r in by_family.items()) + ".")
    return lines


def _axis_text(plan: dict[str, Any]) -> str:
    parts = []
    for a in plan["axes"]:
        vals = [":".join(map(_value, v)) if isinstance(v, list) and len(a["keys"]) > 1 else _value(v)
                for v in a["values"]]
        parts.append(f"`{','.join(a['keys'])}` ({', '.join(vals)})")
    return " x ".join(parts) or "no axes (the base alone)"


def _axis_keys(doc: dict[str, Any]) -> list[str]:
    return [k for a in doc["plan"]["axes"] for k in a["keys"]]


def _table(head: list[str], rows: list[list[str]], align: str) -> list[str]:
    return ["| " + " | ".join(head) + " |", "|" + "".join(" ---: |" if a == "r" else " --- |" for a in align)] + \
           ["| " + " | ".join(r) + " |" for r in rows]


def front_table(doc: dict[str, Any]) -> list[str]:
    """The Pareto front as a markdown table: settings, loss (dB) with interval, LUTs, FFs, DSP, BRAM, Fmax, latency."""
    by_id = {r["id"]: r for r in doc["candidates"]}
    keys = _axis_keys(doc)
    rows = []
    for cid in doc["front"]:
        r = by_id[cid]
        mark = (" (recommended)" if cid == doc["recommended"].get("id") else "") + \
            (" (the base)" if cid == doc.get("base_id") else "")
        rows.append([cid + mark] + [_value(r["settings"][k]) for k in keys] +
                    [_f(r["loss_db"]), _ci(r["loss_db_ci95"]), str(r["luts"]), str(r["ffs"]), str(r["multipliers"]),
                     str(r["brams"]), _f(r["fmax_mhz"], ".1f"), _lat(r)])
    head = ["id"] + [f"`{k}`" for k in keys] + ["loss dB", "95 % interval", "LUTs", "FFs", "DSP", "BRAM", "Fmax MHz",
                                               "latency (mapper + demapper)"]
    return _table(head, rows, "l" * (1 + len(keys)) + "rlrrrrrr")


def knob_table(doc: dict[str, Any]) -> list[str]:
    rows = []
    for k in doc["knobs"]:
        if not k["pairs"]:
            rows.append([f"`{k['axis']}`", f"{k['from']} -> {k['to']}", "0", "-", "-", "-", "no measured pair"])
            continue
        if k["trade"] == "trade":
            price = f"{k['luts_per_step']:.1f} (cheaper: {k[k['cheaper']]})"
        elif k["trade"] == "cheaper and no worse":
            price = f"free: {k[k['cheaper']]} is cheaper and no worse"
        else:
            price = "no LUT change"
        rows.append([f"`{k['axis']}`", f"{k['from']} -> {k['to']}", str(k["pairs"]), f"{k['luts_change']:+g}",
                     f"{k['loss_db_change']:+.4f}", f"{k['latency_change']:+g}", price])
    return _table(["axis", "step", "pairs", "LUTs (median change)", "loss dB (median change)",
                   "latency cycles (median change)", "LUTs saved per 0.01 dB of loss"], rows, "llrrrrl")


def all_table(doc: dict[str, Any]) -> list[str]:
    keys = _axis_keys(doc)
    front = set(doc["front"])
    rows = []
    for r in doc["candidates"]:
        if r["status"] == "done":
            loss = _f(r["loss_db"]) if r["loss_db"] is not None else "n/a"
            note = ", ".join(n for n in ("front" if r["id"] in front else "",
                                         "the base" if r["id"] == doc.get("base_id") else "",
                                         f"same spec as {r['same_as']}" if r.get("same_as") else "") if n)
            if r["loss_db"] is None:
                note = r.get("loss_note") or "no loss figure"
            rows.append([r["id"]] + [_value(r["settings"][k]) for k in keys] +
                        ["done", loss, str(r["luts"]), _f(r["fmax_mhz"], ".1f"), _lat(r), note])
        else:
            rows.append([r["id"]] + [_value(r["settings"][k]) for k in keys] +
                        [f"failed ({r['stage']})", "-", "-", "-", "-", r["reason"].replace("|", "\\|")])
    head = ["id"] + [f"`{k}`" for k in keys] + ["status", "loss dB", "LUTs", "Fmax MHz", "latency", "note"]
    return _table(head, rows, "l" * (1 + len(keys)) + "lrrrrl")


def markdown(doc: dict[str, Any]) -> str:
    """report/explore.md: the section of the design review about the design space."""
    plan = doc["plan"]
    counts = doc["counts"]
    fixed = ", ".join(f"`{k} = {_value(v)}`" for k, v in plan["settings"].items())
    op = (f"Es/N0 {plan['operating_point_db']:g} dB" if plan["operating_point_db"] is not None
          else f"where the float exact GMI reaches {plan['gmi_target']:g} x log2 M")
    parts = "; ".join(f"{_FAMILY_TITLES.get(f, f)} on {t}" for f, t in doc["parts"].items())
    place = (f"Fmax: nextpnr (seed {plan['pnr_seed']}) {parts}, the slower of the two modules" if plan["fmax"]
             else "synthesis only (no Fmax)")
    tools = ", ".join(doc["tools"].values()) or "none run"
    out = ["## Design-space exploration", "",
           f"{counts['candidates']} candidates of `{doc['design']}` ({doc['base']}) over {_axis_text(plan)}"
           + (f"; fixed: {fixed}" if fixed else "") + f". {counts['done']} measured, {counts['failed']} failed"
           + (f"; the base itself is {doc['base_id']}" if doc.get("base_id") else "") + ".", "",
           f"Loss: {doc['loss_definition']}, at the operating point ({op}); {plan['symbols']} symbols per Es/N0 point, "
           f"seed {plan['seed']}. Cost: LUTs, FFs, DSP and BRAM of mapper + demapper from Yosys on the family's flow; "
           f"{place}. Tools: {tools}.", ""]
    out += recommendation_lines(doc) + [""]
    out += ["### Pareto front: loss against LUTs", "",
            "Candidates that no other of the same FPGA family beats in both loss and LUTs, in increasing LUTs "
            f"(losses within {LOSS_RESOLUTION_DB:g} dB count as equal).", "",
            "![loss against LUTs](explore.png)", ""]
    out += front_table(doc) + [""]
    if doc["knobs"]:
        out += ["### What each knob buys", "",
                "Per axis step, over the candidates that differ in that axis only: the median change of LUTs, of "
                "loss and of latency (mapper + demapper), and how many LUTs the cheaper side saves per 0.01 dB of "
                "loss it adds (more is a better buy). "
                "Losses share their random numbers, so their differences are more precise than each interval.", ""]
        out += knob_table(doc) + [""]
    out += ["### All candidates", ""] + all_table(doc) + [""]
    return "\n".join(out)


def summary_lines(doc: dict[str, Any]) -> list[str]:
    """What `qamsmith explore` prints: the front, the recommendation (plain text, no markdown)."""
    lines = front_table(doc) + [""] + [ln.replace("**", "").replace("`", "") for ln in recommendation_lines(doc)]
    failed = [r for r in doc["candidates"] if r["status"] != "done"]
    for r in failed[:10]:
        lines.append(f"  failed {r['id']} ({r['stage']}): {r['reason']}")
    if len(failed) > 10:
        lines.append(f"  ... and {len(failed) - 10} more failed (explore.md lists them)")
    return lines


# --------------------------------------------------------------------------- the plot


def need_matplotlib() -> Any:
    """matplotlib.pyplot on the Agg backend, or a one-line SpecError naming the extra (exit 2)."""
    try:
        import matplotlib
    except ImportError:
        raise SpecError("explore", "matplotlib", f"installed to draw explore.png: {INSTALL}") from None
    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    plt.rcParams.update({"figure.dpi": 100, "savefig.dpi": 110, "font.size": 9, "axes.grid": True,
                         "grid.alpha": 0.3, "svg.hashsalt": "qamsmith"})
    return plt


def plot(doc: dict[str, Any], path: Path) -> None:
    """Loss (dB) against LUTs with the front, the budget and the recommendation; Fmax against LUTs beside it."""
    plt = need_matplotlib()
    pts = measured(doc["candidates"])
    plan = doc["plan"]
    front = [r for i in doc["front"] for r in pts if r["id"] == i]
    rec = doc["recommended"].get("id")
    panels = 2 if plan["fmax"] else 1
    fig, axes = plt.subplots(1, panels, figsize=(6.2 * panels, 4.8), squeeze=False, constrained_layout=True)
    ax = axes[0][0]
    families = sorted({r["family"] for r in pts})
    for n, fam in enumerate(families):
        rs = [r for r in pts if r["family"] == fam]
        x = [r["luts"] for r in rs]
        y = [r["loss_db"] for r in rs]
        lo = [max(r["loss_db"] - r["loss_db_ci95"][0], 0) if r["loss_db_ci95"] else 0 for r in rs]
        hi = [max(r["loss_db_ci95"][1] - r["loss_db"], 0) if r["loss_db_ci95"] else 0 for r in rs]
        ax.errorbar(x, y, yerr=[lo, hi], fmt="o", ms=4, color=f"C{n}", alpha=0.45, capsize=2,
                    label=f"{_FAMILY_TITLES.get(fam, fam)} candidates (95 %)")
    for n, fam in enumerate(families):                  # one front per family: LUTs of two fabrics do not compare
        fr = [r for r in front if r["family"] == fam]
        if fr:
            ax.step([r["luts"] for r in fr], [r["loss_db"] for r in fr], where="post", lw=1.0, zorder=3,
                    color="k" if len(families) == 1 else f"C{n}",
                    label="Pareto front" + ("" if len(families) == 1 else f" ({_FAMILY_TITLES.get(fam, fam)})"))
    if front:
        ax.plot([r["luts"] for r in front], [r["loss_db"] for r in front], "o", mfc="none", mec="k", ms=8, zorder=3)
        for r in front:
            ax.annotate(r["id"], (r["luts"], r["loss_db"]), textcoords="offset points", xytext=(5, 4), fontsize=7)
    ax.axhline(plan["budget_db"], color="C3", ls="--", lw=0.8, label=f"budget {plan['budget_db']:g} dB")
    best = [r for r in pts if r["id"] == rec]
    if best:
        ax.plot(best[0]["luts"], best[0]["loss_db"], "*", color="C3", ms=15, zorder=4, label=f"recommended {rec}")
    base = [r for r in pts if r["id"] == doc.get("base_id")]
    if base:
        ax.plot(base[0]["luts"], base[0]["loss_db"], "D", mfc="none", mec="C2", ms=10, mew=1.5, zorder=4,
                label=f"the base ({base[0]['id']})")
    if pts and max(r["loss_db"] for r in pts) > 20 * plan["budget_db"]:
        ax.set_yscale("symlog", linthresh=plan["budget_db"] / 10)
    ax.set_xlabel("LUTs (mapper + demapper)")
    ax.set_ylabel(f"implementation loss vs {_REFERENCE_TITLES[plan['loss_reference']]} (dB)")
    ax.set_title(f"{doc['design']}: {len(pts)} candidates measured, {len(front)} on the front")
    ax.legend(fontsize=7)
    if panels == 2:
        ax2 = axes[0][1]
        for n, fam in enumerate(families):
            rs = [r for r in pts if r["family"] == fam and r.get("fmax_mhz") is not None]
            ax2.plot([r["luts"] for r in rs], [r["fmax_mhz"] for r in rs], "o", ms=4, color=f"C{n}", alpha=0.45,
                     label=f"{_FAMILY_TITLES.get(fam, fam)} candidates")
        fr = [r for r in front if r.get("fmax_mhz") is not None]
        ax2.plot([r["luts"] for r in fr], [r["fmax_mhz"] for r in fr], "o", mfc="none", mec="k", ms=8,
                 label="on the loss front")
        for r in fr:
            ax2.annotate(r["id"], (r["luts"], r["fmax_mhz"]), textcoords="offset points", xytext=(5, 4), fontsize=7)
        if plan["clock_mhz"] is not None:
            ax2.axhline(plan["clock_mhz"], color="C3", ls="--", lw=0.8, label=f"clock {plan['clock_mhz']:g} MHz")
        if best and best[0].get("fmax_mhz") is not None:
            ax2.plot(best[0]["luts"], best[0]["fmax_mhz"], "*", color="C3", ms=15, zorder=4, label=f"recommended {rec}")
        if base and base[0].get("fmax_mhz") is not None:
            ax2.plot(base[0]["luts"], base[0]["fmax_mhz"], "D", mfc="none", mec="C2", ms=10, mew=1.5, zorder=4,
                     label=f"the base ({base[0]['id']})")
        ax2.set_xlabel("LUTs (mapper + demapper)")
        ax2.set_ylabel("Fmax of the slower module (MHz)")
        ax2.set_title("Fmax against LUTs")
        ax2.legend(fontsize=7)
    fig.savefig(path, metadata={"Software": None})      # no date or version metadata: same data, same bytes
    plt.close(fig)


def write(doc: dict[str, Any], report_dir: Path) -> dict[str, Path]:
    """report/explore.json, explore.md and explore.png, each written atomically; then report.md assembled again
    (report.rebuild_report: explore.md joins it as the section of explore.json)."""
    paths = {name: report_dir / name for name in ("explore.json", "explore.md", "explore.png")}
    with tempfile.TemporaryDirectory(prefix="qamsmith-explore-plot-") as tmp:
        png = Path(tmp) / "explore.png"
        plot(doc, png)
        data = png.read_bytes()
    write_file(paths["explore.json"], an.to_json(doc), key="report")
    write_file(paths["explore.md"], markdown(doc), key="report")
    write_file(paths["explore.png"], data, key="report")
    paths["report.md"] = rebuild_report(report_dir)
    return paths


__all__ = ["LOSS_RESOLUTION_DB", "LOSS_STEP_DB", "document", "dominates", "knob_effects", "loss_steps", "markdown",
           "measured", "need_matplotlib", "pareto_front", "plot", "recommend", "runner_up_text", "summary_lines", "write"]
