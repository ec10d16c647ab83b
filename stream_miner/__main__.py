"""``python -m stream_miner``: the command line."""

from stream_miner.cli.main import entry

entry()
