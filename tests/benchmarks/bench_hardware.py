"""Hardware figures per order and FPGA family, measured with Yosys and nextpnr (a script, not collected by pytest).

    python tests/benchmarks/bench_hardware.py                  # the tables, QPSK .. 4096-QAM, seed 1
    python tests/benchmarks/bench_hardware.py --orders 4,16,256 --seeds 1,2,3 --families ice40,ecp5
    python tests/benchmarks/bench_hardware.py --calibrate --family ecp5   # re-measure the primitives of ir.timing
    python tests/benchmarks/bench_hardware.py --targets --seeds 1,2,3      # adaptive order and lanes against their targets

Per order, at default widths with the latency the generator picks for the family
(`interface.family`), one table per family (iCE40 HX8K with nextpnr-ice40, ECP5 LFE5U-45F with
nextpnr-ecp5, tools.PARTS): the demapper's LUTs, FFs, DSPs and block RAMs, latency and II, the
demapper's and mapper's Fmax, and the Fmax of a bare registered adder of the demapper's widest
adder word, with the ratios; the brute-force reference's LUTs at 256 points. With several seeds
every Fmax and ratio is the median over them, the spread printed beside it. The last column is
the wall time of that family's runs of the order.

--calibrate places registered adders of 4..32 bits, chains of 1..6 LUT4 levels and multipliers
(signed a x b as in the iCE40 calibration, the unsigned scale multiplies and the constant
multiplies of the designs) on the family's part, prints each register-to-register delay with the
logic cells on nextpnr's critical path and the multipliers Yosys mapped to DSPs, and a
least-squares fit in the form of ir.timing.Calibration.
"""

from __future__ import annotations

import argparse
import datetime
import statistics
import sys
import tempfile
import time
from pathlib import Path
from typing import Any, Callable

import numpy as np

from qamsmith import SpecError
from qamsmith.flows import cost, tools
from qamsmith.hdl import verilog
from qamsmith.ir.references import adder_module
from qamsmith.spec import DesignSpec


def _median(results: list[dict], get: Callable[[dict], float]) -> tuple[float, float, float]:
    values = [get(r) for r in results]
    return statistics.median(values), min(values), max(values)


def _fmax(r: dict, key: str, fam: str) -> float:
    fig = r["references"]["adder"] if key == "adder" else r["modules"][key]
    return fig["fmax"][fam]["fmax_mhz"]


def bench(orders: list[int], seeds: list[int], families: list[str], shape: str = "rectangular") -> int:
    t = tools.find_tools(families=families)
    start = time.monotonic()
    rows: dict[str, list[str]] = {fam: [] for fam in families}
    with tempfile.TemporaryDirectory() as tmp:
        for order in orders:
            for fam in families:
                t0 = time.monotonic()
                # the design for the family it is placed on (interface.family: its delay model)
                settings: dict[str, Any] = {"constellation.order": order, "interface.family": fam}
                if order.bit_length() % 2 == 0:         # odd-bit orders take the shape
                    settings["constellation.shape"] = shape
                spec = DesignSpec(name=f"bench-{order}-{fam}").with_settings(settings)
                dd = cost.build_source(spec, Path(tmp))
                # the brute-force reference only where its target is defined (256 points) and cheap enough
                runs = [cost.estimate(dd, flows=(fam,), families=(fam,), seed=seed, tools=t,
                                      references=("adder", "bruteforce") if order == 256 and seed == seeds[0]
                                      else ("adder",)) for seed in seeds]
                rows[fam].append(_row(order, fam, runs, seeds, time.monotonic() - t0))
                print(f"# {order}-QAM {fam}: {time.monotonic() - t0:.0f} s", file=sys.stderr, flush=True)
    print(f"# {datetime.date.today()}, {t.versions['yosys']}; seeds {','.join(map(str, seeds))} (Fmax and ratios: "
          f"median [min, max]); {time.monotonic() - start:.0f} s in all")
    for fam in families:
        print(f"\n## {tools.part_title(fam)}: {t.versions[f'nextpnr-{fam}']}\n")
        print("| M | log2 M | demapper LUTs | LUTs / log2 M | FFs | DSP | BRAM | latency | II | demapper Fmax | "
              "mapper LUTs | mapper Fmax | adder (bits) Fmax | demapper / adder | mapper / adder | brute LUTs | "
              "maxlog / brute | s |")
        print("|---" * 18 + "|")
        for row in rows[fam]:
            print(row)
    return 0


