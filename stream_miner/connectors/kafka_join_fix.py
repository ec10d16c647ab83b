"""Workarounds for a group-join fault of kafka-python 3.0 (held to 3.x in pyproject: this
module uses its coordinator's internals) and one of the test broker.

**A lost join.** ``join_group_async`` keeps an in-flight JoinGroup/SyncGroup task across
polls: a poll that times out returns and the next poll awaits the same task. But when the
task finishes between two polls (the loop was busy with records or a tick), the next poll
sees a finished task and starts a new JoinGroup, throwing the assignment away. With a broker
that holds JoinGroup for seconds, a busy member can go round that loop for a minute without
partitions. The fix finishes such a join with the task's result, exactly as the library's
own success path does.

**A LeaveGroup during a rebalance.** The test broker, given a LeaveGroup while the group was
rebalancing (a JoinGroup of this member in flight, or another member's JoinGroup before this
one joined again), went on to name the member that left as the next generation's leader and
kept answering JoinGroups with that gone leader: the others went round JoinGroup, SyncGroup
(refused), JoinGroup for 50-300 s (kafka-python also sent SyncGroup after its LeaveGroup).
So a stopped member (:func:`depart`) first lets a join round in flight end, then asks with
one heartbeat whether the group is steady: if so it leaves at once (the others take its
partitions over without waiting); if the group is rebalancing it closes without a
LeaveGroup and that rebalance drops it, as it drops a crashed member.
"""

from __future__ import annotations

import threading
import time
import types
from typing import Any

from kafka import KafkaConsumer
from kafka.errors import KafkaError
from kafka.structs import MemberState


def keep_finished_joins(consumer: KafkaConsumer) -> None:
    """Make ``consumer``'s group coordinator complete a join that finished between polls."""
    coordinator = consumer._coordinator
    library_join = coordinator.join_group_async

    async def join_group_async(self: Any, timeout_ms: int | None = None) -> bool:
        task = self._join_task
        if task is None or not task.succeeded():
            return bool(await library_join(timeout_ms))
        self._join_task = None
        with self._lock:
            self.rejoining = False
            self.rejoin_needed = False
            self.state = MemberState.STABLE
            self._enable_heartbeat()
        generation = self._generation
        await self._on_join_complete_async(
            generation.generation_id, generation.member_id, generation.protocol, task.value
        )
        return True

    coordinator.join_group_async = types.MethodType(join_group_async, coordinator)


def depart(consumer: KafkaConsumer, timeout: float) -> None:
    """Let a JoinGroup/SyncGroup round of ``consumer`` still in flight end, then keep the
    LeaveGroup of ``consumer.close()`` only if one heartbeat finds the group steady (see the
    module's docstring), all within ``timeout`` seconds. Call it just before ``close()``."""
    deadline = time.monotonic() + timeout
    coordinator = consumer._coordinator
    task = coordinator._join_task
    if task is not None and not task.is_done:
        ended = threading.Event()
        task.add_both(lambda _: ended.set())
        ended.wait(timeout)
    joined = coordinator.state is MemberState.STABLE or (task is not None and task.succeeded())
    if not (joined and _steady(coordinator, max(0.0, deadline - time.monotonic()))):
        with coordinator._lock:
            coordinator.state = MemberState.UNJOINED  # close() leaves only a joined group


def _steady(coordinator: Any, timeout: float) -> bool:
    """True when a heartbeat sent now is answered without error within ``timeout`` seconds
    (no rebalance under way, this member's generation current)."""
    if coordinator.coordinator_unknown():
        return False
    beat = coordinator._manager.call_soon(coordinator._send_heartbeat_request)
    try:
        coordinator._net.run(coordinator._manager.wait_for, beat, int(timeout * 1000))
    except KafkaError:
        return False
    return True
