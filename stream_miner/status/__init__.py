"""The live status page of ``run`` and ``demo``: a tick listener keeping a short history
(:class:`StatusBoard`) and the routes serving it as HTML and JSON."""

from stream_miner.status.board import StatusBoard
from stream_miner.status.page import status_routes

__all__ = ["StatusBoard", "status_routes"]
