"""qamsmith: QAM mapper and soft-demapper generator for FPGA modems."""

from __future__ import annotations

from .constellation import LABELINGS, ORDERS, Axis, Constellation, bits_to_labels, label_bits
from .errors import SpecError
from .fixed import ROUNDING_MODES, QFormat, quantize, shift_round
from .model import (Design, demap, derive, hard_decisions, llr_exact, llr_maxlog, map_bits, map_labels,
                    quantize_input)
from .spec import ALGORITHMS, ConstellationSpec, DemapperSpec, DesignSpec, InterfaceSpec, MapperSpec

__version__ = "0.1.0"

__all__ = [
    "__version__", "ALGORITHMS", "LABELINGS", "ORDERS", "ROUNDING_MODES", "Axis", "Constellation",
    "ConstellationSpec", "DemapperSpec", "Design", "DesignSpec", "InterfaceSpec", "MapperSpec", "QFormat",
    "SpecError", "bits_to_labels", "demap", "derive", "hard_decisions", "label_bits", "llr_exact",
    "llr_maxlog", "map_bits", "map_labels", "quantize", "quantize_input", "shift_round",
]
