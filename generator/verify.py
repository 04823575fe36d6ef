"""`qamsmith verify out/<name>`: build and run the cocotb benches on Icarus; lint and synthesis gates.

The bulk check streams the design's vectors/ plus fresh random stimulus (expected words from
the bit-exact model) through both blocks inside a Verilog harness with random gaps and
backpressure; the stream benches put a Python source, sink and scoreboard around each block
(tlast/tuser, full rate, reset in mid-stream). One summary line; exit status 1 on a mismatch.
"""

from __future__ import annotations

import argparse
import json
import os
import re
import shutil
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Sequence

import numpy as np

from . import emit, model, testbench
from .errors import SpecError
from .spec import DesignSpec

#: random vectors per block and configuration compared by default
DEFAULT_VECTORS = 100_000
#: words through each stream bench (Python source/sink, slower per word)
DEFAULT_STREAM = 2000


@dataclass
class Result:
    """Outcome of a verification run."""

    compared: int = 0
    mismatches: int = 0
    seconds: float = 0.0
    simulator: str = "icarus"
    details: list[str] = field(default_factory=list)
    failed_tests: int = 0

    @property
    def ok(self) -> bool:
        return self.mismatches == 0 and self.failed_tests == 0 and self.compared > 0

    def summary(self, name: str) -> str:
        rate = self.compared / self.seconds if self.seconds > 0 else 0.0
        return (f"verify {name}: {self.compared} vectors compared, {self.mismatches} mismatches, "
                f"simulator {self.simulator}, {self.seconds:.1f} s, {rate:.0f} vectors/s")


# --------------------------------------------------------------------------- inputs


def load_design(design_dir: str | Path) -> model.Design:
    path = Path(design_dir) / "design.toml"
    if not path.is_file():
        raise SpecError("design", str(design_dir), "a directory written by `qamsmith generate` (with design.toml)")
    return model.derive(DesignSpec.from_toml(path))


def icarus_version() -> str:
    try:
        out = subprocess.run(["iverilog", "-V"], capture_output=True, text=True).stdout
    except FileNotFoundError:
        return "icarus (not installed)"
    m = re.search(r"version\s+(\S+)", out)
    return f"icarus {m.group(1)}" if m else "icarus"


def random_words(design: model.Design, n: int, seed: int) -> dict[str, tuple[list[int], list[int]]]:
    """n random mapper labels and n random demapper inputs, with the model's expected words."""
    rng = np.random.default_rng(seed)
    labels = rng.integers(0, design.constellation.order, n)
    fmt = design.input_format
    i = rng.integers(fmt.min_code, fmt.max_code + 1, n)
    q = rng.integers(fmt.min_code, fmt.max_code + 1, n)
    s = rng.integers(0, design.scale_format.max_code + 1, n) if design.scale_format else None
    return {"map": ([int(v) for v in labels], emit.mapper_words(design, labels)),
            "dem": (emit.demapper_input_words(design, i, q, s), emit.demapper_words(design, i, q, s))}


def _read_hex(path: Path) -> list[int]:
    out = []
    for line in path.read_text().splitlines():
        line = line.split("//", 1)[0].strip()
        if line:
            out.append(int(line, 16))
    return out


def prepare_stimulus(design: model.Design, design_dir: Path, build: Path, n_random: int, seed: int,
                     use_vectors: bool = True, vector_limit: int | None = None) -> dict[str, Any]:
    """Hex files of vectors/ + random words per block in `build`; returns paths and counts.

    `vector_limit` keeps an evenly strided subset of the demapper's vectors/ words (for the
    2-D search of many points, whose simulation is slow); None keeps every word.
    """
    pack = emit.packing(design)
    widths = {"map": (pack["mapper_input"]["width"], pack["mapper_output"]["width"]),
              "dem": (pack["demapper_input"]["width"], pack["demapper_output"]["width"])}
    files = {"map": ("mapper_in.hex", "mapper_out.hex"), "dem": ("demapper_in.hex", "demapper_out.hex")}
    rnd = random_words(design, n_random, seed) if n_random else {"map": ([], []), "dem": ([], [])}
    info: dict[str, Any] = {}
    for blk in ("map", "dem"):
        words_in, words_out = [], []
        if use_vectors:
            words_in += _read_hex(design_dir / "vectors" / files[blk][0])
            words_out += _read_hex(design_dir / "vectors" / files[blk][1])
            if blk == "dem" and vector_limit is not None and len(words_in) > vector_limit:
                keep = np.unique(np.linspace(0, len(words_in) - 1, vector_limit).round().astype(int))
                words_in = [words_in[j] for j in keep]
                words_out = [words_out[j] for j in keep]
        words_in += rnd[blk][0]
        words_out += rnd[blk][1]
        if len(words_in) != len(words_out):
            raise RuntimeError(f"{blk}: {len(words_in)} stimulus words but {len(words_out)} expected")
        pin, pout = build / f"{blk}_in.hex", build / f"{blk}_out.hex"
        pin.write_bytes(emit.format_words(words_in, widths[blk][0], f"// {blk} stimulus\n"))
        pout.write_bytes(emit.format_words(words_out, widths[blk][1], f"// {blk} expected\n"))
        info[blk] = {"in": str(pin), "out": str(pout), "count": len(words_in)}
    return info


