"""Fault campaign: does ``stream-miner run`` over Kafka count every basket exactly once, and
write every bad message once, through kills, group churn, broker and checkpoint faults?

    python -m simulations.fault_campaign --scenario all --baskets 30000 --seed 1 [--repeat R]

Each scenario starts a real broker (tests/kafka_broker.py), runs members as separate
``stream-miner run`` processes with real signals, produces a seeded stream concurrently
(baskets with marker items, duplicates, bad messages), injects its faults at moments defined
by progress (plus a seeded random extra), stops everything with SIGTERM, then reads the
topic back and accounts per basket (simulations/fault_harness.py). Prints a table and writes
the figures to simulations/results/fault_campaign.json.

Scenarios:
- ``kill-loop``: one member, SIGKILLed and restarted several times while the producer runs.
- ``group-churn``: three members on six partitions; two SIGKILLs and three SIGTERMs, each
  followed by a restart, spread over the run.
- ``broker-pause``: the broker SIGSTOPped longer than the session timeout, then again while
  the member is SIGTERMed.
- ``broker-restart``: the broker SIGKILLed, then SIGTERMed, each time started again on the
  same port with its log kept (an object store outside the broker process).
- ``checkpoint-faults``: the checkpoint directory replaced by a file, then the checkpoint
  file replaced by a directory, each repaired and the member restarted.
"""

from __future__ import annotations

import argparse
import itertools
import json
import random
import re
import shutil
import signal
import sys
import tempfile
import time
from collections import Counter
from collections.abc import Callable
from dataclasses import asdict, dataclass, field
from pathlib import Path

from simulations.fault_harness import (
    ONE_LINE,
    TICK_SECONDS,
    Figures,
    Member,
    Message,
    Observed,
    Producer,
    basket_figures,
    caught_up,
    committed,
    dead_letter_figures,
    dead_letter_keys,
    make_stream,
    member_command,
    observed_figures,
    read_oracle,
    reference_itemsets,
    snapshot_itemsets,
    split_markers,
    watch,
)
from simulations.text_table import text_table

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))
from kafka_broker import Broker, start_broker, stop_broker

ERROR_LINE = re.compile(r"^stream-miner: error: ", re.M)
RESULTS = Path(__file__).resolve().parent / "results" / "fault_campaign.json"
TOPIC, DEAD_TOPIC, GROUP = "checkouts", "dead", "campaign"
PROGRESS_WITHIN = 120.0  # seconds to reach a fault's progress point (else the fault comes anyway)
RECOVERY_WITHIN = 120.0  # seconds after the last commit of the topic for pending recoveries
COMPLETION_WITHIN = 300.0  # seconds after the producer's end for the group to commit the topic
REPORT_WITHIN = 30.0  # seconds for a member to report a checkpoint fault (a line, or an exit)
KILL_JITTER = TICK_SECONDS  # a seeded random extra (s) after a kill's progress point (baskets
# in the member's snapshot, written every TICK_SECONDS): where in a tick the kill lands
OUTAGE_SECONDS = 10.0  # a SIGSTOPped broker: longer than the session timeout (GROUP_OPTIONS, 6 s)
RESTART_DOWN = 3.0  # seconds a restarted broker stays down
# the duration of an outage is the fault itself, not a wait for anything


@dataclass
class Recovery:
    """A fault's end awaiting recovery: when it ended, the messages acknowledged by then, and
    what the group must commit (everything acknowledged once more came, or at the end)."""

    began: float
    before: int
    target: dict[int, int] | None = None


