"""Drift quality: the detector of ``stream-miner run`` scored on scenarios with ground truth.

    python -m simulations.drift_quality            # every bundled scenario, then the table
    python -m simulations.drift_quality --scenario my-shop.toml --no-table

For each scenario (``stream_miner/simulate/scenarios/*.toml`` unless ``--scenario`` names
files) the stream is generated and written as JSON Lines, then read by the same pieces as
``stream-miner run --source file:... --events-out ...`` with the scenario's options (the
``run`` parser and option builders, FileSource, Runner, a JSON Lines events file), with a
tick listener beside them that feeds a naive detector (the rule-set difference between
consecutive ticks). Both are scored against the ground truth
(:mod:`stream_miner.simulate.truth`, scoring in :mod:`simulations.drift_scoring`) and printed
side by side, then the issue's targets at the default drift settings, then a table of how
delay and false alarms move with ``--confirm-ticks`` and ``--false-discovery-rate``.
Writes ``simulations/results/drift_quality.json`` and, with matplotlib installed, a PNG
timeline per scenario (its first seed) in ``simulations/results/drift_quality/``.
"""

from __future__ import annotations

import argparse
import io
import json
import statistics
import tempfile
from dataclasses import dataclass, replace
from pathlib import Path

from simulations.drift_scoring import NaiveDetector, Score, event_alarm, score
from stream_miner.cli.drift_options import drift_settings
from stream_miner.cli.main import build_parser
from stream_miner.cli.options import file_layout, run_settings
from stream_miner.connectors.dead_letters import DeadLetterCounter
from stream_miner.connectors.file_source import FileSource
from stream_miner.connectors.json_lines import JsonLinesFile
from stream_miner.engine.rules import RuleFilter
from stream_miner.runtime.protocols import TickReport
from stream_miner.runtime.runner import Runner
from stream_miner.simulate.scenarios import Generated, Scenario, bundled, generate, load
from stream_miner.simulate.truth import Truth, ground_truth

RESULTS = Path(__file__).resolve().parent / "results"
TARGETS = {  # the targets at the default drift settings
    "recall": 0.95,
    "median_delay_windows": 0.5,
    "false_per_day_stationary": 1.0,
    "redundant_per_change": 0.5,
}
TABLE = [
    ("defaults", []),
    ("--confirm-ticks 1", ["--confirm-ticks", "1"]),
    ("--confirm-ticks 3", ["--confirm-ticks", "3"]),
    ("--false-discovery-rate 0.01", ["--false-discovery-rate", "0.01"]),
    ("--false-discovery-rate 0.00001", ["--false-discovery-rate", "0.00001"]),
]


@dataclass
class Outcome:
    """One scenario at one setting: the detector's and the naive detector's scores."""

    scenario: Scenario
    generated: Generated
    truths: list[Truth]
    detector: Score
    naive: Score
    options: list[str]


class _NaiveFeed:
    """A tick listener handing every tick to the naive detector."""

    def __init__(self, naive: NaiveDetector) -> None:
        self.naive = naive

    def on_tick(self, report: TickReport) -> None:
        self.naive.on_tick(report.tick, report.consumed)


def run_detector(data: Path, events: Path, options: list[str], naive: NaiveDetector) -> list[dict]:
    """Read ``data`` as ``stream-miner run --source file:DATA OPTIONS --events-out EVENTS``
    does, with ``naive`` fed every tick; the events written."""
    argv = ["run", "--source", f"file:{data}", *options, "--events-out", str(events), "--quiet"]
    args = build_parser().parse_args(argv)
    settings = run_settings(args, tick_interval=args.tick_interval, drift=drift_settings(args))
    source = FileSource(str(data), file_layout(args, "jsonl"))
    sink = JsonLinesFile(events)
    try:
        runner = Runner(
            settings, source, DeadLetterCounter(), [_NaiveFeed(naive)], io.StringIO(), events=sink
        )
        if runner.run() != 0:
            raise SystemExit(f"drift_quality: the run over {data} failed")
    finally:
        sink.close()
        source.close()
    with open(events, encoding="utf-8") as lines:
        return [json.loads(line) for line in lines]


