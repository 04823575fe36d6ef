"""Where a spec comes from: a TOML file, a generated design directory, or a built-in example by name."""

from __future__ import annotations

from importlib import resources
from pathlib import Path
from typing import Any

from ..errors import SpecError
from .design import DesignSpec

#: the example `qamsmith generate` builds when given no spec
DEFAULT_EXAMPLE = "larkspur-backhaul-256"


def examples() -> dict[str, Any]:
    """Built-in example specs shipped in the package: name -> resource (a TOML file)."""
    folder = resources.files("qamsmith.spec") / "examples"
    return {p.name[:-5]: p for p in sorted(folder.iterdir(), key=lambda p: p.name) if p.name.endswith(".toml")}


def example_summary(resource: Any) -> str:
    """First comment line of an example, without the '#'."""
    for line in resource.read_text(encoding="utf-8").splitlines():
        if line.startswith("#") and line.strip("# "):
            return line.strip("# ")
    return ""


def load_spec(source: str) -> DesignSpec:
    """A spec from a TOML path, a design directory (its design.toml), or a built-in example by name."""
    path = Path(source)
    if path.is_dir() and (path / "design.toml").is_file():
        path = path / "design.toml"
    if path.exists() or source.endswith(".toml") or "/" in source:
        return DesignSpec.from_toml(path)
    found = examples()
    if source in found:
        with resources.as_file(found[source]) as real:
            return DesignSpec.from_toml(real)
    raise SpecError("spec", source, f"a TOML file, a design directory or a built-in example: {', '.join(found)}")


__all__ = ["DEFAULT_EXAMPLE", "example_summary", "examples", "load_spec"]