@dataclass
class Stage:
    """One scenario run: broker, stream, producer, members and what was seen."""

    name: str
    seed: int
    workdir: Path
    broker: Broker
    partitions: int
    messages: list[Message]
    producer: Producer
    rnd: random.Random
    observed: Observed = field(default_factory=Observed)
    members: list[Member] = field(default_factory=list)
    dead_files: list[Path] = field(default_factory=list)
    dead_topics: list[str] = field(default_factory=list)
    faults: int = 0
    recovery_seconds: list[float] = field(default_factory=list)
    pending: list[Recovery] = field(default_factory=list)
    started: float = field(default_factory=time.monotonic)
    _looked_at: float = 0.0

    def __enter__(self) -> Stage:
        return self

    def __exit__(self, *exc_info: object) -> None:
        for member in self.members:
            member.discard()
        stop_broker(self.broker)

    def member(self, name: str, to_topic: bool, per_basket: bool) -> Member:
        """Start a member writing dead letters to the dead-letter topic or its own file."""
        workdir = self.workdir / name
        if to_topic:
            target = f"kafka://{self.broker.address}/{DEAD_TOPIC}"
            if DEAD_TOPIC not in self.dead_topics:
                self.broker.create_topic(DEAD_TOPIC, 1)
                self.dead_topics.append(DEAD_TOPIC)
        else:
            self.dead_files.append(workdir / "dead.jsonl")
            target = str(self.dead_files[-1])
        command = member_command(self.broker, TOPIC, GROUP, workdir, target, per_basket=per_basket)
        member = Member(name, workdir, command, self.observed)
        self.members.append(member)
        member.start()
        return member

    def phases(self, count: int) -> list[list[Message]]:
        """The stream cut into ``count`` parts at seeded points near equal shares."""
        n = len(self.messages)
        cuts = [round(n * (k + self.rnd.uniform(-0.1, 0.1)) / count) for k in range(1, count)]
        bounds = [0, *cuts, n]
        return [self.messages[a:b] for a, b in itertools.pairwise(bounds)]

    def target(self, k: int, of: int, total: int) -> int:
        """The progress point of fault ``k`` of ``of``: spread over 90 % of ``total``, plus a
        seeded random extra of up to a third of the spacing."""
        spacing = 0.9 * total / (of + 1)
        return round(spacing * (k + 1) + self.rnd.uniform(0, spacing / 3))

    def fault_over(self) -> None:
        """Count a fault that just ended; its recovery is awaited by :meth:`tend`."""
        self.faults += 1
        self.pending.append(Recovery(time.monotonic(), self.producer.total()))

    def tend(self) -> None:
        """What a service manager and a watcher do meanwhile: start a member again that exited
        by itself, and (once a second) check the recoveries awaited."""
        for member in self.members:
            member.restart_if_exited()
        if not self.pending or time.monotonic() - self._looked_at < 1.0:
            return
        self._looked_at = time.monotonic()
        for recovery in self.pending:
            if recovery.target is None and (
                self.producer.total() > recovery.before or not self.producer.busy
            ):
                recovery.target = self.producer.snapshot()
        targets = [recovery for recovery in self.pending if recovery.target is not None]
        if not targets:
            return
        now = committed(self.broker, GROUP, TOPIC, range(self.partitions))
        for recovery in targets:
            assert recovery.target is not None
            if all(now[p] >= offset for p, offset in recovery.target.items()):
                self.recovery_seconds.append(round(time.monotonic() - recovery.began, 1))
                self.pending.remove(recovery)

    def finish(self, per_basket: bool) -> Figures:
        """Wait for the producer and for the group to commit the whole topic, stop every
        member with SIGTERM at once, and account."""
        self.producer.wait()
        oracle = read_oracle(self.broker, TOPIC, self.partitions)
        watch(caught_up(self.broker, GROUP, TOPIC, oracle.ends), COMPLETION_WITHIN, self.tend)
        watch(lambda: not self.pending, RECOVERY_WITHIN, self.tend)
        sent = [(member, member.signal()) for member in self.members]
        for member, at in sent:
            member.finish_stop(at)
        snapshots = [snapshot_itemsets(member.snapshot_path) for member in self.members]
        if per_basket:
            times: Counter[str] = Counter()
            items: Counter[tuple] = Counter()
            for _, itemsets in snapshots:
                markers, real = split_markers(itemsets)
                times.update(markers)
                items.update(real)
            expected = Counter((item,) for basket in oracle.baskets.values() for item in basket)
            counted = sum(times.values())
            differing = _differing(dict(items), dict(expected))
        else:
            (header, itemsets), *_ = snapshots
            times, real = split_markers(itemsets)
            counted = header["size"]
            differing = _differing(real, reference_itemsets(oracle.baskets.values(), 2, 3))
        written = dead_letter_keys(self.broker, self.dead_files, self.dead_topics)
        return Figures(
            scenario=self.name,
            seed=self.seed,
            produced=len(oracle.baskets),
            messages=oracle.messages,
            resent=len(oracle.resent),
            **basket_figures(oracle, times, counted),
            itemsets_differing=differing,
            **dead_letter_figures(oracle, written),
            faults=self.faults,
            recoveries=len(self.recovery_seconds),
            max_recovery_seconds=max(self.recovery_seconds, default=0.0),
            recovery_seconds=self.recovery_seconds,
            **observed_figures(self.observed),
            wall_seconds=round(time.monotonic() - self.started, 1),
        )


def _differing(found: dict[tuple, int], expected: dict[tuple, int]) -> int:
    return sum(1 for key in found.keys() | expected.keys() if found.get(key) != expected.get(key))