def _row(order: int, fam: str, runs: list[dict[str, Any]], seeds: list[int], seconds: float) -> str:
    res = runs[0]
    dm, mp = res["modules"]["demapper"], res["modules"]["mapper"]
    ad = res["references"]["adder"]
    k = order.bit_length() - 1
    br = res["references"].get("bruteforce_demapper", {})
    brute = br.get("flows", {}).get(fam, {}).get("luts")
    ratio = br.get("maxlog_lut_ratio", {}).get(fam)
    syn = dm["flows"][fam]
    fd = _median(runs, lambda r: _fmax(r, "demapper", fam))
    fm = _median(runs, lambda r: _fmax(r, "mapper", fam))
    fa = _median(runs, lambda r: _fmax(r, "adder", fam))
    rd = _median(runs, lambda r: _fmax(r, "demapper", fam) / _fmax(r, "adder", fam))
    rm = _median(runs, lambda r: _fmax(r, "mapper", fam) / _fmax(r, "adder", fam))

    def f(x: tuple[float, float, float], fmt: str = ".1f") -> str:
        return f"{x[0]:{fmt}}" + (f" [{x[1]:{fmt}}, {x[2]:{fmt}}]" if len(seeds) > 1 else "")

    return (f"| {order} | {k} | {syn['luts']} | {syn['luts'] / k:.0f} | {syn['ffs']} | {syn['multipliers']} | "
            f"{syn['brams']} | {dm['latency_cycles']} | {dm['initiation_interval']} | {f(fd)} | "
            f"{mp['flows'][fam]['luts']} | {f(fm)} | {f(fa)} ({ad['width']}) | {f(rd, '.2f')} | {f(rm, '.2f')} | "
            f"{brute if brute is not None else '-'} | {f'{ratio:.3f}' if ratio is not None else '-'} | {seconds:.0f} |")


# --------------------------------------------------------------------------- adaptive order and lanes (issue 10)

#: the targets: an adaptive [4, 16, 64, 256] demapper against the single-order 256-QAM demapper at the same widths,
#: and N lanes against one lane
ADAPTIVE_LUTS, ADAPTIVE_FMAX = 1.3, 0.95
LANES_LUTS, LANES_FMAX = 1.05, 0.95


