"""The datapath IR: register plan, the meaning of each operation, and the builders against the model.

The evaluator runs a datapath with exactly the meaning the HDL back ends print; here every
builder's datapath is evaluated over every input code of each axis and compared with the
bit-exact model, so a builder can be wrong only where a simulator would also see it.
Two's-complement arithmetic modulo 2^w (common practice) is the outside reference of the
operation tests, written out with Python integers.
"""

from __future__ import annotations

import numpy as np
import pytest

from qamsmith.errors import SpecError
from qamsmith.ir import (OPERATIONS, Add, Bits, Builder, Compare, Concat, Const, Field, FlipIf, Gate, Logic, Lookup, Mul,
                         Mux, Reduce, Resize, Signal, Sub, design_modules, evaluate, level_multiply, output_words)
from qamsmith.ir.schedule import DEFAULT_SLACK, predicted_fmax, schedule, widest_adder_ns
from qamsmith.ir.timing import ICE40, op_delay
from qamsmith.ir.core import evaluate_op
from qamsmith.model import demap, derive, map_labels
from qamsmith.spec import DesignSpec

from matrix import user_table


def _ops_in_order(dp):
    return [a for a in dp.assigns()]


@pytest.mark.parametrize("order", [4, 64, 4096])
@pytest.mark.parametrize("alg", ["maxlog", "folded"])
def test_schedule_keeps_dependencies_and_the_budget(order: int, alg: str) -> None:
    d = derive(DesignSpec(name="t").with_settings({"constellation.order": order, "demapper.algorithm": alg}))
    dp = design_modules(d)["demapper"].datapath
    budget = DEFAULT_SLACK * widest_adder_ns(dp, ICE40)
    sched = schedule(dp, ICE40)
    for a in dp.assigns():
        for x in a.op.operands():
            if isinstance(x, (Signal, Bits)) and x.name in sched.stage_of:
                assert sched.stage_of[x.name] <= sched.stage_of[a.dst.name]
    slowest = max(op_delay(a.op, a.dst, ICE40) for a in dp.assigns())
    assert max(sched.delays_ns) <= max(budget, slowest) + 1e-9
    # the output word comes from the last register stage, every stage has logic
    assert all(sched.delays_ns)


@pytest.mark.parametrize("stages", [1, 2, 3, 5, 8])
def test_schedule_meets_a_stage_count(stages: int) -> None:
    d = derive(DesignSpec(name="t").with_settings({"constellation.order": 256}))
    dp = design_modules(d)["demapper"].datapath
    sched = schedule(dp, ICE40, stages=stages)
    assert sched.latency == stages
    if stages > 1:                              # more stages never predict a slower clock
        assert predicted_fmax(sched, ICE40) >= predicted_fmax(schedule(dp, ICE40, stages=stages - 1), ICE40)


@pytest.mark.parametrize("order", [2, 4, 16, 64, 256, 1024, 4096])
@pytest.mark.parametrize("scaling", ["normalized", "full-scale"])
@pytest.mark.parametrize("rounding", ["half-even", "half-away", "floor"])
def test_level_multiply_reproduces_every_level(order: int, scaling: str, rounding: str) -> None:
    d = derive(DesignSpec(name="t").with_settings({
        "constellation.order": order, "mapper.implementation": "logic", "mapper.scaling": scaling,
        "mapper.rounding": rounding, "mapper.width": 16, "mapper.fraction": 13}))
    for lv in d.level_codes:
        c, k, g = level_multiply(lv)
        n = np.arange(lv.size)
        assert np.array_equal((n * c + k) >> g, lv)


def test_level_multiply_refuses_non_linear_levels() -> None:
    # floor of a linear function has steps differing by at most one: 0, 5, 6 cannot be one
    with pytest.raises(SpecError, match=r"mapper\.implementation = 'logic'"):
        level_multiply(np.array([0, 5, 6]))


# --------------------------------------------------------------------------- meaning of the operations


def _twos(v: int, w: int, signed: bool) -> int:
    """v modulo 2^w read as a w-bit word (two's complement, common practice), with Python integers."""
    v &= (1 << w) - 1
    return v - (1 << w) if signed and v >> (w - 1) else v


A = Signal("a", 5, True, -16, 15)
B = Signal("b", 4, False, 0, 15)
C = Signal("c", 1, False, 0, 1)


