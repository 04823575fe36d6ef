"""Verilog generation: template context from a Design, rendered from templates/*.v.j2.

Python computes every number the templates use: the pipeline register plan, the width of
every internal signal (exact ranges over every input code, as `model._derive_widths` does),
the competitor and label case tables, the constant multiply of the `logic` mapper. The
templates only lay out structure.

Pipeline: a module is a chain of logical steps (see `mapper_steps` / `demapper_steps`);
`interface.*_stages = 0` puts one register after every step, N > 0 spreads N registers over
the steps (extra ones at the output). Every register stage has a valid bit. With
`interface.flow_control = "shared"` (the default) every stage loads on one enable,
ce = !valid_last | m_axis_tready: one gate from m_axis_tready to every clock enable, which is
what lets a deep pipeline reach the speed of its slowest step. With "per-stage" stage s loads
when it is empty or the stage after it loads (ce_s = !valid_s | ce_{s+1}), so empty stages
fill while the output waits, at the price of a chain of one OR gate per stage. Either way the
stream runs at one symbol per clock with any backpressure pattern and loses nothing;
s_axis_tready = ce_0, or, with `interface.skid`, a register of a two-entry skid buffer in
front of stage 0.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .errors import SpecError
from .fixed import bits_for_range, shift_round

#: the 2-D search's min trees grow with M; the constellation layer refuses more points
SEARCH_LIMIT = 256


# --------------------------------------------------------------------------- helpers


def vlit(value: int, width: int, signed: bool = True) -> str:
    """A sized Verilog literal: -12'sd5 (never 12'sd-5); unsigned values as 8'd5."""
    value = int(value)
    if signed:
        return f"-{width}'sd{-value}" if value < 0 else f"{width}'sd{value}"
    if value < 0:
        raise ValueError(f"unsigned literal of a negative value {value}")
    return f"{width}'d{value}"


def sext(x: str, width: int, to: int) -> str:
    """Sign-extend the identifier x of `width` bits to `to` bits (a Verilog expression)."""
    if to < width:
        raise ValueError(f"sext of {x} from {width} to {to} bits")
    return x if to == width else f"{{{{{to - width}{{{x}[{width - 1}]}}}}, {x}}}"


def zext(x: str, width: int, to: int) -> str:
    """Zero-extend the identifier x of `width` bits to `to` bits (a Verilog expression)."""
    if to < width:
        raise ValueError(f"zext of {x} from {width} to {to} bits")
    return x if to == width else f"{{{to - width}'d0, {x}}}"


def _env():
    from .emit import jinja_env  # the project's environment (filters vlit, vname)
    return jinja_env()


def _banner(design: Any, what: str) -> str:
    from .emit import banner
    return banner(design, what)


def place_registers(steps: int, stages: int) -> list[int]:
    """Registers after each of `steps` logical steps for `stages` (0: one per step).

    Returns a count per step; the last step always gets at least one (outputs come from
    flops), surplus registers go after the last step.
    """
    if steps < 1:
        raise ValueError("a module has at least one step")
    if stages == 0:
        return [1] * steps
    plan = [0] * steps
    if stages >= steps:
        plan = [1] * steps
        plan[-1] += stages - steps
        return plan
    for s in range(stages):
        plan[min(steps - 1, round((s + 1) * steps / stages) - 1)] += 1
    plan[-1] = max(plan[-1], 1)
    # collisions (several registers after one step) move to the next free boundary
    while sum(plan) > stages or any(p > 1 for p in plan[:-1]):
        for b, p in enumerate(plan[:-1]):
            if p > 1:
                plan[b] -= 1
                plan[b + 1] += 1
                break
        else:
            break
    return plan


@dataclass
class Step:
    """One logical step: what it computes (name -> (width, signed)) and what it reads."""

    name: str
    produces: dict[str, tuple[int, bool]]
    consumes: tuple[str, ...]
    #: per-step data the template lays out (adder-tree nodes of a product step)
    info: dict[str, Any] = field(default_factory=dict)
    #: filled by _pipeline: source name of every consumed signal, target name of every product
    inp: dict[str, str] = field(default_factory=dict)
    out: dict[str, str] = field(default_factory=dict)
    #: registers after this step, and the stage numbers they are
    regs: int = 0
    stages: list[int] = field(default_factory=list)
    #: per register: list of (signal name, width, source name, target name)
    banks: list[list[tuple[str, int, str, str]]] = field(default_factory=list)