def targets(seeds: list[int], fam: str, lanes_order: int, lanes: list[int]) -> int:
    """Demapper LUTs and Fmax (median over the seeds) of the adaptive core and of N lanes, and the ratios."""
    t = tools.find_tools(families=[fam])
    start = time.monotonic()
    base = {"constellation.labeling": "3gpp-nr", "interface.family": fam}
    designs = {"qam256": {**base, "constellation.order": 256},
               "adaptive-4to256": {**base, "constellation.orders": [4, 16, 64, 256]}}
    designs.update({f"qam{lanes_order}-x{n}": {**base, "constellation.order": lanes_order, "interface.lanes": n}
                    for n in lanes})
    figures: dict[str, dict[str, Any]] = {}
    with tempfile.TemporaryDirectory() as tmp:
        for name, settings in designs.items():
            t0 = time.monotonic()
            dd = cost.build_source(DesignSpec(name=f"bench-{name}").with_settings(settings), Path(tmp))
            runs = [cost.estimate(dd, flows=(fam,), families=(fam,), seed=seed, tools=t, references=False)
                    for seed in seeds]
            dm = runs[0]["modules"]["demapper"]
            figures[name] = {"luts": dm["flows"][fam]["luts"], "ffs": dm["flows"][fam]["ffs"],
                             "latency": dm["latency_cycles"],
                             "fmax": _median(runs, lambda r: _fmax(r, "demapper", fam)),
                             "seconds": time.monotonic() - t0}
            print(f"# {name} {fam}: {figures[name]['luts']} LUTs, Fmax {figures[name]['fmax'][0]:.1f} MHz, "
                  f"{time.monotonic() - t0:.0f} s", file=sys.stderr, flush=True)
    print(f"# {datetime.date.today()}, {t.versions['yosys']}, {t.versions[f'nextpnr-{fam}']}; "
          f"{tools.part_title(fam)}; seeds {','.join(map(str, seeds))} (Fmax: median [min, max]); "
          f"{time.monotonic() - start:.0f} s in all")

    def row(name: str, ref: str, luts_target: float, fmax_target: float) -> str:
        a, b = figures[name], figures[ref]
        lr, fr = a["luts"] / (b["luts"] * luts_target), a["fmax"][0] / b["fmax"][0]
        ok = lr <= 1.0 + 1e-12 and fr >= fmax_target
        f = a["fmax"]
        return (f"| {name} | {a['luts']} | {a['ffs']} | {a['latency']} | {f[0]:.1f} [{f[1]:.1f}, {f[2]:.1f}] | {ref} | "
                f"{a['luts'] / b['luts']:.3f} (target <= {luts_target:g}) | {fr:.3f} (target >= {fmax_target:g}) | "
                f"{'met' if ok else 'MISSED'} |")

    print("\n| demapper | LUTs | FFs | latency | Fmax (MHz) | against | LUT ratio | Fmax ratio | targets |")
    print("|---" * 9 + "|")
    print(row("qam256", "qam256", 1.3, 0.0).replace("| met |", "| (reference) |"))
    print(row("adaptive-4to256", "qam256", ADAPTIVE_LUTS, ADAPTIVE_FMAX))
    one = f"qam{lanes_order}-x1"
    for n in lanes:
        name = f"qam{lanes_order}-x{n}"
        r = row(name, one, LANES_LUTS * n, LANES_FMAX)
        print(r.replace("| met |", "| (reference) |") if n == 1 else r)
    return 0


# --------------------------------------------------------------------------- calibration


def _lut_chain(n: int) -> str:
    """n levels of a 4-input function per bit (one LUT4 each) between two 16-bit registers."""
    body = "\n".join(f"  wire [15:0] l{j + 1} = {{l{j}[14:0], l{j}[15]}} ^ (l{j} & {{l{j}[13:0], l{j}[15:14]}})"
                     f" ^ {{l{j}[12:0], l{j}[15:13]}};" for j in range(n))
    return (f"module lut{n}(input wire aclk, input wire [15:0] a, output wire [15:0] s);\n"
            f" reg [15:0] ar = 0, sr = 0; wire [15:0] l0 = ar;\n{body}\n"
            f" always @(posedge aclk) begin ar <= a; sr <= l{n}; end\n assign s = sr;\nendmodule\n")


def _multiply(name: str, a: int, b: int, signed: bool, const: int | None = None) -> str:
    """A registered a x b multiply (b a constant when `const` is given)."""
    s = "signed " if signed else ""
    pw = a + b
    if const is not None:
        return (f"module {name}(input wire aclk, input wire [{a - 1}:0] x, output wire [{pw - 1}:0] p);\n"
                f" reg [{a - 1}:0] xr = 0; reg [{pw - 1}:0] pr = 0;\n"
                f" always @(posedge aclk) begin xr <= x; pr <= xr * {b}'d{const}; end\n assign p = pr;\nendmodule\n")
    return (f"module {name}(input wire aclk, input wire [{a - 1}:0] x, input wire [{b - 1}:0] y,"
            f" output wire [{pw - 1}:0] p);\n reg {s}[{a - 1}:0] xr = 0; reg {s}[{b - 1}:0] yr = 0;"
            f" reg {s}[{pw - 1}:0] pr = 0;\n always @(posedge aclk) begin xr <= x; yr <= y; pr <= xr * yr; end\n"
            f" assign p = pr;\nendmodule\n")


