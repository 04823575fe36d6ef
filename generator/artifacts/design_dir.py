"""A design directory (out/<name>/): every file built from a spec, written atomically, and read back.

`build_files(spec)` is a pure function of the spec and the generator version (byte-identical on
every run). `write_design` replaces a directory only when it holds nothing but unmodified files of
an earlier run (or with `force`); files qamsmith did not write are never touched, and `report/`
(what `analyze` and `cost` wrote) stays with an unchanged design and is kept as
`report-stale-<old content hash>/` when the design changed. `DesignDirectory` reads a written
directory through its manifest: file names, top modules and ROM parameters come from there.
"""

from __future__ import annotations

import hashlib
import json
import os
from dataclasses import dataclass
from functools import cached_property
from pathlib import Path
from typing import Any

from ..errors import SpecError
from ..model import Design, derive
from ..spec import DesignSpec
from .kit import kit_files
from .manifest import build_manifest, rom_files
from .rtl import rtl_files, rtl_manifest
from .testbench import testbench_files, testbench_manifest
from .texts import GENERATOR, content_hash, design_toml
from .vectors import vector_files
from .writer import replace_directory

MANIFEST = "manifest.json"
#: where `qamsmith analyze` and `qamsmith cost` write about a design
REPORT_DIR = "report"
#: what an earlier design's report becomes when the design changes
STALE_PREFIX = "report-stale-"


def build_files(spec: DesignSpec) -> dict[str, bytes]:
    """Every file of `out/<name>/`: relative path -> content (raises SpecError before anything is written)."""
    design = derive(spec)
    rtl = rtl_manifest(design)
    tb = testbench_manifest(design)
    files: dict[str, bytes] = {"design.toml": design_toml(design).encode()}
    files.update(rom_files(design))
    vec, vectors = vector_files(design)
    files.update(vec)
    # the kit is written from the manifest's numbers, which do not depend on its file list
    kit = kit_files(build_manifest(design, {}, vectors, rtl, tb))
    for extra in (rtl_files(design), testbench_files(design, rtl), kit):
        for path, content in extra.items():
            if path in files or path == MANIFEST:
                raise RuntimeError(f"two generators write {path!r}")
            files[path] = content.encode()
    manifest = build_manifest(design, files, vectors, rtl, tb)
    files[MANIFEST] = (json.dumps(manifest, sort_keys=True, indent=2) + "\n").encode()
    return files


# --------------------------------------------------------------------------- writing


def _entries(root: Path) -> list[str]:
    """Relative paths of the files, links and empty directories under root."""
    out = []
    for dirpath, dirnames, filenames in os.walk(root):
        here = Path(dirpath)
        for name in list(dirnames):
            if (here / name).is_symlink():
                dirnames.remove(name)
                filenames.append(name)
        if not dirnames and not filenames and here != root:
            out.append(here.relative_to(root).as_posix())
        out.extend((here / name).relative_to(root).as_posix() for name in filenames)
    return sorted(out)


def _read_manifest(target: Path) -> dict[str, Any] | None:
    try:
        data = json.loads((target / MANIFEST).read_text(encoding="utf-8"))
        return data if data["generator"]["name"] == GENERATOR else None
    except (OSError, ValueError, KeyError, TypeError):
        return None


def _owned(target: Path) -> dict[str, str]:
    """Files the tool wrote into target earlier (path -> sha256), from its manifest; {} if none."""
    data = _read_manifest(target)
    try:
        return {str(e["path"]): str(e["sha256"]) for e in data["files"]} if data else {}
    except (KeyError, TypeError):
        return {}


def generated_files(target: str | Path) -> list[str]:
    """Relative paths of the files qamsmith wrote into a design directory (manifest.json included)."""
    owned = _owned(Path(target))
    return sorted([*owned, MANIFEST]) if owned else []