def open_stage(
    name: str, baskets: int, seed: int, workdir: Path, partitions: int, kept_log: bool = False
) -> Stage:
    """A fresh broker with the topic, and the scenario's seeded stream and producer."""
    broker = start_broker(kept_log=kept_log)
    try:
        broker.create_topic(TOPIC, partitions)
    except BaseException:
        stop_broker(broker)
        raise
    messages = make_stream(baskets, seed, partitions)
    producer = Producer(broker, TOPIC, rate=max(100, baskets // 40))
    return Stage(name, seed, workdir / name, broker, partitions, messages, producer, random.Random(seed))


# ------------------------------------------------------------------ scenarios
def kill_loop(baskets: int, seed: int, workdir: Path) -> Figures:
    """One member SIGKILLed at seeded progress points (baskets it counted) while the producer
    runs, restarted with the same command each time; SIGTERM at the end."""
    with open_stage("kill-loop", baskets, seed, workdir, partitions=1) as stage:
        member = stage.member("m0", to_topic=False, per_basket=False)
        stage.producer.send(stage.messages)
        kills = min(8, max(3, baskets // 5000))
        for k in range(kills):
            point = stage.target(k, kills, baskets)
            watch(lambda point=point: member.consumed() >= point, PROGRESS_WITHIN, stage.tend)
            time.sleep(stage.rnd.uniform(0, KILL_JITTER))  # see KILL_JITTER
            member.kill()
            member.start()
            stage.fault_over()
        return stage.finish(per_basket=False)


def group_churn(baskets: int, seed: int, workdir: Path) -> Figures:
    """Three members on six partitions; two SIGKILLs and three SIGTERMs of seeded members at
    seeded progress points, each member started again after a seeded share of the stream."""
    with open_stage("group-churn", baskets, seed, workdir, partitions=6) as stage:
        members = [stage.member(f"m{k}", to_topic=k == 2, per_basket=True) for k in range(3)]
        stage.broker.wait_for_stable_group(GROUP, 3, timeout=120)
        stage.producer.send(stage.messages)
        events = ["kill", "kill", "term", "term", "term"]
        stage.rnd.shuffle(events)
        total = len(stage.messages)
        for k, event in enumerate(events):
            point = stage.target(k, len(events), total)
            watch(lambda point=point: stage.producer.total() >= point, PROGRESS_WITHIN, stage.tend)
            victim = stage.rnd.choice(members)
            if event == "kill":
                victim.kill()
            else:
                victim.stop()
            back = min(total, stage.producer.total() + stage.rnd.randint(1, max(1, total // 20)))
            watch(lambda back=back: stage.producer.total() >= back, PROGRESS_WITHIN)
            victim.start()
            stage.fault_over()
        return stage.finish(per_basket=True)


def broker_pause(baskets: int, seed: int, workdir: Path) -> Figures:
    """The broker SIGSTOPped for longer than the session timeout, then SIGCONTed; later
    SIGSTOPped again while the member is SIGTERMed (the stop is timed), and the member
    started again after SIGCONT."""
    with open_stage("broker-pause", baskets, seed, workdir, partitions=1) as stage:
        member = stage.member("m0", to_topic=True, per_basket=False)
        first, second, third = stage.phases(3)
        stage.producer.send(first)
        stage.producer.wait()
        stage.broker.pause()
        time.sleep(OUTAGE_SECONDS)  # the outage itself (see OUTAGE_SECONDS)
        stage.broker.resume()
        stage.fault_over()
        stage.producer.send(second)
        stage.producer.wait()
        stage.broker.pause()
        member.stop()
        stage.broker.resume()
        member.start()
        stage.fault_over()
        stage.producer.send(third)
        return stage.finish(per_basket=False)


def broker_restart(baskets: int, seed: int, workdir: Path) -> Figures:
    """The broker SIGKILLed, later SIGTERMed, each time started again on the same port with its
    log kept, while a member runs."""
    with open_stage("broker-restart", baskets, seed, workdir, partitions=1, kept_log=True) as stage:
        stage.member("m0", to_topic=True, per_basket=False)
        first, *rest = stage.phases(3)
        stage.producer.send(first)
        for sig in (signal.SIGKILL, signal.SIGTERM):
            stage.producer.wait()
            stage.broker.restart(sig, down=RESTART_DOWN)
            stage.fault_over()
            stage.producer.send(rest.pop(0))
        return stage.finish(per_basket=False)


def checkpoint_faults(baskets: int, seed: int, workdir: Path) -> Figures:
    """While a member runs: its checkpoint directory replaced by a file, later its checkpoint
    file replaced by a directory. Each time: wait for the member to say so (or exit), repair,
    restart the member."""
    with open_stage("checkpoint-faults", baskets, seed, workdir, partitions=1) as stage:
        member = stage.member("m0", to_topic=False, per_basket=False)
        checkpoints = member.workdir / "ck"
        aside = member.workdir / "aside"
        phases = stage.phases(3)
        breaks = [
            (_directory_to_file, _file_back_to_directory),
            (_file_to_directory, _directory_back_to_file),
        ]
        for phase, (spoil, repair) in zip(phases, breaks, strict=False):
            stage.producer.send(phase)
            stage.producer.wait()
            point = member.consumed() + 1
            watch(lambda point=point: member.consumed() >= point, PROGRESS_WITHIN, stage.tend)
            mark = len(member.stderr())
            spoil(checkpoints, aside)
            watch(_reported(member, mark), REPORT_WITHIN)
            if ERROR_LINE.search(member.stderr()[mark:]):  # an error ends the run: wait for the exit
                watch(lambda: not member.alive(), REPORT_WITHIN)
            repair(checkpoints, aside)
            if not member.restart_if_exited():
                member.stop()
                member.start()
            stage.fault_over()
        stage.producer.send(phases[-1])
        return stage.finish(per_basket=False)


def _reported(member: Member, mark: int) -> Callable[[], bool]:
    """A condition: the member printed a line about a problem after ``mark``, or exited."""
    return lambda: not member.alive() or bool(ONE_LINE.search(member.stderr()[mark:]))


def _directory_to_file(checkpoints: Path, aside: Path) -> None:
    checkpoints.rename(aside)
    checkpoints.write_text("a file where the checkpoint directory was\n")


def _file_back_to_directory(checkpoints: Path, aside: Path) -> None:
    checkpoints.unlink()
    aside.rename(checkpoints)


def _file_to_directory(checkpoints: Path, aside: Path) -> None:
    checkpoint = checkpoints / "checkpoint.npz"
    if checkpoint.exists():
        checkpoint.rename(aside)
    checkpoint.mkdir()


def _directory_back_to_file(checkpoints: Path, aside: Path) -> None:
    checkpoint = checkpoints / "checkpoint.npz"
    shutil.rmtree(checkpoint)
    if aside.exists():
        aside.rename(checkpoint)


SCENARIOS: dict[str, Callable[[int, int, Path], Figures]] = {
    "kill-loop": kill_loop,
    "group-churn": group_churn,
    "broker-pause": broker_pause,
    "broker-restart": broker_restart,
    "checkpoint-faults": checkpoint_faults,
}


# ------------------------------------------------------------------- reporting
COLUMNS = [
    ("scenario", "scenario"),
    ("seed", "seed"),
    ("produced", "produced"),
    ("counted", "counted"),
    ("lost", "lost"),
    ("double_counted", "double"),
    ("itemsets_differing", "sets≠"),
    ("bad_produced", "bad"),
    ("dead_letters_written", "dl written"),
    ("dead_letters_missing", "dl missing"),
    ("dead_letters_twice", "dl twice"),
    ("faults", "faults"),
    ("recoveries", "recovered"),
    ("max_recovery_seconds", "max recovery s"),
    ("one_line_errors", "1-line"),
    ("tracebacks", "tracebacks"),
    ("max_stop_seconds", "max stop s"),
]


def table(rows: list[dict]) -> str:
    """The figures as an aligned text table."""
    cells = [[title for _, title in COLUMNS]] + [
        [str(row.get(key, "")) for key, _ in COLUMNS] for row in rows
    ]
    return "\n".join(text_table(cells))


def run_one(name: str, baskets: int, seed: int, workdir: Path) -> dict:
    """One scenario's figures as a dict; a scenario the harness could not finish says why."""
    import pytest  # processes.py reports a wait that timed out through pytest.fail

    try:
        return asdict(SCENARIOS[name](baskets, seed, workdir))
    except (Exception, pytest.fail.Exception) as error:
        return {"scenario": name, "seed": seed, "aborted": " ".join(str(error).split())[:500]}


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--scenario", default="all", choices=["all", *SCENARIOS])
    parser.add_argument("--baskets", type=int, default=30000, help="distinct baskets per scenario")
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--repeat", type=int, default=1, help="runs per scenario, seeds S, S+1, ...")
    parser.add_argument("--out", type=Path, default=RESULTS, help=f"figures as JSON (default: {RESULTS})")
    parser.add_argument("--keep", type=Path, help="keep the members' directories here (default: a temp dir)")
    args = parser.parse_args(argv)
    names = list(SCENARIOS) if args.scenario == "all" else [args.scenario]
    rows = []
    with tempfile.TemporaryDirectory(prefix="fault-campaign-") as scratch:
        workdir = args.keep or Path(scratch)
        for repeat in range(args.repeat):
            for name in names:
                seed = args.seed + repeat
                row = run_one(name, args.baskets, seed, workdir / f"seed-{seed}")
                rows.append(row)
                print(json.dumps(row), file=sys.stderr, flush=True)
    command = "python -m simulations.fault_campaign " + " ".join(argv if argv is not None else sys.argv[1:])
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(json.dumps({"command": command.strip(), "runs": rows}, indent=1) + "\n")
    print(table(rows))
    return 0


if __name__ == "__main__":
    sys.exit(main())
