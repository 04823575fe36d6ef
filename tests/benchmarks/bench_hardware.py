"""Hardware figures per order, measured with Yosys and nextpnr-ice40 (a script, not collected by pytest).

    python tests/benchmarks/bench_hardware.py                  # the table, QPSK .. 4096-QAM, seed 1
    python tests/benchmarks/bench_hardware.py --orders 4,16,256 --seeds 1,2,3
    python tests/benchmarks/bench_hardware.py --calibrate      # re-measure the primitives of ir.timing

Per order, at default widths with the latency the generator picks: the demapper's iCE40 LUTs,
FFs, latency and II, the demapper's and mapper's Fmax, and the Fmax of a bare registered adder
of the demapper's widest adder word, with the ratios; the brute-force reference's LUTs at 256
points. With several seeds every Fmax is the median over them, the spread printed beside it.
"""

from __future__ import annotations

import argparse
import datetime
import statistics
import sys
import tempfile
import time
from pathlib import Path

from qamsmith.flows import cost, tools
from qamsmith.hdl import verilog
from qamsmith.ir.references import adder_module
from qamsmith.spec import DesignSpec


def _median(results: list[dict], get) -> tuple[float, float, float]:
    values = [get(r) for r in results]
    return statistics.median(values), min(values), max(values)


def bench(orders: list[int], seeds: list[int]) -> int:
    t = tools.find_tools()
    print(f"# {datetime.date.today()} {t.versions['yosys']}; {t.versions.get('nextpnr-ice40')}; "
          f"part {tools.PART['device']} {tools.PART['package']}, seeds {','.join(map(str, seeds))} "
          f"(Fmax: median [min, max])")
    print("| M | log2 M | demapper iCE40 LUTs | LUTs / log2 M | FFs | latency | II | demapper Fmax | mapper LUTs | "
          "mapper Fmax | adder (bits) Fmax | demapper / adder | mapper / adder | brute LUTs | maxlog / brute | s |")
    print("|---" * 16 + "|")
    with tempfile.TemporaryDirectory() as tmp:
        for order in orders:
            t0 = time.monotonic()
            spec = DesignSpec(name=f"bench-{order}").with_settings({"constellation.order": order})
            dd = cost.build_source(spec, Path(tmp))
            # the brute-force reference only where its target is defined (256 points) and cheap enough
            runs = [cost.estimate(dd, flows=("ice40",), seed=seed, tools=t,
                                  references=("adder", "bruteforce") if order == 256 and seed == seeds[0]
                                  else ("adder",)) for seed in seeds]
            res = runs[0]
            dm, mp = res["modules"]["demapper"], res["modules"]["mapper"]
            ad = res["references"]["adder"]
            k = order.bit_length() - 1
            br = res["references"].get("bruteforce_demapper", {})
            brute = br.get("flows", {}).get("ice40", {}).get("luts")
            ratio = br.get("maxlog_lut_ratio", {}).get("ice40")
            luts = dm["flows"]["ice40"]["luts"]
            fd = _median(runs, lambda r: r["modules"]["demapper"]["fmax_mhz"])
            fm = _median(runs, lambda r: r["modules"]["mapper"]["fmax_mhz"])
            fa = _median(runs, lambda r: r["references"]["adder"]["fmax_mhz"])
            rd = _median(runs, lambda r: r["modules"]["demapper"]["fmax_mhz"] / r["references"]["adder"]["fmax_mhz"])
            rm = _median(runs, lambda r: r["modules"]["mapper"]["fmax_mhz"] / r["references"]["adder"]["fmax_mhz"])

            def f(x: tuple[float, float, float], fmt: str = ".1f") -> str:
                return f"{x[0]:{fmt}}" + (f" [{x[1]:{fmt}}, {x[2]:{fmt}}]" if len(seeds) > 1 else "")

            print(f"| {order} | {k} | {luts} | {luts / k:.0f} | {dm['flows']['ice40']['ffs']} | {dm['latency_cycles']} | "
                  f"{dm['initiation_interval']} | {f(fd)} | {mp['flows']['ice40']['luts']} | {f(fm)} | "
                  f"{f(fa)} ({ad['width']}) | {f(rd, '.2f')} | {f(rm, '.2f')} | "
                  f"{brute if brute is not None else '-'} | {f'{ratio:.3f}' if ratio is not None else '-'} | "
                  f"{time.monotonic() - t0:.0f} |", flush=True)
    return 0


