"""The design spec: validated, immutable dataclasses built from TOML, flags or Python.

Each section is a frozen dataclass with keyword-only fields; every field has a default and a
one-line doc (`field(metadata={"doc": ...})`). Validation that needs only the spec happens
in `DesignSpec.__post_init__`; everything derived from it (constellation, internal widths)
lives in `model.derive`, which refuses specs whose arithmetic would overflow.

Every refusal is one `SpecError` line naming a key the user wrote. `DesignSpec.given` records
those keys (TOML file, flags); a refusal that follows from several keys names the one the user
set with the value that would fit, e.g. `--mapper-width 2` alone is refused as mapper.width
("at least 11 bits for mapper.fraction = 10 (the default)"), never as the default fraction. No
default is derived from another key (so no valid spec changes), with one exception that only
turns a refusal into a design: a table given without an order sets the order to its row count.
"""

from __future__ import annotations

import math
import numbers
import re
import tomllib
from dataclasses import dataclass, field, fields, replace
from pathlib import Path
from typing import Any

from ..errors import SpecError
from .files import loads_toml, read_table_csv, read_toml, shown

#: Orders (number of points) the generator accepts.
ORDERS = (2, 4, 8, 16, 32, 64, 128, 256, 512, 1024, 2048, 4096)
#: Orders of an odd number of bits (besides BPSK): rectangular or cross, see constellation.shape.
ODD_ORDERS = (8, 32, 128, 512, 2048)
#: Shapes of an odd-bit order: a 2^ceil(k/2) x 2^floor(k/2) rectangle, or Smith's cross (32 points and up).
SHAPES = ("rectangular", "cross")
#: Orders that have a cross shape.
CROSS_ORDERS = (32, 128, 512, 2048)
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
#: labelings whose orders can share one adaptive core (constellation.orders): the Gray-type families, whose
#: per-axis labels nest (the label of level n >> s of a smaller order is the top bits of level n's label)
MODE_LABELINGS = ("gray", "3gpp-nr", "ieee-802.11")
#: orders an adaptive core can hold: BPSK (on I; not 3gpp-nr, whose BPSK moves both axes) and the squares
MODE_ORDERS = (2, 4, 16, 64, 256, 1024, 4096)
#: most symbols per transfer (interface.lanes)
MAX_LANES = 16
#: named order sets for constellation.orders: name -> (labeling, orders, where the set is defined). The clauses are
#: from memory (not checked against the documents here); each set is the modulation orders of that table or clause.
ORDER_PRESETS: dict[str, tuple[str, tuple[int, ...], str]] = {
    "nr-pdsch-64": ("3gpp-nr", (4, 16, 64), "3GPP TS 38.214 Table 5.1.3.1-1 (MCS index table 1), from memory"),
    "nr-pdsch-256": ("3gpp-nr", (4, 16, 64, 256), "3GPP TS 38.214 Table 5.1.3.1-2 (MCS index table 2), from memory"),
    "nr-pdsch-1024": ("3gpp-nr", (4, 16, 64, 256, 1024),
                      "3GPP TS 38.214 Table 5.1.3.1-4 (MCS index table 4, Rel-17), from memory"),
    "wlan-ofdm": ("ieee-802.11", (2, 4, 16, 64), "IEEE 802.11 clause 17 (OFDM PHY) rates, from memory"),
    "wlan-vht": ("ieee-802.11", (2, 4, 16, 64, 256), "IEEE 802.11 clause 21 (VHT) MCSs, from memory"),
    "wlan-he": ("ieee-802.11", (2, 4, 16, 64, 256, 1024), "IEEE 802.11 clause 27 (HE) MCSs, from memory"),
    "wlan-eht": ("ieee-802.11", (2, 4, 16, 64, 256, 1024, 4096), "IEEE 802.11be clause 36 (EHT) MCSs, from memory"),
}

_NAME_RE = re.compile(r"^[a-z][a-z0-9_-]{0,47}$")
_PREFIX_RE = re.compile(r"^[a-z][a-z0-9_]{0,31}$")