def _pipeline(inputs: dict[str, tuple[int, bool]], steps: list[Step], outputs: tuple[str, ...],
              stages: int, carried: dict[str, tuple[int, bool]]) -> dict[str, Any]:
    """Names and register banks of every signal at every boundary.

    `carried` (tlast, tuser) travel alongside from the inputs to the outputs.
    """
    plan = place_registers(len(steps), stages)
    widths = dict(inputs)
    widths.update(carried)
    for st in steps:
        widths.update(st.produces)
    current = {name: f"in_{name}" for name in list(inputs) + list(carried)}
    stage = 0
    for b, st in enumerate(steps):
        st.regs = plan[b]
        for sig in st.consumes:
            st.inp[sig] = current[sig]
        for sig in st.produces:
            st.out[sig] = f"{sig}_{b}_next"
            current[sig] = st.out[sig]
        later = set(outputs) | set(carried)
        for nxt in steps[b + 1:]:
            later |= set(nxt.consumes)
        alive = [s for s in current if s in later]
        for r in range(st.regs):
            bank = []
            for sig in alive:
                dst = f"{sig}_s{stage}_reg"
                bank.append((sig, widths[sig][0], current[sig], dst))
                current[sig] = dst
            st.banks.append(bank)
            st.stages.append(stage)
            stage += 1
    return {"latency": stage, "final": {s: current[s] for s in list(outputs) + list(carried)},
            "plan": plan}


def _stages(design: Any, role: str, steps: list[Step]) -> int:
    """interface.<role>_stages, or the count timing.py chooses for interface.target_mhz."""
    if design.spec.interface.target_mhz > 0:
        from .timing import stages_for
        return stages_for(design, role, [st.name for st in steps])
    return getattr(design.spec.interface, f"{role}_stages")


def _carried(spec) -> dict[str, tuple[int, bool]]:
    i = spec.interface
    out: dict[str, tuple[int, bool]] = {}
    if i.tlast:
        out["tlast"] = (1, False)
    if i.tuser_width:
        out["tuser"] = (i.tuser_width, False)
    return out


def _label_slice(label_bits: tuple[int, ...], k: int) -> list[int]:
    """tdata bit positions of the axis label's bits, axis bit 0 (the index MSB) first."""
    return [k - 1 - b for b in label_bits]


# --------------------------------------------------------------------------- mapper


def level_multiply(levels: np.ndarray, width: int, max_shift: int = 40) -> tuple[int, int, int]:
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


def _mapper_context(design: Any) -> dict[str, Any]:
    spec = design.spec
    k = design.bits
    W = design.mapper_format.width
    m = spec.mapper
    const = design.constellation
    carried = _carried(spec)
    inputs = {"label": (k, False)}
    axes_ctx = []
    roms = []
    if const.axes is None:
        kind = "points"
        words = [((int(q) & ((1 << W) - 1)) << W) | (int(i) & ((1 << W) - 1))
                 for i, q in zip(design.point_i, design.point_q)]
        roms.append({"name": "points", "param": "ROM_POINTS_FILE", "file": "rom/mapper_points.hex",
                     "depth": const.order, "width": 2 * W, "index_bits": k,
                     "words": [vlit(w, 2 * W, False) for w in words]})
        steps = [Step("lookup", {"lvl_i": (W, True), "lvl_q": (W, True)}, ("label",))]
    else:
        kind = m.implementation
        for name, ax, lv in zip("iq", const.axes, design.level_codes):
            a: dict[str, Any] = {"name": name, "bits": ax.bits, "levels": ax.levels}
            if ax.bits:
                a["taps"] = _label_slice(ax.label_bits, k)
                if kind == "rom":
                    words = [int(lv[ax.index_of_code[c]]) for c in range(ax.levels)]
                    roms.append({"name": name, "param": f"ROM_{name.upper()}_FILE",
                                 "file": f"rom/mapper_{name}.hex", "depth": ax.levels, "width": W,
                                 "index_bits": ax.bits, "words": [vlit(w & ((1 << W) - 1), W, False) for w in words]})
                else:
                    mask = ax.gray_mask
                    a["gray"] = mask is not None and ax.codes != tuple(range(ax.levels))
                    a["mask"] = vlit(mask or 0, ax.bits, False)
                    c, kk, g = level_multiply(lv, W)
                    n = np.arange(ax.levels)
                    acc = n * c + kk
                    aw = max(bits_for_range(int(acc.min()), int(acc.max()))[0], g + W, ax.bits + 1)
                    aw = max(aw, bits_for_range(min(c, 0), max(c, 0))[0], bits_for_range(min(kk, 0), max(kk, 0))[0])
                    a.update(mul=vlit(c, aw), add=vlit(kk, aw), shift=g, acc_width=aw,
                             drop_low=g, drop_high=aw - g - W, index_ext=aw - ax.bits)
            else:
                a["zero"] = vlit(int(lv[0]), W)
            axes_ctx.append(a)
        if kind == "rom":
            steps = [Step("lookup", {"lvl_i": (W, True), "lvl_q": (W, True)}, ("label",))]
        else:
            steps = [Step("decode", {f"n_{a['name']}": (max(a["bits"], 1), False) for a in axes_ctx if a["bits"]},
                          ("label",)),
                     Step("level", {"lvl_i": (W, True), "lvl_q": (W, True)},
                          tuple(f"n_{a['name']}" for a in axes_ctx if a["bits"]))]
    pipe = _pipeline(inputs, steps, ("lvl_i", "lvl_q"), _stages(design, "mapper", steps), carried)
    return {"kind": kind, "k": k, "W": W, "axes": axes_ctx, "roms": roms, "steps": steps,
            "inline": m.rom_style == "inline", "pipe": pipe, "carried": carried}


