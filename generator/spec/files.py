"""Reading what users write: spec TOML files and label,i,q table CSVs (one-line SpecError on any problem).

Also `shown`, which every refusal passes the user's value through, so that a message stays one short
line whatever was written (a 5,000-digit integer, an array nested 3,000 deep, a megabyte of text).
"""

from __future__ import annotations

import math
import sys
import tomllib
from pathlib import Path
from typing import Any

from ..errors import SpecError

#: deepest nesting and longest integer literal a spec may hold and still be parsed (far beyond any valid
#: value; Python's own limits, about 300 levels for tomllib and 4,300 digits, would end in a traceback
#: instead of a refusal naming the key that holds them)
MAX_NESTING = 10_000
MAX_DIGITS = 100_000
#: a value whose repr is longer than this is cut in a message, to about half of it (with its size noted)
SHOWN_CHARS = 120
#: levels of a nested value a message shows
_SHOWN_DEPTH = 4


class _Shown:
    """A long value as a message shows it: its repr cut to a readable prefix, with a note of its size."""

    def __init__(self, text: str) -> None:
        self.text = text

    def __repr__(self) -> str:
        return self.text


def _digits(n: int) -> int:
    """Decimal digits of |n| without converting it to text (Python refuses that above 4,300 digits)."""
    n = abs(n)
    d = max(1, int(n.bit_length() * 0.30102999566398120))
    while n >= 10 ** d:
        d += 1
    while d > 1 and n < 10 ** (d - 1):
        d -= 1
    return d


def _depth(value: Any) -> int:
    """How deep arrays and tables nest in value (iterative: the value may nest thousands deep)."""
    deepest, stack = 0, [(value, 0)]
    while stack:
        item, level = stack.pop()
        if isinstance(item, (list, tuple, dict)):
            deepest = max(deepest, level + 1)
            stack.extend((v, level + 1) for v in (item.values() if isinstance(item, dict) else item))
    return deepest


