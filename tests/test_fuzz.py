"""The front ends, fuzzed (hypothesis): every generated spec either builds or is refused in one line.

Specs mix valid and invalid values, types and sizes (5,000-digit integers, 1e400, NaN, long strings),
nesting (arrays 3,000 deep, tables where a value belongs) and unknown keys, and reach the real command
line both as a TOML file (`qamsmith generate spec.toml`) and as flags (`--set section.key=value` and the
flags of SPEC_FLAGS). Every run ends in exit 0 with the design directory written, or exit 2 with exactly
one line `qamsmith: error: <key> = ...` naming a key the user set, and nothing in the output directory.
Derandomized (the same examples every run) and sized to run in well under 30 s.
"""

from __future__ import annotations

import contextlib
import io
import re
import tempfile
import tomllib
import warnings
from dataclasses import dataclass
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from qamsmith.cli import SPEC_FLAGS, main
from qamsmith.spec import SECTIONS, examples, field_docs

#: every key a refusal may name: the spec's keys, table_file (documented by `qamsmith list`), the
#: sections (a value where a table of keys belongs) and the flags
REAL_KEYS = set(field_docs()) | {"constellation.table_file"} | set(SECTIONS)
FLAG_OF = {key: flag for flag, key, _ in SPEC_FLAGS}
FLAGS = {flag for flag, _, _ in SPEC_FLAGS}
FUZZ = settings(max_examples=250, derandomize=True, database=None, deadline=None,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large, HealthCheck.large_base_example])

QPSK_ROWS = ["[0, -1, -1]", "[1, -1, 1]", "[2, 1, -1]", "[3, 1, 1]"]
CSV_FILES = {
    "qpsk.csv": b"label,i,q\n0,-1,-1\n1,-1,1\n2,1,-1\n3,1,1\n",
    "three.csv": b"label,i,q\n0,-1,-1\n1,-1,1\n2,1,-1\n",
    "duplicate.csv": b"0,-1,-1\n1,-1,1\n2,1,-1\n2,1,1\n",
    "huge.csv": b"0,-1,-1\n1,-1,1\n2,1,-1\n3,1e400,1\n",
    "latin1.csv": "0,-1,-1\n1,-1,1\n2,1,-1\n3,1,1 # \u00e9\n".encode("latin-1"),
    "words.csv": b"0,-1,-1\n1,one,1\n",
}


# --------------------------------------------------------------------------- values, as TOML text

def _int_text(n: int) -> str:
    return str(n)


huge_ints = st.integers(20, 6000).map(lambda d: "9" * d) | st.integers(20, 400).map(lambda d: "-1" + "0" * d)
floats = st.sampled_from(["16.0", "1.5", "-2.5", "1e400", "-1e400", "1e308", "nan", "inf", "-inf", "0.0", "12.0",
                          "1e-320", "1" + "0" * 400 + ".0"])
plain_strings = st.text(st.characters(min_codepoint=0x20, max_codepoint=0x7e, exclude_characters='"\\'), max_size=12)
strings = (plain_strings.map(lambda s: f'"{s}"') | st.integers(200, 5000).map(lambda n: '"' + "x" * n + '"')
           | st.sampled_from(['"gray"', '"table"', '"é ü"', '"a\\nb"', '""']))
deep_arrays = st.sampled_from([1, 2, 40, 400, 3000]).map(lambda d: "[" * d + "]" * d)
wild_scalars = (st.integers(-10, 5000).map(_int_text) | huge_ints | floats | strings
                | st.sampled_from(["true", "false", "1979-05-27", "07:32:00"]))
wild = st.recursive(wild_scalars | deep_arrays,
                    lambda inner: st.lists(inner, max_size=3).map(lambda xs: "[" + ", ".join(xs) + "]")
                    | st.dictionaries(st.sampled_from(["a", "width", "order"]), inner, max_size=2).map(
                        lambda d: "{" + ", ".join(f"{k} = {v}" for k, v in d.items()) + "}"),
                    max_leaves=6)


def _rows(rows: list[str]) -> str:
    return "[" + ", ".join(rows) + "]"


tables = (st.just(_rows(QPSK_ROWS))
          | st.tuples(st.integers(0, 3), st.integers(0, 2), wild_scalars).map(
              lambda t: _rows(QPSK_ROWS[:t[0]] + ["[" + ", ".join(["0", "1", "1"][:t[1]] + [t[2]] + ["1", "1", "1"][t[1] + 1:]) + "]"]
                              + QPSK_ROWS[t[0] + 1:]))
          | st.sampled_from([_rows(QPSK_ROWS[:3]), _rows(QPSK_ROWS + ["[4, 3, 3]"]), "[]", "5", "1.5",
                             _rows(["[0, 1e300, 1]"] + QPSK_ROWS[1:]), _rows(["[0, 1e-300, 1e-300]"] + QPSK_ROWS[1:])]))