# --------------------------------------------------------------------------- demapper


def _output_stage(design: Any, mag_width: int) -> dict[str, Any]:
    """Widths of the scale multiply, the rounding shift, the saturation and the sign."""
    d = design.spec.demapper
    sh = design.output_shift
    pw = design.widths["product"][0] if design.scale_format else mag_width
    pmax = (1 << pw) - 1
    lw = d.llr_width
    o: dict[str, Any] = {"pw": pw, "shift": sh, "rounding": d.rounding, "lw": lw,
                         "max": vlit((1 << (lw - 1)) - 1, lw - 1, False),
                         }
    if design.scale_format:
        o["sw"] = design.scale_format.width
    if sh <= 0:
        o["mode"] = "left"
        o["vw"] = pw - sh
    else:
        o["mode"] = d.rounding
        half = 0 if d.rounding == "floor" else (1 << (sh - 1))
        sumw = bits_for_range(0, pmax + half)[0]
        o["sumw"] = sumw
        o["half"] = vlit(max(half - (1 if d.rounding == "half-even" else 0), 0), sumw, False)
        o["odd"] = sh < pw
        vmax = int(shift_round(np.array([pmax]), sh, d.rounding)[0])
        o["vw"] = max(bits_for_range(0, vmax)[0], 1)
        o["empty"] = sumw <= sh  # every product rounds to zero
        if not o["empty"]:
            o["vw"] = sumw - sh
        # half-even: the added constant is 2^(sh-1) - 1 + p[sh], a mux of two constants by p[sh]
        o["half_val"] = max(half - (1 if d.rounding == "half-even" else 0), 0)
        o["half_odd"] = vlit(o["half_val"] + 1, sumw, False)
    o["sat"] = o["vw"] > lw - 1
    o["vext"] = (lw - 1) - o["vw"] if not o["sat"] else 0
    if o["sat"] and o["mode"] != "left" and not o["empty"]:
        # saturation compare in parallel with the rounding add: rsum >= 2^(lw-1+sh) <=> p >= thr
        top = 1 << (lw - 1 + sh)
        cw = pw + 1
        o["cw"] = cw
        # p >= thr is the carry out of p + (2^cw - thr): a constant add, no inverter in front
        o["thr"] = vlit((1 << cw) - min(top - o["half_val"], (1 << cw) - 1), cw + 1, False)
        o["thr_odd"] = vlit((1 << cw) - min(top - o["half_val"] - 1, (1 << cw) - 1), cw + 1, False)
    return o


