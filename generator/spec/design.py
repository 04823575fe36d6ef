"""The design spec: validated, immutable dataclasses built from TOML, flags or Python.

Each section is a frozen dataclass with keyword-only fields; every field has a default and a
one-line doc (`field(metadata={"doc": ...})`). Validation that needs only the spec happens
in `DesignSpec.__post_init__`; everything derived from it (constellation, internal widths)
lives in `model.derive`, which refuses specs whose arithmetic would overflow.
"""

from __future__ import annotations

import math
import re
import tomllib
from dataclasses import dataclass, field, fields, replace
from pathlib import Path
from typing import Any

from ..errors import SpecError
from .files import read_table_csv, read_toml

#: Orders (number of points) the generator accepts.
ORDERS = (2, 4, 16, 64, 256, 1024, 4096)
#: Named labelings, plus "table" for a user table.
LABELINGS = ("gray", "3gpp-nr", "ieee-802.11", "natural", "table")
#: Rounding of the mapper's levels (real values to codes): to nearest with ties to even or away
#: from zero, or down (a true floor of the signed value).
MAPPER_ROUNDING = ("half-even", "half-away", "floor")
#: Rounding of the LLR: the magnitude is rounded, then signed, so every mode is symmetric about
#: zero: to nearest with ties to even or away from zero, or toward zero (the magnitude truncated).
LLR_ROUNDING = ("half-even", "half-away", "toward-zero")
#: Every rounding mode, as spelled in the spec.
ROUNDING_MODES = ("half-even", "half-away", "floor", "toward-zero")
ALGORITHMS = ("maxlog", "folded", "hard")
SCALINGS = ("normalized", "full-scale")
MAPPER_IMPLEMENTATIONS = ("rom", "logic")
TABLE_SOURCES = ("inline", "readmemh")
FLOW_CONTROLS = ("shared", "per-stage")
#: FPGA families the delay model behind interface.target_mhz is calibrated for
FAMILIES = ("ice40", "ecp5")
#: hardware description languages of the generated RTL
LANGUAGES = ("verilog", "vhdl", "both")
#: widest input / output word the model handles exactly in int64 and tests exhaustively
MAX_WIDTH = 20

_NAME_RE = re.compile(r"^[a-z][a-z0-9_-]{0,47}$")
_PREFIX_RE = re.compile(r"^[a-z][a-z0-9_]{0,31}$")


def _f(default: Any, doc: str) -> Any:
    return field(default=default, metadata={"doc": doc})


@dataclass(frozen=True, kw_only=True)
class ConstellationSpec:
    order: int = _f(16, "number of points M: one of 2, 4, 16, 64, 256, 1024, 4096")
    labeling: str = _f("gray", "bit labeling: gray, 3gpp-nr, ieee-802.11, natural, or table")
    table: tuple[tuple[int, float, float], ...] = _f(
        (), "user table rows [label, i, q] when labeling = 'table' (any scale; normalized by the tool)")


@dataclass(frozen=True, kw_only=True)
class MapperSpec:
    width: int = _f(12, "output width W of each signed I and Q component, bits")
    scaling: str = _f("normalized", "normalized (average symbol energy 1) or full-scale (for a DAC)")
    fraction: int = _f(10, "normalized: fraction bits, one output LSB = 2^-fraction normalized units")
    backoff_db: float = _f(1.0, "full-scale: outermost level this many dB below signed full scale")
    rounding: str = _f("half-even", "rounding of the level values: half-even, half-away or floor")
    implementation: str = _f("rom", "rom (level tables) or logic (levels computed from the label bits)")
    tables: str = _f("inline", "rom: inline (constant tables in the RTL) or readmemh (a $readmemh image, path a module parameter)")


