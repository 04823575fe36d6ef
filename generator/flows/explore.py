"""`qamsmith explore`: the loss x LUTs x Fmax trade-off across many candidate designs, on one machine or a Dask cluster.

A plan is a base spec, fixed settings on top of it and axes: spec keys with the values to sweep
(or several keys whose values move together, e.g. an input width with its fraction). The
candidates are the Cartesian product of the axes, each a resolved spec (the base's name kept).
Each one is measured by the functions behind `qamsmith analyze` and `qamsmith cost`, never copies
of them: `analysis.implementation_loss` (seeded Monte-Carlo of the bit-exact chain, loss in dB at
the operating point with its 95 % interval) and `cost.estimate` on the design built by
`artifacts.build_files` into a temporary directory (Yosys on the flow of `interface.family`,
nextpnr on its part for Fmax; mapper and demapper). A candidate that fails (a refused spec, a
clock the schedule cannot reach, a tool that fails or times out) is recorded with its one-line
reason; the sweep goes on.

Execution: `jobs=1` runs in this process without Dask; otherwise the candidates go to Dask
(`dask.distributed`, the optional extra `explore`): an embedded `LocalCluster` (one single-threaded
worker process per core) or an existing scheduler (`cluster="tcp://host:8786"`; its workers need
qamsmith and the EDA tools). Workers only compute and return plain dicts; this process keeps the
cache, so workers need no shared file system.

Cache: one JSON file per candidate under `cache_dir`, keyed by the content hash of its resolved
spec (which includes the qamsmith version), the versions of the tools that measured it, the
Monte-Carlo seed and size, the operating-point rule and the cost settings. A result is stored as
soon as it arrives, so an interrupted sweep, or one rerun with one more axis value, computes only
what is missing. Refusals are cached (they follow from the spec alone); tool failures are not
(a timeout depends on the machine's load), so a rerun retries them.
"""

from __future__ import annotations

import contextlib
import functools
import hashlib
import io
import itertools
import json
import logging
import math
import os
import re
import signal
import sys
import tempfile
import threading
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, Callable, Iterable, Iterator, Sequence, TextIO

from ..artifacts import content_hash, probe_directory, write_file
from ..errors import SpecError
from ..spec import DesignSpec, field_docs, parse_value, shown
from ..spec.files import read_toml
from ..version import __version__
from . import analysis as an
from . import cost
from . import explore_report as er
from .tools import PNR_FAMILIES, SEED, YOSYS_TIMEOUT_S, ToolFailed, ToolMissing, Tools, find_tools

#: where the per-candidate results are kept by default: under the design's report/ (which `generate` keeps)
CACHE_DIR = "explore-cache"
#: the files written into report/
FILES = ("explore.json", "explore.md", "explore.png")
#: bump when a cached result's layout changes (old entries are then simply not found)
CACHE_FORMAT = 1
#: the largest sweep accepted (a typo such as 1..1000 on two axes should not start a week of runs)
MAX_CANDIDATES = 4096
#: the largest integer range an axis value `a..b` may expand to
MAX_RANGE = 256
#: what the loss is measured against: float exact log-MAP (the headline of `analyze`) or float max-log
LOSS_REFERENCES = ("exact", "maxlog")
INSTALL = "pip install 'qamsmith[explore]'"
#: how long a run on an existing scheduler waits for its first worker, seconds
WORKER_WAIT_S = 60.0
#: keys an axis may not sweep: the name is the candidates' shared name, not a design choice
_NOT_AXES = frozenset({"name"})
#: keys that are set together by a resolution rule (interface.target_mhz chooses the stages)
_STAGE_KEYS = ("interface.mapper_stages", "interface.demapper_stages")
_TARGET_KEY = "interface.target_mhz"


# --------------------------------------------------------------------------- the plan


@dataclass(frozen=True)
class Axis:
    """One swept dimension: one spec key, or several keys whose values move together (one tuple per point)."""

    keys: tuple[str, ...]
    values: tuple[tuple[Any, ...], ...]

    @property
    def name(self) -> str:
        return ",".join(self.keys)


@dataclass(frozen=True)
class Plan:
    """What to sweep and how to judge it: axes, fixed settings, the budget, the clock and the measurement settings."""

    axes: tuple[Axis, ...] = ()
    settings: tuple[tuple[str, Any], ...] = ()
    budget_db: float = an.DEFAULT_BUDGET_DB
    clock_mhz: float | None = None
    seed: int = an.DEFAULT_SEED
    symbols: int = an.DEFAULT_EXPLORE_SYMBOLS
    operating_point_db: float | None = None
    gmi_fraction: float = an.DEFAULT_GMI_FRACTION
    loss_reference: str = "exact"
    fmax: bool = True
    pnr_seed: int = SEED
    timeout: float = YOSYS_TIMEOUT_S

    @property
    def size(self) -> int:
        return math.prod(len(a.values) for a in self.axes)

    def record(self) -> dict[str, Any]:
        """The plan as explore.json shows it."""
        return {"axes": [{"keys": list(a.keys), "values": [list(p) if len(a.keys) > 1 else p[0] for p in a.values]}
                         for a in self.axes],
                "settings": dict(self.settings), "budget_db": self.budget_db, "clock_mhz": self.clock_mhz,
                "seed": self.seed, "symbols": self.symbols, "operating_point_db": self.operating_point_db,
                "gmi_target": None if self.operating_point_db is not None else self.gmi_fraction,
                "loss_reference": self.loss_reference, "fmax": self.fmax, "pnr_seed": self.pnr_seed}