def evaluate(
    scenario: Scenario, work: Path, extra: list[str] | None = None, generated: Generated | None = None,
    truths: list[Truth] | None = None,
) -> Outcome:  # fmt: skip
    """Generate (unless given), run and score one scenario with ``extra`` run options."""
    generated = generated or generate(scenario)
    truths = truths if truths is not None else ground_truth(generated)
    settings = scenario.settings
    data = work / f"{_slug(scenario.name)}.jsonl"
    if not data.exists():
        generated.write(data)
    events = work / f"{_slug(scenario.name)}-events.jsonl"
    events.unlink(missing_ok=True)
    options = [*settings.options(), *(extra or [])]
    rules = RuleFilter(min_confidence=settings.min_confidence, min_lift=settings.min_lift)
    naive = NaiveDetector(rules, settings.window_size)
    found = run_detector(data, events, options, naive)
    positions = {f"b{i}": i + 1 for i in range(len(generated.baskets))}
    alarms = [event_alarm(event, positions) for event in found]
    detector = score(alarms, truths, generated, settings.window_size)
    return Outcome(
        scenario,
        generated,
        truths,
        detector,
        score(naive.alarms, truths, generated, settings.window_size),
        options,
    )


def _slug(name: str) -> str:
    return "-".join(name.lower().split())


def _fmt(value: float | None, spec: str = ".2f") -> str:
    return "n/a" if value is None else format(value, spec)


def describe(outcome: Outcome) -> list[str]:
    """Lines for one scenario: what was planted and both detectors' figures."""
    lines = [f"== {outcome.scenario.name}: {outcome.scenario.about}"]
    for truth in outcome.truths:
        crossings = ", ".join(
            f"{c.kind} at basket {c.baskets}{'' if c.required else ' (below the margin)'}"
            for c in truth.crossings
        )
        lines.append(f"   planted {truth.change} {' + '.join(truth.items)} from basket {truth.start}: "
                     f"{crossings or 'no crossing: must not alert'}")  # fmt: skip
    for name, s in (("detector", outcome.detector), ("naive", outcome.naive)):
        delay = _fmt(s.median_delay, ".0f")
        lines.append(
            f"   {name:<8} alarms {s.alarms:>4}  hits {s.hits}/{s.crossings}  recall {_fmt(s.recall)}  "
            f"precision {_fmt(s.precision)}  median delay {delay} baskets "
            f"({_fmt(None if s.median_delay_seconds is None else s.median_delay_seconds / 60, '.0f')} min)  "
            f"false alarms {s.false_alarms} ({_fmt(s.false_per_day)}/day)  "
            f"redundant/change {_fmt(s.redundant_per_change)}"
        )
    return lines


def targets(outcomes: list[Outcome], which: str = "detector") -> dict:
    """The issue's four figures over every scenario, and whether each target is met."""
    total, stationary = Score(), Score()
    windows: list[float] = []
    for outcome in outcomes:
        s: Score = getattr(outcome, which)
        total.add(s)
        windows += [d / outcome.scenario.settings.window_size for d in s.delays]
        if not outcome.scenario.changes:
            stationary.add(s)
    figures = {
        "recall": total.recall,
        "median_delay_windows": statistics.median(windows) if windows else None,
        "false_per_day_stationary": stationary.false_per_day,
        "redundant_per_change": total.redundant_per_change,
    }
    met = {
        "recall": figures["recall"] is not None and figures["recall"] >= TARGETS["recall"],
        **{
            key: figures[key] is not None and figures[key] <= TARGETS[key]
            for key in ("median_delay_windows", "false_per_day_stationary", "redundant_per_change")
        },
    }
    return {"figures": figures, "met": met, "false_alarms": total.false_alarms, "alarms": total.alarms}