@pytest.mark.parametrize("op,dst,ref", [
    (Add(A, B), (7, True), lambda a, b, c: a + b),
    (Sub(B, A), (6, True), lambda a, b, c: b - a),
    (Mul(A, B), (9, True), lambda a, b, c: a * b),
    (Mul(A, B), (4, False), lambda a, b, c: a * b),           # modulo 2^4
    (Resize(A), (8, True), lambda a, b, c: a),                 # sign extension
    (Resize(A), (3, False), lambda a, b, c: a),                # truncation
    (Resize(Bits(A, 4, 1)), (4, False), lambda a, b, c: (a & 31) >> 1),
    (Concat((C, B, Const(2, 2))), (7, False), lambda a, b, c: (c << 6) | (b << 2) | 2),
    (Mux(C, A, B), (6, True), lambda a, b, c: a if c else b),
    (Compare("lt", A, B), (1, False), lambda a, b, c: int(a < b)),
    (Compare("ge", A, Const(-3, 3, True)), (1, False), lambda a, b, c: int(a >= -3)),
    (Logic("xor", A, B), (6, True), lambda a, b, c: _twos(a, 6, True) ^ b),
    (Gate(C, A), (5, True), lambda a, b, c: a if c else 0),
    (FlipIf(C, A), (6, True), lambda a, b, c: ~a if c else a),
    (Reduce("xor", A), (1, False), lambda a, b, c: bin(a & 31).count("1") & 1),
    (Reduce("or", B), (1, False), lambda a, b, c: int(b != 0)),
    (Reduce("and", Bits(A, 2, 0)), (1, False), lambda a, b, c: int(a & 7 == 7)),
    (Lookup(B, (3, -2, 7)), (4, True), lambda a, b, c: [3, -2, 7][b] if b < 3 else 0),
], ids=lambda x: type(x).__name__ if not callable(x) and not isinstance(x, tuple) else "")
def test_operation_meaning(op, dst, ref) -> None:
    grid = [(a, b, c) for a in range(-16, 16) for b in range(16) for c in (0, 1)]
    av, bv, cv = (np.array(col, dtype=np.int64) for col in zip(*grid))
    args = [{"a": av, "b": bv, "c": cv}[x.name] if isinstance(x, (Signal, Bits)) else np.int64(x.value)
            for x in op.operands()]
    args = [(v >> x.lo) & ((1 << x.width) - 1) if isinstance(x, Bits) else v for x, v in zip(op.operands(), args)]
    got = evaluate_op(op, args, dst)
    want = [_twos(ref(a, b, c), *dst) for a, b, c in grid]
    assert got.tolist() == want


def test_the_operation_set_is_closed() -> None:
    assert {cls.__name__ for cls in OPERATIONS} == {"Resize", "Add", "Sub", "Mul", "Concat", "Mux", "Compare",
                                                    "Lookup", "Logic", "Gate", "FlipIf", "Reduce"}


def test_builder_sizes_from_values_and_refuses_dead_logic() -> None:
    b = Builder()
    y = b.input("y", 6, True, 0, domain="y", values=np.arange(-32, 32))
    b.step("s", "a step")
    s = b.add("s", y, 40)                     # y + 40 over every code: 8 .. 71, unsigned 7 bits
    assert (s.width, s.signed, s.lo, s.hi) == (7, False, 8, 71)
    w = b.add("w", y, 40, width=6, signed=True)   # modulo 2^6: the full signed range
    assert (w.width, w.signed) == (6, True)
    with pytest.raises(ValueError, match="never used: w"):
        b.build([Field(s, 0)], 7, 6)


# --------------------------------------------------------------------------- the builders against the model


def _words(design, out: np.ndarray) -> list[int]:
    w = 1 if design.spec.demapper.algorithm == "hard" else design.llr_format.width
    res = [0] * out.shape[0]
    for j in range(design.bits):
        res = [(r << w) | (int(v) & ((1 << w) - 1)) for r, v in zip(res, out[:, j])]
    return res


SETTINGS = [
    {},
    {"demapper.scale_width": 4, "demapper.scale_fraction": 2, "demapper.llr_width": 10, "demapper.rounding": "half-even",
     "mapper.implementation": "logic", "mapper.scaling": "full-scale"},
    {"demapper.input_fraction": 1, "demapper.input_width": 8, "demapper.llr_width": 5, "demapper.llr_fraction": 1,
     "demapper.rounding": "toward-zero", "mapper.tables": "inline"},
    {"demapper.llr_width": 12, "demapper.llr_fraction": 6},                      # an exact left shift
]


