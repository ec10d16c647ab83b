"""Backtest reports: a replay's ticks recorded in bounded memory (:mod:`.recorder`), gathered
into one JSON-ready object (:mod:`.data`) and drawn as a self-contained HTML page with inline
SVG charts (:mod:`.page`, :mod:`.charts`)."""