@dataclass(frozen=True, kw_only=True)
class DemapperSpec:
    algorithm: str = _f("maxlog", "maxlog (exact max-log), folded (Tosato-Bisaglia) or hard")
    input_width: int = _f(12, "width of each signed equalized I and Q input, bits")
    input_fraction: int = _f(
        4, "input fraction bits in units of half the minimum distance: levels sit at odd multiples of 2^fraction codes")
    llr_width: int = _f(8, "width of each signed LLR, bits (saturates symmetrically)")
    llr_fraction: int = _f(2, "LLR fraction bits; one LLR unit = the max-log metric divided by d_min^2")
    rounding: str = _f("half-away", "rounding of the LLR, symmetric about zero: half-even, half-away or toward-zero")
    scale_width: int = _f(0, "width of the unsigned per-symbol reliability input (0: no input)")
    scale_fraction: int = _f(0, "fraction bits of the reliability input")


@dataclass(frozen=True, kw_only=True)
class InterfaceSpec:
    prefix: str = _f("", "module name prefix (default: the design name with '-' as '_')")
    mapper_stages: int = _f(0, "mapper register stages, latency in cycles (0: as many as it has steps)")
    demapper_stages: int = _f(0, "demapper register stages, latency in cycles (0: as many as it has steps)")
    target_mhz: float = _f(0.0, "target clock, MHz: the generator chooses both stage counts (0: off, use the *_stages)")
    family: str = _f("ice40", "FPGA family whose delay model interface.target_mhz uses: ice40 or ecp5")
    tlast: bool = _f(True, "carry s_axis_tlast to m_axis_tlast with its symbol")
    tuser_width: int = _f(0, "width of a tuser field carried with each symbol (0: none)")
    flow_control: str = _f("shared", "shared (one enable for every stage: fastest) or per-stage (empty stages fill while the output waits)")
    skid: bool = _f(False, "register s_axis_tready through a two-entry skid buffer at the input (no added latency)")


SECTIONS: dict[str, type] = {
    "constellation": ConstellationSpec,
    "mapper": MapperSpec,
    "demapper": DemapperSpec,
    "interface": InterfaceSpec,
}


def _choice(key: str, value: object, allowed: tuple[str, ...]) -> None:
    if value not in allowed:
        raise SpecError(key, value, f"one of {', '.join(allowed)}")


def _int(key: str, value: object, lo: int, hi: int, why: str = "") -> None:
    if not isinstance(value, int) or isinstance(value, bool) or not lo <= value <= hi:
        raise SpecError(key, value, f"an integer from {lo} to {hi}{why}")


