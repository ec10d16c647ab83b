"""``--events-out -``: drift events on standard output, as JSON Lines or readable lines."""

from __future__ import annotations

import json
import sys
from typing import TextIO

from stream_miner.runtime.protocols import CannotCutBack


class EventLines(CannotCutBack):
    """Events on stdout, flushed per event; stdout cannot be cut back on a restart."""

    def __init__(self, out: TextIO | None = None, *, as_text: bool = False) -> None:
        self.out = out or sys.stdout
        self.as_text = as_text

    def write(self, event: dict) -> None:
        as_json = json.dumps(event, ensure_ascii=False, allow_nan=False)
        line = describe_event(event) if self.as_text else as_json
        self.out.write(line + "\n")
        self.out.flush()

    def flush(self) -> None:
        self.out.flush()

    def close(self) -> None:
        self.out.flush()


def describe_event(event: dict) -> str:
    """One readable line: ``emerged  tea + scone  support 7.4% (baseline at most 4.9%), ...``."""
    baseline = event["baseline"]
    was = f"{'' if baseline['exact'] else 'at most '}{100 * baseline['support']:.1f}%"
    best = max(event["rules"], key=lambda r: r["confidence"], default=None)
    measures = "" if best is None else f", confidence {best['confidence']:.2f}, lift {best['lift']:.2f}"
    return (
        f"{event['event']:<8} {' + '.join(event['items'])}  support {100 * event['support']:.1f}% "
        f"(baseline {was}){measures}, p {event['p_value']:.2g}, tick {event['tick']}"
    )