def _f(default: Any, doc: str) -> Any:
    return field(default=default, metadata={"doc": doc})


@dataclass(frozen=True, kw_only=True)
class ConstellationSpec:
    order: int = _f(16, "number of points M: 2, 4, 8, 16, ... 4096 (odd-bit orders take constellation.shape); "
                        "with constellation.orders, the largest of them")
    labeling: str = _f("gray", "bit labeling: gray, 3gpp-nr, ieee-802.11, natural, or table")
    shape: str = _f("rectangular", "odd-bit orders 8, 32, 128, 512, 2048 (labeling gray, natural or table; 3gpp-nr "
                    "and ieee-802.11 define none): rectangular (2^ceil(k/2) x 2^floor(k/2) levels, per axis; the "
                    "default: the one shape every order has, a square being a rectangle and 8 points having no "
                    "cross) or cross (Smith's cross, 32 points and up: about 1.1 dB less mean energy at the same "
                    "minimum distance, quasi-Gray, labeling gray only); square orders and tables take their shape "
                    "from the order or the table, so only 'rectangular' there (and the key is left out of their "
                    "resolved spec)")
    table: tuple[tuple[int, float, float], ...] = _f(
        (), "user table rows [label, i, q] when labeling = 'table' (any scale; normalized by the tool)")
    orders: tuple[int, ...] = _f(
        (), "adaptive core: the orders of its modes, ascending (a list, or a preset name: see qamsmith list); "
            "labeling gray, 3gpp-nr or ieee-802.11; the mode field of each symbol indexes this list; order is "
            "the largest (left out of the resolved spec when empty: one order)")


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
    family: str = _f("ice40", "FPGA family whose delay model places the registers: ice40 or ecp5")
    language: str = _f("verilog", "hardware description language of rtl/: verilog, vhdl or both")
    tlast: bool = _f(True, "carry s_axis_tlast to m_axis_tlast with its symbol")
    tuser_width: int = _f(0, "width of a tuser field carried with each symbol (0: none)")
    flow_control: str = _f("shared", "shared (one enable for every stage: fastest) or per-stage (empty stages fill while the output waits)")
    skid: bool = _f(False, "register s_axis_tready through a two-entry skid buffer at the input (no added latency)")
    lanes: int = _f(1, "symbols per transfer, 1 to 16: lane 0 in the least significant part of every word, one "
                       "tvalid/tready for all (left out of the resolved spec when 1)")


SECTIONS: dict[str, type] = {
    "constellation": ConstellationSpec,
    "mapper": MapperSpec,
    "demapper": DemapperSpec,
    "interface": InterfaceSpec,
}


def _is_int(value: object) -> bool:
    return isinstance(value, int) and not isinstance(value, bool)


def _is_real(value: object) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _whole(value: object) -> str:
    """A hint for a float where an integer is expected (TOML `16.0` is a float): ' (an integer: 16, not 16.0)'."""
    if isinstance(value, float) and value.is_integer() and abs(value) < 1e15:
        return f" (an integer: {int(value)}, not {value!r})"
    return ""


def _key(text: object) -> str:
    """A key as a message names it: as written when it is a plain dotted name, else its repr (cut if long)."""
    if isinstance(text, str) and re.fullmatch(r"[A-Za-z0-9_.-]{1,64}", text):
        return text
    return repr(shown(text))


def _choice(key: str, value: object, allowed: tuple[str, ...]) -> None:
    if not isinstance(value, str) or value not in allowed:
        raise SpecError(key, shown(value), f"one of {', '.join(allowed)}")


def _int(key: str, value: object, lo: int, hi: int, why: str = "") -> None:
    if not _is_int(value) or not lo <= value <= hi:
        raise SpecError(key, shown(value), f"an integer from {lo} to {hi}{why}{_whole(value)}")


