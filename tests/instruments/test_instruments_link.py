"""The Link over real transports: pyvisa-py on a loopback TCP socket (the path real raw-SCPI
instruments take), so binary blocks, truncation, timeouts and dropped connections are real."""

from __future__ import annotations

import socket
import threading
from collections.abc import Callable, Iterator

import numpy as np
import pytest
import pyvisa

from sweeper.instruments import ieee4882
from sweeper.instruments.errors import ConnectionLost, InstrumentError, InstrumentTimeout, MalformedResponse
from sweeper.instruments.link import Link
from sweeper.instruments.roles import TransactionStats

Reply = bytes | Callable[[socket.socket], None] | None


class LoopbackInstrument:
    """A one-connection SCPI socket server answering from a table (None = stay silent)."""

    def __init__(self, table: dict[bytes, Reply]) -> None:
        self.table = table
        self.received: list[bytes] = []
        self.server = socket.socket()
        self.server.bind(("127.0.0.1", 0))
        self.server.listen(1)
        self.port = self.server.getsockname()[1]
        self.thread = threading.Thread(target=self._serve, daemon=True)
        self.thread.start()

    def _serve(self) -> None:
        try:
            conn, _ = self.server.accept()
        except OSError:  # closed before anyone connected
            return
        with conn:
            try:
                for line in conn.makefile("rb"):
                    command = line.strip()
                    self.received.append(command)
                    reply = self.table.get(command)
                    if callable(reply):
                        reply(conn)
                        return
                    if reply is not None:
                        conn.sendall(reply)
            except OSError:  # the client went away first
                return

    def close(self) -> None:
        self.server.close()


def hang_up(conn: socket.socket) -> None:
    """Close the connection without answering."""
    conn.shutdown(socket.SHUT_RDWR)
    conn.close()


PAYLOAD = bytes(range(256)) * 4  # holds LF (0x0A) and CR bytes inside binary data
# 300 kB of seeded random bytes: about 1,200 LF bytes inside the payload
BIG = np.random.default_rng(7).integers(0, 256, 300_000, dtype=np.uint8).tobytes()
TABLE: dict[bytes, Reply] = {
    b"BIG?": ieee4882.format_block(BIG) + b"\n",
    b"*IDN?": b"Loopback Works,LB-1,LB-0001,0.1\n",
    b"BLOCK?": ieee4882.format_block(PAYLOAD) + b"\n",
    b"WORDS?": ieee4882.format_block(np.arange(-500, 500, dtype="<i2").tobytes()) + b"\n",
    b"SHORT?": b"#41024" + PAYLOAD[:300],  # announces 1024 bytes, sends 300, then nothing
    b"LONG?": ieee4882.format_block(b"abc") + b"XYZ\n",  # more bytes than announced
    b"NOTBLOCK?": b"1.5\n",
    b"VALUES?": b"1.5,-2e-3,+7\n",
    b"BADVALUES?": b"1.5,oops,7\n",
    b"SILENT?": None,
    b"BYE?": hang_up,
}


@pytest.fixture
def link() -> Iterator[tuple[Link, LoopbackInstrument, list[tuple]]]:
    server = LoopbackInstrument(TABLE)
    rm = pyvisa.ResourceManager("@py")
    resource = rm.open_resource(
        f"TCPIP0::127.0.0.1::{server.port}::SOCKET",
        read_termination="\n",
        write_termination="\n",
        timeout=300,  # ms: short, so the timeout cases stay fast
        chunk_size=256,  # small chunks: a block takes several reads
    )
    seen: list[tuple] = []
    lk = Link(resource, "scope", stats=TransactionStats(), observers=[lambda *a: seen.append(a)])
    yield lk, server, seen
    lk.close()
    rm.close()
    server.close()


def test_query_and_block_with_terminators_inside(link) -> None:
    lk, server, seen = link
    assert lk.query("*IDN?") == "Loopback Works,LB-1,LB-0001,0.1"
    assert lk.query_block("BLOCK?") == PAYLOAD
    # the session is still in step: the next answer is the next answer
    assert lk.query("*IDN?").startswith("Loopback Works")
    words = ieee4882.decode_samples(lk.query_block("WORDS?"), "int16", "little")
    np.testing.assert_array_equal(words, np.arange(-500, 500))
    assert lk.stats.queries == 4 and lk.stats.writes == 0
    assert lk.stats.per_role == {"scope": 4}
    assert lk.stats.bytes_read == len("Loopback Works,LB-1,LB-0001,0.1") * 2 + len(PAYLOAD) + 2000
    assert [s[2] for s in seen] == ["*IDN?", "BLOCK?", "*IDN?", "WORDS?"]
    assert seen[1][3] == "<block of 1024 bytes>" and seen[1][5] is None
    assert all(s[4] >= 0 for s in seen)


