"""The ``stream-miner`` command line: one module per command, shared options and output."""
