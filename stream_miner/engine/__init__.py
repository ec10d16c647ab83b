"""The mining engine: window, prefix tree, FP-growth, rules, incremental ticks (no I/O)."""