def _text(value: Any, room: int, level: int = 0) -> tuple[str, bool]:
    """A repr of value of about `room` characters at most, and whether anything was cut."""
    if isinstance(value, int) and not isinstance(value, bool) and value.bit_length() > 128:
        d = _digits(value)
        if d > 40:
            head = abs(value) // 10 ** (d - 16)
            return f"{'-' if value < 0 else ''}{head}…", True
    if isinstance(value, (list, tuple, dict)):
        opening, closing = ("{", "}") if isinstance(value, dict) else ("(", ")") if isinstance(value, tuple) else ("[", "]")
        if level >= _SHOWN_DEPTH and value:
            return f"{opening}…{closing}", True
        items = list(value.items()) if isinstance(value, dict) else list(value)
        parts: list[str] = []
        cut = False
        for item in items:
            left = room - sum(len(p) + 2 for p in parts)
            if left < 8:
                cut = True
                break
            if isinstance(value, dict):
                k, k_cut = _text(item[0], left // 2, level + 1)
                v, v_cut = _text(item[1], left - len(k) - 2, level + 1)
                part, part_cut = f"{k}: {v}", k_cut or v_cut
            else:
                part, part_cut = _text(item, left, level + 1)
            parts.append(part)
            cut = cut or part_cut
        body = ", ".join(parts) + (", …" if len(parts) < len(items) else "")
        if isinstance(value, tuple) and len(items) == 1:
            body += ","
        return opening + body + closing, cut
    text = repr(value)
    if len(text) <= room:
        return text, False
    return (repr(value[:max(room // 2, 8)]) if isinstance(value, str) else text[:max(room // 2, 8)]) + "…", True


def shown(value: Any) -> Any:
    """value itself when its repr is short, else a stand-in whose repr is a readable prefix and a size note.

    Every refusal passes the user's value through this, so `SpecError`'s one line stays short and never
    fails: the repr of a 5,000-digit integer raises in Python and that of a deeply nested array recurses.
    """
    try:
        text, cut = _text(value, SHOWN_CHARS)
    except (ValueError, RecursionError):       # an exotic type whose repr fails: name its type
        return _Shown(f"<{type(value).__name__}>")
    if not cut:
        return value
    if isinstance(value, int) and not isinstance(value, bool):
        note = f"{_digits(value)} digits"
    elif isinstance(value, str):
        note = f"{len(value)} characters"
    elif isinstance(value, (list, tuple, dict)):
        depth = _depth(value)
        note = f"{len(value)} item{'s' if len(value) != 1 else ''}" + (f", nested {depth} deep" if depth > _SHOWN_DEPTH else "")
    else:
        note = f"{len(repr(value))} characters"
    return _Shown(f"{text} ({note})")


def loads_toml(text: str) -> dict[str, Any]:
    """Parse TOML text; nesting up to MAX_NESTING and integers up to MAX_DIGITS digits come back as values.

    tomllib recurses once per nested array and converts integers with int(), so Python's recursion
    limit and its 4,300-digit limit would end such a file in a RecursionError or a ValueError that
    names no key. Only when that happens is the text parsed again with both limits raised for the
    parse alone (restored after), so the value reaches validation and the refusal names its key.
    Raises tomllib.TOMLDecodeError on a syntax error and ValueError beyond the two bounds.
    """
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError:
        raise
    except (RecursionError, ValueError):
        pass
    recursion, digits = sys.getrecursionlimit(), sys.get_int_max_str_digits()
    try:
        sys.setrecursionlimit(recursion + 3 * MAX_NESTING)   # tomllib: 2 frames per array, 3 per inline table
        if digits:
            sys.set_int_max_str_digits(max(digits, MAX_DIGITS))
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError:
        raise
    except (RecursionError, ValueError):
        raise ValueError(f"values nested at most {MAX_NESTING} deep and integers of at most {MAX_DIGITS} digits") from None
    finally:
        sys.setrecursionlimit(recursion)
        sys.set_int_max_str_digits(digits)


def read_toml(path: Path) -> dict[str, Any]:
    """The parsed TOML of a spec file (SpecError: unreadable, not UTF-8 or not TOML)."""
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise SpecError("spec", shown(str(path)), f"a readable TOML file ({exc.strerror or exc})") from None
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data.count(b"\n", 0, exc.start) + 1
        raise SpecError("spec", shown(str(path)), f"a UTF-8 text file (byte 0x{data[exc.start]:02x} on line {line} "
                        "is not UTF-8)") from None
    try:
        return loads_toml(text)
    except ValueError as exc:
        raise SpecError("spec", shown(str(path)), f"valid TOML ({exc})") from None


def read_table_csv(path: str) -> tuple[tuple[int, float, float], ...]:
    """Rows of a `label,i,q` CSV (a header line is allowed; '#' starts a comment)."""
    key = "constellation.table_file"
    try:
        with open(path, "rb") as fh:
            data = fh.read()
    except OSError as exc:
        raise SpecError(key, shown(path), f"a readable CSV file ({exc.strerror or exc})") from None
    except ValueError:                         # a NUL character in the path
        raise SpecError(key, shown(path), "a path to a label,i,q CSV file") from None
    try:
        lines = data.decode("utf-8").splitlines()
    except UnicodeDecodeError as exc:
        line = data.count(b"\n", 0, exc.start) + 1
        raise SpecError(key, shown(path), f"a UTF-8 text file (byte 0x{data[exc.start]:02x} on line {line} "
                        "is not UTF-8)") from None
    rows = []
    for lineno, line in enumerate(lines, 1):
        text = line.split("#", 1)[0].strip()
        if not text or text.replace(" ", "").lower() == "label,i,q":
            continue
        where = shown(f"{path}:{lineno}: {line.strip()}")
        cells = [c.strip() for c in text.split(",")]
        if len(cells) != 3:
            raise SpecError(key, where, "three columns label,i,q")
        try:
            lab = int(cells[0])
            i, q = float(cells[1]), float(cells[2])
        except ValueError:                     # also an integer label of more than 4,300 digits
            raise SpecError(key, where, "an integer label and numeric i, q") from None
        if not (math.isfinite(i) and math.isfinite(q)) or lab < 0:
            raise SpecError(key, where, "a label >= 0 and finite i, q")
        rows.append((lab, i, q))
    return tuple(rows)