def _sources(design: model.Design, design_dir: Path) -> list[Path]:
    p = design.spec.prefix
    return [design_dir / "rtl" / f"{p}_mapper.v", design_dir / "rtl" / f"{p}_demapper.v",
            design_dir / "tb" / f"{testbench.harness_module(design)}.v"]


def _rom_parameters(design: model.Design, design_dir: Path) -> dict[str, str]:
    c = emit.rom_manifest(design)
    names = testbench.rom_params(design)
    out = {}
    for name in names:
        entry = next(e for e in c if (e["axis"] == "points" and name == "ROM_POINTS_FILE")
                     or name == f"ROM_{e['axis'].upper()}_FILE")
        out[name] = '"' + str((design_dir / entry["path"]).resolve()) + '"'
    return out


def _depth(count: int) -> int:
    return 1 << max(10, (max(count, 1) - 1).bit_length())


def _plusargs(info: dict[str, Any], seed: int, in_pct: int, out_pct: int) -> list[str]:
    args = [f"+seed={seed}", f"+in_pct={in_pct}", f"+out_pct={out_pct}"]
    for blk in ("map", "dem"):
        args += [f"+{blk}_count={info[blk]['count']}", f"+{blk}_in={info[blk]['in']}", f"+{blk}_out={info[blk]['out']}"]
    return args


# --------------------------------------------------------------------------- runs


def run_direct(design_dir: str | Path, *, n_random: int = 0, seed: int = 1, in_pct: int = 80, out_pct: int = 80,
               build_dir: str | Path | None = None, use_vectors: bool = True,
               vector_limit: int | None = None) -> Result:
    """The harness on plain iverilog + vvp (no Python per clock): the fast path of the test matrix."""
    design_dir = Path(design_dir).resolve()
    design = load_design(design_dir)
    t0 = time.perf_counter()
    with _build_dir(build_dir) as build:
        info = prepare_stimulus(design, design_dir, build, n_random, seed, use_vectors, vector_limit)
        top = testbench.harness_module(design)
        depth = _depth(max(info["map"]["count"], info["dem"]["count"]))
        params = {"DEPTH": str(depth), **_rom_parameters(design, design_dir)}
        cmd = ["iverilog", "-g2012", "-s", top, "-o", str(build / "harness.vvp")]
        cmd += [f"-P{top}.{k}={v}" for k, v in params.items()]
        cmd += [str(s) for s in _sources(design, design_dir)]
        comp = subprocess.run(cmd, capture_output=True, text=True)
        if comp.returncode:
            raise RuntimeError(f"iverilog failed:\n{comp.stderr}")
        run = subprocess.run(["vvp", "-n", str(build / "harness.vvp"), "+finish",
                              *_plusargs(info, seed, in_pct, out_pct)], capture_output=True, text=True, cwd=build)
        m = re.search(r"RESULT map_compared=(\d+) map_bad=(\d+) dem_compared=(\d+) dem_bad=(\d+)", run.stdout)
        if not m:
            raise RuntimeError(f"harness did not finish:\n{run.stdout[-3000:]}\n{run.stderr[-3000:]}")
        mc, mb, dc, db = map(int, m.groups())
        res = Result(compared=mc + dc, mismatches=mb + db, seconds=time.perf_counter() - t0)
        res.details = [line for line in run.stdout.splitlines() if line.startswith("BAD")]
        if mc != info["map"]["count"] or dc != info["dem"]["count"]:
            res.mismatches += 1
            res.details.append(f"compared {mc}/{info['map']['count']} mapper and {dc}/{info['dem']['count']} "
                               "demapper words")
        return res


