"""Sources and sinks that move baskets in and out of stream-miner."""
