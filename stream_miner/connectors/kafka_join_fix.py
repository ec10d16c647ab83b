"""Workarounds for two group-join faults of kafka-python 3.0 (pinned in pyproject).

**A lost join.** 
``join_group_async`` keeps an in-flight JoinGroup/SyncGroup task across polls: a poll that
times out returns and the next poll awaits the same task. But when the task finishes between
two polls (the loop was busy with records or a tick), the next poll sees a finished task and
starts a new JoinGroup, throwing the assignment away. With a broker that holds JoinGroup for
seconds, a busy member can go round that loop for a minute without partitions. The fix
finishes such a join with the task's result, exactly as the library's own success path does.

**A SyncGroup after LeaveGroup.** ``close()`` sends LeaveGroup while a JoinGroup may still be
in flight; the broker answers requests on a connection in order, so the JoinGroup's answer
comes first and the library goes on to send SyncGroup, as the group's leader perhaps, after
its LeaveGroup. A broker can take that member back into the group (the test broker did: the
others then waited 50-300 s for a leader that was gone). :func:`stop_joins`, called just
before ``close()``, makes a JoinGroup answered from then on end the attempt instead.
"""

from __future__ import annotations

import types
from typing import Any

from kafka import KafkaConsumer
from kafka.errors import KafkaError
from kafka.structs import MemberState


def keep_finished_joins(consumer: KafkaConsumer) -> None:
    """Make ``consumer``'s group coordinator complete a join that finished between polls, and
    send no SyncGroup once :func:`stop_joins` was called."""
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


def stop_joins(consumer: KafkaConsumer) -> None:
    """From now on a JoinGroup of ``consumer`` that is answered ends its attempt without a
    SyncGroup (see the module's docstring); call it just before ``consumer.close()``."""
    consumer._coordinator.stream_miner_leaving = True