def _ports(**widths: int) -> list[dict[str, Any]]:
    """aclk, then the given ports: inputs named by the caller's order, the last one the output."""
    names = list(widths)
    return ([{"name": "aclk", "dir": "input", "width": 1}]
            + [{"name": n, "dir": "input" if i < len(names) - 1 else "output", "width": w}
               for i, (n, w) in enumerate(widths.items())])


def _fit(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Least-squares coefficients of y = x @ c."""
    return np.linalg.lstsq(x, y, rcond=None)[0]


def calibrate(seeds: list[int], family: str) -> int:
    """Registered adders, LUT4 chains and multipliers on one family's part: the primitives of ir.timing."""
    t = tools.find_tools(families=[family])
    started = time.monotonic()
    print(f"# {datetime.date.today()} {tools.part_title(family)}: {t.versions['yosys']} "
          f"{tools.PARTS[family]['synth']}; "
          f"{t.versions[f'nextpnr-{family}']}; seeds {','.join(map(str, seeds))} (delay: median [min, max] ns)")
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)

        def run(name: str, text: str, ports: list[dict]) -> tuple[float, str, int]:
            """Median delay (ns) over the seeds; a note (the spread, DSPs, the critical path's logic cells); DSPs."""
            path = work / f"{name}.v"
            path.write_text(text)
            wname = f"{name}_wrap"
            wfile = work / f"{wname}.v"
            wfile.write_text(cost.render("cost/timing_wrapper.v.j2", **cost.wrapper_context(wname, name, ports)))
            delays, cells = [], []
            for seed in seeds:
                f = tools.place_route(t, [path], wname, wfile, cwd=work, work=work, family=family,
                                      seed=seed)["fmax_mhz"]
                delays.append(1000.0 / f)
                cells.append(len(tools.critical_path_logic((work / f"{wname}.{family}.report.json").read_text())))
            mults = tools.synthesize(t, [path], name, family, cwd=work, work=work)["multipliers"] or 0
            d = statistics.median(delays)
            note = (f"{d:.3f} ns [{min(delays):.3f}, {max(delays):.3f}], {mults} DSP, logic cells on the critical "
                    f"path {','.join(map(str, cells))}")
            return d, note, mults

        adders = []
        for w in (4, 8, 12, 16, 24, 32):
            m = adder_module(f"add{w}", w)
            ports = [{"name": p.name, "dir": p.direction, "width": p.width} for p in m.ports]
            d, note, _ = run(m.name, verilog.module_text(m), ports)
            adders.append((w, d))
            print(f"adder {w} bits: {note}", flush=True)
        chains = []
        for n in range(1, 7):
            d, note, _ = run(f"lut{n}", _lut_chain(n), _ports(a=16, s=16))
            chains.append((n, d))
            print(f"LUT4 chain {n} levels: {note}", flush=True)
        muls: list[tuple[int, int, int, float, int]] = []   # (a, b, product bits, delay, DSPs)
        for a, b in ((3, 12), (4, 14), (5, 16), (7, 18), (8, 20)):
            d, note, dsp = run(f"mul{a}x{b}", _multiply(f"mul{a}x{b}", a, b, True), _ports(x=a, y=b, p=a + b))
            muls.append((a, b, a + b, d, dsp))
            print(f"multiply signed {a}x{b}: {note}", flush=True)
        for a, b in ((12, 5), (16, 5)):     # the unsigned reliability scale of the demapper
            d, note, dsp = run(f"umul{a}x{b}", _multiply(f"umul{a}x{b}", a, b, False), _ports(x=a, y=b, p=a + b))
            muls.append((b, a, a + b, d, dsp))
            print(f"multiply unsigned {a}x{b}: {note}", flush=True)
        for a, c in ((4, 1257), (6, 40137)):  # the logic mapper's level: n * c
            b = c.bit_length()
            d, note, dsp = run(f"cmul{a}x{c}", _multiply(f"cmul{a}x{c}", a, b, False, c), _ports(x=a, p=a + b))
            muls.append((a, b, a + b, d, dsp))
            print(f"multiply {a} bits x constant {c}: {note}", flush=True)

    # the fit, in the form of ir.timing.Calibration: chains give the register hop and the LUT level
    n, dn = np.array(chains).T
    register, lut = _fit(np.c_[np.ones_like(n), n], dn)
    w, dw = np.array(adders).T
    add0, add_bit = _fit(np.c_[np.ones_like(w), w], dw)
    fields = [f"register_ns={register:.2f}", f"lut_ns={lut:.2f}", f"add_entry_ns={add0 - register:.2f}",
              f"add_bit_ns={add_bit:.4f}"]
    lut_muls = [m for m in muls[:5] if m[4] == 0]         # the signed a x b, as fitted for iCE40
    dsp_muls = [m for m in muls if m[4] == 1]
    if len(lut_muls) >= 3:
        ma, mb, _, md, _ = np.array(lut_muls).T
        m0, ms, ml = _fit(np.c_[np.ones_like(ma), np.minimum(ma, mb), np.maximum(ma, mb)], md)
        fields += [f"mul_entry_ns={m0 - register:.2f}", f"mul_short_bit_ns={ms:.3f}", f"mul_long_bit_ns={ml:.3f}"]
    if len(dsp_muls) >= 2:
        _, _, pw, md, _ = np.array(dsp_muls).T
        d0, dbit = _fit(np.c_[np.ones_like(pw), pw], md)
        fields += [f"dsp_entry_ns={d0 - register:.2f}", f"dsp_bit_ns={dbit:.4f}"]
    print(f"# least-squares fit: {', '.join(fields)}")
    print(f"# {time.monotonic() - started:.0f} s")
    return 0


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--orders", default="4,16,64,256,1024,4096")
    ap.add_argument("--seeds", default=str(tools.SEED), help="nextpnr seeds, comma-separated (median reported)")
    ap.add_argument("--families", default=",".join(tools.PNR_FAMILIES),
                    help="FPGA families, comma-separated, one table each (default: %(default)s)")
    ap.add_argument("--shape", default="rectangular", choices=("rectangular", "cross"),
                    help="constellation.shape of the odd-bit orders (default: %(default)s)")
    ap.add_argument("--calibrate", action="store_true")
    ap.add_argument("--targets", action="store_true",
                    help="the adaptive-order and lanes targets (issue 10) on --family, with --seeds")
    ap.add_argument("--lanes-order", type=int, default=64, help="--targets: the order of the lanes designs")
    ap.add_argument("--lanes", default="1,2,4,8", help="--targets: lane counts (1 first: the reference)")
    ap.add_argument("--family", default="ice40", choices=tools.PNR_FAMILIES, help="the family --calibrate measures")
    args = ap.parse_args()
    seeds = [int(s) for s in args.seeds.split(",")]
    try:
        if args.calibrate:
            return calibrate(seeds, args.family)
        if args.targets:
            return targets(seeds, args.family, args.lanes_order, [int(n) for n in args.lanes.split(",")])
        families = tools.check_families(f.strip() for f in args.families.split(",") if f.strip())
        return bench([int(o) for o in args.orders.split(",")], seeds, families, args.shape)
    except (tools.ToolMissing, SpecError) as exc:
        print(f"bench_hardware: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())
