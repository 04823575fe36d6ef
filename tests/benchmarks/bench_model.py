"""Model throughput benchmark: symbols/s of the bit-exact mapper and demappers per order, on one core.

    python tests/benchmarks/bench_model.py [--orders 4 16 256] [--chunk-log2 18] [--repeat 9] [--json out.json]

Steady state: each case is warmed up, then timed in `--repeat` samples (each at least 50 ms of
back-to-back calls on one chunk of symbols), and the median per call is reported (symbols per
second = chunk / median time). The chunk (2^18 symbols by default)
keeps the per-axis demapper tables in cache. In the same run the float exact log-MAP reference
(`model.llr_exact`, on a smaller chunk: it holds an N x sqrt(M) distance matrix per axis) is timed,
and the table gives the ratio maxlog / exact. Thread pools are limited to one thread and the process
is pinned to one CPU before numpy is imported. Not collected by pytest (file name bench_*.py).
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS"):
    os.environ[_var] = "1"

import argparse  # noqa: E402
import json  # noqa: E402
import platform  # noqa: E402
import statistics  # noqa: E402
import time  # noqa: E402
from typing import Callable  # noqa: E402

import numpy as np  # noqa: E402

from qamsmith import __version__  # noqa: E402
from qamsmith.model import demap, derive, llr_exact, map_bits, quantize_input  # noqa: E402
from qamsmith.spec import ConstellationSpec, DemapperSpec, DesignSpec  # noqa: E402

ORDERS = (4, 16, 64, 256, 1024, 4096)
TARGET = (256, "maxlog", 20e6)        # issue 2: bit-exact maxlog demap of 256-QAM >= 20 M symbols/s, one core


def _median_time(fn: Callable[[], object], repeat: int, min_sample: float = 0.05) -> float:
    """Median wall time of one fn() call in seconds: warm up, then `repeat` samples of >= min_sample s each."""
    t0 = time.perf_counter()
    fn()
    number = max(1, int(min_sample / max(time.perf_counter() - t0, 1e-9)))
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        for _ in range(number):
            fn()
        times.append((time.perf_counter() - t0) / number)
    return statistics.median(times)


def _spec(order: int, labeling: str, algorithm: str) -> DesignSpec:
    """The default widths (12-bit I/Q in and out, 8-bit LLRs) at this order."""
    return DesignSpec(name="bench", constellation=ConstellationSpec(order=order, labeling=labeling),
                      demapper=DemapperSpec(algorithm=algorithm))


def bench_order(order: int, labeling: str, chunk: int, exact_chunk: int, repeat: int, seed: int) -> dict:
    """Throughputs (symbols/s) of map_bits, demap (maxlog, folded, hard) and llr_exact at one order."""
    rng = np.random.default_rng(seed)
    designs = {alg: derive(_spec(order, labeling, alg)) for alg in ("maxlog", "folded", "hard")}
    d = designs["maxlog"]
    k = d.bits
    bits = rng.integers(0, 2, (chunk, k), dtype=np.int8)
    ci, cq = map_bits(d, bits)
    x = (ci + 1j * cq) * d.mapper_lsb
    n0 = 10 ** (-(3 * k + 3) / 10)                       # roughly the order's operating Es/N0
    y = x + (rng.standard_normal(chunk) + 1j * rng.standard_normal(chunk)) * np.sqrt(n0 / 2)
    i, q = quantize_input(d, y)
    ye = y[:exact_chunk]
    rates = {"map_bits": chunk / _median_time(lambda: map_bits(d, bits), repeat)}
    for alg, des in designs.items():
        rates[f"demap_{alg}"] = chunk / _median_time(lambda des=des: demap(des, i, q), repeat)
    rates["llr_exact"] = exact_chunk / _median_time(lambda: llr_exact(d, ye, n0), max(3, repeat // 3))
    rates["maxlog_over_exact"] = rates["demap_maxlog"] / rates["llr_exact"]
    return rates


def _cpu_model() -> str:
    try:
        with open("/proc/cpuinfo", encoding="utf-8") as fh:
            for line in fh:
                if line.startswith("model name"):
                    return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or "unknown"


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--orders", type=int, nargs="+", default=list(ORDERS), help="orders to measure")
    ap.add_argument("--labeling", default="gray", help="labeling (default gray)")
    ap.add_argument("--chunk-log2", type=int, default=18, help="symbols per timed call, log2 (default 18)")
    ap.add_argument("--exact-chunk-log2", type=int, default=14, help="symbols per llr_exact call, log2 (default 14)")
    ap.add_argument("--repeat", type=int, default=9, help="timed calls per case; the median is reported")
    ap.add_argument("--cpu", type=int, default=None, help="CPU to pin to (default: the first one allowed)")
    ap.add_argument("--seed", type=int, default=2026)
    ap.add_argument("--json", default=None, help="also write the figures to this JSON file")
    args = ap.parse_args(argv)

    pinned = None
    if hasattr(os, "sched_setaffinity"):
        cpu = args.cpu if args.cpu is not None else min(os.sched_getaffinity(0))
        os.sched_setaffinity(0, {cpu})
        pinned = cpu
    chunk, exact_chunk = 1 << args.chunk_log2, 1 << args.exact_chunk_log2
    print(f"qamsmith {__version__}, numpy {np.__version__}, Python {platform.python_version()}")
    print(f"CPU: {_cpu_model()} (pinned to CPU {pinned}, 1 thread)")
    print(f"labeling {args.labeling}; chunk {chunk} symbols (llr_exact: {exact_chunk}); median of {args.repeat} samples")
    print("default widths: 12-bit I/Q in and out, input fraction 4, 8-bit LLRs\n")
    cols = ("map_bits", "demap_maxlog", "demap_folded", "demap_hard", "llr_exact")
    print(f"{'order':>6} " + " ".join(f"{c:>13}" for c in cols) + f" {'maxlog/exact':>13}")
    print(f"{'':>6} " + " ".join(f"{'Msym/s':>13}" for _ in cols))
    results = {}
    for order in args.orders:
        r = bench_order(order, args.labeling, chunk, exact_chunk, args.repeat, args.seed + order)
        results[str(order)] = r
        print(f"{order:>6} " + " ".join(f"{r[c] / 1e6:>13.2f}" for c in cols) + f" {r['maxlog_over_exact']:>12.0f}x")
    order, alg, target = TARGET
    verdict = None
    if str(order) in results:
        got = results[str(order)][f"demap_{alg}"]
        verdict = got >= target
        print(f"\ntarget: {alg} demap of {order}-QAM >= {target / 1e6:.0f} M symbols/s on one core: "
              f"{got / 1e6:.1f} M symbols/s, {'met' if verdict else 'MISSED'}")
    if args.json:
        doc = {"qamsmith": __version__, "numpy": np.__version__, "python": platform.python_version(),
               "cpu": _cpu_model(), "pinned_cpu": pinned, "labeling": args.labeling, "chunk": chunk,
               "exact_chunk": exact_chunk, "repeat": args.repeat, "symbols_per_s": results,
               "target_met": verdict}
        with open(args.json, "w", encoding="utf-8") as fh:
            json.dump(doc, fh, indent=2, sort_keys=True)
            fh.write("\n")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