def _cases():
    for order in (2, 4, 16, 64, 256, 1024, 4096):
        for lab in ("gray", "3gpp-nr", "ieee-802.11", "natural", "table"):
            if lab == "table" and order > 64:
                continue
            for alg in ("maxlog", "folded", "hard"):
                for n, extra in enumerate(SETTINGS):
                    yield pytest.param(order, lab, alg, extra, id=f"qam{order}-{lab}-{alg}-s{n}")
    # odd-bit orders: rectangles of unequal axes (gray, natural) and Smith's cross ("cross": gray, shape cross)
    for order in (8, 32, 128, 2048):
        for lab in ("gray", "natural") + (("cross",) if order > 8 else ()):
            for alg in ("maxlog", "hard") + (("folded",) if lab == "gray" else ()):
                for n, extra in enumerate(SETTINGS):
                    if lab == "cross":          # a cross's mapper is a table of points (logic: refused, test_cross)
                        extra = {key: v for key, v in extra.items() if key != "mapper.implementation"}
                    yield pytest.param(order, lab, alg, extra, id=f"qam{order}-{lab}-{alg}-s{n}")


@pytest.mark.parametrize("order,labeling,alg,extra", list(_cases()))
def test_datapaths_equal_the_model(order: int, labeling: str, alg: str, extra: dict) -> None:
    """Every input code of each axis (the other axis random) and every label, through the evaluator."""
    settings = {"constellation.order": order, "constellation.labeling": labeling, "demapper.algorithm": alg, **extra}
    if labeling == "cross":
        settings.update({"constellation.labeling": "gray", "constellation.shape": "cross"})
    if labeling == "table":
        settings["constellation.table"] = [list(r) for r in user_table(order)]
    try:
        d = derive(DesignSpec(name="t").with_settings(settings))
        mods = design_modules(d)
    except SpecError:
        pytest.skip("the spec refuses this combination (asserted in test_sim)")
    dp = mods["mapper"].datapath
    labels = np.arange(d.constellation.order)
    i, q = map_labels(d, labels)
    w = d.mapper_format.width
    assert list(output_words(dp, evaluate(dp, {"lab": labels}))) == \
        [((int(b) & ((1 << w) - 1)) << w) | (int(a) & ((1 << w) - 1)) for a, b in zip(i, q)]
    dp = mods["demapper"].datapath
    fmt = d.input_format
    rng = np.random.default_rng(order)
    codes = d.input_codes
    if not d.per_axis and codes.size > 1024:
        codes = rng.choice(codes, 1024, replace=False)
    n = codes.size
    i = np.concatenate([codes, rng.integers(fmt.min_code, fmt.max_code + 1, n), [fmt.min_code, fmt.max_code]])
    q = np.concatenate([rng.integers(fmt.min_code, fmt.max_code + 1, n), codes, [fmt.min_code, fmt.max_code]])
    inputs = {"y_i": i, "y_q": q}
    s = None
    if d.scale_format is not None:
        s = rng.integers(0, d.scale_format.max_code + 1, i.size)
        s[::5] = d.scale_format.max_code
        s[1::7] = 0
        inputs["scale"] = s
    values = evaluate(dp, inputs)
    assert list(output_words(dp, values)) == _words(d, demap(d, i, q, s))
    # every signal stays inside the range (hence the width) it was declared with
    for sig in dp.signals():
        v = values[sig.name]
        assert sig.lo <= v.min() and v.max() <= sig.hi, sig


def test_steps_and_requested_latency() -> None:
    for alg, steps in (("maxlog", ["range", "decide", "competitor", "select", "residual", "product", "accumulate",
                                   "round", "sign"]),
                       ("folded", ["fold", "round", "sign"]), ("hard", ["range", "decide", "label"])):
        d = derive(DesignSpec(name="t").with_settings({"constellation.order": 64, "demapper.algorithm": alg}))
        m = design_modules(d)["demapper"]
        assert [st.name for st in m.datapath.steps] == steps
        d2 = derive(DesignSpec(name="t").with_settings({"constellation.order": 64, "demapper.algorithm": alg,
                                                        "interface.demapper_stages": 5}))
        assert design_modules(d2)["demapper"].latency == 5


@pytest.mark.parametrize("labeling", ["gray", "3gpp-nr"])
def test_two_levels_per_axis_is_a_rounding_and_a_saturation(labeling: str) -> None:
    """QPSK: the max-log LLR of each bit is +-y, so the demapper is one adder and a saturation (no decision,
    no competitor table) and the hard decision is y's sign bit."""
    d = derive(DesignSpec(name="t").with_settings({"constellation.order": 4, "constellation.labeling": labeling}))
    dp = design_modules(d)["demapper"].datapath
    assert [st.name for st in dp.steps] == ["round", "saturate"]
    assert sum(isinstance(a.op, (Add, Sub)) for a in dp.assigns()) == 2          # one adder per axis
    h = derive(DesignSpec(name="t").with_settings({"constellation.order": 4, "constellation.labeling": labeling,
                                                   "demapper.algorithm": "hard"}))
    assert design_modules(h)["demapper"].latency == 1
