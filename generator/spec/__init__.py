"""Layer 1, the spec: what the user asks for, validated and immutable (TOML, flags and Python land here)."""

from __future__ import annotations

from .design import (ALGORITHMS, CROSS_ORDERS, FAMILIES, LABELINGS, LANGUAGES, LLR_ROUNDING, MAPPER_ROUNDING, MAX_LANES,
                     MAX_WIDTH, MODE_LABELINGS, MODE_ORDERS, ODD_ORDERS, ORDER_PRESETS, ORDERS, ROUNDING_MODES, SCALINGS, SECTIONS, SHAPES, TABLE_SOURCES,
                     ConstellationSpec, DemapperSpec, DesignSpec, InterfaceSpec, MapperSpec, field_docs, parse_value)
from .files import shown
from .sources import DEFAULT_EXAMPLE, example_summary, examples, load_spec

__all__ = ["ALGORITHMS", "CROSS_ORDERS", "DEFAULT_EXAMPLE", "FAMILIES", "LABELINGS", "LANGUAGES", "LLR_ROUNDING", "MAPPER_ROUNDING",
           "MAX_LANES", "MAX_WIDTH", "MODE_LABELINGS", "MODE_ORDERS", "ODD_ORDERS", "ORDER_PRESETS", "ORDERS", "ROUNDING_MODES", "SCALINGS", "SECTIONS", "SHAPES", "TABLE_SOURCES", "ConstellationSpec", "DemapperSpec", "DesignSpec", "InterfaceSpec", "MapperSpec",
           "example_summary", "examples", "field_docs", "load_spec", "parse_value", "shown"]