def _text(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return value
    return json.dumps(value) if isinstance(value, (list, dict)) else str(value)


def split_top(text: str, sep: str) -> list[str]:
    """`text` split at `sep` outside brackets and quotes ('[4,16],[16,64]' is two items at ',')."""
    parts, depth, quote, start = [], 0, "", 0
    for n, ch in enumerate(text):
        if quote:
            quote = "" if ch == quote else quote
        elif ch in "\"'":
            quote = ch
        elif ch in "[{":
            depth += 1
        elif ch in "]}":
            depth -= 1
        elif ch == sep and depth == 0:
            parts.append(text[start:n])
            start = n + 1
    parts.append(text[start:])
    return [p.strip() for p in parts]


def known_keys() -> frozenset[str]:
    """The spec keys an axis or a setting may name: every field of the spec's sections (so new keys work too)."""
    return frozenset(field_docs()) - _NOT_AXES | {"constellation.table_file"}


def check_key(key: str, where: str) -> str:
    """`key` if it is a spec key an axis may set; SpecError naming `where` otherwise."""
    if key not in known_keys():
        if key in _NOT_AXES:
            raise SpecError(where, key, "a design choice: the candidates share the base's name")
        raise SpecError(where, shown(key), "a spec key section.key (`qamsmith list` shows them), e.g. "
                        "demapper.llr_width")
    return key


_RANGE_RE = re.compile(r"^([-+]?\d+)\.\.([-+]?\d+)$")


def _values(text: str, key: str, where: str) -> list[Any]:
    """Values of one key from text: TOML values ('5', 'maxlog', '"x"', '[4, 16]') or an integer range 'a..b'."""
    m = _RANGE_RE.match(text)
    if m:
        lo, hi = int(m.group(1)), int(m.group(2))
        if hi < lo or hi - lo + 1 > MAX_RANGE:
            raise SpecError(where, text, f"a range lo..hi with lo <= hi and at most {MAX_RANGE} values")
        return list(range(lo, hi + 1))
    if not text:
        raise SpecError(where, text, f"a value for {key}")
    return [parse_value(text, key=key)]


def parse_axis(text: str, *, where: str = "--axis") -> Axis:
    """An axis from the command line: 'KEY=V1,V2,...', a range 'KEY=4..8', or linked keys 'K1,K2=A1:B1,A2:B2'."""
    keys_text, sep, vals_text = text.partition("=")
    if not sep or not keys_text.strip() or not vals_text.strip():
        raise SpecError(where, shown(text), "KEY=V1,V2,... (e.g. demapper.llr_width=5,6,8 or 4..8), or linked keys "
                        "K1,K2=A1:B1,A2:B2 (e.g. demapper.input_width,demapper.input_fraction=10:4,12:6)")
    keys = tuple(check_key(k.strip(), where) for k in keys_text.split(","))
    points: list[tuple[Any, ...]] = []
    for item in split_top(vals_text.strip(), ","):
        if len(keys) == 1:
            points += [(v,) for v in _values(item, keys[0], where)]
            continue
        parts = split_top(item, ":")
        if len(parts) != len(keys):
            raise SpecError(where, shown(item),
                            f"{len(keys)} values separated by ':' (one for each of {', '.join(keys)})")
        points.append(tuple(parse_value(p, key=k) for k, p in zip(keys, parts)))
    return _axis(keys, points, where)


def _axis(keys: tuple[str, ...], points: Sequence[tuple[Any, ...]], where: str) -> Axis:
    if len(set(keys)) != len(keys):
        raise SpecError(where, ",".join(keys), "each key once")
    seen: list[tuple[Any, ...]] = []
    for p in points:
        if p in seen:
            raise SpecError(where, ",".join(keys), f"distinct values ({':'.join(map(_text, p))} twice)")
        seen.append(p)
    if not seen:
        raise SpecError(where, ",".join(keys), "at least one value")
    return Axis(keys, tuple(seen))


def parse_setting(text: str, *, where: str = "--set") -> tuple[str, Any]:
    """A fixed setting on the base: 'KEY=VALUE' (TOML value syntax)."""
    key, sep, value = text.partition("=")
    if not sep or not key.strip():
        raise SpecError(where, shown(text), "section.key=value, e.g. interface.family=ecp5")
    return check_key(key.strip(), where), parse_value(value.strip(), key=key.strip())


def _flatten(table: dict[str, Any], prefix: str = "") -> Iterator[tuple[str, Any]]:
    """Dotted keys of a TOML table: {'demapper': {'llr_width': x}} and {'demapper.llr_width': x} alike."""
    for key, value in table.items():
        dotted = f"{prefix}{key}"
        if isinstance(value, dict):
            yield from _flatten(value, dotted + ".")
        else:
            yield dotted, value


#: the keys of an [explore] table (a plan file) and what each holds
PLAN_KEYS: dict[str, str] = {
    "axes": "a table of spec keys, each an array of values to sweep",
    "linked": "an array of tables {keys = [...], values = [[...], ...]}: keys whose values move together",
    "set": "a table of spec keys set on the base for every candidate",
    "budget_db": "the loss budget of the recommendation, dB",
    "clock_mhz": "the clock the recommendation must reach, MHz",
    "seed": "the Monte-Carlo seed",
    "symbols": "Monte-Carlo symbols per Es/N0 point",
    "operating_point_db": "the Es/N0 (dB) where the loss is measured",
    "gmi_target": "operating point: float exact GMI at this fraction of log2 M",
    "loss_reference": "exact or maxlog: the float receiver the loss is measured against",
    "fmax": "false: synthesis only, no place and route",
    "timeout": "seconds per tool run",
}


def read_plan(path: str | Path) -> dict[str, Any]:
    """The [explore] table of a plan file as plan fields (axes parsed, keys checked); SpecError names --plan.

    The format (PLAN_KEYS; spec keys dotted, quoted or as nested tables alike)::

        [explore]
        budget_db = 0.05              # dB
        clock_mhz = 150               # MHz, optional
        symbols = 131072              # Monte-Carlo symbols per Es/N0 point
        [explore.axes]
        "demapper.algorithm" = ["maxlog", "folded"]
        demapper.llr_width = [5, 6, 8]
        [explore.set]                 # fixed on the base for every candidate
        "interface.family" = "ecp5"
        [[explore.linked]]            # keys whose values move together
        keys = ["demapper.input_width", "demapper.input_fraction"]
        values = [[10, 4], [12, 6]]
    """
    try:
        data = read_toml(Path(path))
    except SpecError as exc:
        raise SpecError("--plan", exc.value, exc.allowed) from None
    extra = [k for k in data if k != "explore"]
    if extra or not isinstance(data.get("explore"), dict):
        raise SpecError("--plan", str(path), "a TOML file with one [explore] table (the base spec is DESIGN)")
    table = data["explore"]
    out: dict[str, Any] = {}
    for key, value in table.items():
        if key not in PLAN_KEYS:
            raise SpecError(f"explore.{key}", shown(value), f"a key of [explore]: {', '.join(PLAN_KEYS)}")
    axes: list[Axis] = []
    axes_table = table.get("axes", {})
    if not isinstance(axes_table, dict):
        raise SpecError("explore.axes", shown(axes_table), PLAN_KEYS["axes"])
    for key, values in _flatten(axes_table):
        where = f"explore.axes.{key}"
        if not isinstance(values, list):
            raise SpecError(where, shown(values), "an array of the values to sweep, e.g. [5, 6, 8]")
        axes.append(_axis((check_key(key, where),), [(v,) for v in values], where))
    linked = table.get("linked", [])
    if not isinstance(linked, list):
        raise SpecError("explore.linked", shown(linked), PLAN_KEYS["linked"])
    for n, item in enumerate(linked):
        where = f"explore.linked[{n}]"
        if (not isinstance(item, dict) or set(item) != {"keys", "values"} or not isinstance(item["keys"], list)
                or not isinstance(item["values"], list) or not item["keys"]):
            raise SpecError(where, shown(item), PLAN_KEYS["linked"])
        keys = tuple(check_key(str(k), where) for k in item["keys"])
        points = []
        for p in item["values"]:
            if not isinstance(p, list) or len(p) != len(keys):
                raise SpecError(where, shown(p), f"arrays of {len(keys)} values (one for each of {', '.join(keys)})")
            points.append(tuple(p))
        axes.append(_axis(keys, points, where))
    out["axes"] = axes
    settings = table.get("set", {})
    if not isinstance(settings, dict):
        raise SpecError("explore.set", shown(settings), PLAN_KEYS["set"])
    out["settings"] = [(check_key(k, f"explore.set.{k}"), v) for k, v in _flatten(settings)]
    for key, target in (("budget_db", "budget_db"), ("clock_mhz", "clock_mhz"), ("seed", "seed"),
                        ("symbols", "symbols"), ("operating_point_db", "operating_point_db"),
                        ("gmi_target", "gmi_fraction"), ("loss_reference", "loss_reference"), ("fmax", "fmax"),
                        ("timeout", "timeout")):
        if key in table:
            out[target] = table[key]
    return out


def _number(value: Any, key: str, lo: float, hi: float, what: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not lo <= value <= hi:
        raise SpecError(key, shown(value), what)
    return float(value)


def _integer(value: Any, key: str, lo: int, hi: int, what: str) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or not lo <= value <= hi:
        raise SpecError(key, shown(value), what)
    return value


def make_plan(*, axes: Sequence[str] = (), plan_file: str | Path | None = None, settings: Sequence[str] = (),
              **given: Any) -> Plan:
    """The plan of a command line: the plan file's [explore] table, then the flags (a flag given wins).

    `axes` and `settings` are command-line texts (parse_axis, parse_setting); `given` holds the
    other Plan fields, None where the flag was not given."""
    fields_: dict[str, Any] = read_plan(plan_file) if plan_file is not None else {}
    all_axes = list(fields_.pop("axes", [])) + [parse_axis(a) for a in axes]
    fixed = dict(fields_.pop("settings", []))
    for text in settings:
        key, value = parse_setting(text)
        fixed[key] = value
    fields_.update({k: v for k, v in given.items() if v is not None})
    seen: dict[str, str] = {}
    for a in all_axes:
        for k in a.keys:
            if k in seen:
                raise SpecError("--axis", k, "one axis per key (it is swept twice)")
            if k in fixed:
                raise SpecError("--axis", k, "a key not also fixed by --set or [explore.set]")
            seen[k] = a.name
    plan = Plan(axes=tuple(all_axes), settings=tuple(sorted(fixed.items())), **fields_)
    return check_plan(plan)


def check_plan(plan: Plan) -> Plan:
    """Refuse (SpecError, one line) a plan that cannot run; returns it with numbers as floats."""
    budget = _number(plan.budget_db, "--budget", 1e-6, 10.0, "a loss budget in dB, above 0 and at most 10")
    clock = None if plan.clock_mhz is None else _number(plan.clock_mhz, "--clock", 1.0, 1000.0,
                                                          "a clock target from 1 to 1000 MHz")
    _integer(plan.seed, "--seed", 0, 2 ** 63 - 1, "an integer from 0 to 2^63 - 1")
    _integer(plan.symbols, "--symbols", an.MIN_SYMBOLS, 10 ** 10, f"an integer from {an.MIN_SYMBOLS} to 1e10")
    op = None if plan.operating_point_db is None else _number(
        plan.operating_point_db, "--operating-point", *an.SNR_LIMITS_DB, "an Es/N0 from -30 to 80 dB")
    gmi = _number(plan.gmi_fraction, "--gmi-target", 1e-9, 1 - 1e-9, "a fraction of log2(M) between 0 and 1")
    if plan.loss_reference not in LOSS_REFERENCES:
        raise SpecError("--loss-reference", shown(plan.loss_reference), f"one of {', '.join(LOSS_REFERENCES)}")
    if not isinstance(plan.fmax, bool):
        raise SpecError("explore.fmax", shown(plan.fmax), "true or false")
    timeout = _number(plan.timeout, "--timeout", 1.0, 86400.0, "seconds per tool run, from 1 to 86400")
    if clock is not None and not plan.fmax:
        raise SpecError("--clock", plan.clock_mhz, "a target checked against Fmax: not with --no-fmax")
    if plan.size > MAX_CANDIDATES:
        raise SpecError("--axis", " x ".join(str(len(a.values)) for a in plan.axes),
                        f"at most {MAX_CANDIDATES} candidates (the product of the axes' lengths)")
    return replace(plan, budget_db=budget, clock_mhz=clock, operating_point_db=op, gmi_fraction=gmi, timeout=timeout)


# --------------------------------------------------------------------------- candidates


@dataclass(frozen=True)
class Candidate:
    """One point of the sweep: its axis values, and its resolved spec or why the spec was refused."""

    id: str
    point: tuple[tuple[Any, ...], ...]           # one tuple per axis
    settings: dict[str, Any]                     # key -> value of every axis key
    spec: DesignSpec | None
    error: str | None = None

    @property
    def hash(self) -> str | None:
        return None if self.spec is None else content_hash(self.spec)


def resolve(base: DesignSpec, plan: Plan, settings: dict[str, Any]) -> DesignSpec:
    """The spec of one candidate: the base with the plan's fixed settings and the candidate's axis values.

    A clock target chooses the stage counts (the spec refuses both at once): a candidate that sets
    interface.target_mhz > 0 gets stages 0 unless it sets them itself, and one that sets a stage count
    gets target_mhz 0 unless it sets that; the resolved spec shows what was used."""
    wanted = {**dict(plan.settings), **settings}
    if not wanted:
        return base
    i = base.interface
    target = wanted.get(_TARGET_KEY, i.target_mhz)
    stages = [wanted.get(k, getattr(i, k.split(".")[1])) for k in _STAGE_KEYS]
    numbers = all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in (target, *stages))
    if numbers and target and any(stages):
        if _TARGET_KEY in wanted and not any(k in wanted for k in _STAGE_KEYS):
            wanted.update({k: 0 for k in _STAGE_KEYS})
        elif _TARGET_KEY not in wanted:
            wanted[_TARGET_KEY] = 0.0
    return base.with_settings(wanted)


def candidates(base: DesignSpec, plan: Plan) -> list[Candidate]:
    """Every point of the axes' product (first axis slowest), resolved against the base; a refusal keeps its reason."""
    points = list(itertools.product(*(a.values for a in plan.axes)))
    width = len(str(len(points)))
    out = []
    for n, point in enumerate(points, 1):
        settings = {k: v for a, p in zip(plan.axes, point) for k, v in zip(a.keys, p)}
        cid = f"c{n:0{width}d}"
        try:
            out.append(Candidate(cid, tuple(point), settings, resolve(base, plan, settings)))
        except SpecError as exc:
            out.append(Candidate(cid, tuple(point), settings, None, str(exc)))
    return out


# --------------------------------------------------------------------------- one candidate (runs on a worker)


def task_of(spec: DesignSpec, plan: Plan) -> dict[str, Any]:
    """What a worker needs to measure one spec: plain data only (a worker may run another Python)."""
    return {"spec": spec.to_dict(), "given": sorted(spec.given), "hash": content_hash(spec),
            "family": spec.interface.family, "seed": plan.seed, "symbols": plan.symbols,
            "operating_point_db": plan.operating_point_db,
            "gmi_fraction": None if plan.operating_point_db is not None else plan.gmi_fraction,
            "fmax": plan.fmax, "pnr_seed": plan.pnr_seed, "timeout": plan.timeout}


@functools.lru_cache(maxsize=None)
def _tools(families: tuple[str, ...]) -> Tools:
    """The EDA tools of this process (looked up once per worker)."""
    return find_tools(families=families)


def tool_versions(families: Iterable[str], fmax: bool) -> dict[str, str]:
    """Versions of the tools that measure candidates of these families here (ToolMissing if one is absent)."""
    fams = tuple(f for f in PNR_FAMILIES if f in set(families)) if fmax else ()
    return dict(sorted(_tools(fams).versions.items()))


def _versions_for(versions: dict[str, str], family: str, fmax: bool) -> dict[str, str]:
    """The versions that measure one family's candidate: Yosys, and that family's nextpnr when placing."""
    return {k: v for k, v in versions.items() if k == "yosys" or (fmax and k == f"nextpnr-{family}")}


def _one_line(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()
    return text[0] if text else type(exc).__name__


_LOG_RE = re.compile(r"\s*\(log: ([^)]*)\)\s*$")


def _failed(stage: str, exc: BaseException | str, **extra: Any) -> dict[str, Any]:
    """A failed candidate: the stage, one line of reason (a tool's log path kept apart: it is machine-specific)."""
    reason = exc if isinstance(exc, str) else _one_line(exc)
    out: dict[str, Any] = {"status": "failed", "stage": stage, "reason": reason, **extra}
    m = _LOG_RE.search(reason)
    if m:
        out["reason"], out["log"] = reason[:m.start()], m.group(1)
    return out


def _module_figures(fig: dict[str, Any], family: str) -> dict[str, Any]:
    flow = fig["flows"][family]
    fm = fig.get("fmax", {}).get(family)
    return {"module": fig["module"], "luts": flow["luts"], "ffs": flow["ffs"], "brams": flow["brams"],
            "multipliers": flow["multipliers"], "latency_cycles": fig["latency_cycles"],
            "initiation_interval": fig["initiation_interval"], "fmax_mhz": None if fm is None else fm["fmax_mhz"]}


def _loss_figures(loss: an.LossResult) -> dict[str, Any]:
    def ci(v: Any) -> list[float] | None:
        return None if v is None else [float(v[0]), float(v[1])]

    return {"operating_point_esn0_db": loss.operating_point_esn0_db, "gmi_target": loss.gmi_target,
            "loss_db_vs_exact": loss.loss_db_vs_exact, "loss_db_vs_exact_ci95": ci(loss.loss_db_vs_exact_ci95),
            "loss_db_vs_maxlog": loss.loss_db_vs_maxlog, "loss_db_vs_maxlog_ci95": ci(loss.loss_db_vs_maxlog_ci95),
            "note": loss.note}


def evaluate(task: dict[str, Any]) -> dict[str, Any]:
    """Measure one candidate (task_of): build it, its implementation loss, its cost. Never raises.

    Returns {"status": "done", "loss": ..., "hardware": ..., "tools": ...} or {"status": "failed",
    "stage", "reason"}: stage "spec" when the generator refused the spec (a SpecError while building
    or simulating it: it follows from the spec), else where it broke ("build", "loss", "cost", "worker").
    Plain JSON data, the same on any worker for the same task and tools."""
    stage = "build"
    try:
        spec = DesignSpec.from_dict(task["spec"], given=frozenset(task["given"]))
        if content_hash(spec) != task["hash"]:
            return _failed("worker", f"this worker runs qamsmith {__version__}, which gives the candidate another "
                           "content hash: install the same qamsmith on every worker")
        family, fmax = task["family"], task["fmax"]
        with tempfile.TemporaryDirectory(prefix="qamsmith-explore-") as tmp:
            dd = cost.build_source(spec, Path(tmp))             # SpecError: refused (e.g. a clock out of reach)
            stage = "loss"
            with contextlib.redirect_stderr(io.StringIO()):     # no progress bar of its own
                loss = an.implementation_loss(dd.design, task["symbols"], task["seed"],
                                              operating_point_db=task["operating_point_db"],
                                              gmi_fraction=task["gmi_fraction"] or an.DEFAULT_GMI_FRACTION)
            stage = "cost"
            tools = _tools((family,) if fmax else ())
            hw = cost.estimate(dd, flows=[family], families=[family] if fmax else None, fmax=fmax,
                               references=False, seed=task["pnr_seed"], timeout=task["timeout"], tools=tools)
        result = {"status": "done", "tools": _versions_for(hw["tools"], family, fmax), "loss": _loss_figures(loss),
                  "hardware": {role: _module_figures(hw["modules"][role], family) for role in cost.ROLES}}
        return json.loads(json.dumps(result))                    # plain data: tuples as lists, as the cache reads it
    except SpecError as exc:
        return _failed("spec" if stage in ("build", "loss") else stage, exc)
    except (ToolFailed, ToolMissing) as exc:
        return _failed(stage, exc)
    except Exception as exc:                                     # noqa: BLE001 - one candidate must not end the sweep
        return _failed(stage, f"{type(exc).__name__}: {_one_line(exc)}")


def cacheable(result: dict[str, Any]) -> bool:
    """Results that follow from the spec and the tools alone: measured ones and refusals (SpecError); not tool
    failures (a timeout depends on the load) nor internal errors."""
    return result["status"] == "done" or result.get("stage") == "spec"


# --------------------------------------------------------------------------- the cache


def cache_key(task: dict[str, Any], versions: dict[str, str]) -> tuple[str, dict[str, Any]]:
    """(key, what it hashes): the spec's content hash, the tools, the Monte-Carlo and cost settings."""
    fields_ = {"format": CACHE_FORMAT, "content_hash": task["hash"],
               "tools": _versions_for(versions, task["family"], task["fmax"]),
               **{k: task[k] for k in ("seed", "symbols", "operating_point_db", "gmi_fraction", "fmax", "pnr_seed")}}
    text = json.dumps(fields_, sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(text.encode()).hexdigest()[:32], fields_


@dataclass
class Cache:
    """One JSON file per measured candidate in `root` (None: no cache)."""

    root: Path | None

    def path(self, key: str) -> Path:
        assert self.root is not None
        return self.root / f"{key}.json"

    def get(self, key: str, fields_: dict[str, Any]) -> dict[str, Any] | None:
        if self.root is None:
            return None
        try:
            entry = json.loads(self.path(key).read_text(encoding="utf-8"))
        except (OSError, ValueError):
            return None
        return entry.get("result") if isinstance(entry, dict) and entry.get("key") == fields_ else None

    def put(self, key: str, fields_: dict[str, Any], result: dict[str, Any]) -> None:
        if self.root is not None:
            write_file(self.path(key), json.dumps({"key": fields_, "result": result}, sort_keys=True, indent=1) + "\n",
                       key="--cache")

    def keys(self) -> set[str]:
        """The keys stored (for tests and the summary)."""
        if self.root is None or not self.root.is_dir():
            return set()
        return {p.stem for p in self.root.glob("*.json")}


# --------------------------------------------------------------------------- progress


@dataclass
class Progress:
    """One status line on a terminal (done / running / queued / failed / cached); nothing when stderr is not one."""

    total: int
    stream: TextIO = field(default_factory=lambda: sys.stderr)
    enabled: bool | None = None
    done: int = 0
    failed: int = 0
    cached: int = 0
    running: int = 0
    queued: int = 0

    def __post_init__(self) -> None:
        if self.enabled is None:
            self.enabled = bool(getattr(self.stream, "isatty", lambda: False)())

    def show(self) -> None:
        if not self.enabled:
            return
        finished = self.done + self.failed + self.cached
        self.stream.write(f"\rexplore: {finished}/{self.total} | {self.done} done, {self.running} running, "
                          f"{self.queued} queued, {self.failed} failed, {self.cached} cached ")
        self.stream.flush()

    def close(self) -> None:
        if self.enabled:
            self.stream.write("\n")
            self.stream.flush()


# --------------------------------------------------------------------------- runners


def _need_dask() -> tuple[Any, Any]:
    """dask.distributed and dask.config, or a one-line SpecError naming the extra (exit 2)."""
    try:
        import dask.config
        import distributed
    except ImportError:
        raise SpecError("explore", "dask.distributed", f"installed for parallel runs: {INSTALL} "
                        "(or --jobs 1 to run in this process)") from None
    return distributed, dask.config


@contextlib.contextmanager
def _workers_leave_ctrl_c() -> Iterator[None]:
    """SIGINT ignored while the embedded cluster starts its worker processes, which keep ignoring it (an ignored
    signal stays ignored across exec, and Python then installs no KeyboardInterrupt): Ctrl-C on a terminal reaches
    the whole process group, and only this command should act on it (it closes the cluster, ending the workers).
    A Ctrl-C in that second of start-up is lost; the next one works."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    old = signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, old)


def dask_setup(worker: Any) -> None:
    """Dask's preload hook, run in each worker of the embedded cluster as it starts (a worker its nanny restarts
    too): it leaves Ctrl-C to the command, as above."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)


#: Dask's nanny gives new workers MALLOC_TRIM_THRESHOLD_=65536; any explicit trim threshold turns off glibc's
#: dynamic mmap threshold, so every large numpy temporary of a candidate's Monte-Carlo becomes a fresh mmap and
#: its page faults (bench_explore.py's 24 candidates on 2 workers: 131 s wall and 41 s of system time with it,
#: 105 s and 15 s without). None unsets it in the embedded cluster's workers (a value the user exported stays).
KEEP_GLIBC_TRIM = {"distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_": None}


def default_workers() -> int:
    """One worker per core this process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:                        # not on Linux
        return max(1, os.cpu_count() or 1)


class Runner:
    """Where candidates run: `versions` probes the tools there, `run` measures tasks and reports each result."""

    workers = 1

    def __enter__(self) -> "Runner":
        return self

    def __exit__(self, *exc: Any) -> None:
        return None

    def versions(self, families: Sequence[str], fmax: bool) -> dict[str, str]:
        return tool_versions(families, fmax)

    def run(self, tasks: Sequence[dict[str, Any]], done: Callable[[dict[str, Any], dict[str, Any]], None],
            progress: Progress) -> None:
        """In this process, one after another (no Dask)."""
        for n, task in enumerate(tasks):
            progress.running, progress.queued = 1, len(tasks) - n - 1
            progress.show()
            result = evaluate(task)
            progress.running = 0
            done(task, result)


class DaskRunner(Runner):
    """An embedded LocalCluster (`workers` single-threaded processes, started only if there is work) or a scheduler."""

    def __init__(self, *, workers: int | None = None, address: str | None = None) -> None:
        self.distributed, self.dask_config = _need_dask()
        self.address = address
        self.workers = workers or default_workers()
        self.stack = contextlib.ExitStack()
        self.client: Any = None

    def __enter__(self) -> "DaskRunner":
        # exceptions inside Dask's event-loop callbacks (e.g. its cancelled wait when Ctrl-C ends the run) are
        # logged here; a candidate's own failure comes back through its future
        quiet = logging.getLogger("tornado.application")
        self.stack.callback(quiet.setLevel, quiet.level)
        quiet.setLevel(logging.CRITICAL)
        if self.address is not None:
            self._connect()
        return self

    def __exit__(self, *exc: Any) -> None:
        self.stack.close()

    def _connect(self, needed: int | None = None) -> Any:
        if self.client is not None:
            return self.client
        d = self.distributed
        if self.address is not None:
            try:
                self.client = self.stack.enter_context(d.Client(self.address, timeout="20s"))
            except (OSError, TimeoutError) as exc:
                raise SpecError("--cluster", self.address, f"a reachable Dask scheduler ({_one_line(exc)}); start one "
                                "with `dask scheduler` and workers with `dask worker tcp://HOST:8786`") from None
            try:
                self.client.wait_for_workers(1, timeout=WORKER_WAIT_S)
            except TimeoutError:
                raise SpecError("--cluster", self.address, f"a scheduler with workers (none joined within "
                                f"{WORKER_WAIT_S:g} s): start them with `dask worker {self.address} --nworkers -1 "
                                "--nthreads 1`") from None
            self.workers = max(1, sum(self.client.nthreads().values()))
        else:
            n = min(self.workers, needed or self.workers)
            with _workers_leave_ctrl_c(), self.dask_config.set(KEEP_GLIBC_TRIM):
                cluster = self.stack.enter_context(d.LocalCluster(
                    n_workers=n, threads_per_worker=1, processes=True, host="127.0.0.1", dashboard_address=None,
                    silence_logs=logging.CRITICAL, preload=[__name__]))          # runs dask_setup in each worker
                self.client = self.stack.enter_context(d.Client(cluster))
        return self.client

    def versions(self, families: Sequence[str], fmax: bool) -> dict[str, str]:
        if self.address is None:                  # the local cluster's workers are this machine
            return tool_versions(families, fmax)
        fut = self._connect().submit(tool_versions, list(families), fmax, pure=False)
        try:
            return fut.result()
        except ToolMissing as exc:
            raise ToolMissing(f"on a worker of {self.address}: {exc}") from None

    def run(self, tasks: Sequence[dict[str, Any]], done: Callable[[dict[str, Any], dict[str, Any]], None],
            progress: Progress) -> None:
        client = self._connect(len(tasks))
        futures = {client.submit(evaluate, t, pure=False): t for t in tasks}
        pending = len(futures)
        progress.running, progress.queued = min(pending, self.workers), max(0, pending - self.workers)
        progress.show()
        for fut in self.distributed.as_completed(futures):
            task = futures[fut]
            try:
                result = fut.result()
            except Exception as exc:               # noqa: BLE001 - a lost worker fails its candidate, not the sweep
                result = _failed("worker", f"{type(exc).__name__}: {_one_line(exc)}")
            fut.release()
            pending -= 1
            progress.running, progress.queued = min(pending, self.workers), max(0, pending - self.workers)
            done(task, result)


def runner(jobs: int | None, cluster: str | None) -> Runner:
    """In-process for jobs=1, an existing scheduler for `cluster`, else an embedded LocalCluster of `jobs` workers."""
    if cluster is not None:
        if jobs is not None:
            raise SpecError("--jobs", jobs, "not with --cluster (the scheduler's workers decide)")
        if not re.fullmatch(r"[a-z][a-z0-9+]*://\S+", cluster):
            raise SpecError("--cluster", shown(cluster), "a scheduler address like tcp://HOST:8786")
        return DaskRunner(address=cluster)
    if jobs is not None and (isinstance(jobs, bool) or not isinstance(jobs, int) or not 1 <= jobs <= 1024):
        raise SpecError("--jobs", shown(jobs), "an integer from 1 to 1024 (1: in this process, without Dask)")
    return Runner() if jobs == 1 else DaskRunner(workers=jobs)


# --------------------------------------------------------------------------- the sweep


@dataclass
class Outcome:
    """A finished sweep: explore.json's content, and what this run did (not part of the document)."""

    doc: dict[str, Any]
    computed: int
    cached: int
    failed: int
    workers: int
    cache_dir: Path | None
    paths: dict[str, Path] = field(default_factory=dict)


def _row(c: Candidate, result: dict[str, Any] | None, same_as: str | None, plan: Plan) -> dict[str, Any]:
    """One candidate of explore.json: its settings and figures (totals over mapper and demapper)."""
    row: dict[str, Any] = {"id": c.id, "settings": dict(c.settings), "hash": c.hash}
    if same_as:
        row["same_as"] = same_as
    if c.spec is None:
        return {**row, "status": "failed", "stage": "spec", "reason": c.error}
    row["family"] = c.spec.interface.family
    if result is None:
        return {**row, "status": "failed", "stage": "run", "reason": "not run (the sweep was interrupted)"}
    if result["status"] != "done":
        return {**row, **{k: v for k, v in result.items() if k in ("status", "stage", "reason", "log")}}
    loss, hw = result["loss"], result["hardware"]
    ref = plan.loss_reference
    fmaxes = [m["fmax_mhz"] for m in hw.values()]
    row.update({
        "status": "done", "tools": result["tools"],
        "loss_db": loss[f"loss_db_vs_{ref}"], "loss_db_ci95": loss[f"loss_db_vs_{ref}_ci95"],
        "loss_db_vs_exact": loss["loss_db_vs_exact"], "loss_db_vs_exact_ci95": loss["loss_db_vs_exact_ci95"],
        "loss_db_vs_maxlog": loss["loss_db_vs_maxlog"], "loss_db_vs_maxlog_ci95": loss["loss_db_vs_maxlog_ci95"],
        "loss_note": loss["note"], "operating_point_esn0_db": loss["operating_point_esn0_db"],
        "luts": sum(m["luts"] for m in hw.values()), "ffs": sum(m["ffs"] for m in hw.values()),
        "brams": sum(m["brams"] or 0 for m in hw.values()),
        "multipliers": sum(m["multipliers"] or 0 for m in hw.values()),
        "fmax_mhz": None if None in fmaxes else min(fmaxes),
        "latency_cycles": {role: m["latency_cycles"] for role, m in hw.items()},
        "modules": hw,
    })
    return row


def explore(base: DesignSpec, plan: Plan, *, report_dir: Path, cache_dir: Path | None, jobs: int | None = None,
            cluster: str | None = None, progress: Progress | bool | None = None,
            write: bool = True) -> Outcome:
    """Sweep the plan on `base`, write report/explore.{json,md,png}; the document and what this run did.

    `progress`: a Progress, True/None (a line when stderr is a terminal) or False (none)."""
    where = runner(jobs, cluster)                    # refuses bad --jobs / --cluster, or a missing dask, first
    if write:
        er.need_matplotlib()
        probe_directory(report_dir, key="report")       # fail before the sweep, not after it
    cands = candidates(base, plan)
    store = Cache(cache_dir)
    first: dict[str, str] = {}                       # content hash -> the first candidate with it
    tasks: dict[str, dict[str, Any]] = {}
    for c in cands:
        if c.spec is not None and c.hash not in first:
            first[c.hash] = c.id
            tasks[c.hash] = task_of(c.spec, plan)
    results: dict[str, dict[str, Any]] = {}
    refused = sum(c.spec is None for c in cands)
    bar = progress if isinstance(progress, Progress) else Progress(0, enabled=None if progress in (None, True)
                                                                    else False)
    bar.total, bar.failed = len(tasks) + refused, refused
    computed = failed = cached = 0
    with where as run:
        families = sorted({t["family"] for t in tasks.values()})
        versions = run.versions(families, plan.fmax) if tasks else {}
        missing = []
        for h, task in tasks.items():
            key, fields_ = cache_key(task, versions)
            hit = store.get(key, fields_)
            if hit is not None:
                results[h] = hit
                cached += 1
            else:
                missing.append(task)
        bar.cached = cached
        bar.queued = len(missing)
        bar.show()

        def finished(task: dict[str, Any], result: dict[str, Any]) -> None:
            nonlocal computed, failed
            results[task["hash"]] = result
            if result["status"] == "done":
                computed += 1
                bar.done += 1
            else:
                failed += 1
                bar.failed += 1
            if cacheable(result):
                key, fields_ = cache_key(task, {**versions, **result.get("tools", {})})
                store.put(key, fields_, result)
            bar.show()

        try:
            if missing:
                run.run(missing, finished, bar)
        finally:
            bar.close()
        workers = run.workers
    rows = [_row(c, results.get(c.hash) if c.spec is not None else None,
                 first[c.hash] if c.spec is not None and first[c.hash] != c.id else None, plan) for c in cands]
    doc = er.document(base, plan.record(), rows)
    out = Outcome(doc, computed, cached, failed, workers, cache_dir)
    if write:
        out.paths = er.write(doc, report_dir)
    return out


__all__ = ["CACHE_DIR", "FILES", "INSTALL", "LOSS_REFERENCES", "MAX_CANDIDATES", "PLAN_KEYS", "Axis", "Cache",
           "Candidate", "DaskRunner", "Outcome", "Plan", "Progress", "Runner", "cache_key", "cacheable", "candidates",
           "check_key", "check_plan", "dask_setup", "default_workers", "evaluate", "explore", "known_keys", "make_plan",
           "parse_axis", "parse_setting", "read_plan", "resolve", "runner", "split_top", "task_of", "tool_versions"]
