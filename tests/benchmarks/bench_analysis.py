"""Monte-Carlo engine benchmark: symbols/s of the analysis chain per order, one core.

    python tests/benchmarks/bench_analysis.py [--orders 16 64 256] [--symbols 1000000] [--repeat 3]
                                              [--sweep-points 10] [--json out.json]

Per order, at an Es/N0 near the operating point (float exact GMI ~ 90 % of log2 M), times
`Chain.run` on `--symbols` symbols (all chunks, all 16 batches, histograms and the GMI factor
search included) in two modes:

* fixed: labels, fixed-point mapping (`model.map_labels` tables), noise, input quantization,
  bit-exact demapping (`model.demap`), hard decisions (BER) and the GMI of the LLR codes;
* full: the same plus float max-log and float exact log-MAP LLRs and their GMI (what
  `qamsmith analyze` runs at each point).

It also times a 10-point sweep of 10^6 symbols per point (full mode) of 64-QAM and reports the
peak resident memory. Best of `--repeat` runs, as wall time and as this process's CPU time (the two differ when
other work shares the machine). Thread pools are limited to one thread and the
process is pinned to one CPU before numpy is imported. Not collected by pytest (file name bench_*).
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS"):
    os.environ[_var] = "1"
if hasattr(os, "sched_setaffinity"):
    try:
        os.sched_setaffinity(0, {sorted(os.sched_getaffinity(0))[0]})
    except OSError:
        pass

import argparse  # noqa: E402
import json  # noqa: E402
import platform  # noqa: E402
import resource  # noqa: E402
import subprocess  # noqa: E402
import time  # noqa: E402

from qamsmith import __version__  # noqa: E402
from qamsmith.flows import analysis as an  # noqa: E402
from qamsmith.model import derive  # noqa: E402
from qamsmith.spec import ConstellationSpec, DesignSpec  # noqa: E402

#: Es/N0 (dB) near the default operating point of each order (float exact GMI ~ 0.9 log2 M)
OPERATING = {4: 5.8, 16: 12.1, 64: 17.7, 256: 23.2, 1024: 28.9, 4096: 34.6}
TARGET = (64, "fixed", 5e6)         # issue 4: >= 5 M symbols/s for 64-QAM incl. mapping, noise, demap, GMI


def _cpu() -> str:
    try:
        out = subprocess.run(["lscpu"], capture_output=True, text=True, check=False).stdout
        for line in out.splitlines():
            if line.startswith("Model name:"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or "unknown"


def _best(fn, repeat: int) -> tuple[float, float]:
    """Best wall time and best CPU time (this process, one thread) of fn() over `repeat` runs, seconds."""
    fn()                                           # warm-up (tables, caches)
    wall, cpu = [], []
    for _ in range(repeat):
        t0, c0 = time.perf_counter(), time.process_time()
        fn()
        wall.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
    return min(wall), min(cpu)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--orders", type=int, nargs="+", default=[4, 16, 64, 256, 1024])
    ap.add_argument("--symbols", type=int, default=1_000_000)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--sweep-points", type=int, default=10)
    ap.add_argument("--json", metavar="FILE")
    args = ap.parse_args()
    rows = []
    print(f"qamsmith {__version__}, numpy engine, one core; CPU: {_cpu()}; {time.strftime('%Y-%m-%d')}")
    print(f"load average before: {os.getloadavg()[0]:.2f} (CPU-time figures are those of this process alone)")
    print(f"{'order':>6} {'Es/N0':>6} {'fixed Msym/s':>13} {'(cpu)':>7} {'full Msym/s':>12} {'(cpu)':>7}")
    for order in args.orders:
        design = derive(DesignSpec(name="bench", constellation=ConstellationSpec(order=order)))
        chain = an.Chain(design)
        s = OPERATING.get(order, 20.0)
        t_fixed, c_fixed = _best(lambda: chain.run(s, args.symbols, 1, floats=False), args.repeat)
        t_full, c_full = _best(lambda: chain.run(s, args.symbols, 1), args.repeat)
        n = args.symbols
        row = {"order": order, "esn0_db": s, "symbols": n,
               "fixed_symbols_per_s": n / t_fixed, "full_symbols_per_s": n / t_full,
               "fixed_symbols_per_cpu_s": n / c_fixed, "full_symbols_per_cpu_s": n / c_full}
        rows.append(row)
        print(f"{order:>6} {s:>6.1f} {n / t_fixed / 1e6:>13.2f} {n / c_fixed / 1e6:>7.2f} "
              f"{n / t_full / 1e6:>12.2f} {n / c_full / 1e6:>7.2f}")
    design = derive(DesignSpec(name="bench", constellation=ConstellationSpec(order=64)))
    points = [10.0 + i for i in range(args.sweep_points)]
    t0, c0 = time.perf_counter(), time.process_time()
    an.sweep(design, points, 1_000_000, 1)
    t_sweep, c_sweep = time.perf_counter() - t0, time.process_time() - c0
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    print(f"64-QAM sweep of {len(points)} points x 10^6 symbols (full mode): {t_sweep:.1f} s wall, "
          f"{c_sweep:.1f} s CPU; "
          f"peak RSS {peak_mb:.0f} MB")
    order, mode, need = TARGET
    got = next((r for r in rows if r["order"] == order), None)
    if got is not None:
        wall, cpu = got[f"{mode}_symbols_per_s"], got[f"{mode}_symbols_per_cpu_s"]
        print(f"target: {order}-QAM {mode} >= {need / 1e6:.0f} M symbols/s: {wall / 1e6:.2f} M wall, "
              f"{cpu / 1e6:.2f} M per CPU second ({'met' if max(wall, cpu) >= need else 'NOT met'})")
    if args.json:
        with open(args.json, "w", encoding="utf-8") as fh:
            json.dump({"cpu": _cpu(), "date": time.strftime("%Y-%m-%d"), "rows": rows, "sweep_seconds": t_sweep,
                       "sweep_points": len(points), "peak_rss_mb": peak_mb}, fh, indent=2, sort_keys=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
