"""The start-up check that the source topic keeps its log longer than a rebuilt window
needs: a member given a partition rebuilds its window by reading it again from the topic."""

from __future__ import annotations

import sys
from typing import TextIO

from kafka.admin import ConfigResource, ConfigResourceType, KafkaAdminClient
from kafka.errors import KafkaError


def retention_seconds(servers: str, topic: str, options: dict[str, object]) -> float | None:
    """The topic's ``retention.ms`` in seconds (inf: kept forever); None when the broker
    does not say."""
    known = {k: v for k, v in options.items() if k in KafkaAdminClient.DEFAULT_CONFIG}
    try:
        admin = KafkaAdminClient(bootstrap_servers=servers, **known)
    except (KafkaError, OSError, ValueError):
        return None
    try:
        found = admin.describe_configs(
            [ConfigResource(ConfigResourceType.TOPIC, topic, None)], config_filter="all"
        )
        entry = found.get("topic", {}).get(topic, {}).get("retention.ms")
        value = entry.get("value") if isinstance(entry, dict) else entry
        if value is None:
            return None
        millis = int(value)
    except (KafkaError, OSError, ValueError, TypeError, AttributeError):
        return None
    finally:
        admin.close()
    return float("inf") if millis < 0 else millis / 1000


def warn_short_retention(topic: str, kept: float | None, needed: float, log: TextIO = sys.stderr) -> bool:
    """One line when the topic keeps its log (``kept`` seconds, None: unknown) shorter than
    ``needed`` seconds of event time (a rebuilt window would miss baskets the log no longer
    holds); whether it warned."""
    if kept is None or kept >= needed:
        return False
    print(
        f"stream-miner: warning: topic {topic} keeps its log {kept:g} s, less than the {needed:g} s "
        "a member rebuilding a partition's window reads again; raise retention.ms or a handover "
        "loses baskets",
        file=log,
        flush=True,
    )
    return True
