"""Layer 2, numbers: fixed-point formats and rounding, constellations and their bit labelings."""

from __future__ import annotations

from .constellation import (MAX_SEARCH_POINTS, Axis, Constellation, bits_per_symbol, bits_to_labels, brgc,
                            from_table, label_bits, named, standard_energy)
from .fixed import QFormat, bits_for_range, quantize, round_float, saturate, shift_round

__all__ = ["MAX_SEARCH_POINTS", "Axis", "Constellation", "QFormat", "bits_for_range", "bits_per_symbol",
           "bits_to_labels", "brgc", "from_table", "label_bits", "named", "quantize", "round_float", "saturate",
           "shift_round", "standard_energy"]