def _grid(order: int, labeling: str, shape: str = "rectangular") -> tuple[int, float] | None:
    """(outermost level in amplitude units, one amplitude unit in normalized units) of a named labeling.

    The grid `numbers.named` builds (levels at odd integers, unit average energy), None for a user
    table. The spec uses it only to say which width fits when the user set a width but not its fraction.
    Mean energies (amplitude units squared): square 2(M-1)/3; rectangle (LI^2 + LQ^2 - 2)/3; cross
    (31M - 32)/48 (numbers.constellation.standard_energy derives them).
    """
    if labeling == "table":
        return None
    if order == 2:
        return 1, (math.sqrt(0.5) if labeling == "3gpp-nr" else 1.0)
    k = order.bit_length() - 1
    if k % 2 == 0:
        return math.isqrt(order) - 1, math.sqrt(1.5 / (order - 1))
    li, lq = 1 << ((k + 1) // 2), 1 << (k // 2)
    if shape == "cross":
        return 3 * lq // 2 - 1, math.sqrt(48.0 / (31 * order - 32))
    return li - 1, math.sqrt(3.0 / (li * li + lq * lq - 2))


def _row_problem(row: Any) -> str:
    """What is wrong with a table row [label, i, q] ('' when nothing is)."""
    if (not isinstance(row, (list, tuple)) or len(row) != 3 or not isinstance(row[0], numbers.Integral)
            or isinstance(row[0], bool)
            or not all(isinstance(v, numbers.Real) and not isinstance(v, bool) for v in row[1:])):
        return "rows [label, i, q] with an integer label and numeric i, q"
    try:
        finite = math.isfinite(float(row[1])) and math.isfinite(float(row[2]))
    except OverflowError:                       # an integer beyond the largest float
        finite = False
    return "" if finite else "finite i, q (at most 1.8e308 in magnitude)"


@dataclass(frozen=True, kw_only=True)
class DesignSpec:
    """A complete design: what `qamsmith generate` builds. Immutable and hashable."""

    name: str = _f("qam", "design name: the output directory and the default module prefix")
    constellation: ConstellationSpec = field(default_factory=ConstellationSpec)
    mapper: MapperSpec = field(default_factory=MapperSpec)
    demapper: DemapperSpec = field(default_factory=DemapperSpec)
    interface: InterfaceSpec = field(default_factory=InterfaceSpec)
    #: the dotted keys the user wrote (TOML file, flags), empty when not known (built in Python). Not part
    #: of the spec's value (left out of ==, hash, repr and to_dict): it only decides which key a refusal
    #: names, so that a refusal never blames a default the user did not write (see `blame`).
    given: frozenset[str] = field(default=frozenset(), compare=False, repr=False)

    def wrote(self, key: str) -> bool:
        """True when the user wrote `key` (or when what the user wrote is not known)."""
        return not self.given or key in self.given

    def blame(self, key: str, *others: str) -> str:
        """The key a refusal names: `key` if the user wrote it, else the first of `others` the user wrote.

        A refusal that follows from several keys (a fraction that does not fit its width, a table the
        mapper cannot hold) names one the user actually set, with the value that would fit; `key`
        when the user wrote none of them or when what the user wrote is not known.
        """
        if self.wrote(key):
            return key
        return next((k for k in others if k in self.given), key)

    def value(self, key: str) -> Any:
        """The value of a dotted key as a refusal shows it (a table, from rows or a CSV: its row count)."""
        if key in ("constellation.table", "constellation.table_file"):
            return f"{len(self.constellation.table)} rows"
        if key == "name":
            return self.name
        section, name = key.split(".")
        return getattr(getattr(self, section), name)

    def default_note(self, key: str) -> str:
        """' (the default)' when the user did not write `key`, for messages that quote its value."""
        return "" if self.wrote(key) else " (the default)"

    def __post_init__(self) -> None:
        if not isinstance(self.given, frozenset) or not all(isinstance(k, str) for k in self.given):
            raise SpecError("given", shown(self.given), "a frozenset of the dotted keys the user wrote")
        if not isinstance(self.name, str) or not _NAME_RE.match(self.name):
            raise SpecError("name", shown(self.name), "lower-case letters, digits, '-' or '_', starting with a letter, at most 48")
        for sec, cls in SECTIONS.items():
            if not isinstance(getattr(self, sec), cls):
                raise SpecError(sec, shown(getattr(self, sec)), f"a {cls.__name__}")
        c, m, d, i = self.constellation, self.mapper, self.demapper, self.interface
        if not _is_int(c.order) or c.order not in ORDERS:
            raise SpecError("constellation.order", shown(c.order), f"one of {', '.join(map(str, ORDERS))}{_whole(c.order)}")
        _choice("constellation.labeling", c.labeling, LABELINGS)
        _choice("constellation.shape", c.shape, SHAPES)
        self._check_shape()
        self._check_table()
        self._check_orders()
        _int("mapper.width", m.width, 2, MAX_WIDTH)
        _choice("mapper.scaling", m.scaling, SCALINGS)
        if m.scaling == "normalized":
            if _is_int(m.fraction) and m.fraction >= m.width and self.blame("mapper.fraction", "mapper.width") == "mapper.width":
                raise SpecError("mapper.width", m.width, self._mapper_width_for_fraction())
            _int("mapper.fraction", m.fraction, 0, m.width - 1, " (fraction bits inside mapper.width)")
        else:  # full-scale ignores the fraction; only its type is checked
            _int("mapper.fraction", m.fraction, 0, MAX_WIDTH, " (unused with full-scale scaling)")
        # a NaN fails every comparison, and an integer too large for a float (left one by _section) compares exactly
        if not _is_real(m.backoff_db) or not 0 <= m.backoff_db <= 40:
            raise SpecError("mapper.backoff_db", shown(m.backoff_db), "a number of dB from 0 to 40")
        _choice("mapper.rounding", m.rounding, MAPPER_ROUNDING)
        _choice("mapper.implementation", m.implementation, MAPPER_IMPLEMENTATIONS)
        _choice("mapper.tables", m.tables, TABLE_SOURCES)
        _choice("demapper.algorithm", d.algorithm, ALGORITHMS)
        _int("demapper.input_width", d.input_width, 2, MAX_WIDTH)
        if (_is_int(d.input_fraction) and d.input_fraction > d.input_width - 2
                and self.blame("demapper.input_fraction", "demapper.input_width") == "demapper.input_width"):
            raise SpecError("demapper.input_width", d.input_width, self._input_width_for_fraction())
        _int("demapper.input_fraction", d.input_fraction, 0, d.input_width - 2, " (fraction bits inside demapper.input_width)")
        _int("demapper.llr_width", d.llr_width, 2, 32)
        if (_is_int(d.llr_fraction) and d.llr_fraction >= d.llr_width
                and self.blame("demapper.llr_fraction", "demapper.llr_width") == "demapper.llr_width"):
            raise SpecError("demapper.llr_width", d.llr_width, f"at least {d.llr_fraction + 1} bits for demapper.llr_fraction "
                            f"= {d.llr_fraction} (the default), or set demapper.llr_fraction <= {d.llr_width - 1}")
        _int("demapper.llr_fraction", d.llr_fraction, 0, d.llr_width - 1, " (fraction bits inside demapper.llr_width)")
        if d.rounding == "floor":
            raise SpecError("demapper.rounding", d.rounding, "one of half-even, half-away, toward-zero (the LLR "
                            "magnitude is rounded, then signed; toward-zero is what floor of the magnitude does)")
        _choice("demapper.rounding", d.rounding, LLR_ROUNDING)
        _int("demapper.scale_width", d.scale_width, 0, 18)
        _int("demapper.scale_fraction", d.scale_fraction, 0, d.scale_width, " (fraction bits inside demapper.scale_width)")
        if not isinstance(i.prefix, str) or (i.prefix and not _PREFIX_RE.match(i.prefix)):
            raise SpecError("interface.prefix", shown(i.prefix), "a Verilog identifier: lower-case letters, digits, '_', starting with a letter")
        _int("interface.mapper_stages", i.mapper_stages, 0, 8)
        _int("interface.demapper_stages", i.demapper_stages, 0, 8)
        t = i.target_mhz
        if not _is_real(t) or not (t == 0 or 1 <= t <= 1000):
            raise SpecError("interface.target_mhz", shown(t), "0 (off) or a clock from 1 to 1000 MHz")
        if t and (i.mapper_stages or i.demapper_stages):
            raise SpecError("interface.target_mhz", t, "0 when interface.mapper_stages or demapper_stages is set "
                            "(a target clock chooses the stages)")
        if not isinstance(i.tlast, bool):
            raise SpecError("interface.tlast", shown(i.tlast), "true or false")
        _int("interface.tuser_width", i.tuser_width, 0, 62, " (the model carries it in int64 words)")
        _choice("interface.flow_control", i.flow_control, FLOW_CONTROLS)
        _choice("interface.family", i.family, FAMILIES)
        _choice("interface.language", i.language, LANGUAGES)
        if not isinstance(i.skid, bool):
            raise SpecError("interface.skid", shown(i.skid), "true or false")
        _int("interface.lanes", i.lanes, 1, MAX_LANES)

    def _check_orders(self) -> None:
        """constellation.orders: ascending orders of one Gray-type labeling family, the largest the order."""
        c = self.constellation
        if not isinstance(c.orders, tuple) or not all(_is_int(o) for o in c.orders):
            raise SpecError("constellation.orders", shown(c.orders), "a list of orders or a preset name "
                            f"({', '.join(ORDER_PRESETS)})")
        if not c.orders:
            return
        allowed = f"ascending orders from {', '.join(map(str, MODE_ORDERS))}, at least two"
        if len(c.orders) < 2 or any(o not in MODE_ORDERS for o in c.orders) or list(c.orders) != sorted(set(c.orders)):
            raise SpecError("constellation.orders", list(c.orders), allowed)
        if c.labeling not in MODE_LABELINGS:
            key = self.blame("constellation.labeling", "constellation.orders")
            if key == "constellation.orders":
                raise SpecError(key, list(c.orders), f"no orders with labeling {c.labeling!r} (modes need "
                                f"one of {', '.join(MODE_LABELINGS)}: their labels nest from order to order)")
            raise SpecError(key, c.labeling, f"one of {', '.join(MODE_LABELINGS)} with constellation.orders "
                            "(their labels nest from order to order)")
        if c.labeling == "3gpp-nr" and 2 in c.orders:
            raise SpecError("constellation.orders", list(c.orders), "orders from 4 up with labeling 3gpp-nr "
                            "(its BPSK moves both axes, so it shares no axis with the squares)")
        if c.order != c.orders[-1]:
            key = self.blame("constellation.order", "constellation.orders")
            raise SpecError(key, self.value(key), f"constellation.order = the largest of constellation.orders "
                            f"({c.orders[-1]}), or leave constellation.order out")

    def _check_shape(self) -> None:
        """Odd-bit orders: the labelings that define them, and the shape (cross: 32 points and up, gray only)."""
        c = self.constellation
        if c.order in ODD_ORDERS and c.labeling in ("3gpp-nr", "ieee-802.11"):
            key = self.blame("constellation.labeling", "constellation.order")
            why = f"{c.labeling} defines no odd-bit order"
            if key == "constellation.order":
                raise SpecError(key, c.order, f"an even-bit order (2, 4, 16, ... 4096) for labeling {c.labeling!r} ({why})")
            raise SpecError(key, c.labeling, f"gray, natural or table for order {c.order} ({why})")
        if c.shape != "cross":
            return
        if c.order not in CROSS_ORDERS:
            what = ("8 points have no cross" if c.order == 8 else
                    "an even-bit order is a square" if c.order > 2 else "BPSK has one shape")
            raise SpecError("constellation.shape", c.shape, f"rectangular for order {c.order} ({what}; "
                            f"cross for {', '.join(map(str, CROSS_ORDERS))})")
        if c.labeling == "table":
            raise SpecError("constellation.shape", c.shape, "rectangular with labeling = 'table' (the table's points "
                            "give its shape)")
        if c.labeling != "gray":
            key = self.blame("constellation.labeling", "constellation.shape")
            if key == "constellation.shape":
                raise SpecError(key, c.shape, f"rectangular for labeling {c.labeling!r} (a cross has the gray "
                                "labeling only: Smith's quasi-Gray)")
            raise SpecError(key, c.labeling, "gray for shape 'cross' (Smith's quasi-Gray; natural binary has no "
                            "cross labeling here)")

    def _check_table(self) -> None:
        """The table's shape (the geometry is checked by numbers.from_table), named as the user gave it."""
        c = self.constellation
        key = self.blame("constellation.table", "constellation.table_file")
        if not isinstance(c.table, tuple):
            raise SpecError(key, shown(c.table), "a tuple of rows (label, i, q)")
        for row in c.table:
            problem = _row_problem(row) or ("" if isinstance(row, tuple) else "rows as tuples (label, i, q): the spec is immutable")
            if problem:
                raise SpecError(key, shown(row), problem)
        if c.labeling == "table" and not c.table:
            key = self.blame("constellation.table", "constellation.table_file", "constellation.labeling")
            if key == "constellation.labeling":
                raise SpecError(key, c.labeling, "rows in constellation.table or a constellation.table_file with it")
            raise SpecError(key, c.table if key == "constellation.table" else "0 rows",
                            "rows [label, i, q] (or table_file) when labeling = 'table'")
        if c.labeling != "table" and c.table:
            raise SpecError(self.blame("constellation.table", "constellation.table_file", "constellation.labeling"),
                            f"{len(c.table)} rows", "no table unless labeling = 'table'")

    def _mapper_width_for_fraction(self) -> str:
        """What mapper.width needs for the default mapper.fraction (the user set the width only)."""
        c, m = self.constellation, self.mapper
        need, grid = m.fraction + 1, _grid(c.order, c.labeling, c.shape)
        if grid is not None:                    # the outermost level's code, as model.derive rounds it
            x = grid[0] * grid[1] * 2.0 ** m.fraction
            top = math.ceil(x) if m.rounding == "floor" else math.floor(x + 0.5)
            need = max(need, top.bit_length() + 1)
        return f"at least {need} bits for mapper.fraction = {m.fraction} (the default), or set a smaller mapper.fraction"

    def _input_width_for_fraction(self) -> str:
        """What demapper.input_width needs for the default demapper.input_fraction (the user set the width only)."""
        c, d = self.constellation, self.demapper
        f, w = d.input_fraction, d.input_width
        grid = _grid(c.order, c.labeling, c.shape)
        peak = grid[0] if grid is not None else 0  # a table's outermost level is known to model.derive only
        need = max(f + 2, (peak << f).bit_length() + 1)
        fits = [k for k in range(w - 1) if (peak << k) <= (1 << (w - 1)) - 1]
        alt = f", or set demapper.input_fraction <= {fits[-1]}" if fits else ""
        return f"at least {need} bits for demapper.input_fraction = {f} (the default){alt}"

    @property
    def prefix(self) -> str:
        return self.interface.prefix or self.name.replace("-", "_")

    @property
    def bits(self) -> int:
        return self.constellation.order.bit_length() - 1

    # --- building --------------------------------------------------------------------

    @classmethod
    def from_dict(cls, data: dict[str, Any], *, base_dir: Path | None = None,
                  given: frozenset[str] | None = None) -> "DesignSpec":
        """Build from nested dicts (TOML layout). Unknown keys are refused, never ignored.

        `given`: the keys the user wrote (default: every key of `data`), kept as `DesignSpec.given`.
        """
        if not isinstance(data, dict):
            raise SpecError("spec", shown(data), "a table of keys")
        if given is None:
            given = frozenset(["name"] * ("name" in data) + [f"{sec}.{key}" for sec in SECTIONS
                                                               if isinstance(data.get(sec), dict) for key in data[sec]])
        kwargs: dict[str, Any] = {}
        for key, value in data.items():
            if key == "name":
                kwargs["name"] = value
            elif key in SECTIONS:
                if not isinstance(value, dict):
                    raise SpecError(key, shown(value), "a table of keys")
                kwargs[key] = _section(key, SECTIONS[key], value, base_dir, given)
            else:
                raise SpecError(_key(key), shown(value), f"a known key: name, {', '.join(SECTIONS)}")
        return cls(given=given, **kwargs)

    @classmethod
    def from_toml(cls, path: str | Path) -> "DesignSpec":
        path = Path(path)
        return cls.from_dict(read_toml(path), base_dir=path.parent)

    def with_settings(self, settings: dict[str, Any], *, base_dir: Path | None = None) -> "DesignSpec":
        """A copy with dotted keys ('mapper.width') replaced; validated again."""
        data = self.to_dict()
        given = set(self.given)
        for dotted, value in settings.items():
            parts = dotted.split(".") if isinstance(dotted, str) else []
            if parts == ["name"]:
                data["name"] = value
                given.add("name")
                continue
            if len(parts) != 2 or parts[0] not in SECTIONS:
                raise SpecError(_key(dotted), shown(value), f"a key 'section.field' with section one of {', '.join(SECTIONS)}")
            data[parts[0]][parts[1]] = value
            given.add(dotted)
            if parts == ["constellation", "table_file"]:
                data["constellation"].pop("table", None)
                given.discard("constellation.table")
            if parts == ["constellation", "table"]:
                given.discard("constellation.table_file")
            if parts == ["constellation", "labeling"] and not (isinstance(value, str) and value == "table"):
                data["constellation"]["table"] = []
        return DesignSpec.from_dict(data, base_dir=base_dir, given=frozenset(given))

    def to_dict(self) -> dict[str, Any]:
        """Nested plain dicts of every field (the fully resolved spec).

        constellation.shape is left out where it means nothing (square orders, BPSK and tables: it can only
        be 'rectangular' there), so that those designs resolve, hash and regenerate as before the key existed.
        """
        out: dict[str, Any] = {"name": self.name}
        for sec in SECTIONS:
            obj = getattr(self, sec)
            out[sec] = {f.name: _plain(getattr(obj, f.name)) for f in fields(obj)}
        c = self.constellation
        if c.order not in ODD_ORDERS or c.labeling == "table":
            del out["constellation"]["shape"]
        if not c.orders:                        # one order: as before modes existed
            del out["constellation"]["orders"]
        if self.interface.lanes == 1:
            del out["interface"]["lanes"]
        return out

    @property
    def modes(self) -> tuple[int, ...]:
        """The orders of an adaptive core's modes, () for a single order."""
        return self.constellation.orders


def _plain(value: Any) -> Any:
    if isinstance(value, tuple):
        return [_plain(v) for v in value]
    return value


def _section(name: str, cls: type, values: dict[str, Any], base_dir: Path | None, given: frozenset[str]) -> Any:
    known = {f.name: f for f in fields(cls)}
    kwargs: dict[str, Any] = {}
    values = dict(values)
    table_key = "constellation.table"
    if name == "constellation" and "table_file" in values:
        path = values.pop("table_file")
        table_key = "constellation.table_file"
        if not isinstance(path, str) or not path:
            raise SpecError(table_key, shown(path), "a path to a label,i,q CSV file")
        if "table" in values:
            raise SpecError(table_key, shown(path), "either constellation.table or constellation.table_file, not both")
        full = Path(path) if base_dir is None or Path(path).is_absolute() else base_dir / path
        values["table"] = read_table_csv(str(full))
    for key, value in values.items():
        if key not in known:
            raise SpecError(f"{name}.{_key(key)}", shown(value), f"a known key of [{name}]: {', '.join(known)}")
        if key == "table":
            value = _table_rows(table_key, value)
        elif key == "orders":
            value = _orders(value, values.get("labeling", "gray"))
        elif isinstance(known[key].default, float) and isinstance(value, int) and not isinstance(value, bool):
            try:
                value = float(value)
            except OverflowError:               # beyond any float: left an integer, refused by validation
                pass
        kwargs[key] = value
    # a table sets the order when the user did not: one row per label
    if (name == "constellation" and "constellation.order" not in given and kwargs.get("table")
            and kwargs.get("labeling", cls.labeling) == "table"):
        rows = len(kwargs["table"])
        if rows not in ORDERS:
            raise SpecError(table_key, f"{rows} rows", f"one row per label: {', '.join(map(str, ORDERS))} rows "
                            "(constellation.order, not set, is the number of rows)")
        kwargs["order"] = rows
    # orders set the order when the user did not: the largest mode
    if (name == "constellation" and "constellation.order" not in given and kwargs.get("orders")
            and all(_is_int(o) for o in kwargs["orders"])):
        kwargs["order"] = max(kwargs["orders"])
    return cls(**kwargs)


def _orders(value: Any, labeling: Any) -> Any:
    """constellation.orders as written: a list of orders, or a preset name (checked against the labeling)."""
    if isinstance(value, str):
        if value not in ORDER_PRESETS:
            raise SpecError("constellation.orders", value, f"a list of orders or a preset: {', '.join(ORDER_PRESETS)}")
        family, orders, _ = ORDER_PRESETS[value]
        if labeling != family:
            raise SpecError("constellation.orders", value, f"a preset of labeling {labeling!r}, or set "
                            f"constellation.labeling = '{family}' ({value} is a {family} set)")
        return orders
    if not isinstance(value, (list, tuple)) or not all(_is_int(o) for o in value):
        raise SpecError("constellation.orders", shown(value), f"a list of orders or a preset: {', '.join(ORDER_PRESETS)}")
    return tuple(int(o) for o in value)


def _table_rows(key: str, value: Any) -> tuple[tuple[int, float, float], ...]:
    if not isinstance(value, (list, tuple)):
        raise SpecError(key, shown(value), "an array of rows [label, i, q]")
    rows = []
    for row in value:
        problem = _row_problem(row)
        if problem:
            raise SpecError(key, shown(row), problem)
        rows.append((int(row[0]), float(row[1]), float(row[2])))
    return tuple(rows)


def field_docs() -> dict[str, str]:
    """'section.key' -> one-line doc, for `qamsmith list` and the design.toml comments."""
    docs = {"name": DesignSpec.__dataclass_fields__["name"].metadata["doc"]}
    for sec, cls in SECTIONS.items():
        for f in fields(cls):
            docs[f"{sec}.{f.name}"] = f.metadata["doc"]
    return docs


def parse_value(text: str, *, key: str = "--set") -> Any:
    """A `--set key=value` value: TOML syntax (numbers, true/false, quoted strings), else a bare string.

    `key` names the setting in the refusal of a value nested or sized beyond what `loads_toml` parses.
    """
    try:
        data = loads_toml(f"v = {text}")
    except tomllib.TOMLDecodeError:
        return text
    except ValueError as exc:
        raise SpecError(_key(key), shown(text), str(exc)) from None
    return data["v"] if list(data) == ["v"] else text   # text with a line break and more keys: a bare string


__all__ = ["ALGORITHMS", "CROSS_ORDERS", "FAMILIES", "LABELINGS", "LANGUAGES", "LLR_ROUNDING", "MAPPER_ROUNDING", "MAX_LANES",
           "MAX_WIDTH", "MODE_LABELINGS", "MODE_ORDERS", "ODD_ORDERS", "ORDERS", "ORDER_PRESETS", "ROUNDING_MODES", "SCALINGS", "SECTIONS", "SHAPES", "TABLE_SOURCES",
           "ConstellationSpec", "DemapperSpec", "DesignSpec", "InterfaceSpec", "MapperSpec", "field_docs",
           "parse_value"]