class _build_dir:
    """A given build directory (kept), or a temporary one (removed)."""

    def __init__(self, path: str | Path | None) -> None:
        self.path = Path(path) if path else None
        self.tmp: str | None = None

    def __enter__(self) -> Path:
        if self.path is None:
            self.tmp = tempfile.mkdtemp(prefix="qamsmith-")
            return Path(self.tmp)
        self.path.mkdir(parents=True, exist_ok=True)
        return self.path.resolve()

    def __exit__(self, *exc: object) -> None:
        if self.tmp:
            shutil.rmtree(self.tmp, ignore_errors=True)


def run_cocotb(design_dir: str | Path, *, n_random: int = DEFAULT_VECTORS, seed: int = 1, stream: int = DEFAULT_STREAM,
               in_pct: int = 80, out_pct: int = 80, build_dir: str | Path | None = None,
               streams: bool = True) -> Result:
    """Build and run the generated cocotb benches (harness bulk check and the stream benches)."""
    from cocotb_tools.runner import get_results, get_runner

    design_dir = Path(design_dir).resolve()
    design = load_design(design_dir)
    t0 = time.perf_counter()
    res = Result(simulator=icarus_version())
    tb = design_dir / "tb"
    p = design.spec.prefix
    with _build_dir(build_dir) as build:
        info = prepare_stimulus(design, design_dir, build, n_random, seed)
        results = build / "results.jsonl"
        results.unlink(missing_ok=True)
        env = {"QAMSMITH_DESIGN": str(design_dir), "QAMSMITH_RESULTS": str(results),
               "QAMSMITH_SEED": str(seed), "QAMSMITH_STREAM": str(stream),
               "QAMSMITH_MAP_IN": info["map"]["in"], "QAMSMITH_MAP_OUT": info["map"]["out"],
               "QAMSMITH_DEM_IN": info["dem"]["in"], "QAMSMITH_DEM_OUT": info["dem"]["out"],
               # a deprecated cocotb call in the benches fails the run instead of passing quietly
               "PYTHONWARNINGS": "error"}
        runner = get_runner("icarus")
        roms = _rom_parameters(design, design_dir)
        srcs = _sources(design, design_dir)
        jobs = [(testbench.harness_module(design), srcs, {"DEPTH": _depth(max(info["map"]["count"], info["dem"]["count"])), **roms},
                 "bulk", _plusargs(info, seed, in_pct, out_pct))]
        if streams:
            jobs += [(f"{p}_mapper", srcs[:1], roms, "stream_mapper", []),
                     (f"{p}_demapper", srcs[1:2], {}, "stream_demapper", [])]
        for top, sources, params, case, plusargs in jobs:
            bdir = build / top
            runner.build(sources=sources, hdl_toplevel=top, build_dir=bdir, parameters=params, always=True,
                         timescale=("1ns", "1ps"), log_file=bdir / "build.log")
            xml = runner.test(test_module=testbench.test_module(design), hdl_toplevel=top, build_dir=bdir,
                              test_dir=tb, testcase=case, plusargs=plusargs, extra_env=env, seed=seed,
                              results_xml=str(bdir / "results.xml"), log_file=bdir / "sim.log")
            _, failed = get_results(Path(xml))
            res.failed_tests += failed
            if failed:
                res.details.append(f"{case}: failed (log {bdir / 'sim.log'})")
        for line in results.read_text().splitlines() if results.exists() else []:
            entry = json.loads(line)
            if entry["test"] == "bulk":
                res.compared += entry["map_compared"] + entry["dem_compared"]
                res.mismatches += entry["map_bad"] + entry["dem_bad"]
                res.details += [entry[k] for k in ("map_first", "dem_first") if k in entry]
            else:
                res.compared += entry["compared"]
                res.mismatches += entry["bad"]
                if entry.get("first"):
                    res.details.append(entry["first"])
        shutil.rmtree(tb / "__pycache__", ignore_errors=True)
    res.seconds = time.perf_counter() - t0
    return res


# --------------------------------------------------------------------------- lint and synthesis


