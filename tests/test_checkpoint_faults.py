"""Checkpoint writes the system refuses, and a checkpoint missing at start-up.

The faults are real: a directory where the checkpoint file goes, a file where its directory
goes, a full file system (a small tmpfs, where mounting is permitted), no write permission
(as root, the child runs without the capability that overrides file permissions) and a file
size limit (RLIMIT_FSIZE set on the running child, so writes fail with EFBIG). Each failure
is one line naming the file and the cause; a periodic checkpoint that fails commits nothing,
warns once per run of failures and says when a checkpoint is written again; a final one
that fails exits 1; no temporary file is left behind.
"""

from __future__ import annotations

import errno
import io
import json
import os
import re
import resource
import shutil
import subprocess
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import pytest

from processes import stream_miner, wait_until
from stream_miner.cli.main import main
from stream_miner.connectors.dead_letters import DeadLetterCounter
from stream_miner.connectors.file_source import FileSource
from stream_miner.decoding.files import FileLayout
from stream_miner.engine.params import MiningParams
from stream_miner.engine.window import CountWindow
from stream_miner.runtime.checkpoint import CHECKPOINT_NAME, CheckpointWriteError, load_checkpoint
from stream_miner.runtime.ledger import CommitOutcome
from stream_miner.runtime.protocols import TickReport
from stream_miner.runtime.runner import Runner, RunSettings

TEMPORARIES = f".{CHECKPOINT_NAME}.*.tmp"  # what an atomic write leaves if it fails to clean up
WINDOW, EVERY = 30, 10


def append_baskets(path: Path, first: int, n: int) -> None:
    """Append ``n`` checkouts with ids ``first``.. in one write (a reader never sees half)."""
    lines = [json.dumps({"id": f"c{i}", "items": ["tea", f"g{i % 4}"]}) for i in range(first, first + n)]
    with path.open("a") as out:
        out.write("\n".join(lines) + "\n")


def run_command(data: Path, ck: Path, *extra: str) -> list[str]:
    """`run` options over ``data`` with a checkpoint after every tick (tick every 10 baskets)."""
    return [
        "run",
        "--source",
        f"file:{data}",
        "--window-size",
        str(WINDOW),
        "--tick-every",
        str(EVERY),
        "--min-count",
        "2",
        "--max-size",
        "1",  # single items: no compiled loops, so the checkpoint is the only file written
        "--checkpoint-dir",
        str(ck),
        *extra,
    ]


# ------------------------------------------------------------------ in-process faults
class RecordingSource(FileSource):
    """A file source that keeps every commit the loop makes (files commit nowhere)."""

    def __init__(self, path: Path) -> None:
        super().__init__(str(path), FileLayout("jsonl"))
        self.commits: list[dict[int, int]] = []

    def commit(self, positions: dict[int, int]) -> tuple[dict[int, int], CommitOutcome]:
        self.commits.append(dict(positions))
        return positions, CommitOutcome.ACKED


def in_process_settings(ck: Path) -> RunSettings:
    """The settings of :func:`run_command` for a Runner built in the test's process."""
    params = MiningParams(min_count=2, max_size=1)
    return RunSettings(
        CountWindow(WINDOW), params, tick_every=EVERY, checkpoint_dir=ck, checkpoint_interval=0.0
    )


@dataclass
class Fault:
    """Breaks the checkpoint's path at one tick (before that tick's checkpoint) and mends it
    at a later one (None: never), noting the temporary files found just before mending."""

    directory: Path
    breaking: Callable[[], object]
    mending: Callable[[], object]
    at: int
    until: int | None
    leftovers: list[Path] | None = None

    def on_tick(self, report: TickReport) -> None:
        if report.tick.number == self.at:
            self.breaking()
        if report.tick.number == self.until:
            self.leftovers = sorted(self.directory.glob(TEMPORARIES))
            self.mending()


