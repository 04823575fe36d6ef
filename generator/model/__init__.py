"""Layer 3, the model: the bit-exact fixed-point mapper and demapper (pure numpy) and float references."""

from __future__ import annotations

from .design import Design, constellation_of, derive
from .reference import llr_exact, llr_maxlog
from .run import (demap, demap_direct, hard_decisions, llr_scale_to_nats, map_bits, map_labels,
                  quantize_input)
from .steps import AxisDemap, OutputStage, axis_steps, decide, fold, metric, output

__all__ = ["AxisDemap", "Design", "OutputStage", "axis_steps", "constellation_of", "decide", "demap",
           "demap_direct", "derive", "fold", "hard_decisions", "llr_exact", "llr_maxlog", "llr_scale_to_nats",
           "map_bits", "map_labels", "metric", "output", "quantize_input"]
