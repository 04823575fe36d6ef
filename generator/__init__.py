"""qamsmith: QAM mapper and soft-demapper generator for FPGA modems.

The names in `__all__` are the stable API: generated testbenches and user scripts use only these.
"""

from __future__ import annotations

from .artifacts import (DesignDirectory, build_files, load_design, packing, random_words, read_words, run_block,
                        write_design)
from .errors import SpecError
from .model import Design, demap, derive, hard_decisions, llr_exact, llr_maxlog, map_bits, map_labels, quantize_input
from .numbers import Axis, Constellation, QFormat, bits_to_labels, label_bits, quantize, shift_round
from .spec import (ALGORITHMS, LABELINGS, ORDERS, ROUNDING_MODES, ConstellationSpec, DemapperSpec, DesignSpec,
                   InterfaceSpec, MapperSpec, load_spec)
from .version import __version__

__all__ = [
    "__version__", "ALGORITHMS", "LABELINGS", "ORDERS", "ROUNDING_MODES", "Axis", "Constellation",
    "ConstellationSpec", "DemapperSpec", "Design", "DesignDirectory", "DesignSpec", "InterfaceSpec", "MapperSpec",
    "QFormat", "SpecError", "bits_to_labels", "build_files", "demap", "derive", "hard_decisions", "label_bits",
    "llr_exact", "llr_maxlog", "load_design", "load_spec", "map_bits", "map_labels", "packing", "quantize",
    "quantize_input", "random_words", "read_words", "run_block", "shift_round", "write_design",
]