def file_to_directory(ck: Path) -> tuple[Callable[[], object], Callable[[], object], str]:
    target = ck / CHECKPOINT_NAME
    return lambda: (target.unlink(), target.mkdir()), target.rmdir, "Is a directory"


def directory_to_file(ck: Path) -> tuple[Callable[[], object], Callable[[], object], str]:
    return (
        lambda: (shutil.rmtree(ck), ck.write_text("not a directory\n")),
        ck.unlink,
        f"{ck} is not a directory",
    )


def disk_full(ck: Path) -> tuple[Callable[[], object], Callable[[], object], str]:
    filler = ck / "filler"
    return lambda: fill(filler), filler.unlink, "No space left on device"


def fill(path: Path) -> None:
    """Write zeros to ``path`` until its file system is full."""
    fd = os.open(path, os.O_WRONLY | os.O_CREAT)
    block = bytes(1 << 16)
    try:
        while True:
            os.write(fd, block)
    except OSError as error:
        assert error.errno == errno.ENOSPC, error
    finally:
        os.close(fd)


@pytest.fixture
def small_tmpfs(tmp_path: Path):
    """A 1 MiB tmpfs mounted at ``tmp_path/ck`` (skips where mounting is not permitted)."""
    ck = tmp_path / "ck"
    ck.mkdir()
    mount = shutil.which("mount")
    mounted = mount and subprocess.run(
        [mount, "-t", "tmpfs", "-o", "size=1m", "tmpfs", str(ck)], capture_output=True, text=True
    )
    if not mounted or mounted.returncode != 0:
        detail = mounted.stderr.strip() if mounted else "no mount command"
        pytest.skip(f"cannot mount a tmpfs here ({detail}); the file size limit test still fails writes")
    yield ck
    subprocess.run(["umount", str(ck)], check=True)


@pytest.mark.parametrize("mended", [True, False], ids=["mended", "still broken at the end"])
@pytest.mark.parametrize("fault", [file_to_directory, directory_to_file, disk_full])
def test_a_failing_periodic_checkpoint_warns_once_commits_nothing_and_is_retried(
    fault, mended, tmp_path, request
):
    ck = request.getfixturevalue("small_tmpfs") if fault is disk_full else tmp_path / "ck"
    data, path, log = tmp_path / "in.jsonl", ck / CHECKPOINT_NAME, io.StringIO()
    append_baskets(data, 0, 100)  # ticks 0..9 at 10, 20, ..., 100 baskets, a checkpoint after each
    breaking, mending, cause = fault(ck)
    injected = Fault(ck, breaking, mending, at=3, until=6 if mended else None)
    source = RecordingSource(data)
    runner = Runner(in_process_settings(ck), source, DeadLetterCounter(), [injected], log)

    if mended:
        assert runner.run() == 0
    else:
        with pytest.raises(
            CheckpointWriteError, match=f"^cannot write checkpoint {re.escape(str(path))}: {cause}$"
        ):
            runner.run()
    source.close()

    lines = log.getvalue().splitlines()
    warnings = [line for line in lines if "warning" in line]
    assert len(warnings) == 1, lines  # three failed in a row: said once
    assert warnings[0].startswith(
        f"stream-miner: warning: cannot write checkpoint {path}: {cause}; nothing is committed"
    )
    if mended:
        assert f"stream-miner: checkpoint {path} written again after 3 failed attempts" in lines
        assert injected.leftovers == []
        # ticks 3, 4 and 5 were not checkpointed, so their offsets were never committed
        # (a file's offsets are line numbers from 1: the next after n lines is n + 1)
        # (the end of the input is checkpointed twice: once due by time, once as the last one)
        distinct = [c for i, c in enumerate(source.commits) if i == 0 or c != source.commits[i - 1]]
        assert distinct == [{0: n + 1} for n in (10, 20, 30, 70, 80, 90, 100)]
        _, metadata = load_checkpoint(ck, window=CountWindow(WINDOW))
        assert metadata["consumed"] == 100 and metadata["ledger"]["held"] == {"0": 101}
    else:
        assert not any("written again" in line for line in lines)
        assert source.commits == [{0: 11}, {0: 21}, {0: 31}]  # nothing after the fault
        assert not ck.is_dir() or sorted(ck.glob(TEMPORARIES)) == []