def target_lines(detector: dict, naive: dict) -> list[str]:
    names = {
        "recall": "recall (required crossings)         >= 0.95",
        "median_delay_windows": "median delay after crossing (windows) <= 0.5",
        "false_per_day_stationary": "false alarms per day, stationary     <= 1",
        "redundant_per_change": "redundant events per true change     <= 0.5",
    }
    lines = [f"{'target':<46} {'detector':>9} {'met':>4}   {'naive':>9} {'met':>4}"]
    for key, label in names.items():
        d, n = detector["figures"][key], naive["figures"][key]
        lines.append(
            f"{label:<46} {_fmt(d):>9} {'yes' if detector['met'][key] else 'NO':>4}   "
            f"{_fmt(n):>9} {'yes' if naive['met'][key] else 'NO':>4}"
        )
    return lines


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawTextHelpFormatter)
    parser.add_argument("--scenario", action="append", type=Path, help="a scenario file (repeatable)")
    parser.add_argument(
        "--seeds", type=int, default=1, metavar="K", help="run each scenario with K seeds from its own on"
    )
    parser.add_argument("--no-table", action="store_true", help="skip the table of other settings")
    parser.add_argument("--no-plots", action="store_true", help="skip the PNG timelines")
    parser.add_argument("--out", type=Path, default=RESULTS / "drift_quality.json", help="the results file")
    parser.add_argument("--plots", type=Path, default=RESULTS / "drift_quality", help="folder for the PNGs")
    args = parser.parse_args(argv)
    try:
        scenarios = [
            seeded for path in (args.scenario or bundled()) for seeded in with_seeds(load(path), args.seeds)
        ]
    except ValueError as error:
        parser.exit(2, f"drift_quality: error: {error}\n")
    with tempfile.TemporaryDirectory(prefix="drift-quality-") as folder:
        work = Path(folder)
        outcomes = []
        for scenario in scenarios:
            outcome = evaluate(scenario, work)
            outcomes.append(outcome)
            print("\n".join(describe(outcome)), flush=True)
        detector, naive = targets(outcomes), targets(outcomes, "naive")
        print("\nTargets at the default drift settings (scenario window, tick and thresholds):")
        print("\n".join(target_lines(detector, naive)), flush=True)
        table = [] if args.no_table else settings_table(outcomes, work)
    report = {
        "command": "python -m simulations.drift_quality"
        + (f" --seeds {args.seeds}" if args.seeds > 1 else ""),
        "targets": TARGETS,
        "detector": detector,
        "naive": naive,
        "scenarios": [_scenario_json(o) for o in outcomes],
        "table": table,
    }
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(json.dumps(report, indent=1) + "\n")
    print(f"\nresults: {args.out}")
    if not args.no_plots:
        from simulations.drift_timeline import draw_all

        print(draw_all(outcomes[:: args.seeds], args.plots))  # each scenario's first seed
    return 0


def with_seeds(scenario: Scenario, count: int) -> list[Scenario]:
    """``scenario`` with ``count`` seeds from its own on (named by seed when more than one)."""
    if count == 1:
        return [scenario]
    first = scenario.stream.seed
    return [
        replace(scenario, name=f"{scenario.name} seed {seed}", stream=replace(scenario.stream, seed=seed))
        for seed in range(first, first + count)
    ]


def settings_table(outcomes: list[Outcome], work: Path) -> list[dict]:
    """Every scenario again at other drift settings: recall, delay and false alarms."""
    rows = []
    head = f"{'recall':>6} {'median delay':>12} {'FA/day stat.':>12} {'FA all':>6} {'redund.':>7}"
    print(f"\n{'setting':<32} {head}")
    for label, extra in TABLE:
        runs = (
            outcomes
            if not extra
            else [evaluate(o.scenario, work, extra, o.generated, o.truths) for o in outcomes]
        )
        found = targets(runs)
        figures = found["figures"]
        delays = [d for o in runs for d in o.detector.delays]
        median = statistics.median(delays) if delays else None
        rows.append(
            {
                "setting": label,
                "median_delay_baskets": median,
                **figures,
                "false_alarms": found["false_alarms"],
            }
        )
        print(
            f"{label:<32} {_fmt(figures['recall']):>6} {_fmt(median, '.0f'):>12} "
            f"{_fmt(figures['false_per_day_stationary']):>12} {found['false_alarms']:>6} "
            f"{_fmt(figures['redundant_per_change']):>7}",
            flush=True,
        )
    return rows


def _scenario_json(outcome: Outcome) -> dict:
    return {
        "name": outcome.scenario.name,
        "file": outcome.scenario.source,
        "options": outcome.options,
        "baskets": len(outcome.generated.baskets),
        "truth": [t.as_json() for t in outcome.truths],
        "detector": outcome.detector.as_json(),
        "naive": outcome.naive.as_json(),
    }


if __name__ == "__main__":
    raise SystemExit(main())
