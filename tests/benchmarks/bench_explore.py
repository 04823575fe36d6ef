"""`qamsmith explore` on one machine: --jobs 1 against the embedded Dask LocalCluster, then a cached re-run
(a script, not collected by pytest).

    python tests/benchmarks/bench_explore.py                 # 24 candidates of a 64-QAM design on iCE40
    python tests/benchmarks/bench_explore.py --workers 4     # the local cluster's size (default: one per core)

The sweep: a 64-QAM gray design (maxlog, input fraction 4, iCE40 with nextpnr for Fmax) over
demapper.llr_width 4, 5, 6, 8 x demapper.algorithm maxlog, folded x demapper.input_width 9, 10, 12
(24 candidates, default Monte-Carlo size and seed). Three runs of the real command, each a fresh
process, timed by wall clock: (1) --jobs 1 with an empty cache, (2) the local cluster with another
empty cache, (3) run 2 again (everything cached). The first two must write the same explore.json.
The machine may be shared: the load average before and after each run is printed beside it, the
CPU seconds the run's own processes used (so "cores busy" below 1 for --jobs 1, or below the worker
count for the cluster, means other work took the cores), and before and after the runs the parallel
capacity the machine offers: how much faster N copies of a fixed CPU-bound job finish together than
one after another (N on an idle machine with N cores).
"""

from __future__ import annotations

import argparse
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

SPEC = """name = "bench-qam64"

[constellation]
order = 64
labeling = "gray"

[demapper]
algorithm = "maxlog"
input_width = 10
input_fraction = 4
llr_width = 6
llr_fraction = 2

[interface]
family = "ice40"
"""
AXES = ["--axis", "demapper.llr_width=4,5,6,8", "--axis", "demapper.algorithm=maxlog,folded",
        "--axis", "demapper.input_width=9,10,12"]


def _load() -> str:
    one, five, _ = os.getloadavg()
    return f"load {one:.2f} (1 min), {five:.2f} (5 min)"


#: a fixed CPU-bound job (pure Python, a few seconds) for the machine's parallel capacity
_PROBE = [sys.executable, "-c", "s = 0\nfor i in range(30_000_000):\n    s += i * i\n"]


def capacity(n: int) -> float:
    """How much faster n copies of a fixed CPU-bound job finish run at once than one after another (n: ideal)."""
    start = time.monotonic()
    subprocess.run(_PROBE, check=True)
    alone = time.monotonic() - start
    start = time.monotonic()
    procs = [subprocess.Popen(_PROBE) for _ in range(n)]
    for proc in procs:
        proc.wait()
    return n * alone / (time.monotonic() - start)


def _cpu() -> float:
    """CPU seconds (user + system) of the finished child processes and everything they waited for: the command,
    its Dask workers, their Yosys and nextpnr runs."""
    ru = resource.getrusage(resource.RUSAGE_CHILDREN)
    return ru.ru_utime + ru.ru_stime


def _run(label: str, argv: list[str]) -> float:
    before, cpu0 = _load(), _cpu()
    start = time.monotonic()
    res = subprocess.run([sys.executable, "-m", "qamsmith", *argv], capture_output=True, text=True)
    took = time.monotonic() - start
    cpu = _cpu() - cpu0
    if res.returncode != 0:
        sys.exit(f"{label} failed ({res.returncode}):\n{res.stderr}")
    summary = [ln for ln in res.stdout.splitlines() if ln.startswith("qamsmith: ") and "candidates" in ln]
    print(f"{label:<24} wall {took:7.1f} s, CPU {cpu:7.1f} s ({cpu / took:.2f} cores busy on average)   "
          f"[{before}; after: {_load()}]")
    print(f"{'':<24} {summary[0] if summary else ''}")
    return took


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--workers", type=int, default=None, help="local cluster workers (default: one per core)")
    args = ap.parse_args()
    cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count()
    print(f"bench_explore: 24 candidates, 64-QAM on iCE40 (Yosys + nextpnr-ice40), {cores} cores, "
          f"local cluster of {args.workers or cores} workers")
    workers = args.workers or cores
    before = capacity(workers)
    print(f"parallel capacity before: {workers} copies of a fixed CPU-bound job run {before:.2f}x faster together "
          f"than one after another ({workers:.2f}x on an idle machine)")
    with tempfile.TemporaryDirectory(prefix="qamsmith-bench-explore-") as tmp:
        root = Path(tmp)
        spec = root / "bench-qam64.toml"
        spec.write_text(SPEC)
        common = ["explore", str(spec), *AXES, "--quiet"]
        serial = _run("--jobs 1", [*common, "--jobs", "1", "--out", str(root / "serial"),
                                   "--cache", str(root / "cache-serial")])
        cluster_args = [*common, "--out", str(root / "cluster"), "--cache", str(root / "cache-cluster")]
        if args.workers:
            cluster_args += ["--jobs", str(args.workers)]
        cluster = _run("local cluster", cluster_args)
        cached = _run("local cluster, cached", cluster_args)
        same = ((root / "serial/bench-qam64/report/explore.json").read_bytes()
                == (root / "cluster/bench-qam64/report/explore.json").read_bytes())
    after = capacity(workers)
    print(f"parallel capacity after: {after:.2f}x")
    print(f"speed-up of the local cluster over --jobs 1: {serial / cluster:.2f}x (target >= 1.8x on 2 cores; the "
          f"machine offered {before:.2f}x before and {after:.2f}x after)")
    print(f"cached re-run: {cached:.2f} s = {100 * cached / cluster:.1f} % of the local cluster's first run, "
          f"{100 * cached / serial:.1f} % of the --jobs 1 run (target < 5 %)")
    print(f"explore.json of --jobs 1 and of the local cluster identical: {same}")
    return 0 if same else 1


if __name__ == "__main__":
    sys.exit(main())