def _demapper_context(design: Any) -> dict[str, Any]:
    from .model import decide  # the model's step, to size the residual exactly

    spec = design.spec
    d = spec.demapper
    k = design.bits
    W = d.input_width
    f = d.input_fraction
    ifmt = design.input_format
    alg = d.algorithm
    carried = _carried(spec)
    sw = design.scale_format.width if design.scale_format else 0
    inputs: dict[str, tuple[int, bool]] = {"y_i": (W, True), "y_q": (W, True)}
    if sw:
        inputs["scale"] = (sw, False)
    lw = d.llr_width
    out_w = k if alg == "hard" else k * lw
    y = np.arange(ifmt.min_code, ifmt.max_code + 1, dtype=np.int64)
    ctx: dict[str, Any] = {"k": k, "W": W, "f": f, "alg": alg, "sw": sw, "lw": lw, "out_w": out_w,
                           "carried": carried}
    steps: list[Step] = []
    fields: list[tuple[int, str]] = []  # (field index from the LSB, signal)
    if design.per_axis:
        ctx["kind"] = "axis"
        mw = design.widths["magnitude"][0]
        rw = design.widths["residual"][0] if "residual" in design.widths else W
        axes = []
        for name, ad in zip("iq", design.axes):
            ax = ad.axis
            L, m = ax.levels, ax.bits
            lo, hi = ifmt.min_code + (L << f), ifmt.max_code + (L << f)
            sumw = bits_for_range(lo, hi)[0]
            a: dict[str, Any] = {"name": name, "L": L, "m": m, "sumw": sumw,
                                 "ext": sumw - W, "over": sumw - 2 >= f + 1 + m,
                                 "maxn": vlit(L - 1, m, False),
                                 "codes": [vlit(c, m, False) for c in ax.codes],
                                 "label_bits": list(ax.label_bits)}
            ahw = bits_for_range(-((L - 1) << f), (L - 1) << f)[0]
            a.update(ahw=ahw, resw=rw, diffw=max(W, ahw) + 1)
            n_hat, e = decide(ad, y, f)
            if L != 1 << m:
                raise ValueError(f"axis of {L} levels with {m} bits: the decision slices need L = 2^m")
            s_all = y + (L << f)
            # decide without serial adders: the clamps are known from the input range
            a["clamp_lo"] = bool(np.any(s_all < 0))
            a["clamp_hi"] = bool(np.any((s_all >> (f + 1)) > L - 1))
            if a["clamp_hi"] and not a["over"]:
                raise ValueError("high clamp without overflow bits")
            a["cl"] = vlit((L - 1) << f, a["diffw"], False)
            dmask = (1 << a["diffw"]) - 1
            a["mcl"] = vlit((-((L - 1) << f)) & dmask, a["diffw"], False)
            hw = bits_for_range(ifmt.min_code - (L << f), ifmt.max_code - (L << f))[0]
            a["hw"] = hw
            a["mlc"] = vlit((-(L << f)) & ((1 << hw) - 1), hw, False)
            bits = []
            for j in range(m):
                b: dict[str, Any] = {"j": j, "label_bit": ax.label_bits[j], "id": f"{name}{j}"}
                if alg == "maxlog":
                    b.update(_maxlog_bit(ad, name, j, n_hat, e, f, rw, mw))
                elif alg == "folded":
                    b.update(inverted=ad.inverted[j], const=vlit((1 << (m - j)) << f, W + 1))
                bits.append(b)
                fields.append((k - 1 - ax.label_bits[j], f"llr_{name}{j}"))
            a["bits"] = bits
            axes.append(a)
        ctx["axes"] = axes
        ctx["unused_q"] = len(axes) < 2
        ctx["mw"] = mw
        names = [a["name"] for a in axes]
        if alg == "hard":
            steps += _decide_steps(axes, names, rw, f, with_residual=False)
            steps.append(Step("label", {"hard": (k, False)}, tuple(f"n_{n}" for n in names)))
        else:
            mags = {}
            for a in axes:
                for b in a["bits"]:
                    mags[f"mag_{a['name']}{b['j']}"] = (mw, False)
                    mags[f"neg_{a['name']}{b['j']}"] = (1, False)
            if alg == "maxlog":
                steps += _maxlog_steps(axes, names, rw, mw, f)
            else:
                steps.append(Step("fold", mags, tuple(f"y_{n}" for n in names)))
    else:
        ctx["kind"] = "search"
        ctx["unused_q"] = False
        pts = []
        lo_i, hi_i = ifmt.min_code, ifmt.max_code
        diw = 1
        for lab in range(design.constellation.order):
            ci, cq = int(design.search_i[lab]), int(design.search_q[lab])
            diw = max(diw, bits_for_range(lo_i - ci, hi_i - ci)[0], bits_for_range(lo_i - cq, hi_i - cq)[0])
            pts.append({"label": lab, "i": ci, "q": cq})
        dw = design.widths["distance"][0]
        xw = max(2 * diw, dw)
        for p in pts:
            p["ci"] = vlit(p["i"], xw)
            p["cq"] = vlit(p["q"], xw)
        ctx.update(points=pts, diw=diw, dw=dw, xw=xw, M=len(pts),
                   difw=design.widths.get("difference", bits_for_range(-(1 << dw), 1 << dw))[0],
                   mw=design.widths["magnitude"][0])
        lbits = [[lab for lab in range(len(pts)) if (lab >> (k - 1 - b)) & 1] for b in range(k)]
        ctx["trees"] = []
        for b in range(k):
            ones = lbits[b]
            zeros = [lab for lab in range(len(pts)) if lab not in ones]
            ctx["trees"].append({"b": b, "one": _tree(f"m1_{b}", ones), "zero": _tree(f"m0_{b}", zeros)})
        dist = {f"d_{p['label']}": (dw, False) for p in pts}
        steps.append(Step("distance", dist, ("y_i", "y_q")))
        if alg == "hard":
            ctx["argmin"] = _tree("am", list(range(len(pts))))
            steps.append(Step("argmin", {"hard": (k, False)}, tuple(dist)))
        else:
            mags = {}
            for b in range(k):
                mags[f"mag_{b}"] = (ctx["mw"], False)
                mags[f"neg_{b}"] = (1, False)
                fields.append((k - 1 - b, f"llr_{b}"))
            steps.append(Step("minimum", mags, tuple(dist)))
    if alg != "hard":
        mag_names = [n for st in steps for n in st.produces if n.startswith("mag_")]
        neg_names = [n for st in steps for n in st.produces if n.startswith("neg_")]
        ctx["out"] = _output_stage(design, ctx["mw"])
        ctx["llrs"] = [n[4:] for n in mag_names]
        if sw:
            steps.append(Step("scale", {f"p_{n}": (ctx["out"]["pw"], False) for n in ctx["llrs"]},
                              tuple(mag_names) + ("scale",)))
            src = tuple(f"p_{n}" for n in ctx["llrs"])
        else:
            src = tuple(mag_names)
        rnd: dict[str, tuple[int, bool]] = {}
        for n in ctx["llrs"]:
            rnd[f"v_{n}"] = (lw - 1, False)
            if ctx["out"]["sat"]:
                rnd[f"ovf_{n}"] = (1, False)
        steps.append(Step("round", rnd, src))
        steps.append(Step("sign", {f"llr_{n}": (lw, True) for n in ctx["llrs"]}, tuple(rnd) + tuple(neg_names)))
        outputs = tuple(f"llr_{n}" for n in ctx["llrs"])
    else:
        outputs = ("hard",)
    # mag/neg names above are per axis bit (i0..) or per label bit (0..); fields map them
    ctx["fields"] = sorted(fields, reverse=True)
    pipe = _pipeline(inputs, steps, outputs, _stages(design, "demapper", steps), carried)
    ctx.update(steps=steps, pipe=pipe, outputs=outputs)
    return ctx