def test_a_large_block_with_many_lf_bytes_arrives_whole_through_a_prepared_session(link) -> None:
    from sweeper.instruments.transport import MIN_RECV_BYTES, prepare_session

    lk, _server, _seen = link
    assert prepare_session(lk.resource)  # a pyvisa-py raw socket: the fixes apply
    session = lk.resource.visalib.sessions[lk.resource.session]
    assert session.max_recv_size >= MIN_RECV_BYTES  # pyvisa-py opens it at 4096
    assert BIG.count(b"\n") > 1000
    assert lk.query_block("BIG?") == BIG
    # the termination character is back on for text answers, and the session is in step
    assert lk.resource.read_termination == "\n"
    assert lk.query("*IDN?") == "Loopback Works,LB-1,LB-0001,0.1"


def test_ascii_values(link) -> None:
    lk, _, _ = link
    np.testing.assert_array_equal(lk.query_ascii_values("VALUES?"), [1.5, -2e-3, 7.0])
    with pytest.raises(MalformedResponse, match=r"'BADVALUES\?'.*'oops' in a comma-separated list is not a number"):
        lk.query_ascii_values("BADVALUES?")


def test_truncated_block_is_malformed_not_a_hang(link) -> None:
    lk, _, seen = link
    with pytest.raises(MalformedResponse) as info:
        lk.query_block("SHORT?")
    message = str(info.value)
    # (how many of the 300 bytes are counted depends on where the transport split the reads)
    assert "'SHORT?'" in message and "truncated block: header announces 1024 bytes" in message
    assert "the read timed out" in message
    assert seen[-1][5] == message  # the transcript records the failure


def test_extra_bytes_after_a_block(link) -> None:
    lk, _, _ = link
    with pytest.raises(MalformedResponse, match="more data than the header announced"):
        lk.query_block("LONG?")


def test_not_a_block(link) -> None:
    lk, _, _ = link
    with pytest.raises(MalformedResponse, match=r"'NOTBLOCK\?'.*not an arbitrary block"):
        lk.query_block("NOTBLOCK?")


def test_timeout_names_the_command(link) -> None:
    lk, _, _ = link
    with pytest.raises(InstrumentTimeout, match=r"scope \(TCPIP0::127.0.0.1::\d+::SOCKET\): 'SILENT\?': no complete answer within 0.3 s"):
        lk.query("SILENT?")
    # a per-call timeout is applied and then restored
    with pytest.raises(InstrumentTimeout, match="within 0.1 s"):
        lk.query("SILENT?", timeout_s=0.1)
    assert lk.timeout_s == pytest.approx(0.3)


def test_connection_lost(link) -> None:
    lk, _, _ = link
    # pyvisa-py reports a peer that hung up as a read timeout first (end of stream, no data);
    # the next writes then fail on the dead socket.
    with pytest.raises((ConnectionLost, InstrumentTimeout)) as info:
        lk.query("BYE?")
    assert "'BYE?'" in str(info.value)
    outcomes = []
    for _ in range(4):
        try:
            lk.query("*IDN?")
            outcomes.append("answer")
        except InstrumentTimeout:
            outcomes.append("timeout")
        except ConnectionLost as exc:
            assert "'*IDN?': transport failed" in str(exc)
            outcomes.append("lost")
            break
    assert outcomes[-1] == "lost" and "answer" not in outcomes


def test_closed_link_refuses(link) -> None:
    lk, _, _ = link
    lk.close()
    with pytest.raises(ConnectionLost, match="session already closed"):
        lk.write("*CLS")


def test_fault_hook_sees_every_transaction_and_may_raise(link) -> None:
    lk, server, seen = link
    calls: list[tuple[str, str]] = []

    def hook(role: str, command: str) -> None:
        calls.append((role, command))
        if command == "*IDN?" and len(calls) == 2:
            raise InstrumentTimeout(role, lk.resource_name, command, "injected")
        if command == "*CLS":
            raise OSError("injected socket failure")

    lk.fault_hook = hook
    assert lk.query("*IDN?").startswith("Loopback")
    with pytest.raises(InstrumentTimeout, match="injected"):
        lk.query("*IDN?")
    with pytest.raises(ConnectionLost, match="transport failed: injected socket failure") as info:
        lk.write("*CLS")
    assert isinstance(info.value, InstrumentError)
    assert calls == [("scope", "*IDN?"), ("scope", "*IDN?"), ("scope", "*CLS")]
    # injected faults happen before sending: the instrument saw only the first query
    assert server.received == [b"*IDN?"]
    assert lk.stats.queries == 2 and lk.stats.writes == 1  # attempts are counted
    assert [s[5] is None for s in seen] == [True, False, False]
