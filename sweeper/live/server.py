"""A small local web server that shows a sweep as it runs (stdlib http.server, one thread per request).

Routes: `/` the page, `/state.json` progress and verdict counts, `/plot.svg` the report's
Bode plot of the points so far (redrawn only when the journal has grown). Nothing else is
served: no files, no directory listing, only GET and HEAD.

It binds to the loopback interface (127.0.0.1) unless the caller explicitly allows another
address: the page shows a run's data to whoever can reach the port. While bound to loopback,
requests must also name a loopback host in their Host header, so that a web page elsewhere
cannot reach the server through a DNS name that resolves to 127.0.0.1 (DNS rebinding).
"""

from __future__ import annotations

import ipaddress
import json
import os
import socket
import threading
from http import HTTPStatus
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path
from typing import Any

from sweeper.live.page import render_page
from sweeper.live.state import Snapshot, read_snapshot

LOOPBACK_HOST = "127.0.0.1"
_LOOPBACK_NAMES = ("localhost",)


class LiveError(ValueError):
    """A live view that cannot be started as asked (address refused, source unreadable)."""


def is_loopback(host: str) -> bool:
    """True for 127.0.0.0/8, ::1 and 'localhost'."""
    if host.lower() in _LOOPBACK_NAMES:
        return True
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:
        return False


def _host_of(header: str) -> str:
    """The host part of a Host header ('127.0.0.1:8000' -> '127.0.0.1', '[::1]:80' -> '::1')."""
    header = header.strip()
    if header.startswith("["):
        return header[1:header.find("]")] if "]" in header else header
    return header.rsplit(":", 1)[0] if header.count(":") == 1 else header


class LiveView:
    """Follows one journal (or run file): a snapshot and an SVG plot, both re-made only when the
    file has changed. Safe to call from several request threads."""

    def __init__(self, source: str | os.PathLike[str]) -> None:
        self.source = Path(source)
        self._lock = threading.Lock()
        self._plot_lock = threading.Lock()
        self._signature: tuple[int, int] | None = None
        self._snapshot: Snapshot | None = None
        self._error = ""
        self._svg: str | None = None
        self._svg_version: int | None = None

    def snapshot(self) -> Snapshot:
        """The run as it stands; on a read error the last good snapshot with the error noted.

        Raises LiveError when the source has never been readable.
        """
        with self._lock:
            try:
                st = self.source.stat()
                signature = (st.st_size, st.st_mtime_ns)
                if signature != self._signature or self._snapshot is None:
                    self._snapshot = read_snapshot(self.source)
                    self._signature = signature
                self._error = ""
            except Exception as exc:  # noqa: BLE001 - a file being written, moved or damaged: keep what we had
                self._error = f"{type(exc).__name__}: {exc}"
                if self._snapshot is None:
                    raise LiveError(f"{self.source}: cannot read: {exc}") from None
            return self._snapshot

    def state(self) -> dict[str, Any]:
        """`Snapshot.as_json` plus the last read error, if any."""
        data = self.snapshot().as_json()
        if self._error:
            data["error"] = self._error
        return data

    def svg(self) -> str:
        """The Bode plot of the current snapshot as SVG text (cached per snapshot version)."""
        from sweeper.report.plot import bode_figure, figure_svg

        snap = self.snapshot()
        with self._plot_lock:
            if self._svg is None or self._svg_version != snap.version:
                dut = snap.metadata.get("dut") or {}
                who = " ".join(str(x) for x in (dut.get("board"), dut.get("serial")) if x)
                title = f"{who}  |  {snap.points} of {snap.planned} points" + ("" if snap.finished else "  |  running")
                self._svg = figure_svg(bode_figure(snap.frame, snap.metadata, title=title))
                self._svg_version = snap.version
            return self._svg