def _maxlog_bit(ad: Any, name: str, j: int, n_hat: np.ndarray, e: np.ndarray, f: int, rw: int, mw: int) -> dict[str, Any]:
    """Competitor tables and the shift-add multiply of one axis bit: R = |dn| * u, u = |(dn << f) - e|.

    u = (|dn| << f) - sign(dn) * e >= 0, and R = sum of u << i over the bits i of |dn|. Bits of
    |dn| that are always 0 make no partial product; a bit that is always 1 takes u itself, the
    others a gated copy w_i = (|dn| bit i) ? u : 0, computed as (g_i ? dshp : 0) + (g_i ? (~)e : 0)
    with the gates applied one step earlier (no gate in front of an adder).
    Every width is the exact range over every input code (n_hat, e of the whole input range).
    """
    ax = ad.axis
    L, m = ax.levels, ax.bits
    ident = f"{name}{j}"
    comp = ad.competitor[j]
    table = comp if ad.uses_sign[j] else comp[:, :1]
    adn_t = np.abs(table)
    if np.any(adn_t == 0):
        raise ValueError("a competitor offset of zero levels")
    aw = max(int(adn_t.max()).bit_length(), 1)
    or_bits = int(np.bitwise_or.reduce(adn_t.ravel()))
    and_bits = int(np.bitwise_and.reduce(adn_t.ravel()))
    pos_t = table > 0
    dn = comp[n_hat, (e < 0).astype(np.int64)]
    adn = np.abs(dn)
    t = (dn << f) - e
    u = np.where(dn > 0, t, -t)
    if np.any(u < 0):
        raise ValueError("max-log metric with a negative distance term")
    uw = bits_for_range(0, int(u.max()))[0]
    key_w = m + 1 if ad.uses_sign[j] else m
    cols = (0, 1) if ad.uses_sign[j] else (0,)

    def cases(fn, width: int) -> list[tuple[str, str]]:
        out = []
        for n in range(L):
            for s in cols:
                k_ = vlit((n << 1) | s, m + 1, False) if ad.uses_sign[j] else vlit(n, m, False)
                out.append((k_, vlit(int(fn(int(comp[n, s]))), width, False)))
        return out

    def dshp(d: int) -> int:
        """(|dn| << f) + (dn > 0): with ~e in place of -e - 1, u = dshp + (dn > 0 ? ~e : e)."""
        return (abs(d) << f) + int(d > 0)

    dp_t = np.vectorize(dshp)(table)
    dpw = bits_for_range(0, int(dp_t.max()))[0]
    leaves = []
    for i in range(aw):
        if not (or_bits >> i) & 1:
            continue
        gated = not (and_bits >> i) & 1
        leaf: dict[str, Any] = {"i": i, "gated": gated, "src": f"w_{ident}_{i}" if gated else f"u_{ident}"}
        if gated:
            leaf["gate_cases"] = cases(lambda d, i=i: (abs(d) >> i) & 1, 1)
        leaves.append(leaf)
    need_u = any(not lf["gated"] for lf in leaves)
    adn_var = len({int(v) for v in adn_t.ravel()}) > 1
    pos_var = bool(pos_t.any() and not pos_t.all())
    # adder tree over the partial products u << i, one register per level
    vals = {("leaf", lf["i"]): ((adn >> lf["i"]) & 1) * (u << lf["i"]) for lf in leaves}
    level: list[tuple] = [("leaf", lf["i"]) for lf in leaves]
    tree: list[list[dict[str, Any]]] = []
    while len(level) > 1:
        ops, nxt = [], []
        for x in range(0, len(level), 2):
            args = level[x:x + 2]
            node = f"acc_{ident}_{len(tree)}_{x // 2}"
            v = sum(vals[a_] for a_ in args)
            vals[("node", node)] = v
            ops.append({"dst": node, "w": bits_for_range(0, int(np.max(v)))[0], "args": args, "root": False})
            nxt.append(("node", node))
        tree.append(ops)
        level = nxt
    out: dict[str, Any] = {
        "uses_sign": ad.uses_sign[j], "key_w": key_w, "aw": aw, "uw": uw,
        "xw": max(dpw, rw + 1) + 1, "dpw": dpw,
        "dp_var": need_u and len({int(v) for v in dp_t.ravel()}) > 1,
        "dp_reg": (need_u or any(lf["gated"] for lf in leaves)) and len({int(v) for v in dp_t.ravel()}) > 1, "dp_const_val": int(dp_t.ravel()[0]),
        "dp_cases": cases(dshp, dpw),
        "adn_var": adn_var,
        "adn_const": vlit(int(adn_t.ravel()[0]), aw, False), "adn_const_val": int(adn_t.ravel()[0]),
        "pos_var": pos_var, "pos_const": bool(pos_t.all()),
        "adn_cases": cases(abs, aw), "pos_cases": cases(lambda d: int(d > 0), 1), "tree": tree,
        "leaves": leaves, "leaf_by_i": {lf["i"]: lf for lf in leaves}, "depth": len(tree),
        "need_u": need_u, "se": need_u and (pos_var or bool(pos_t.all())),
        "pos_reg": pos_var and (need_u or any(lf["gated"] for lf in leaves)),
    }
    if tree:
        tree[-1][0]["root"] = True
        tree[-1][0]["w"] = mw
    else:
        if leaves[0]["gated"]:
            raise ValueError("a single gated partial product")
        out["single"] = leaves[0]["i"]
    return out


