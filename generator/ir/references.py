"""Reference modules of the cost flow, never part of a design: a brute-force demapper and a bare adder.

* brute force: per axis, the distance |y - c_n| to every level; per label bit the minimum over
  the levels carrying 1 and over those carrying 0; D = min1^2 - min0^2 = (min1 - min0)(min1 + min0)
  in input codes squared, so D / 2^(f+2) is the maxlog demapper's metric R; then the same output
  stage. What a straightforward design costs, to compare the per-axis maxlog demapper with.
  A cross (no per-axis structure): the squared distance to every point (the squares of y - c shared
  per coordinate), per label bit the two minima, D = min1 - min0, R = D / 2^(f+2), the same output stage.
* bare adder: a registered adder of the demapper's widest adder word: the fabric's speed limit
  for such a word, to compare every module's Fmax with.
"""

from __future__ import annotations

import numpy as np

from ..model import Design
from .build import Builder
from .core import Add, Compare, Field, Signal, Sub
from .demapper import SoftBit, min_tree, output_stage
from .module import Module, Port, sideband, stream_ports
from .schedule import schedule
from .timing import ICE40

#: register stages of the brute-force reference (distances and minima, then the output stage)
BRUTEFORCE_STAGES = 2


def widest_adder(module: Module) -> int:
    """Width (bits) of the widest adder, subtractor or compare of a module's datapath."""
    widths = [max(a.dst.width, *(x.width for x in a.op.operands())) for a in module.datapath.assigns()
              if isinstance(a.op, (Add, Sub, Compare))]
    return max(widths, default=module.datapath.in_width)


def adder_module(name: str, width: int) -> Module:
    """A bare registered adder of `width` bits: s = a + b, input word {b, a}, no handshake."""
    b = Builder()
    a_ = b.input("a", width, False, 0, doc="operand a")
    b_ = b.input("b", width, False, width, doc="operand b")
    b.step("add", f"a {width}-bit adder")
    s = b.add("s", a_, b_, width=width, signed=False)
    dp = b.build([Field(s, 0, "sum")], width, 2 * width)
    ports = (Port("aclk", "input", 1, "clock and reset"), Port("s_axis_tdata", "input", 2 * width, "sink"),
             Port("m_axis_tdata", "output", width, "source"))
    return Module(name=name, role="reference", summary=(
        f"Reference for the Fmax estimate: a bare registered {width}-bit adder, the widest adder word of",
        "the demapper. Generated only for comparison; never part of a design."),
        datapath=dp, schedule=schedule(dp, ICE40, stages=1), ports=ports, handshake=False)


def bruteforce_module(design: Design, name: str) -> Module:
    """The brute-force max-log demapper at the design's widths (soft output): per axis for a product labeling,
    over every point in 2-D for a cross."""
    if design.cross is not None:
        return _bruteforce_2d(design, name)
    if not design.per_axis:
        raise ValueError("a brute-force reference needs a product labeling or a cross")
    d = design.spec.demapper
    W, f, k, lw = d.input_width, d.input_fraction, design.bits, d.llr_width
    sw = design.scale_format.width if design.scale_format else 0
    b = Builder()
    codes = design.input_codes
    ys = [b.input(f"y_{c}", W, True, n * W, domain=c, values=codes) for n, c in enumerate("iq"[:len(design.axes)])]
    scale = b.input("scale", sw, False, 2 * W, domain="scale", values=np.arange(1 << sw)) if sw else None
    b.step("distance", "per axis: the distance |y - c_n| to every level")
    dists = []
    for y, ad in zip(ys, design.axes):
        c = y.name[-1]
        row = []
        for n, code in enumerate(ad.level_input_codes):
            diff = b.sub(f"diff_{c}{n}", y, code)
            neg = b.sub(f"ndiff_{c}{n}", 0, diff)
            row.append(b.mux(f"dist_{c}{n}", diff.msb, neg, diff))
        dists.append(row)
    b.step("minimum", "per label bit: the nearest level carrying 1 and the nearest carrying 0")
    minima = []
    for y, ad, row in zip(ys, design.axes, dists):
        c = y.name[-1]
        for j, lb in enumerate(ad.axis.label_bits):
            bit = ad.label_bit_of_level(j)
            m1, _ = min_tree(b, f"min1_{lb}", [(row[n], n) for n in range(ad.levels) if bit[n]])
            m0, _ = min_tree(b, f"min0_{lb}", [(row[n], n) for n in range(ad.levels) if not bit[n]])
            minima.append((c, lb, m1, m0))
    b.step("metric", f"D = (min1 - min0)(min1 + min0); R = |D| / 2^{f + 2}")
    llrs = []
    for c, lb, m1, m0 in minima:
        neg = b.compare(f"neg_{lb}", "lt", m1, m0)
        d10 = b.sub(f"d10_{lb}", m1, m0)
        d01 = b.sub(f"d01_{lb}", m0, m1)
        dd = b.mux(f"dd_{lb}", neg, d01, d10)
        ds = b.add(f"ds_{lb}", m1, m0)
        dm = b.mul(f"dm_{lb}", dd, ds)
        values = b.values(dm)
        if values is not None and np.any(values % (1 << (f + 2))):
            raise ValueError("the brute-force metric is not a multiple of 2^(f+2)")
        mag = b.resize(f"mag_{lb}", dm[dm.width - 1:f + 2], dm.width - f - 2, False)
        llrs.append(SoftBit(str(lb), mag, neg, (k - 1 - lb) * lw))
    return _reference_demapper(b, design, name, llrs, scale, (
        "Reference brute-force max-log demapper, generated only for the hardware comparison: per axis",
        "the distance to every level, two minima per axis bit, D = min1^2 - min0^2, then the same output stage",
        "at the same widths. Never part of a design."))


