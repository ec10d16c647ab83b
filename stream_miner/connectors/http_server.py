"""A small HTTP server of our own on a daemon thread: GET routes by path, 404 elsewhere.

A route is a function that returns ``(status, content type, body)``; it runs on the server's
request thread. ``/metrics`` is one route (:meth:`~stream_miner.metrics.run_metrics.RunMetrics.exposition`); more (a status page)
are added by passing them in. A route that raises answers 500 with one line of text. Requests
are not logged.
"""

from __future__ import annotations

import socket
import threading
from collections.abc import Callable, Mapping
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from urllib.parse import urlsplit

Route = Callable[[], tuple[int, str, bytes]]
TEXT = "text/plain; charset=utf-8"
SERVER_THREAD = "stream-miner-http"


class HttpServer:
    """Serves ``routes`` on ``host``:``port`` (0: a free port) from the moment it is made
    until :meth:`close`. Raises OSError when it cannot listen (port in use, unknown host)."""

    def __init__(self, host: str, port: int, routes: Mapping[str, Route]) -> None:
        handler = type("Handler", (_Handler,), {"routes": dict(routes)})
        server_class = _Server6 if ":" in host else ThreadingHTTPServer
        self._server = server_class((host, port), handler)
        self.host = host
        self.port = int(self._server.server_address[1])
        self._thread = threading.Thread(target=self._server.serve_forever, name=SERVER_THREAD, daemon=True)
        self._thread.start()

    def url(self, path: str) -> str:
        """The address of ``path`` on this server."""
        host = f"[{self.host}]" if ":" in self.host else self.host
        return f"http://{host}:{self.port}{path}"

    def close(self) -> None:
        """Stop serving and release the port."""
        self._server.shutdown()
        self._server.server_close()
        self._thread.join()


class _Server6(ThreadingHTTPServer):
    address_family = socket.AF_INET6


class _Handler(BaseHTTPRequestHandler):
    routes: dict[str, Route] = {}
    server_version = "stream-miner"

    def do_GET(self) -> None:
        route = self.routes.get(urlsplit(self.path).path)
        if route is None:
            known = ", ".join(sorted(self.routes))
            status, kind, body = 404, TEXT, f"not found; this server serves {known}\n".encode()
        else:
            try:
                status, kind, body = route()
            except Exception as error:  # one line for the scraper; the run goes on
                status, kind, body = 500, TEXT, f"{type(error).__name__}: {error}\n".encode()
        self.send_response(status)
        self.send_header("Content-Type", kind)
        if status != 204:  # a 204 carries no length (RFC 9110, 8.6)
            self.send_header("Content-Length", str(len(body)))
        self.end_headers()
        self.wfile.write(body)

    def log_message(self, format: str, *args: object) -> None:
        """Requests are not logged (stderr is for the run's own lines)."""