def _decide_steps(axes: list[dict[str, Any]], names: list[str], rw: int, f: int, with_residual: bool) -> list[Step]:
    """range (adders of y and constants, side by side) and decide (the clamp muxes, no adder)."""
    rng: dict[str, tuple[int, bool]] = {}
    dec: dict[str, tuple[int, bool]] = {}
    for a in axes:
        n = a["name"]
        if a["clamp_lo"]:
            rng[f"lo_{n}"] = (1, False)
        if a["clamp_hi"]:
            rng[f"hs_{n}"] = (1, False)
        rng[f"nm_{n}"] = (a["m"], False)
        dec[f"n_{n}"] = (a["m"], False)
        if with_residual:
            rng[f"yl_{n}"] = (f + 1, False)
            if a["clamp_lo"]:
                rng[f"elo_{n}"] = (rw, False)
            if a["clamp_hi"]:
                rng[f"ehi_{n}"] = (rw, False)
            dec[f"e_{n}"] = (rw, True)
    return [Step("range", rng, tuple(f"y_{n}" for n in names)), Step("decide", dec, tuple(rng))]


def _maxlog_steps(axes: list[dict[str, Any]], names: list[str], rw: int, mw: int, f: int) -> list[Step]:
    """range, decide, competitor, select, residual, product/accumulate (one per adder-tree level).

    Each is about one adder of the internal width or two LUT levels (see timing.step_delay).
    """
    steps = _decide_steps(axes, names, rw, f, with_residual=True)
    dec = steps[-1].produces
    comp: dict[str, tuple[int, bool]] = {}
    for a in axes:
        for b in a["bits"]:
            if b["dp_reg"]:
                comp[f"dp_{b['id']}"] = (b["dpw"], False)
            if b["pos_reg"]:
                comp[f"pos_{b['id']}"] = (1, False)
            for lf in b["leaves"]:
                if lf["gated"]:
                    comp[f"g_{b['id']}_{lf['i']}"] = (1, False)
            comp[f"neg_{b['id']}"] = (1, False)
    steps.append(Step("competitor", comp, tuple(dec)))
    sel: dict[str, tuple[int, bool]] = {}
    sel_in: list[str] = []
    for a in axes:
        for b in a["bits"]:
            if b["se"]:
                sel[f"se_{b['id']}"] = (rw + 1, True)
            for lf in b["leaves"]:
                if lf["gated"]:
                    sel[f"gs_{b['id']}_{lf['i']}"] = (rw + 1, True)
                    sel[f"ga_{b['id']}_{lf['i']}"] = (b["dpw"], False)
                    sel_in += [f"g_{b['id']}_{lf['i']}", f"dp_{b['id']}"]
            if b["pos_reg"]:
                sel_in.append(f"pos_{b['id']}")
    if sel:
        steps.append(Step("select", sel, tuple(dict.fromkeys(sel_in)) + tuple(f"e_{n}" for n in names)))
    res: dict[str, tuple[int, bool]] = {}
    res_in: list[str] = [f"e_{a['name']}" for a in axes
                         if any(b["need_u"] and not b["se"] for b in a["bits"])] + list(sel)
    for a in axes:
        for b in a["bits"]:
            if "single" in b:
                res[f"mag_{b['id']}"] = (mw, False)
            elif b["need_u"]:
                res[f"u_{b['id']}"] = (b["uw"], False)
            for lf in b["leaves"]:
                if lf["gated"]:
                    res[f"w_{b['id']}_{lf['i']}"] = (b["uw"], False)
            if b["dp_var"]:
                res_in.append(f"dp_{b['id']}")
    steps.append(Step("residual", res, tuple(res_in)))
    depth = max((b["depth"] for a in axes for b in a["bits"]), default=0)
    for lvl in range(depth):
        prod: dict[str, tuple[int, bool]] = {}
        cons: list[str] = []
        for a in axes:
            for b in a["bits"]:
                if lvl >= b["depth"]:
                    continue
                for op in b["tree"][lvl]:
                    prod[f"mag_{b['id']}" if op["root"] else op["dst"]] = (op["w"], False)
                    for arg in op["args"]:
                        cons.append(b["leaf_by_i"][arg[1]]["src"] if arg[0] == "leaf" else arg[1])
        steps.append(Step("product" if lvl == 0 else "accumulate", prod, tuple(dict.fromkeys(cons)),
                          info={"level": lvl}))
    return steps


