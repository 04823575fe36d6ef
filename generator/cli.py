"""The `qamsmith` command: generate designs, list what is supported, run the model on vector files.

Bad input of any kind raises SpecError, printed as one line `qamsmith: error: ...` with exit
status 2 (argparse usage errors exit 2 as well); nothing is written in that case.
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys
from dataclasses import fields
from importlib import resources
from pathlib import Path
from typing import Any, Sequence

from . import __version__
from .constellation import LABELINGS, ORDERS
from .errors import SpecError
from .fixed import ROUNDING_MODES
from .spec import ALGORITHMS, SECTIONS, DesignSpec, field_docs, parse_value

#: Modules that add their own subcommand: each defines `register(subparsers) -> None`.
COMMAND_MODULES: tuple[str, ...] = ("qamsmith.verify", "qamsmith.analysis", "qamsmith.report", "qamsmith.estimate")

DEFAULT_EXAMPLE = "larkspur-backhaul-256"

#: (flag, spec key, type) of the common fields; everything else goes through --set
SPEC_FLAGS: tuple[tuple[str, str, type], ...] = (
    ("--order", "constellation.order", int),
    ("--labeling", "constellation.labeling", str),
    ("--algorithm", "demapper.algorithm", str),
    ("--mapper-width", "mapper.width", int),
    ("--input-width", "demapper.input_width", int),
    ("--input-fraction", "demapper.input_fraction", int),
    ("--llr-width", "demapper.llr_width", int),
    ("--llr-fraction", "demapper.llr_fraction", int),
    ("--name", "name", str),
)


# --------------------------------------------------------------------------- examples


def examples() -> dict[str, Any]:
    """Built-in example specs shipped in the package: name -> resource (a TOML file)."""
    folder = resources.files("qamsmith") / "examples"
    return {p.name[:-5]: p for p in sorted(folder.iterdir(), key=lambda p: p.name) if p.name.endswith(".toml")}


def example_summary(resource: Any) -> str:
    """First comment line of an example, without the '#'."""
    for line in resource.read_text(encoding="utf-8").splitlines():
        if line.startswith("#") and line.strip("# "):
            return line.strip("# ")
    return ""


def load_spec(source: str) -> DesignSpec:
    """A spec from a TOML path, or a built-in example by name."""
    path = Path(source)
    if path.is_dir() and (path / "design.toml").is_file():
        path = path / "design.toml"
    if path.exists() or source.endswith(".toml") or "/" in source:
        return DesignSpec.from_toml(path)
    found = examples()
    if source in found:
        with resources.as_file(found[source]) as real:
            return DesignSpec.from_toml(real)
    raise SpecError("spec", source, f"a TOML file or a built-in example: {', '.join(found)}")


# --------------------------------------------------------------------------- generate


def _settings(args: argparse.Namespace) -> dict[str, Any]:
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
            raise SpecError("--set", item, "section.key=value, e.g. mapper.scaling=full-scale")
        settings[key.strip()] = parse_value(text.strip())
    return settings


def _auto_name(spec: DesignSpec) -> str:
    c = spec.constellation
    return f"qam{c.order}-{c.labeling.replace('.', '')}-{spec.demapper.algorithm}"


def build_spec(args: argparse.Namespace) -> DesignSpec:
    """The spec a `generate` command line asks for (see `qamsmith generate --help`)."""
    settings = _settings(args)
    if args.spec is not None:
        return load_spec(args.spec).with_settings(settings) if settings else load_spec(args.spec)
    if not settings:
        return load_spec(DEFAULT_EXAMPLE)
    spec = DesignSpec().with_settings(settings)
    return spec if "name" in settings else spec.with_settings({"name": _auto_name(spec)})


def cmd_generate(args: argparse.Namespace) -> int:
    from .emit import content_hash, generated_files, write_design

    spec = build_spec(args)
    target = write_design(spec, args.out, force=args.force)
    owned = generated_files(target)
    groups = sorted({p.split("/", 1)[0] + ("/" if "/" in p else "") for p in owned})
    dm = spec.demapper
    print(f"qamsmith: wrote {target}/: {len(owned)} files ({', '.join(groups)})")
    print(f"  {spec.constellation.order}-point {spec.constellation.labeling}, mapper {spec.mapper.width}-bit, "
          f"demapper {dm.algorithm} {dm.input_width}-bit in, {dm.llr_width}-bit LLR; "
          f"content hash {content_hash(spec)}")
    return 0


# --------------------------------------------------------------------------- list


def cmd_list(args: argparse.Namespace) -> int:
    out = sys.stdout
    out.write(f"orders:         {', '.join(map(str, ORDERS))} (square QAM; BPSK and QPSK included)\n")
    out.write(f"labelings:      {', '.join(LABELINGS)} (table: a label,i,q CSV via --table)\n")
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
    from .emit import output_header, packing, parse_words, run_block, format_words
    from .model import derive

    design = derive(load_spec(args.design))
    pack = packing(design)
    source = args.input
    if source is None:
        base = Path(args.design)
        base = base if base.is_dir() else base.parent
        source = str(base / "vectors" / f"{args.block}_in.hex")
    try:
        text = Path(source).read_text(encoding="utf-8")
    except OSError as exc:
        raise SpecError("--input", source, f"a readable vector file ({exc.strerror})") from None
    words = parse_words(text, pack[f"{args.block}_input"]["width"], source)
    if args.block == "mapper":
        order = design.constellation.order
        bad = next((w for w in words if w >= order), None)
        if bad is not None:
            raise SpecError("--input", f"{source}: label {bad:#x}", f"labels 0..{order - 1}")
    result = run_block(design, args.block, words)
    data = format_words(result, pack[f"{args.block}_output"]["width"], output_header(design, args.block, len(result)))
    if args.output is None:
        sys.stdout.buffer.write(data)
        sys.stdout.flush()
    else:
        try:
            Path(args.output).write_bytes(data)
        except OSError as exc:
            raise SpecError("--output", args.output, f"a writable file ({exc.strerror})") from None
    return 0


# --------------------------------------------------------------------------- parser


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="qamsmith", description="QAM mapper and soft-decision (LLR) demapper generator for FPGA modems.")
    parser.add_argument("--version", action="version", version=f"qamsmith {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    gen = sub.add_parser("generate", help="build a design into OUT/<name>/",
                         description="Build a design (Verilog, ROM images, manifest, vectors) into OUT/<name>/. "
                                     f"With no spec and no spec flags: the built-in example {DEFAULT_EXAMPLE}.")
    gen.add_argument("spec", nargs="?", metavar="SPEC",
                     help="a spec TOML file (e.g. out/<name>/design.toml) or a built-in example name")
    for flag, key, typ in SPEC_FLAGS:
        gen.add_argument(flag, type=typ, metavar=flag[2:].split("-")[-1].upper(), help=f"sets {key}")
    gen.add_argument("--table", metavar="CSV", help="a label,i,q CSV: sets constellation.labeling = table")
    gen.add_argument("--set", action="append", metavar="SECTION.KEY=VALUE",
                     help="any spec key (TOML value syntax), repeatable")
    gen.add_argument("--out", default="out", metavar="DIR", help="output root (default: out)")
    gen.add_argument("--force", action="store_true",
                     help="replace generated files even if edited, keeping files qamsmith did not write")
    gen.set_defaults(func=cmd_generate)

    lst = sub.add_parser("list", help="orders, labelings, algorithms, spec keys and built-in examples")
    lst.set_defaults(func=cmd_list)

    run = sub.add_parser("run", help="run the bit-exact model on a vector file",
                         description="Read stimulus words (hex, one a line, the packing of manifest.json) and "
                                     "write the model's expected output words in the same format.")
    run.add_argument("design", metavar="DESIGN", help="a generated design directory, a spec TOML or an example name")
    run.add_argument("--block", required=True, choices=("mapper", "demapper"))
    run.add_argument("--input", metavar="FILE", help="stimulus words (default: DESIGN/vectors/<block>_in.hex)")
    run.add_argument("--output", metavar="FILE", help="expected words (default: standard output)")
    run.set_defaults(func=cmd_run)

    for name in COMMAND_MODULES:
        importlib.import_module(name).register(sub)
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
    except SpecError as exc:
        print(f"qamsmith: error: {exc}", file=sys.stderr)
        return 2
    except BrokenPipeError:                    # e.g. `qamsmith list | head`: not an error of ours
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0


if __name__ == "__main__":
    sys.exit(main())