class _Handler(BaseHTTPRequestHandler):
    server: LiveServer
    server_version = "sweeper-watch"
    protocol_version = "HTTP/1.1"

    def log_message(self, format: str, *args: Any) -> None:
        """Quiet: a page polling every second would flood the terminal."""

    def _send(self, status: int, body: bytes, content_type: str, head_only: bool = False) -> None:
        self.send_response(status)
        self.send_header("Content-Type", content_type)
        self.send_header("Content-Length", str(len(body)))
        self.send_header("Cache-Control", "no-store")
        self.send_header("X-Content-Type-Options", "nosniff")
        self.send_header("Content-Security-Policy",
                         "default-src 'none'; img-src 'self'; style-src 'unsafe-inline'; "
                         "script-src 'unsafe-inline'; connect-src 'self'")
        self.end_headers()
        if not head_only:
            self.wfile.write(body)

    def _text(self, status: int, message: str, head_only: bool = False) -> None:
        self._send(status, (message + "\n").encode("utf-8"), "text/plain; charset=utf-8", head_only)

    def _serve(self, head_only: bool) -> None:
        if self.server.allowed_hosts is not None:
            host = _host_of(self.headers.get("Host", ""))
            if host.lower() not in self.server.allowed_hosts:
                self._text(HTTPStatus.FORBIDDEN, f"host {host!r} not served: use http://{LOOPBACK_HOST}", head_only)
                return
        route = self.path.split("?", 1)[0]
        view = self.server.view
        try:
            if route in ("/", "/index.html"):
                snap = view.snapshot()
                md = snap.metadata
                dut = md.get("dut") or {}
                title = " ".join(str(x) for x in (dut.get("board"), dut.get("serial")) if x) or str(md.get("run_id"))
                body = render_page(title, f"run {md.get('run_id') or ''}").encode("utf-8")
                self._send(HTTPStatus.OK, body, "text/html; charset=utf-8", head_only)
            elif route == "/state.json":
                body = json.dumps(view.state(), allow_nan=False).encode("utf-8")
                self._send(HTTPStatus.OK, body, "application/json", head_only)
            elif route == "/plot.svg":
                self._send(HTTPStatus.OK, view.svg().encode("utf-8"), "image/svg+xml", head_only)
            else:
                self._text(HTTPStatus.NOT_FOUND, "not found: the live view serves /, /state.json and /plot.svg",
                           head_only)
        except LiveError as exc:
            self._text(HTTPStatus.SERVICE_UNAVAILABLE, str(exc), head_only)

    def do_GET(self) -> None:
        self._serve(head_only=False)

    def do_HEAD(self) -> None:
        self._serve(head_only=True)


class LiveServer(ThreadingHTTPServer):
    """The live view's HTTP server; `url` is where to point a browser."""

    daemon_threads = True

    def __init__(self, view: LiveView, host: str, port: int) -> None:
        self.view = view
        self.address_family = socket.AF_INET6 if ":" in host else socket.AF_INET
        super().__init__((host, port), _Handler)
        bound_port = self.server_address[1]
        self.allowed_hosts: set[str] | None = None
        if is_loopback(host):
            self.allowed_hosts = {"localhost", "127.0.0.1", "::1", host.lower().strip("[]")}
        shown = f"[{host}]" if ":" in host else host
        self.url = f"http://{shown}:{bound_port}/"


def make_server(source: str | os.PathLike[str], host: str = LOOPBACK_HOST, port: int = 0, *,
                allow_remote: bool = False) -> LiveServer:
    """A live server for a journal or run file, bound to host:port (port 0: any free port).

    Refuses an address other than loopback unless allow_remote is True (the CLI sets it only
    when --host is given). Raises LiveError when the source cannot be read or the address not bound.
    """
    if not is_loopback(host) and not allow_remote:
        raise LiveError(f"host {host!r}: the live view serves the loopback interface only "
                        f"({LOOPBACK_HOST}); give --host explicitly to serve another address")
    if not 0 <= port <= 65535:
        raise LiveError(f"port {port}: expected 0 (any free port) to 65535")
    view = LiveView(source)
    view.snapshot()
    try:
        return LiveServer(view, host, port)
    except OSError as exc:
        raise LiveError(f"cannot listen on {host}:{port}: {exc.strerror or exc}") from None
