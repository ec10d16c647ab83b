"""Incremental ticks: the border tracker and its parts (pair table, bitmaps, row lookups, compiled loops)."""
