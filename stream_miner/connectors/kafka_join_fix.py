"""Workarounds for two group-join faults of kafka-python 3.0 (pinned in pyproject).

**A lost join.** ``join_group_async`` keeps an in-flight JoinGroup/SyncGroup task across polls: a poll that
times out returns and the next poll awaits the same task. But when the task finishes between
two polls (the loop was busy with records or a tick), the next poll sees a finished task and
starts a new JoinGroup, throwing the assignment away. With a broker that holds JoinGroup for
seconds, a busy member can go round that loop for a minute without partitions. The fix
finishes such a join with the task's result, exactly as the library's own success path does.

**A LeaveGroup in the middle of a join.** ``close()`` sends LeaveGroup while a JoinGroup may
still be in flight. The test broker then completed the join round with the leaving member as
the group's leader and kept answering later JoinGroups with that gone leader: the others went
round JoinGroup, SyncGroup (refused), JoinGroup for 50-300 s. The library also went on to send
SyncGroup after its LeaveGroup. :func:`leave_after_join`, called just before ``close()``, lets
a join in flight end first (join and sync, within a time limit), so the LeaveGroup comes after
it as in a quiet group, and makes a JoinGroup answered after that end without a SyncGroup.
"""

from __future__ import annotations

import threading
import types
from typing import Any

from kafka import KafkaConsumer
from kafka.errors import KafkaError
from kafka.structs import MemberState


def keep_finished_joins(consumer: KafkaConsumer) -> None:
    """Make ``consumer``'s group coordinator complete a join that finished between polls, and
    send no SyncGroup once :func:`leave_after_join` was called."""
    coordinator = consumer._coordinator
    library_join = coordinator.join_group_async
    library_joined = coordinator._process_join_group_response
    coordinator.stream_miner_leaving = False

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

    def process_join_group_response(self: Any, response: Any, send_time: float) -> Any:
        if self.stream_miner_leaving:
            raise KafkaError("JoinGroup answered while leaving the group: no SyncGroup sent")
        return library_joined(response, send_time)

    coordinator.join_group_async = types.MethodType(join_group_async, coordinator)
    coordinator._process_join_group_response = types.MethodType(process_join_group_response, coordinator)


def leave_after_join(consumer: KafkaConsumer, timeout: float) -> None:
    """Wait up to ``timeout`` seconds for a JoinGroup/SyncGroup round of ``consumer`` still in
    flight to end; from then on a JoinGroup answered ends without a SyncGroup (see the
    module's docstring). Call it just before ``consumer.close()``."""
    coordinator = consumer._coordinator
    task = coordinator._join_task
    if task is not None and not task.is_done:
        ended = threading.Event()
        task.add_both(lambda _: ended.set())
        ended.wait(timeout)
    coordinator.stream_miner_leaving = True