def test_a_new_cause_is_said_again(tmp_path):
    data, ck, log = tmp_path / "in.jsonl", tmp_path / "ck", io.StringIO()
    append_baskets(data, 0, 100)
    first, second = file_to_directory(ck), directory_to_file(ck)
    faults = [Fault(ck, *first[:2], at=3, until=5), Fault(ck, *second[:2], at=5, until=7)]  # back to back
    source = RecordingSource(data)
    assert Runner(in_process_settings(ck), source, DeadLetterCounter(), faults, log).run() == 0
    source.close()
    path = ck / CHECKPOINT_NAME
    told = [line.split(";")[0] for line in log.getvalue().splitlines() if str(path) in line]
    assert told == [
        f"stream-miner: warning: cannot write checkpoint {path}: Is a directory",
        f"stream-miner: warning: cannot write checkpoint {path}: {ck} is not a directory",
        f"stream-miner: checkpoint {path} written again after 4 failed attempts",
    ]


# ------------------------------------------------------------------ faults on a live child
@dataclass(frozen=True)
class LiveFault:
    """A fault done to a running child from outside: ``prefix`` goes before its command."""

    prefix: list[str]
    breaking: Callable[[Path, int], object]
    mending: Callable[[Path, int], object]
    cause: str


def no_permission() -> LiveFault:
    """The checkpoint directory made read-only. Root ignores file permissions, so as root the
    child runs without CAP_DAC_OVERRIDE and CAP_DAC_READ_SEARCH (setpriv drops them from its
    bounding set, so the exec'd interpreter never has them)."""
    prefix: list[str] = []
    if os.geteuid() == 0:
        setpriv = shutil.which("setpriv")
        if setpriv is None:
            pytest.skip(
                "running as root and setpriv (util-linux) is missing: permissions would not stop a write"
            )
        prefix = [setpriv, "--bounding-set", "-dac_override,-dac_read_search", "--"]
        probe = subprocess.run([*prefix, "true"], capture_output=True, text=True)
        if probe.returncode != 0:
            pytest.skip(
                f"cannot drop capabilities here ({probe.stderr.strip()}): permissions would not stop root"
            )
    return LiveFault(
        prefix, lambda ck, _: ck.chmod(0o555), lambda ck, _: ck.chmod(0o755), "Permission denied"
    )


def file_size_limit() -> LiveFault:
    """RLIMIT_FSIZE of the running child lowered below a checkpoint's size (Python ignores
    SIGXFSZ, so the write fails with EFBIG), then raised again."""
    _, hard = resource.getrlimit(resource.RLIMIT_FSIZE)

    def limit(soft: int) -> Callable[[Path, int], object]:
        return lambda _, pid: resource.prlimit(pid, resource.RLIMIT_FSIZE, (soft, hard))

    return LiveFault([], limit(1024), limit(hard), "File too large")