#: values that often build, per key (kept small so that a design builds in a fraction of a second)
VALID: dict[str, st.SearchStrategy[str]] = {
    "name": st.sampled_from(['"fz"', '"fz-b"', '"fz_c"']),
    "constellation.order": st.sampled_from([2, 4, 4, 16, 16, 64, 256]).map(_int_text),
    "constellation.labeling": st.sampled_from(['"gray"', '"3gpp-nr"', '"ieee-802.11"', '"natural"', '"table"']),
    "constellation.table": tables,
    "constellation.orders": st.sampled_from(["[4, 16]", "[2, 4, 16]", "[4, 16, 64]", '"nr-pdsch-64"', '"wlan-ofdm"',
                                             "[16, 4]", "[]", "[4]", '"nope"']),
    "constellation.table_file": st.sampled_from(sorted(CSV_FILES) + ["missing.csv"]).map(lambda n: f'"{n}"'),
    "mapper.width": st.integers(2, 14).map(_int_text),
    "mapper.scaling": st.sampled_from(['"normalized"', '"full-scale"']),
    "mapper.fraction": st.integers(0, 13).map(_int_text),
    "mapper.backoff_db": st.sampled_from(["0.0", "1.0", "3", "20.5", "40.0"]),
    "mapper.rounding": st.sampled_from(['"half-even"', '"half-away"', '"floor"']),
    "mapper.implementation": st.sampled_from(['"rom"', '"logic"']),
    "mapper.tables": st.sampled_from(['"inline"', '"readmemh"']),
    "demapper.algorithm": st.sampled_from(['"maxlog"', '"folded"', '"hard"']),
    "demapper.input_width": st.integers(2, 12).map(_int_text),
    "demapper.input_fraction": st.integers(0, 8).map(_int_text),
    "demapper.llr_width": st.integers(2, 12).map(_int_text),
    "demapper.llr_fraction": st.integers(0, 6).map(_int_text),
    "demapper.rounding": st.sampled_from(['"half-even"', '"half-away"', '"toward-zero"', '"floor"']),
    "demapper.scale_width": st.integers(0, 8).map(_int_text),
    "demapper.scale_fraction": st.integers(0, 4).map(_int_text),
    "interface.prefix": st.sampled_from(['""', '"fz"', '"fz_top"']),
    "interface.mapper_stages": st.integers(0, 3).map(_int_text),
    "interface.demapper_stages": st.integers(0, 3).map(_int_text),
    "interface.target_mhz": st.sampled_from(["0", "0.0", "50.0", "100"]),
    "interface.family": st.sampled_from(['"ice40"', '"ecp5"']),
    "interface.tlast": st.sampled_from(["true", "false"]),
    "interface.tuser_width": st.integers(0, 4).map(_int_text),
    "interface.flow_control": st.sampled_from(['"shared"', '"per-stage"']),
    "interface.skid": st.sampled_from(["true", "false"]),
    "interface.lanes": st.sampled_from(["1", "2", "3", "0", "17"]),
}
UNKNOWN = ["mapper.widht", "demapper.llr_bits", "interface.clock", "constellation.points", "pipeline.stages"]


@st.composite
def entries(draw) -> dict[str, str]:
    """dotted key -> TOML value text: a few keys, mostly plausible values, some wild ones, some unknown keys."""
    keys = draw(st.lists(st.sampled_from(sorted(VALID)), max_size=6, unique=True))
    out = {}
    for key in keys:
        out[key] = draw(wild) if draw(st.sampled_from([False] * 7 + [True] * 3)) else draw(VALID[key])
    if draw(st.sampled_from([False] * 9 + [True])):
        out[draw(st.sampled_from(UNKNOWN))] = draw(wild_scalars)
    return out


# --------------------------------------------------------------------------- running the command line

@dataclass
class Run:
    code: int
    out: str
    err: str
    out_dir: Path


def _run(argv: list[str], out_dir: Path) -> Run:
    stdout, stderr = io.StringIO(), io.StringIO()
    with warnings.catch_warnings(record=True) as caught, contextlib.redirect_stdout(stdout), \
            contextlib.redirect_stderr(stderr):
        warnings.simplefilter("always")
        try:
            code = main([*argv, "--out", str(out_dir)])
        except SystemExit as exc:             # argparse: not expected for anything generated here
            code = 100 + int(exc.code or 0)
    # a warning would be a second line on the real command line's stderr
    assert not caught, [str(w.message) for w in caught]
    return Run(code, stdout.getvalue(), stderr.getvalue(), out_dir)


