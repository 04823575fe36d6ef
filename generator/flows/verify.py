"""`qamsmith verify out/<name>`: the generated RTL against the bit-exact model, word for word.

The bulk check streams the design's vectors/ plus fresh random stimulus (expected words from the
model) through both blocks inside the generated Verilog harness, with random input gaps and
output backpressure; the stream benches put a Python source, sink and scoreboard around each
block (tlast/tuser, full rate, reset in mid-stream). File names, top modules and ROM parameters
come from the design's manifest. `run_direct` runs the harness on plain iverilog/vvp (no Python
per clock), the fast path of the test matrix.
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterator

import numpy as np

from ..artifacts import DesignDirectory, format_words, random_words, read_words, run_block
from ..errors import SpecError
from .tools import lint_verilog, synthesis_gate

#: random vectors per block and configuration compared by default
DEFAULT_VECTORS = 100_000
#: words through each stream bench (Python source/sink, slower per word)
DEFAULT_STREAM = 2000
#: the harness's short names of the blocks
_SHORT = {"mapper": "map", "demapper": "dem"}


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


def icarus_version() -> str:
    try:
        out = subprocess.run(["iverilog", "-V"], capture_output=True, text=True).stdout
    except FileNotFoundError:
        return "icarus (not installed)"
    m = re.search(r"version\s+(\S+)", out)
    return f"icarus {m.group(1)}" if m else "icarus"


# --------------------------------------------------------------------------- stimulus


def prepare_stimulus(dd: DesignDirectory, build: Path, n_random: int, seed: int, *, use_vectors: bool = True,
                     vector_limit: int | None = None) -> dict[str, Any]:
    """Hex files of vectors/ + random words per block in `build`; returns paths and counts.

    `vector_limit` keeps an evenly strided subset of the demapper's vectors/ words (for the 2-D
    search of many points, whose simulation is slow); None keeps every word.
    """
    design = dd.design
    packing = dd.manifest["packing"]
    vectors = dd.manifest["vectors"]
    info: dict[str, Any] = {}
    for block, short in _SHORT.items():
        words_in: list[int] = []
        words_out: list[int] = []
        if use_vectors:
            words_in = read_words(dd.path(vectors[block]["input"]), key="design")
            words_out = read_words(dd.path(vectors[block]["expected"]), key="design")
            if block == "demapper" and vector_limit is not None and len(words_in) > vector_limit:
                keep = np.unique(np.linspace(0, len(words_in) - 1, vector_limit).round().astype(int))
                words_in = [words_in[j] for j in keep]
                words_out = [words_out[j] for j in keep]
        if n_random:
            fresh = random_words(design, block, n_random, seed + (block == "demapper"))
            words_in += fresh
            words_out += run_block(design, block, fresh)
        if len(words_in) != len(words_out):
            raise RuntimeError(f"{block}: {len(words_in)} stimulus words but {len(words_out)} expected")
        pin, pout = build / f"{short}_in.hex", build / f"{short}_out.hex"
        pin.write_bytes(format_words(words_in, packing[f"{block}_input"]["width"], f"// {block} stimulus\n"))
        pout.write_bytes(format_words(words_out, packing[f"{block}_output"]["width"], f"// {block} expected\n"))
        info[short] = {"in": str(pin), "out": str(pout), "count": len(words_in)}
    return info


def _sources(dd: DesignDirectory) -> list[Path]:
    return [dd.rtl_file("mapper"), dd.rtl_file("demapper"), dd.path(dd.testbench["harness"]["file"])]


def _depth(count: int) -> int:
    return 1 << max(10, (max(count, 1) - 1).bit_length())


def _plusargs(info: dict[str, Any], seed: int, in_pct: int, out_pct: int) -> list[str]:
    args = [f"+seed={seed}", f"+in_pct={in_pct}", f"+out_pct={out_pct}"]
    for blk in ("map", "dem"):
        args += [f"+{blk}_count={info[blk]['count']}", f"+{blk}_in={info[blk]['in']}", f"+{blk}_out={info[blk]['out']}"]
    return args


def _quoted(params: dict[str, str]) -> dict[str, str]:
    """String parameters as Verilog string literals (Icarus ignores unquoted ones)."""
    return {k: f'"{v}"' for k, v in params.items()}


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


# --------------------------------------------------------------------------- runs


def run_direct(design_dir: str | Path, *, n_random: int = 0, seed: int = 1, in_pct: int = 80, out_pct: int = 80,
               build_dir: str | Path | None = None, use_vectors: bool = True,
               vector_limit: int | None = None) -> Result:
    """The harness on plain iverilog + vvp (no Python per clock): the fast path of the test matrix."""
    dd = DesignDirectory.open(design_dir)
    t0 = time.perf_counter()
    with _build_dir(build_dir) as build:
        info = prepare_stimulus(dd, build, n_random, seed, use_vectors=use_vectors, vector_limit=vector_limit)
        top = dd.testbench["harness"]["module"]
        params = {"DEPTH": str(_depth(max(info["map"]["count"], info["dem"]["count"]))),
                  **_quoted(dd.rom_parameters())}
        cmd = ["iverilog", "-g2012", "-s", top, "-o", str(build / "harness.vvp")]
        cmd += [f"-P{top}.{k}={v}" for k, v in params.items()]
        cmd += [str(s) for s in _sources(dd)]
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


def run_cocotb(design_dir: str | Path, *, n_random: int = DEFAULT_VECTORS, seed: int = 1, stream: int = DEFAULT_STREAM,
               in_pct: int = 80, out_pct: int = 80, build_dir: str | Path | None = None,
               streams: bool = True) -> Result:
    """Build and run the generated cocotb benches (harness bulk check and the stream benches)."""
    try:
        from cocotb_tools.runner import get_results, get_runner  # noqa: PLC0415 - an optional extra
    except ImportError:
        raise SpecError("verify", "cocotb", "installed: pip install 'qamsmith[verify]' (cocotb runs the "
                                            "generated testbenches)") from None
    dd = DesignDirectory.open(design_dir)
    t0 = time.perf_counter()
    res = Result(simulator=icarus_version())
    tb = dd.path("tb")
    with _build_dir(build_dir) as build:
        info = prepare_stimulus(dd, build, n_random, seed)
        results = build / "results.jsonl"
        results.unlink(missing_ok=True)
        env = {"QAMSMITH_DESIGN": str(dd.root), "QAMSMITH_RESULTS": str(results),
               "QAMSMITH_SEED": str(seed), "QAMSMITH_STREAM": str(stream),
               "QAMSMITH_MAP_IN": info["map"]["in"], "QAMSMITH_MAP_OUT": info["map"]["out"],
               "QAMSMITH_DEM_IN": info["dem"]["in"], "QAMSMITH_DEM_OUT": info["dem"]["out"],
               # a deprecated cocotb call in the benches fails the run instead of passing quietly
               "PYTHONWARNINGS": "error"}
        runner = get_runner("icarus")
        roms = _quoted(dd.rom_parameters())
        srcs = _sources(dd)
        harness = dd.testbench["harness"]["module"]
        jobs = [(harness, srcs, {"DEPTH": _depth(max(info["map"]["count"], info["dem"]["count"])), **roms},
                 "bulk", _plusargs(info, seed, in_pct, out_pct))]
        if streams:
            jobs += [(dd.module("mapper")["module"], srcs[:1], roms, "stream_mapper", []),
                     (dd.module("demapper")["module"], srcs[1:2], {}, "stream_demapper", [])]
        for top, sources, params, case, plusargs in jobs:
            bdir = build / top
            runner.build(sources=sources, hdl_toplevel=top, build_dir=bdir, parameters=params, always=True,
                         timescale=("1ns", "1ps"), log_file=bdir / "build.log")
            xml = runner.test(test_module=dd.testbench["cocotb"]["module"], hdl_toplevel=top, build_dir=bdir,
                              test_dir=tb, testcase=case, plusargs=plusargs, extra_env=env, seed=seed,
                              results_xml=str(bdir / "results.xml"), log_file=bdir / "sim.log")
            _, failed = get_results(Path(xml))
            res.failed_tests += failed
            if failed:
                res.details.append(f"{case}: failed (log {bdir / 'sim.log'})")
        for entry in _results(results):
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


def _results(path: Path) -> Iterator[dict[str, Any]]:
    if path.exists():
        for line in path.read_text().splitlines():
            yield json.loads(line)


# --------------------------------------------------------------------------- the command


def gates(design_dir: str | Path) -> list[str]:
    """Verilator -Wall lint and the Yosys synthesis gate of both modules; the problems found (empty: clean)."""
    dd = DesignDirectory.open(design_dir)
    problems = []
    for role in ("mapper", "demapper"):
        path = dd.rtl_file(role)
        problems += [f"lint {path.name}: {ln}" for ln in lint_verilog(path)]
        rep = synthesis_gate(path, dd.module(role)["module"], cwd=dd.root)
        if not rep["ok"]:
            problems.append(f"synth {path.name}: failed" + "".join(f"\n  {w}" for w in rep["warnings"]))
    return problems


def verify(design_dir: str | Path, *, vectors: int = DEFAULT_VECTORS, stream: int = DEFAULT_STREAM, seed: int = 1,
           build_dir: str | Path | None = None, lint: bool = False) -> tuple[Result, list[str]]:
    """`qamsmith verify`: the simulation result and the lint/synthesis problems (when `lint`)."""
    if vectors < 0:
        raise SpecError("--vectors", vectors, "a count of 0 or more")
    if stream < 1:
        raise SpecError("--stream", stream, "a positive count")
    dd = DesignDirectory.open(design_dir, key="DESIGN")
    problems = gates(dd.root) if lint else []
    return run_cocotb(dd.root, n_random=vectors, seed=seed, stream=stream, build_dir=build_dir), problems


__all__ = ["DEFAULT_STREAM", "DEFAULT_VECTORS", "Result", "gates", "icarus_version", "prepare_stimulus",
           "run_cocotb", "run_direct", "verify"]
