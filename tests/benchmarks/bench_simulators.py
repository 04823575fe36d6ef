"""Simulation throughput of the generated testbenches: Icarus, Verilator and GHDL on the same stimulus.

Each design is generated in both languages; the three simulators run the same words (vectors/ plus
random words, the same gaps and backpressure settings) through the Verilog harness (Icarus through
plain vvp, Verilator as a cached binary) and the VHDL testbench (GHDL). The figure is words compared
per second of simulation (compile and build time apart). Ratios are within one run: the machines
are shared and noisy.

    python tests/benchmarks/bench_simulators.py [--words 20000] [--designs NAME ...]
"""

from __future__ import annotations

import argparse
import platform
import tempfile
import time
from pathlib import Path

from qamsmith import write_design
from qamsmith.flows import verify
from qamsmith.spec import DesignSpec, examples

#: the built-in examples, and a 4096-QAM design (the largest order)
DESIGNS = [*sorted(examples()), "qam4096"]


def _spec(name: str) -> DesignSpec:
    if name == "qam4096":
        return DesignSpec(name="bench-qam4096").with_settings({"constellation.order": 4096})
    return DesignSpec.from_toml(examples()[name])


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--words", type=int, default=20000, help="random words per block on top of vectors/")
    ap.add_argument("--designs", nargs="*", default=DESIGNS)
    args = ap.parse_args()
    print(f"# simulators, {time.strftime('%Y-%m-%d')}, {platform.machine()} {platform.processor() or ''}, "
          f"{args.words} random words per block\n")
    print("| design | words | Icarus (words/s) | Verilator (words/s) | GHDL (words/s) | GHDL / Icarus | Verilator / Icarus |")
    print("|---|---:|---:|---:|---:|---:|---:|")
    with tempfile.TemporaryDirectory(prefix="bench-sim-") as tmp:
        root = Path(tmp)
        for name in args.designs:
            spec = _spec(name).with_settings({"interface.language": "both"})
            design = write_design(spec, root / "out")
            kw = {"n_random": args.words, "seed": 3}
            ic = verify.run_direct(design, build_dir=root / "icarus" / name, **kw)
            vl = verify.run_verilator(design, build_dir=root / "verilator" / name, cache_dir=root / "cache", **kw)
            gh = verify.run_ghdl(design, build_dir=root / "ghdl" / name, **kw)
            assert ic.ok and vl.ok and gh.ok, (ic.details, vl.details, gh.details)
            rate = {r.simulator: r.harness_compared / r.sim_seconds for r in (ic, vl, gh)}
            i, v, g = rate[ic.simulator], rate[vl.simulator], rate[gh.simulator]
            print(f"| {name} | {ic.harness_compared} | {i:,.0f} | {v:,.0f} | {g:,.0f} | {g / i:.2f} | {v / i:.1f} |",
                  flush=True)
    print(f"\nsimulators: {ic.simulator}; {vl.simulator}; {gh.simulator}")


if __name__ == "__main__":
    main()