@pytest.mark.parametrize("make_fault", [no_permission, file_size_limit])
def test_a_running_process_warns_in_one_line_goes_on_and_recovers(make_fault, spawn, tmp_path):
    fault = make_fault()
    data, ck = tmp_path / "in.jsonl", tmp_path / "ck"
    path = ck / CHECKPOINT_NAME
    append_baskets(data, 0, 10)
    child = spawn(
        [*fault.prefix, *stream_miner(*run_command(data, ck, "--follow", "--checkpoint-interval", "0"))]
    )
    wait_until(path.exists, 60, "the first checkpoint", child)
    fault.breaking(ck, child.process.pid)
    try:
        append_baskets(data, 10, 10)
        child.wait_for_line(
            rf"^stream-miner: warning: cannot write checkpoint {re.escape(str(path))}: {fault.cause};"
        )
    finally:
        fault.mending(ck, child.process.pid)
    append_baskets(data, 20, 10)
    child.wait_for_line(
        rf"^stream-miner: checkpoint {re.escape(str(path))} written again after \d+ failed attempts?$"
    )
    child.wait_for_line(r"^stream-miner: tick 2: window 30 baskets")  # all 30 read
    err = child.stop()  # the final checkpoint is written: exit 0
    # a write cut off by the fault may leave its temporary file where it cannot be removed
    # (a read-only directory); the next write that works removes it
    assert sorted(ck.glob(TEMPORARIES)) == []
    # one line for the checkpoint; when the fault struck between a checkpoint and the note of
    # its commit, one more for the note (a restart then takes that commit's outcome as unknown)
    checkpoint_lines = [
        line for line in re.findall(r".*(?:warning|error).*", err) if "commit note" not in line
    ]
    assert "Traceback" not in err and len(checkpoint_lines) == 1, err
    assert len(re.findall(r"cannot write the commit note", err)) <= 1, err

    resumed = subprocess.run(stream_miner(*run_command(data, ck)), capture_output=True, text=True)
    assert resumed.returncode == 0, resumed.stderr
    assert f"resumed from {ck} at tick 3, 30 baskets consumed" in resumed.stderr  # nothing lost


# ------------------------------------------------------------------ start and end
def test_the_final_checkpoint_failing_is_one_error_line_and_exit_1(tmp_path, capsys):
    data, ck = tmp_path / "in.jsonl", tmp_path / "ck"
    append_baskets(data, 0, 50)
    (ck / CHECKPOINT_NAME).mkdir(parents=True)  # --start-fresh: not read, but written at the end
    assert main(run_command(data, ck, "--start-fresh")) == 1
    err = capsys.readouterr().err
    problems = [line for line in err.splitlines() if "error" in line or "warning" in line]
    cause = f"cannot write checkpoint {ck / CHECKPOINT_NAME}: Is a directory"
    assert problems == [  # the empty window's checkpoint at the start, then the final one
        f"stream-miner: warning: {cause}; nothing is committed until a checkpoint is written, "
        "the next one retries",
        f"stream-miner: error: {cause}",
    ]
    assert sorted(ck.glob(TEMPORARIES)) == []


def test_a_checkpoint_that_cannot_be_read_at_start_is_one_line(tmp_path, capsys):
    data, ck = tmp_path / "in.jsonl", tmp_path / "ck"
    append_baskets(data, 0, 50)
    (ck / CHECKPOINT_NAME).mkdir(parents=True)
    assert main(run_command(data, ck)) == 2
    assert capsys.readouterr().err == (
        f"stream-miner: error: cannot read checkpoint {ck / CHECKPOINT_NAME}: Is a directory\n"
    )


def test_a_missing_checkpoint_directory_is_said_at_start(tmp_path, capsys):
    data, ck = tmp_path / "in.jsonl", tmp_path / "ck"
    append_baskets(data, 0, 50)
    said = f"stream-miner: no checkpoint in {ck}: starting with an empty window"
    assert main(run_command(data, ck)) == 0  # a first run: the directory does not exist yet
    assert said in capsys.readouterr().err.splitlines()
    assert main(run_command(data, ck)) == 0
    again = capsys.readouterr().err
    assert said not in again and f"resumed from {ck} at tick 5, 50 baskets consumed" in again
    shutil.rmtree(ck)  # deleted between runs: never silent
    assert main(run_command(data, ck)) == 0
    assert said in capsys.readouterr().err.splitlines()
    (ck / CHECKPOINT_NAME).unlink()  # a directory without a checkpoint
    assert main(run_command(data, ck)) == 0
    assert said in capsys.readouterr().err.splitlines()
