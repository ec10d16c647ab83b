"""``python -m stream_miner``: the command line."""

import sys

from stream_miner.cli.main import main

sys.exit(main())
