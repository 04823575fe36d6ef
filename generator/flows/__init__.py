"""Layer 7, flows: what the commands do with a design: verify, cost, analyze, widths, report."""