def calibrate(seed: int) -> int:
    """Registered adders, LUT4 chains and LUT multipliers: the primitives of ir.timing.CALIBRATION."""
    t = tools.find_tools()
    print(f"# {datetime.date.today()} {t.versions['yosys']}; {t.versions.get('nextpnr-ice40')}")
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)

        def run(name: str, text: str, ports: list[dict]) -> float:
            path = work / f"{name}.v"
            path.write_text(text)
            wname = f"{name}_wrap"
            wfile = work / f"{wname}.v"
            wfile.write_text(cost.render("cost/timing_wrapper.v.j2", **cost.wrapper_context(wname, name, ports)))
            return tools.place_route(t, [path], wname, wfile, cwd=work, work=work, seed=seed)["fmax_mhz"]

        for w in (4, 8, 12, 16, 24, 32):
            m = adder_module(f"add{w}", w)
            ports = [{"name": p.name, "dir": p.direction, "width": p.width} for p in m.ports]
            f = run(m.name, verilog.module_text(m), ports)
            print(f"adder {w} bits: {f:.2f} MHz, {1000 / f:.3f} ns")
        for n in (1, 2, 4, 6):
            body = "\n".join(f"  wire [15:0] l{j + 1} = {{l{j}[14:0], l{j}[15]}} ^ (l{j} & {{l{j}[13:0], l{j}[15:14]}})"
                             f" ^ {{l{j}[12:0], l{j}[15:13]}};" for j in range(n))
            f = run(f"lut{n}", f"module lut{n}(input wire aclk, input wire [15:0] a, output wire [15:0] s);\n"
                    f" reg [15:0] ar = 0, sr = 0; wire [15:0] l0 = ar;\n{body}\n"
                    f" always @(posedge aclk) begin ar <= a; sr <= l{n}; end\n assign s = sr;\nendmodule\n",
                    [{"name": "aclk", "dir": "input", "width": 1}, {"name": "a", "dir": "input", "width": 16},
                     {"name": "s", "dir": "output", "width": 16}])
            print(f"LUT4 chain {n} levels: {f:.2f} MHz, {1000 / f:.3f} ns")
        for a, b in ((3, 12), (4, 14), (5, 16), (7, 18), (8, 20)):
            f = run(f"mul{a}x{b}", f"module mul{a}x{b}(input wire aclk, input wire [{a - 1}:0] x, input wire [{b - 1}:0] y,"
                    f" output wire [{a + b - 1}:0] p);\n reg signed [{a - 1}:0] xr = 0; reg signed [{b - 1}:0] yr = 0;"
                    f" reg signed [{a + b - 1}:0] pr = 0;\n always @(posedge aclk) begin xr <= x; yr <= y; pr <= xr * yr; end\n"
                    f" assign p = pr;\nendmodule\n",
                    [{"name": "aclk", "dir": "input", "width": 1}, {"name": "x", "dir": "input", "width": a},
                     {"name": "y", "dir": "input", "width": b}, {"name": "p", "dir": "output", "width": a + b}])
            print(f"multiply {a}x{b}: {f:.2f} MHz, {1000 / f:.3f} ns")
    return 0


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--orders", default="4,16,64,256,1024,4096")
    ap.add_argument("--seeds", default=str(tools.SEED), help="nextpnr seeds, comma-separated (median reported)")
    ap.add_argument("--calibrate", action="store_true")
    args = ap.parse_args()
    seeds = [int(s) for s in args.seeds.split(",")]
    if args.calibrate:
        return calibrate(seeds[0])
    return bench([int(o) for o in args.orders.split(",")], seeds)


if __name__ == "__main__":
    sys.exit(main())
