"""Reading what users write: spec TOML files and label,i,q table CSVs (one-line SpecError on any problem)."""

from __future__ import annotations

import math
import tomllib
from pathlib import Path
from typing import Any

from ..errors import SpecError


def read_toml(path: Path) -> dict[str, Any]:
    """The parsed TOML of a spec file (SpecError: unreadable, not UTF-8 or not TOML)."""
    try:
        return tomllib.loads(path.read_text(encoding="utf-8"))
    except OSError as exc:
        raise SpecError("spec", str(path), f"a readable TOML file ({exc.strerror})") from None
    except tomllib.TOMLDecodeError as exc:
        raise SpecError("spec", str(path), f"valid TOML ({exc})") from None


def read_table_csv(path: str) -> tuple[tuple[int, float, float], ...]:
    """Rows of a `label,i,q` CSV (a header line is allowed; '#' starts a comment)."""
    key = "constellation.table_file"
    try:
        with open(path, encoding="utf-8") as fh:
            lines = fh.read().splitlines()
    except OSError as exc:
        raise SpecError(key, path, f"a readable CSV file ({exc.strerror})") from None
    rows = []
    for lineno, line in enumerate(lines, 1):
        text = line.split("#", 1)[0].strip()
        if not text or text.replace(" ", "").lower() == "label,i,q":
            continue
        cells = [c.strip() for c in text.split(",")]
        if len(cells) != 3:
            raise SpecError(key, f"{path}:{lineno}: {line.strip()}", "three columns label,i,q")
        try:
            lab = int(cells[0])
            i, q = float(cells[1]), float(cells[2])
        except ValueError:
            raise SpecError(key, f"{path}:{lineno}: {line.strip()}",
                            "an integer label and numeric i, q") from None
        if not (math.isfinite(i) and math.isfinite(q)) or lab < 0:
            raise SpecError(key, f"{path}:{lineno}: {line.strip()}", "a label >= 0 and finite i, q")
        rows.append((lab, i, q))
    return tuple(rows)
