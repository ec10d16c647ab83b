"""Child processes in tests, waited on by what they show, never by fixed sleeps.

A :class:`Child` reads its stderr line by line on a thread, so a test can wait (with a
deadline) for a line such as ``stream-miner run``'s readiness line, and the pipe never fills
up. :func:`wait_until` polls any other observable condition (a snapshot file, a number of
lines, a consumer group's state) with short waits under a generous deadline. Both fail the
test with what the child printed so far when the deadline passes.
"""

from __future__ import annotations

import re
import shlex
import signal
import subprocess
import sys
import threading
import time
from collections.abc import Callable, Sequence
from typing import TypeVar

import pytest

T = TypeVar("T")

READY = r"^stream-miner: reading "  # printed once by `stream-miner run` when it starts consuming


class Child:
    """A running command whose stderr is collected line by line."""

    def __init__(self, command: Sequence[str]) -> None:
        self.command = list(command)
        self.process = subprocess.Popen(
            self.command, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True, bufsize=1
        )
        self._lines: list[str] = []
        self._closed = False
        self._changed = threading.Condition()
        self._reader = threading.Thread(target=self._read, daemon=True)
        self._reader.start()

    def _read(self) -> None:
        assert self.process.stderr is not None
        for line in self.process.stderr:
            with self._changed:
                self._lines.append(line)
                self._changed.notify_all()
        with self._changed:
            self._closed = True
            self._changed.notify_all()

    @property
    def stderr(self) -> str:
        """What the child wrote to stderr so far (all of it once it has exited)."""
        with self._changed:
            return "".join(self._lines)

    def wait_for_line(self, pattern: str, timeout: float = 60) -> re.Match[str]:
        """The first stderr line matching ``pattern`` (``re.search``); fail after ``timeout`` s
        or when the child exits without printing one."""
        regex = re.compile(pattern)
        deadline = time.monotonic() + timeout
        seen = 0
        with self._changed:
            while True:
                for line in self._lines[seen:]:
                    found = regex.search(line)
                    if found:
                        return found
                seen = len(self._lines)
                if self._closed:
                    self.process.wait()
                    pytest.fail(
                        f"{self._name()} exited ({self.process.returncode}) without a line matching "
                        f"{pattern!r}; stderr:\n{''.join(self._lines)}"
                    )
                left = deadline - time.monotonic()
                if left <= 0:
                    pytest.fail(
                        f"{self._name()}: no line matching {pattern!r} within {timeout} s; "
                        f"stderr so far:\n{''.join(self._lines)}"
                    )
                self._changed.wait(left)

    def wait_ready(self, timeout: float = 60) -> None:
        """Wait for ``stream-miner run``'s readiness line: signal handlers are set and the
        source is about to be polled."""
        self.wait_for_line(READY, timeout)

    def send_signal(self, sig: int) -> None:
        self.process.send_signal(sig)

    def finish(self, timeout: float = 60) -> tuple[int, str]:
        """Wait for the child to exit by itself; its return code and whole stderr."""
        try:
            self.process.wait(timeout=timeout)
        except subprocess.TimeoutExpired:
            self.kill()
            pytest.fail(f"{self._name()} still running after {timeout} s; stderr:\n{self.stderr}")
        self._reader.join(timeout=10)
        return self.process.returncode, self.stderr

    def stop(self, timeout: float = 60) -> str:
        """SIGTERM, wait for a clean exit (code 0) and return the whole stderr."""
        self.send_signal(signal.SIGTERM)
        code, err = self.finish(timeout)
        assert code == 0, err
        return err

    def kill(self) -> None:
        """SIGKILL and reap (no-op once exited)."""
        if self.process.poll() is None:
            self.process.kill()
        self.process.wait()
        self._reader.join(timeout=10)

    def _name(self) -> str:
        return shlex.join(self.command)[:300]


def stream_miner(*args: str) -> list[str]:
    """The command line of ``python -m stream_miner ARGS`` (the worktree's code when run from
    the checkout, as ``-m`` puts the working directory first on the path)."""
    return [sys.executable, "-m", "stream_miner", *args]


def wait_until(
    condition: Callable[[], T],
    timeout: float = 60,
    what: str | Callable[[], str] = "",
    child: Child | None = None,
    every: float = 0.05,
) -> T:
    """Poll ``condition`` every ``every`` s until it returns something truthy (returned); fail
    after ``timeout`` s, saying ``what`` was awaited and what ``child`` printed so far."""
    deadline = time.monotonic() + timeout
    while True:
        value = condition()
        if value:
            return value
        if time.monotonic() > deadline:
            awaited = what() if callable(what) else what or getattr(condition, "__name__", "a condition")
            printed = f"; stderr so far:\n{child.stderr}" if child is not None else ""
            pytest.fail(f"not within {timeout} s: {awaited}{printed}")
        time.sleep(every)
