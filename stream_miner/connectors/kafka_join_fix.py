"""A workaround for a lost group join in kafka-python 3.0 (pinned in pyproject).

``join_group_async`` keeps an in-flight JoinGroup/SyncGroup task across polls: a poll that
times out returns and the next poll awaits the same task. But when the task finishes between
two polls (the loop was busy with records or a tick), the next poll sees a finished task and
starts a new JoinGroup, throwing the assignment away. With a broker that holds JoinGroup for
seconds, a busy member can go round that loop for a minute without partitions. The fix
finishes such a join with the task's result, exactly as the library's own success path does.
"""

from __future__ import annotations

import types
from typing import Any

from kafka import KafkaConsumer
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