@dataclass(frozen=True, kw_only=True)
class DesignSpec:
    """A complete design: what `qamsmith generate` builds. Immutable and hashable."""

    name: str = _f("qam", "design name: the output directory and the default module prefix")
    constellation: ConstellationSpec = field(default_factory=ConstellationSpec)
    mapper: MapperSpec = field(default_factory=MapperSpec)
    demapper: DemapperSpec = field(default_factory=DemapperSpec)
    interface: InterfaceSpec = field(default_factory=InterfaceSpec)

    def __post_init__(self) -> None:
        if not isinstance(self.name, str) or not _NAME_RE.match(self.name):
            raise SpecError("name", self.name, "lower-case letters, digits, '-' or '_', starting with a letter, at most 48")
        c, m, d, i = self.constellation, self.mapper, self.demapper, self.interface
        if c.order not in ORDERS:
            extra = " (non-square orders are not supported yet)" if isinstance(c.order, int) and c.order in (8, 32, 128, 512, 2048) else ""
            raise SpecError("constellation.order", c.order, f"one of {', '.join(map(str, ORDERS))}{extra}")
        _choice("constellation.labeling", c.labeling, LABELINGS)
        if c.labeling == "table" and not c.table:
            raise SpecError("constellation.table", c.table, "rows [label, i, q] (or table_file) when labeling = 'table'")
        if c.labeling != "table" and c.table:
            raise SpecError("constellation.table", f"{len(c.table)} rows", "no table unless labeling = 'table'")
        _int("mapper.width", m.width, 2, MAX_WIDTH)
        _choice("mapper.scaling", m.scaling, SCALINGS)
        if m.scaling == "normalized":
            _int("mapper.fraction", m.fraction, 0, m.width - 1, " (fraction bits inside mapper.width)")
        else:  # full-scale ignores the fraction; only its type is checked
            _int("mapper.fraction", m.fraction, 0, MAX_WIDTH, " (unused with full-scale scaling)")
        if not isinstance(m.backoff_db, (int, float)) or isinstance(m.backoff_db, bool) or not 0 <= m.backoff_db <= 40 or math.isnan(m.backoff_db):
            raise SpecError("mapper.backoff_db", m.backoff_db, "a number of dB from 0 to 40")
        _choice("mapper.rounding", m.rounding, MAPPER_ROUNDING)
        _choice("mapper.implementation", m.implementation, MAPPER_IMPLEMENTATIONS)
        _choice("mapper.tables", m.tables, TABLE_SOURCES)
        _choice("demapper.algorithm", d.algorithm, ALGORITHMS)
        _int("demapper.input_width", d.input_width, 2, MAX_WIDTH)
        _int("demapper.input_fraction", d.input_fraction, 0, d.input_width - 2, " (fraction bits inside demapper.input_width)")
        _int("demapper.llr_width", d.llr_width, 2, 32)
        _int("demapper.llr_fraction", d.llr_fraction, 0, d.llr_width - 1, " (fraction bits inside demapper.llr_width)")
        if d.rounding == "floor":
            raise SpecError("demapper.rounding", d.rounding, "one of half-even, half-away, toward-zero (the LLR "
                            "magnitude is rounded, then signed; toward-zero is what floor of the magnitude does)")
        _choice("demapper.rounding", d.rounding, LLR_ROUNDING)
        _int("demapper.scale_width", d.scale_width, 0, 18)
        _int("demapper.scale_fraction", d.scale_fraction, 0, d.scale_width, " (fraction bits inside demapper.scale_width)")
        if not isinstance(i.prefix, str) or (i.prefix and not _PREFIX_RE.match(i.prefix)):
            raise SpecError("interface.prefix", i.prefix, "a Verilog identifier: lower-case letters, digits, '_', starting with a letter")
        _int("interface.mapper_stages", i.mapper_stages, 0, 8)
        _int("interface.demapper_stages", i.demapper_stages, 0, 8)
        t = i.target_mhz
        if (not isinstance(t, (int, float)) or isinstance(t, bool) or math.isnan(t) or not (t == 0 or 1 <= t <= 1000)):
            raise SpecError("interface.target_mhz", t, "0 (off) or a clock from 1 to 1000 MHz")
        if t and (i.mapper_stages or i.demapper_stages):
            raise SpecError("interface.target_mhz", t, "0 when interface.mapper_stages or demapper_stages is set "
                            "(a target clock chooses the stages)")
        if not isinstance(i.tlast, bool):
            raise SpecError("interface.tlast", i.tlast, "true or false")
        _int("interface.tuser_width", i.tuser_width, 0, 64)
        _choice("interface.flow_control", i.flow_control, FLOW_CONTROLS)
        _choice("interface.family", i.family, FAMILIES)
        if not isinstance(i.skid, bool):
            raise SpecError("interface.skid", i.skid, "true or false")

    @property
    def prefix(self) -> str:
        return self.interface.prefix or self.name.replace("-", "_")

    @property
    def bits(self) -> int:
        return self.constellation.order.bit_length() - 1

    # --- building --------------------------------------------------------------------

    @classmethod
    def from_dict(cls, data: dict[str, Any], *, base_dir: Path | None = None) -> "DesignSpec":
        """Build from nested dicts (TOML layout). Unknown keys are refused, never ignored."""
        kwargs: dict[str, Any] = {}
        for key, value in data.items():
            if key == "name":
                kwargs["name"] = value
            elif key in SECTIONS:
                if not isinstance(value, dict):
                    raise SpecError(key, value, "a table of keys")
                kwargs[key] = _section(key, SECTIONS[key], value, base_dir)
            else:
                raise SpecError(key, value, f"a known key: name, {', '.join(SECTIONS)}")
        return cls(**kwargs)

    @classmethod
    def from_toml(cls, path: str | Path) -> "DesignSpec":
        path = Path(path)
        return cls.from_dict(read_toml(path), base_dir=path.parent)

    def with_settings(self, settings: dict[str, Any], *, base_dir: Path | None = None) -> "DesignSpec":
        """A copy with dotted keys ('mapper.width') replaced; validated again."""
        data = self.to_dict()
        for dotted, value in settings.items():
            parts = dotted.split(".")
            if len(parts) == 1 and parts[0] == "name":
                data["name"] = value
                continue
            if len(parts) != 2 or parts[0] not in SECTIONS:
                raise SpecError(dotted, value, f"a key 'section.field' with section one of {', '.join(SECTIONS)}")
            data[parts[0]][parts[1]] = value
            if parts == ["constellation", "table_file"]:
                data["constellation"].pop("table", None)
            if parts == ["constellation", "labeling"] and value != "table":
                data["constellation"]["table"] = []
        return DesignSpec.from_dict(data, base_dir=base_dir)

    def to_dict(self) -> dict[str, Any]:
        """Nested plain dicts of every field (the fully resolved spec)."""
        out: dict[str, Any] = {"name": self.name}
        for sec in SECTIONS:
            obj = getattr(self, sec)
            out[sec] = {f.name: _plain(getattr(obj, f.name)) for f in fields(obj)}
        return out


