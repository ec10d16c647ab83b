"""The status page: one self-contained HTML file (inline style, script and SVG; nothing
fetched from elsewhere) that reads ``api/patterns`` and ``api/events`` every few seconds."""

from __future__ import annotations

from functools import cache
from importlib.resources import files
from typing import TYPE_CHECKING

from stream_miner.status.board import StatusBoard

if TYPE_CHECKING:
    from stream_miner.connectors.http_server import Route

HTML = "text/html; charset=utf-8"


@cache
def page() -> bytes:
    """The page's bytes (read once from the package)."""
    return files("stream_miner.status").joinpath("page.html").read_bytes()


def page_route() -> tuple[int, str, bytes]:
    return 200, HTML, page()


def no_icon_route() -> tuple[int, str, bytes]:
    """Browsers ask for ``/favicon.ico`` with every page: no content, rather than a 404 in
    the console."""
    return 204, HTML, b""


def status_routes(board: StatusBoard) -> dict[str, Route]:
    """The status page and its JSON, as routes of :class:`~stream_miner.connectors.http_server.HttpServer`."""
    return {
        "/": page_route,
        "/favicon.ico": no_icon_route,
        "/api/patterns": board.patterns_route,
        "/api/events": board.events_route,
    }