def _reference_demapper(b: Builder, design: Design, name: str, llrs: list[SoftBit], scale: Signal | None,
                        summary: tuple[str, ...]) -> Module:
    """A brute-force reference from its soft bits: the design's output stage, its stream ports and sideband."""
    d, i = design.spec.demapper, design.spec.interface
    sw = design.scale_format.width if design.scale_format else 0
    outs = output_stage(b, design.output_stage, llrs, scale, d.llr_width)
    dp = b.build([Field(s, lsb) for s, lsb in outs], design.bits * d.llr_width, 2 * d.input_width + sw)
    return Module(name=name, role="reference", summary=summary, datapath=dp,
                  schedule=schedule(dp, ICE40, stages=BRUTEFORCE_STAGES, carried=sideband(i.tlast, i.tuser_width)),
                  ports=stream_ports(dp.in_width, dp.out_width, i.tlast, i.tuser_width))


__all__ = ["BRUTEFORCE_STAGES", "adder_module", "bruteforce_module", "widest_adder"]


def _bruteforce_2d(design: Design, name: str) -> Module:
    """The brute-force 2-D max-log demapper of a cross: every point's squared distance, two minima per bit."""
    d = design.spec.demapper
    W, f, k, lw = d.input_width, d.input_fraction, design.bits, d.llr_width
    sw = design.scale_format.width if design.scale_format else 0
    b = Builder()
    codes = design.input_codes
    yi = b.input("y_i", W, True, 0, domain="i", values=codes)
    yq = b.input("y_q", W, True, W, domain="q", values=codes)
    scale = b.input("scale", sw, False, 2 * W, domain="scale", values=np.arange(1 << sw)) if sw else None
    b.step("distance", "per coordinate (y - c)^2, shared by the points on it; per point the sum, in input codes squared")
    squares = {}
    for y, coords in ((yi, design.search_i), (yq, design.search_q)):
        c = y.name[-1]
        for code in sorted(set(int(v) for v in coords)):
            tag = f"{c}{'m' if code < 0 else 'p'}{abs(code)}"
            diff = b.sub(f"diff_{tag}", y, code)
            squares[(c, code)] = b.mul(f"sq_{tag}", diff, diff)
    dist = [b.add(f"d_{lab}", squares[("i", int(ci))], squares[("q", int(cq))], note=f"point {lab} at ({ci}, {cq})")
            for lab, (ci, cq) in enumerate(zip(design.search_i, design.search_q))]
    b.step("minimum", "per label bit: the nearest point carrying 1 and the nearest carrying 0")
    minima = []
    for bit in range(k):
        ones = [(dist[lab], lab) for lab in range(len(dist)) if (lab >> (k - 1 - bit)) & 1]
        zeros = [(dist[lab], lab) for lab in range(len(dist)) if not (lab >> (k - 1 - bit)) & 1]
        minima.append((bit, min_tree(b, f"min1_{bit}", ones)[0], min_tree(b, f"min0_{bit}", zeros)[0]))
    b.step("metric", f"D = min1 - min0 in input codes squared; R = |D| / 2^{f + 2}")
    llrs = []
    for bit, m1, m0 in minima:
        dif = b.sub(f"dif_{bit}", m1, m0)
        neg = b.resize(f"neg_{bit}", dif.msb, 1, False)
        nd = b.sub(f"nd_{bit}", m0, m1)
        top = max(abs(dif.lo), abs(dif.hi))
        full = b.mux(f"abs_{bit}", neg, nd, dif, width=max(top.bit_length(), f + 3), signed=False)
        mag = b.resize(f"mag_{bit}", full[full.width - 1:f + 2], full.width - f - 2, False)
        llrs.append(SoftBit(str(bit), mag, neg, (k - 1 - bit) * lw))
    return _reference_demapper(b, design, name, llrs, scale, (
        "Reference brute-force 2-D max-log demapper of a cross, generated only for the hardware comparison: the",
        "squared distance to every point, two minima per label bit, D = min1 - min0, then the same output stage",
        "at the same widths. Never part of a design."))

