"""Transport details below VISA that the pure-Python backend gets wrong, fixed per session.

Two behaviours of pyvisa-py 0.8's raw-socket sessions (``TCPIP::host::port::SOCKET``), seen on
the loopback servers of sweeper.sim.serve and read in its source:

- Nagle's algorithm stays on, and VI_ATTR_TCPIP_NODELAY cannot be set (UnknownAttribute). A
  small write followed by another small write then waits for the instrument's delayed ACK:
  43 ms per write + query pair measured on loopback, against well under 1 ms without. VISA's
  default for raw sockets is no delay, so TCP_NODELAY is set on the socket itself.
- Device clear (viClear) reads the socket until nothing arrives for 0.1 s; when the instrument
  has closed its end, every read returns at once with no data and the clear never ends. Here a
  clear that finds the connection closed reports it lost instead.
- Each socket read asks the kernel for at most 4096 bytes (`max_recv_size`, fixed at open),
  with a select() before every recv and a copy of the pending buffer after it: a 2 MB block
  costs about 500 such rounds. The session's receive size is raised to the resource's
  chunk size (at least 64 kB), which VISA leaves to the implementation.

`prepare_session` applies these to a pyvisa-py socket session and leaves every other session
(another backend, another interface) alone.
"""

from __future__ import annotations

import select
import socket
import time
import types
from typing import Any

from pyvisa import constants

#: How long a device clear may keep draining a chattering connection, s.
CLEAR_LIMIT_S = 2.0
#: Quiet time that ends a device clear, s (pyvisa-py's own value).
CLEAR_QUIET_S = 0.1
#: Smallest receive size given to a pyvisa-py socket session, bytes.
MIN_RECV_BYTES = 64 * 1024


def _pyvisa_py_session(resource: Any) -> Any:
    sessions = getattr(getattr(resource, "visalib", None), "sessions", None)
    if not isinstance(sessions, dict):
        return None
    return sessions.get(getattr(resource, "session", None))


def tcp_socket_of(resource: Any) -> socket.socket | None:
    """The TCP socket under a pyvisa-py raw-socket session, else None (other backends, interfaces)."""
    sock = getattr(_pyvisa_py_session(resource), "interface", None)
    return sock if isinstance(sock, socket.socket) and sock.type == socket.SOCK_STREAM else None


def disable_nagle(resource: Any) -> bool:
    """Set TCP_NODELAY on a pyvisa-py raw-socket session; True when it applied (never raises)."""
    sock = tcp_socket_of(resource)
    if sock is None:
        return False
    try:
        sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
    except OSError:
        return False
    return True


def drain_socket(sock: socket.socket, quiet_s: float = CLEAR_QUIET_S, limit_s: float = CLEAR_LIMIT_S) -> bool:
    """Discard what a socket holds until it stays quiet for quiet_s; False when the peer has
    closed the connection (or it failed), True otherwise (also when limit_s ran out)."""
    deadline = time.monotonic() + limit_s
    while time.monotonic() < deadline:
        try:
            readable, _, _ = select.select([sock], [], [], quiet_s)
            if not readable:
                return True
            if not sock.recv(65536):
                return False  # end of stream: the instrument closed its end
        except (OSError, ValueError):
            return False
    return True


def _safe_clear(session: Any) -> constants.StatusCode:
    """Device clear for a pyvisa-py socket session that ends when the peer has closed."""
    pending = getattr(session, "_pending_buffer", None)
    if pending is not None:
        pending.clear()
    sock = getattr(session, "interface", None)
    if not isinstance(sock, socket.socket) or not drain_socket(sock):
        return constants.StatusCode.error_connection_lost
    return constants.StatusCode.success


def widen_reads(resource: Any) -> int:
    """Raise a pyvisa-py socket session's receive size to the resource's chunk size (at least
    MIN_RECV_BYTES); the new size in bytes, 0 when it did not apply (never raises)."""
    session = _pyvisa_py_session(resource)
    if tcp_socket_of(resource) is None or not isinstance(getattr(session, "max_recv_size", None), int):
        return 0
    size = max(MIN_RECV_BYTES, int(getattr(resource, "chunk_size", 0) or 0), session.max_recv_size)
    session.max_recv_size = size
    return size


def prepare_session(resource: Any) -> bool:
    """Fix a freshly opened pyvisa-py raw-socket session: no Nagle delay, a device clear that
    ends on a closed connection, reads of the chunk size. True when it was such a session
    (never raises)."""
    session = _pyvisa_py_session(resource)
    if tcp_socket_of(resource) is None:
        return False
    disable_nagle(resource)
    widen_reads(resource)
    session.clear = types.MethodType(_safe_clear, session)
    return True


__all__ = ["disable_nagle", "drain_socket", "prepare_session", "tcp_socket_of", "widen_reads"]