def _tree(prefix: str, leaves: list[int]) -> dict[str, Any]:
    """A balanced min tree over labels: nodes (name, left, right) bottom-up, root name.

    Ties go to the left (lower label), so the argmin is the first label at the minimum.
    """
    level = [f"leaf{lab}" for lab in leaves]
    nodes = []
    count = 0
    while len(level) > 1:
        nxt = []
        for a in range(0, len(level) - 1, 2):
            name = f"{prefix}_{count}"
            count += 1
            nodes.append((name, level[a], level[a + 1]))
            nxt.append(name)
        if len(level) % 2:
            nxt.append(level[-1])
        level = nxt
    return {"nodes": nodes, "root": level[0], "leaves": leaves}


# --------------------------------------------------------------------------- public


def _ports(design: Any, role: str) -> list[dict[str, Any]]:
    spec = design.spec
    i = spec.interface
    if role == "mapper":
        s_w, m_w = design.bits, 2 * design.mapper_format.width
    else:
        d = spec.demapper
        s_w = 2 * d.input_width + (design.scale_format.width if design.scale_format else 0)
        m_w = design.bits if d.algorithm == "hard" else design.bits * d.llr_width
    ports = [{"name": "aclk", "dir": "input", "width": 1}, {"name": "aresetn", "dir": "input", "width": 1},
             {"name": "s_axis_tdata", "dir": "input", "width": s_w},
             {"name": "s_axis_tvalid", "dir": "input", "width": 1},
             {"name": "s_axis_tready", "dir": "output", "width": 1}]
    if i.tlast:
        ports.append({"name": "s_axis_tlast", "dir": "input", "width": 1})
    if i.tuser_width:
        ports.append({"name": "s_axis_tuser", "dir": "input", "width": i.tuser_width})
    ports += [{"name": "m_axis_tdata", "dir": "output", "width": m_w},
              {"name": "m_axis_tvalid", "dir": "output", "width": 1},
              {"name": "m_axis_tready", "dir": "input", "width": 1}]
    if i.tlast:
        ports.append({"name": "m_axis_tlast", "dir": "output", "width": 1})
    if i.tuser_width:
        ports.append({"name": "m_axis_tuser", "dir": "output", "width": i.tuser_width})
    return ports


