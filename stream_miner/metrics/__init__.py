"""Prometheus metrics of ``stream-miner run``: the run's counts, what each tick found, and
a capped top K of patterns with series of their own.

>>> from stream_miner.metrics import RunMetrics, TopPatterns
>>> metrics = RunMetrics(TopPatterns(k=5))
>>> b"stream_miner_tick_duration_seconds_count 0.0" in metrics.exposition()[2]
True
"""

from stream_miner.metrics.run_metrics import RunMetrics
from stream_miner.metrics.top_patterns import DEFAULT_TOP_K, MAX_TOP_K, TopPatterns

__all__ = ["DEFAULT_TOP_K", "MAX_TOP_K", "RunMetrics", "TopPatterns"]