def lint(path: str | Path, *, top: str | None = None) -> list[str]:
    """Verilator --lint-only -Wall on one generated module; returns the warning/error lines (empty: clean)."""
    path = Path(path)
    cmd = ["verilator", "--lint-only", "-Wall", "--default-language", "1364-2001", str(path)]
    if top:
        cmd += ["--top-module", top]
    r = subprocess.run(cmd, capture_output=True, text=True)
    lines = [ln for ln in (r.stdout + r.stderr).splitlines() if ln.startswith("%")]
    if r.returncode and not lines:
        lines = [f"verilator exit {r.returncode}"]
    return lines


#: Yosys messages that are expected for these designs and harmless
_BENIGN = (r"Replacing memory .* with list of registers", r"wire .* is assigned in a block")


def synth(path: str | Path, top: str, *, cwd: str | Path | None = None) -> dict[str, Any]:
    """Yosys generic `synth` of one module: cells, latches and the warnings that matter."""
    script = f"read_verilog {Path(path).resolve()}; synth -top {top}; stat; select -assert-none t:$dlatch t:$_DLATCH_*"
    r = subprocess.run(["yosys", "-q", "-l", "/dev/stdout", "-p", script], capture_output=True, text=True,
                       cwd=cwd)
    text = r.stdout + r.stderr
    warnings = [ln for ln in text.splitlines() if ln.startswith("Warning") and not any(re.search(b, ln) for b in _BENIGN)]
    cells = re.findall(r"Number of cells:\s+(\d+)", text)
    latch = "Latch inferred" in text or (r.returncode != 0 and "select -assert-none" in text)
    return {"ok": r.returncode == 0 and not warnings and not latch, "returncode": r.returncode,
            "warnings": warnings, "cells": int(cells[-1]) if cells else None, "latch": latch,
            "log": text[-4000:] if r.returncode else ""}


# --------------------------------------------------------------------------- CLI


def _add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("design_dir", help="a design directory written by `qamsmith generate` (out/<name>)")
    p.add_argument("--vectors", type=int, default=DEFAULT_VECTORS,
                   help=f"random vectors per block on top of vectors/ (default {DEFAULT_VECTORS})")
    p.add_argument("--stream", type=int, default=DEFAULT_STREAM,
                   help=f"words through each Python stream bench (default {DEFAULT_STREAM})")
    p.add_argument("--seed", type=int, default=1, help="seed of the random stimulus, gaps and backpressure")
    p.add_argument("--build-dir", default=None, help="keep the simulator build here (default: a temporary directory)")
    p.add_argument("--lint", action="store_true", help="also run verilator --lint-only -Wall and yosys synth")


def handler(args: argparse.Namespace) -> int:
    if args.vectors < 0 or args.stream < 1:
        raise SpecError("--vectors" if args.vectors < 0 else "--stream",
                        args.vectors if args.vectors < 0 else args.stream, "a positive count")
    design_dir = Path(args.design_dir)
    design = load_design(design_dir)
    bad = 0
    if args.lint:
        for role in ("mapper", "demapper"):
            path = design_dir / "rtl" / f"{design.spec.prefix}_{role}.v"
            for ln in lint(path):
                print(f"lint {path.name}: {ln}")
                bad += 1
            rep = synth(path, f"{design.spec.prefix}_{role}", cwd=design_dir)
            print(f"synth {path.name}: {rep['cells']} cells, {'ok' if rep['ok'] else 'FAILED'}")
            bad += 0 if rep["ok"] else 1
            for w in rep["warnings"]:
                print(f"  {w}")
    res = run_cocotb(design_dir, n_random=args.vectors, seed=args.seed, stream=args.stream, build_dir=args.build_dir)
    for line in res.details[:8]:
        print(f"  {line}")
    print(res.summary(design.spec.name))
    return 0 if res.ok and not bad else 1


def register(subparsers: Any) -> None:
    p = subparsers.add_parser("verify", help="simulate a generated design on Icarus and compare to the model",
                              description=__doc__.splitlines()[0])
    _add_arguments(p)
    p.set_defaults(func=handler)


def main(argv: Sequence[str] | None = None) -> int:
    """Entry of tb/run.py: the same as `qamsmith verify`."""
    p = argparse.ArgumentParser(prog="run.py", description=__doc__.splitlines()[0])
    _add_arguments(p)
    args = p.parse_args(argv)
    try:
        return handler(args)
    except SpecError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2


__all__ = ["run_cocotb", "run_direct", "lint", "synth", "load_design", "register", "main", "Result",
           "DEFAULT_VECTORS"]
