"""Scale-out: several ``run`` processes in one consumer group, one exact global result.

Each member keeps the event-time window of the partitions Kafka gives it
(:mod:`~stream_miner.cluster.member`); at every tick boundary the members' windows are
merged exactly with the SON method (:mod:`~stream_miner.cluster.merge`) through a
one-partition coordination topic (:mod:`~stream_miner.cluster.wire`) by the member a
second consumer group elects (:mod:`~stream_miner.cluster.election`,
:mod:`~stream_miner.cluster.aggregator`). Kafka's log is the only shared state: a member
given a partition rebuilds its window by reading it again from the offset its previous
owner committed (:mod:`~stream_miner.cluster.retention` checks the log is kept long enough).
"""
