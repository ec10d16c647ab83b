"""PNG timelines of the drift-quality scenarios (matplotlib, an optional extra: ``[plots]``).

Per scenario: the support and the lift of each planted itemset at every tick, the thresholds,
where each change was planted (grey line) and where it crossed the thresholds (dotted), and
every alarm of the detector and of the naive detector (triangles up: emerged, down: faded;
filled green: hit, orange: redundant, red: false alarm).
"""

from __future__ import annotations

from collections import defaultdict
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING

from simulations.drift_scoring import FALSE_ALARM, HIT, Score

if TYPE_CHECKING:
    from simulations.drift_quality import Outcome

COLOURS = {HIT: "#2a9d4b", "redundant": "#e08a1e", FALSE_ALARM: "#d1342f"}


def draw_all(outcomes: Sequence[Outcome], folder: Path) -> str:
    """Draw every timeline into ``folder``; a line saying where (or why not)."""
    try:
        import matplotlib

        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError:
        return "timelines skipped: matplotlib is not installed (pip install 'stream-miner[plots]')"
    folder.mkdir(parents=True, exist_ok=True)
    for outcome in outcomes:
        figure = _draw(plt, outcome)
        figure.savefig(folder / f"{'-'.join(outcome.scenario.name.lower().split())}.png", dpi=90)
        plt.close(figure)
    return f"timelines: {folder}/*.png"


def _draw(plt, outcome: Outcome):  # matplotlib is optional: untyped
    settings = outcome.scenario.settings
    figure, (support, lift, alarms) = plt.subplots(
        3, 1, figsize=(10, 7), sharex=True, gridspec_kw={"height_ratios": [3, 2, 1.4]}
    )
    figure.suptitle(f"{outcome.scenario.name}: {outcome.scenario.about}", fontsize=9, wrap=True)
    for truth in outcome.truths:
        x = [p.baskets for p in truth.series]
        label = " + ".join(truth.items)
        support.plot(x, [p.support for p in truth.series], label=f"{label} ({truth.change})")
        if len(truth.items) > 1:  # no lift where the items are not bought at all (log scale)
            lift.plot(x, [p.lift if p.lift else None for p in truth.series], label=label)
        for axis in (support, lift, alarms):
            axis.axvline(truth.start, color="grey", linewidth=1)
            for crossing in truth.crossings:
                axis.axvline(crossing.baskets, color="grey", linestyle=":", linewidth=1)
    support.axhline(float(settings.min_support), color="black", linewidth=0.8, linestyle="--", label="enter")
    support.axhline(
        float(settings.min_support * settings.exit_fraction),
        color="black",
        linewidth=0.6,
        linestyle=":",
        label="exit",
    )
    support.set_ylabel("support")
    support.legend(fontsize=7, loc="upper left")
    if settings.min_lift > 1:
        lift.axhline(float(settings.min_lift), color="black", linewidth=0.8, linestyle="--")
    lift.set_yscale("log")
    lift.set_ylabel("lift (log)")
    _alarms(alarms, outcome.detector, 1.0)
    _alarms(alarms, outcome.naive, 0.0)
    alarms.set_title("alarms: up emerged, down faded; green hit, orange redundant, red false", fontsize=8)
    alarms.set_yticks([0, 1], ["naive", "detector"])
    alarms.set_ylim(-0.6, 1.6)
    alarms.set_xlabel(f"baskets (window {settings.window_size}, a tick every {settings.tick_every})")
    figure.tight_layout()
    return figure


def _alarms(axis, scored: Score, row: float) -> None:
    """One scatter per kind and verdict (a naive detector may raise thousands of alarms)."""
    groups: dict[tuple[str, str], list[int]] = defaultdict(list)
    for alarm, verdict in scored.verdicts:
        groups[alarm.kind, verdict].append(alarm.baskets)
    for (kind, verdict), where in sorted(groups.items(), key=lambda g: g[0][1] == HIT):  # hits on top
        marker = "^" if kind == "emerged" else "v"
        axis.scatter(where, [row] * len(where), marker=marker, color=COLOURS[verdict], s=28, linewidths=0)