def _check(run: Run, set_keys: set[str], spec: str) -> None:
    """Exit 0 and a design directory, or exit 2, one line naming a key the user set, nothing written."""
    if run.code == 0:
        written = [p for p in run.out_dir.iterdir() if p.is_dir()]
        assert len(written) == 1 and (written[0] / "design.toml").is_file(), (spec, run.out)
        return
    assert run.code == 2, (spec, run.code, run.err[-2000:])
    lines = run.err.splitlines()
    assert len(lines) == 1 and lines[0].startswith("qamsmith: error: "), (spec, run.err[:2000])
    assert len(lines[0]) < 400, lines[0]
    match = re.match(r"qamsmith: error: (\S+) = ", lines[0])
    assert match, lines[0]
    key = match.group(1)
    assert key in REAL_KEYS | FLAGS | set(UNKNOWN) | {"pipeline"}, lines[0]
    assert key in set_keys, (lines[0], sorted(set_keys))
    assert not run.out_dir.exists() or not any(run.out_dir.iterdir()), (spec, lines[0])


def _csv_dir(root: Path) -> None:
    for name, data in CSV_FILES.items():
        (root / name).write_bytes(data)


# --------------------------------------------------------------------------- the properties

def _toml(spec: dict[str, str], shape: int) -> str:
    """The TOML text of dotted keys: [section] headers, or dotted keys, or a value in place of a section."""
    top = [f"name = {spec['name']}"] if "name" in spec else []
    sections: dict[str, list[str]] = {}
    for dotted, value in spec.items():
        if dotted != "name":
            section, key = dotted.split(".")
            sections.setdefault(section, []).append(f"{key} = {value}")
    if shape == 1:                             # dotted keys at the top level
        return "\n".join(top + [f"{s}.{line}" for s, lines in sections.items() for line in lines]) + "\n"
    return "\n".join(top + [f"[{s}]\n" + "\n".join(lines) for s, lines in sections.items()]) + "\n"


@FUZZ
@given(spec=entries(), shape=st.integers(0, 4))
def test_fuzzed_toml_specs_build_or_are_refused_in_one_line(spec: dict[str, str], shape: int) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        _csv_dir(root)
        # the user wrote each key and each [section] holding one
        set_keys = set(spec) | {key.split(".")[0] for key in spec}
        sections = sorted({key.split(".")[0] for key in spec if key != "name"})
        if shape == 4 and sections:            # a value where a section's table belongs
            spec = {k: v for k, v in spec.items() if k.split(".")[0] != sections[0]}
            text = f"{sections[0]} = 5\n" + _toml(spec, 0)
        else:
            text = _toml(spec, shape)
        path = root / "spec.toml"
        path.write_text(text, encoding="utf-8")
        _check(_run(["generate", str(path)], root / "out"), set_keys, text[:3000])


def _example_keys(name: str) -> set[str]:
    """The keys a built-in example writes (the user wrote them, through the example)."""
    data = tomllib.loads(examples()[name].read_text(encoding="utf-8"))
    return {"name"} | {f"{sec}.{key}" for sec, table in data.items() if isinstance(table, dict) for key in table}


@FUZZ
@given(spec=entries(), flags=st.integers(0, 1),
       base=st.sampled_from([None, None, "larkspur-telemetry-qpsk", "larkspur-spur-16"]))
def test_fuzzed_flags_build_or_are_refused_in_one_line(spec: dict[str, str], flags: int, base: str | None) -> None:
    """--set and the SPEC_FLAGS flags, alone or over a built-in example."""
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        _csv_dir(root)
        argv, set_keys = ["generate"], set(spec)
        if base is not None:
            argv.append(base)
            set_keys |= _example_keys(base)
        for key, value in spec.items():
            csv = key == "constellation.table_file" and value.strip('"') in [*CSV_FILES, "missing.csv"]
            if csv:
                value = '"' + str(root / value.strip('"')) + '"'
            if flags and csv:                  # --table sets the labeling as well
                argv.append(f"--table={value[1:-1]}")
                set_keys.add("constellation.labeling")
            elif flags and key in FLAG_OF:     # the flag's own syntax: strings bare, numbers as written
                bare = value[1:-1] if value.startswith('"') else value
                argv.append(f"{FLAG_OF[key]}={bare}")
            else:
                argv += ["--set", f"{key}={value}"]
        _check(_run(argv, root / "out"), set_keys, " ".join(argv)[:3000])