def _plain(value: Any) -> Any:
    if isinstance(value, tuple):
        return [_plain(v) for v in value]
    return value


def _section(name: str, cls: type, values: dict[str, Any], base_dir: Path | None) -> Any:
    known = {f.name: f for f in fields(cls)}
    kwargs: dict[str, Any] = {}
    values = dict(values)
    if name == "constellation" and "table_file" in values:
        path = values.pop("table_file")
        if not isinstance(path, str):
            raise SpecError("constellation.table_file", path, "a path to a label,i,q CSV file")
        full = Path(path) if base_dir is None or Path(path).is_absolute() else base_dir / path
        values["table"] = read_table_csv(str(full))
    for key, value in values.items():
        if key not in known:
            raise SpecError(f"{name}.{key}", value, f"a known key of [{name}]: {', '.join(known)}")
        if key == "table":
            value = _table_rows(value)
        elif isinstance(known[key].default, float) and isinstance(value, int) and not isinstance(value, bool):
            value = float(value)
        kwargs[key] = value
    return cls(**kwargs)


def _table_rows(value: Any) -> tuple[tuple[int, float, float], ...]:
    rows = []
    for row in value:
        if (not isinstance(row, (list, tuple)) or len(row) != 3 or not isinstance(row[0], int)
                or isinstance(row[0], bool) or not all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in row[1:])):
            raise SpecError("constellation.table", row, "rows [label, i, q] with an integer label and numeric i, q")
        if not (math.isfinite(row[1]) and math.isfinite(row[2])):
            raise SpecError("constellation.table", row, "finite i, q")
        rows.append((int(row[0]), float(row[1]), float(row[2])))
    return tuple(rows)


def field_docs() -> dict[str, str]:
    """'section.key' -> one-line doc, for `qamsmith list` and the design.toml comments."""
    docs = {"name": DesignSpec.__dataclass_fields__["name"].metadata["doc"]}
    for sec, cls in SECTIONS.items():
        for f in fields(cls):
            docs[f"{sec}.{f.name}"] = f.metadata["doc"]
    return docs


def parse_value(text: str) -> Any:
    """A `--set key=value` value: TOML syntax (numbers, true/false, quoted strings), else a bare string."""
    try:
        return tomllib.loads(f"v = {text}")["v"]
    except tomllib.TOMLDecodeError:
        return text


__all__ = ["ALGORITHMS", "FAMILIES", "LABELINGS", "LANGUAGES", "LLR_ROUNDING", "MAPPER_ROUNDING", "MAX_WIDTH", "ORDERS", "ROUNDING_MODES",
           "SCALINGS", "SECTIONS", "TABLE_SOURCES",
           "ConstellationSpec", "DemapperSpec", "DesignSpec", "InterfaceSpec", "MapperSpec", "field_docs",
           "parse_value"]