def _sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def write_design(spec: DesignSpec, out_root: str | Path, *, force: bool = False) -> Path:
    """Write `out_root/<name>/` atomically; raises SpecError (naming --out), writing nothing, when it may not."""
    files = build_files(spec)
    root = Path(out_root)
    target = root / spec.name
    where = f"the design directory {target}"
    if target.exists() and not target.is_dir():
        raise SpecError("--out", str(out_root), f"a directory to write into ({where} is a file)")
    keep: dict[str, str] = {}
    if target.exists():
        owned = _owned(target)
        present = _entries(target)
        dirs = {str(Path(p).parent) for p in [*owned, *files]}
        dirs = {d_ for p in dirs for d_ in [p, *map(str, Path(p).parents)]}
        reports = [p for p in present if p.startswith((REPORT_DIR + "/", STALE_PREFIX))]
        foreign = [p for p in present if p not in owned and p != MANIFEST and p not in dirs and p not in reports]
        modified = [p for p in present if p in owned and _sha(target / p) != owned[p]]
        clash = [p for p in foreign if p in files or any(g.startswith(p + "/") for g in files)]
        if clash:
            raise SpecError("--out", str(out_root), f"a directory where {where} can be written: {clash[0]!r} "
                            "there was not written by qamsmith and would be overwritten (move it away; --force "
                            "keeps such files, so it cannot help)")
        if (foreign or modified) and not force:
            what = (f"{len(foreign)} file(s) qamsmith did not write, e.g. {foreign[0]!r}" if foreign
                    else f"{len(modified)} generated file(s) changed since, e.g. {modified[0]!r}")
            raise SpecError("--out", str(out_root), f"a directory where {where} is new or as qamsmith wrote it; it "
                            f"holds {what} (use --force to replace only the generated files)")
        keep = {p: p for p in foreign}
        old = (_read_manifest(target) or {}).get("content_hash")
        for p in reports:
            # the report describes the design it was made for: it stays with that design
            keep[p] = p if old == content_hash(spec) or not p.startswith(REPORT_DIR + "/") \
                else f"{STALE_PREFIX}{old or 'unknown'}/{p[len(REPORT_DIR) + 1:]}"
    return replace_directory(target, files, keep=keep, key="--out")


# --------------------------------------------------------------------------- reading


@dataclass(frozen=True)
class DesignDirectory:
    """A directory `qamsmith generate` wrote: its spec, manifest and files, located through the manifest."""

    root: Path

    @staticmethod
    def open(path: str | Path, *, key: str = "design") -> "DesignDirectory":
        root = Path(path)
        if not (root / "design.toml").is_file() or not (root / MANIFEST).is_file():
            raise SpecError(key, str(path), "a directory written by `qamsmith generate` (with design.toml and "
                                            "manifest.json)")
        d = DesignDirectory(root.resolve())
        _ = d.manifest
        return d

    @cached_property
    def manifest(self) -> dict[str, Any]:
        try:
            data = json.loads((self.root / MANIFEST).read_text(encoding="utf-8"))
            data["rtl"]["modules"]
        except (OSError, ValueError, KeyError, TypeError) as exc:
            raise SpecError("design", str(self.root / MANIFEST), f"a manifest of this qamsmith version ({exc}); "
                            "regenerate the design") from None
        return data

    @cached_property
    def spec(self) -> DesignSpec:
        return DesignSpec.from_toml(self.root / "design.toml")

    @cached_property
    def design(self) -> Design:
        return derive(self.spec)

    def module(self, role: str) -> dict[str, Any]:
        """The manifest's entry of the mapper or the demapper."""
        return self.manifest["rtl"]["modules"][role]

    def languages(self) -> list[str]:
        return list(self.manifest["rtl"]["languages"])

    def rtl_file(self, role: str, language: str = "verilog") -> Path:
        return self.root / self.module(role)["files"][language]

    def rom_parameters(self, role: str = "mapper") -> dict[str, str]:
        """Module parameter -> absolute path of its ROM image (the manifest's default, resolved here)."""
        return {name: str((self.root / rel).resolve()) for name, rel in self.module(role)["parameters"].items()}

    def path(self, rel: str) -> Path:
        return self.root / rel

    @property
    def testbench(self) -> dict[str, Any]:
        """The manifest's testbench entry: harness and cocotb modules and files."""
        return self.manifest["testbench"]


def load_design(path: str | Path) -> Design:
    """The `Design` of a generated design directory (its design.toml), for testbenches and scripts."""
    return DesignDirectory.open(path).design


__all__ = ["MANIFEST", "REPORT_DIR", "STALE_PREFIX", "DesignDirectory", "build_files", "generated_files",
           "load_design", "write_design"]