def contexts(design: Any) -> dict[str, dict[str, Any]]:
    """Template contexts of both modules (also used by the tests)."""
    return {"mapper": _mapper_context(design), "demapper": _demapper_context(design)}


def manifest(design: Any) -> dict[str, Any]:
    """Manifest entries of the RTL: modules, ports, latency in cycles, pipeline plan, files."""
    p = design.spec.prefix
    ctx = contexts(design)
    out: dict[str, Any] = {"language": "Verilog-2001", "modules": {}, "files": []}
    for role in ("mapper", "demapper"):
        c = ctx[role]
        path = f"rtl/{p}_{role}.v"
        entry = {
            "module": f"{p}_{role}", "file": path, "ports": _ports(design, role),
            "latency": c["pipe"]["latency"], "initiation_interval": 1,
            "pipeline": [{"step": st.name, "registers": st.regs} for st in c["steps"]],
            "flow_control": design.spec.interface.flow_control,
            "tready": ("registered: a two-entry skid buffer at the input" if design.spec.interface.skid
                       else "combinational from m_axis_tready through one gate" if design.spec.interface.flow_control == "shared"
                       else "combinational from m_axis_tready through one OR gate per stage"),
        }
        if role == "mapper":
            entry["implementation"] = c["kind"]
            entry["parameters"] = {r["param"]: r["file"] for r in c["roms"]} if not c["inline"] or c["kind"] == "points" else {}
            if c["inline"]:
                entry["parameters"] = {}
            if c["kind"] == "logic":
                entry["level_multiply"] = {a["name"]: {"multiply": a["mul"], "add": a["add"], "shift": a["shift"]}
                                           for a in c["axes"] if a["bits"]}
        else:
            entry["algorithm"] = design.spec.demapper.algorithm
            entry["architecture"] = "per-axis" if c["kind"] == "axis" else f"2-D search over {c['M']} points"
            if design.scale_format:
                entry["scale"] = ("unsigned code in tdata above Q; LLR = rounded(metric x scale); "
                                  "scale 0 gives LLR 0, every code up to the maximum is exact (no range check needed)")
        out["modules"][role] = entry
        out["files"].append(path)
    return out


def files(design: Any) -> dict[str, str]:
    """Generated RTL files, relative path -> text."""
    env = _env()
    p = design.spec.prefix
    ctx = contexts(design)
    out = {}
    for role in ("mapper", "demapper"):
        c = dict(ctx[role])
        unused: list[str] = []
        ports = _ports(design, role)
        c.update(module=f"{p}_{role}", spec=design.spec, ports=ports, vlit=vlit, skid=design.spec.interface.skid,
                 shared_enable=design.spec.interface.flow_control == "shared",
                 s_width=next(pt["width"] for pt in ports if pt["name"] == "s_axis_tdata"),
                 sext=sext, zext=zext, unused=unused, keep=lambda expr: unused.append(expr) or "")
        body = env.get_template(f"{role}.v.j2").render(**c)
        out[f"rtl/{p}_{role}.v"] = _banner(design, f"{role} of design {design.spec.name}: synthesizable Verilog-2001") + body
    return out


__all__ = ["manifest", "files", "contexts", "place_registers", "level_multiply", "vlit"]
