"""Hardware targets of issue 5, measured with Yosys and nextpnr-ice40 (not collected by pytest).

    python tests/benchmarks/bench_hardware.py            # the table, QPSK .. 4096-QAM
    python tests/benchmarks/bench_hardware.py --orders 4,16,256
    python tests/benchmarks/bench_hardware.py --calibrate   # re-measure timing.CALIBRATION's primitives

Targets: II = 1 at every order (the manifest's initiation interval; the RTL tests prove it in
simulation); 256-QAM maxlog demapper LUTs <= 1/3 of the brute-force reference at the same
widths; 4096-QAM synthesizes and places; demapper LUTs about linear in log2(M); every module's
Fmax >= 80 % of a bare registered adder of the demapper's internal width, with the pipeline the
generator picks (stages = 0: one register per step).
"""

from __future__ import annotations

import argparse
import datetime
import sys
import tempfile
import time
from pathlib import Path

from qamsmith import estimate
from qamsmith.spec import DesignSpec


def bench(orders: list[int], seed: int) -> int:
    tools = estimate.find_tools()
    print(f"# {datetime.date.today()} {tools.versions['yosys']}; {tools.versions.get('nextpnr-ice40')}; "
          f"part {estimate.PART['device']} {estimate.PART['package']}, seed {seed}")
    print("| M | log2 M | demapper iCE40 LUTs | LUTs / log2 M | FFs | latency | II | demapper Fmax | "
          "mapper LUTs | mapper Fmax | adder (bits) Fmax | demapper / adder | mapper / adder | brute LUTs | maxlog / brute | s |")
    print("|---" * 16 + "|")
    misses = 0
    with tempfile.TemporaryDirectory() as tmp:
        for order in orders:
            t0 = time.monotonic()
            spec = DesignSpec(name=f"bench-{order}").with_settings({"constellation.order": order})
            src = estimate.build_source(spec, Path(tmp))
            # the brute-force reference only where the target is defined (256) and cheap enough
            res = estimate.estimate(src, flows=("ice40",), references=True, seed=seed, tools=tools,
                                    progress=None) if order == 256 else _no_brute(src, tools, seed)
            dm, mp = res["modules"]["demapper"], res["modules"]["mapper"]
            ad = res["references"]["adder"]
            k = order.bit_length() - 1
            br = res["references"].get("bruteforce_demapper", {})
            brute = br.get("flows", {}).get("ice40", {}).get("luts")
            ratio = br.get("maxlog_lut_ratio", {}).get("ice40")
            luts = dm["flows"]["ice40"]["luts"]
            print(f"| {order} | {k} | {luts} | {luts / k:.0f} | {dm['flows']['ice40']['ffs']} | {dm['latency_cycles']} | "
                  f"{dm['initiation_interval']} | {dm['fmax_mhz']:.1f} | {mp['flows']['ice40']['luts']} | "
                  f"{mp['fmax_mhz']:.1f} | {ad['fmax_mhz']:.1f} ({ad['width']}) | {dm['fmax_vs_adder']:.2f} | "
                  f"{mp['fmax_vs_adder']:.2f} | {brute if brute is not None else '-'} | "
                  f"{f'{ratio:.3f}' if ratio is not None else '-'} | {time.monotonic() - t0:.0f} |", flush=True)
            misses += sum(1 for f in (dm, mp) if f["fmax_vs_adder"] < 0.8) + (ratio is not None and ratio > 1 / 3)
            misses += sum(1 for f in (dm, mp) if f["initiation_interval"] != 1)
    print(f"# targets missed: {misses}")
    return 0


def _no_brute(src: estimate.Source, tools: estimate.Tools, seed: int) -> dict:
    """The estimate with the adder reference only (the brute force grows with M)."""
    res = estimate.estimate(src, flows=("ice40",), references=False, seed=seed, tools=tools)
    design = estimate.derive(src.spec)
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        ctx = estimate.adder_context(design)
        path = work / f"{ctx['name']}.v"
        path.write_text(estimate.render("ref_adder.v.j2", ctx))
        ports = estimate.ports_of(tools, [path], ctx["name"], cwd=work, work=work)
        adder = {"width": ctx["width"], **estimate.place_route(tools, [path], ctx["name"], ports, cwd=work,
                                                               work=work, seed=seed)}
    res["references"] = {"adder": adder}
    estimate._ratios(res)
    return res


def calibrate(seed: int) -> int:
    """Registered adders, LUT4 chains and LUT multipliers: the primitives of timing.CALIBRATION."""
    tools = estimate.find_tools()
    print(f"# {datetime.date.today()} {tools.versions['yosys']}; {tools.versions.get('nextpnr-ice40')}")
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)

        def run(name: str, text: str) -> float:
            path = work / f"{name}.v"
            path.write_text(text)
            ports = estimate.ports_of(tools, [path], name, cwd=work, work=work)
            return estimate.place_route(tools, [path], name, ports, cwd=work, work=work, seed=seed)["fmax_mhz"]

        for w in (4, 8, 12, 16, 24, 32):
            f = run(f"add{w}", estimate.render("ref_adder.v.j2", {"name": f"add{w}", "width": w, "banner": "//"}))
            print(f"adder {w} bits: {f:.2f} MHz, {1000 / f:.3f} ns")
        for n in (1, 2, 4, 6):
            body = "\n".join(f"  wire [15:0] l{j + 1} = {{l{j}[14:0], l{j}[15]}} ^ (l{j} & {{l{j}[13:0], l{j}[15:14]}})"
                             f" ^ {{l{j}[12:0], l{j}[15:13]}};" for j in range(n))
            f = run(f"lut{n}", f"module lut{n}(input wire aclk, input wire [15:0] a, output wire [15:0] s);\n"
                    f" reg [15:0] ar = 0, sr = 0; wire [15:0] l0 = ar;\n{body}\n"
                    f" always @(posedge aclk) begin ar <= a; sr <= l{n}; end\n assign s = sr;\nendmodule\n")
            print(f"LUT4 chain {n} levels: {f:.2f} MHz, {1000 / f:.3f} ns")
        for a, b in ((3, 12), (4, 14), (5, 16), (7, 18), (8, 20)):
            f = run(f"mul{a}x{b}", f"module mul{a}x{b}(input wire aclk, input wire [{a - 1}:0] x, input wire [{b - 1}:0] y,"
                    f" output wire [{a + b - 1}:0] p);\n reg signed [{a - 1}:0] xr = 0; reg signed [{b - 1}:0] yr = 0;"
                    f" reg signed [{a + b - 1}:0] pr = 0;\n always @(posedge aclk) begin xr <= x; yr <= y; pr <= xr * yr; end\n"
                    f" assign p = pr;\nendmodule\n")
            print(f"multiply {a}x{b}: {f:.2f} MHz, {1000 / f:.3f} ns")
    return 0


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--orders", default="4,16,64,256,1024,4096")
    ap.add_argument("--seed", type=int, default=estimate.SEED)
    ap.add_argument("--calibrate", action="store_true")
    args = ap.parse_args()
    if args.calibrate:
        return calibrate(args.seed)
    return bench([int(o) for o in args.orders.split(",")], args.seed)


if __name__ == "__main__":
    sys.exit(main())
