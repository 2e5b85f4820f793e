"""IEEE Std 488.2 and SCPI helpers: arbitrary blocks, *IDN? and SYSTem:ERRor? answers.

Pure functions on bytes and strings, no I/O (the streaming reader takes callables).

Definite-length arbitrary block (IEEE 488.2, 7.7.6 / 8.7.9): ``#<n><length><bytes>`` where
<n> is one non-zero digit giving how many digits <length> has and <length> is the byte
count. Indefinite form: ``#0<bytes>`` ended by the message terminator (NL with END), the
final NL not being part of the data.
"""

from __future__ import annotations

import re
from collections.abc import Callable
from dataclasses import dataclass
from typing import Literal

import numpy as np

SampleType = Literal["int8", "int16", "float32"]
ByteOrder = Literal["little", "big"]

_DTYPE_CHARS = {"int8": "i1", "int16": "i2", "float32": "f4"}
_ORDER_CHARS = {"little": "<", "big": ">"}


class BlockError(ValueError):
    """A block or answer could not be parsed: truncated, malformed, or of the wrong size."""


@dataclass(frozen=True)
class Block:
    """A parsed arbitrary block: its payload and what followed it in the buffer."""

    payload: bytes
    rest: bytes
    indefinite: bool = False


def _show(data: bytes, limit: int = 24) -> str:
    """A short printable preview of bytes for error messages."""
    text = repr(data[:limit])
    return text + ("..." if len(data) > limit else "")


def _length_digits(head: bytes) -> int:
    """From the first two bytes of a block, how many length digits follow (0 = indefinite form)."""
    if len(head) < 2:
        raise BlockError(f"truncated block header: got {_show(head)}, expected '#<n><length>'")
    if head[:1] != b"#":
        raise BlockError(f"not an arbitrary block: expected '#', got {_show(head)}")
    digit = head[1:2]
    if not digit.isdigit():
        raise BlockError(f"malformed block header: '#' must be followed by a digit, got {_show(head)}")
    return int(digit)


def parse_block_header(head: bytes) -> tuple[int, int | None]:
    """Parse the start of a block: returns (header length in bytes, payload length or None for #0).

    head must hold at least the full header (2 + n bytes for the definite form).
    """
    n = _length_digits(head[:2])
    if n == 0:
        return 2, None
    if len(head) < 2 + n:
        raise BlockError(f"truncated block header: '#{n}' announces {n} length digits, got {_show(head)}")
    digits = head[2 : 2 + n]
    if not digits.isdigit():
        raise BlockError(f"malformed block header: length field {digits!r} is not {n} decimal digits")
    return 2 + n, int(digits)


def parse_block(data: bytes, terminator: bytes = b"\n") -> Block:
    """Parse one arbitrary block at the start of data (leading ASCII blanks allowed).

    Definite form: exactly <length> payload bytes must be present, else BlockError (truncated).
    Indefinite form (#0): the payload runs to the end of data, less one trailing terminator.
    """
    start = len(data) - len(data.lstrip(b" \t"))
    body = data[start:]
    header_len, length = parse_block_header(body[:11])
    if length is None:
        payload = body[header_len:]
        if terminator and payload.endswith(terminator):
            payload = payload[: -len(terminator)]
        return Block(payload=payload, rest=b"", indefinite=True)
    end = header_len + length
    if len(body) < end:
        raise BlockError(
            f"truncated block: header announces {length} bytes, only {len(body) - header_len} arrived"
        )
    return Block(payload=body[header_len:end], rest=body[end:])


def format_block(payload: bytes, indefinite: bool = False, terminator: bytes = b"\n") -> bytes:
    """Format payload as an arbitrary block (definite form unless indefinite=True)."""
    if indefinite:
        return b"#0" + payload + terminator
    length = str(len(payload)).encode("ascii")
    if len(length) > 9:
        raise BlockError(f"payload of {len(payload)} bytes is too long for a definite-length block")
    return b"#" + str(len(length)).encode("ascii") + length + payload


def read_block(read_exact: Callable[[int], bytes], read_to_end: Callable[[], bytes]) -> Block:
    """Read one block from a stream.

    read_exact(n) returns up to n bytes (fewer means the stream ran dry: truncated);
    read_to_end() returns everything up to the end of the message (used for #0).
    The definite form reads exactly its header and payload and leaves any terminator unread.
    """
    head = read_exact(2)
    n = _length_digits(head)
    if n == 0:
        return parse_block(b"#0" + read_to_end())
    header_len, length = parse_block_header(head + read_exact(n))
    assert length is not None
    payload = read_exact(length) if length else b""
    if len(payload) < length:
        raise BlockError(f"truncated block: header announces {length} bytes, only {len(payload)} arrived")
    return Block(payload=payload, rest=b"")


def sample_dtype(sample: SampleType, byte_order: ByteOrder) -> np.dtype:
    """The numpy dtype of one sample of the given type and byte order."""
    if sample not in _DTYPE_CHARS:
        raise BlockError(f"unknown sample type {sample!r} (expected int8, int16 or float32)")
    if byte_order not in _ORDER_CHARS:
        raise BlockError(f"unknown byte order {byte_order!r} (expected little or big)")
    return np.dtype(_ORDER_CHARS[byte_order] + _DTYPE_CHARS[sample])


def decode_samples(payload: bytes, sample: SampleType, byte_order: ByteOrder = "little") -> np.ndarray:
    """Decode a block payload into samples (native byte order copy; int8/int16/float32)."""
    dtype = sample_dtype(sample, byte_order)
    if len(payload) % dtype.itemsize:
        raise BlockError(
            f"block of {len(payload)} bytes is not a whole number of {sample} samples "
            f"({dtype.itemsize} bytes each)"
        )
    return np.frombuffer(payload, dtype=dtype).astype(dtype.newbyteorder("="))


def encode_samples(values: np.ndarray, sample: SampleType, byte_order: ByteOrder = "little") -> bytes:
    """Encode samples as block payload bytes (values must fit the sample type)."""
    dtype = sample_dtype(sample, byte_order)
    array = np.asarray(values)
    if dtype.kind == "i":
        info = np.iinfo(dtype)
        if array.size and (array.min() < info.min or array.max() > info.max):
            raise BlockError(f"values do not fit {sample} ({info.min}..{info.max})")
    return array.astype(dtype).tobytes()


@dataclass(frozen=True)
class Idn:
    """The four fields of an IEEE 488.2 *IDN? answer."""

    maker: str
    model: str
    serial: str
    firmware: str


def parse_idn(text: str) -> Idn:
    """Split an *IDN? answer into maker, model, serial, firmware (IEEE 488.2, 10.14).

    Raises BlockError when the answer does not have four comma-separated fields.
    """
    fields = [part.strip() for part in text.strip().split(",", 3)]
    if len(fields) != 4:
        raise BlockError(f"*IDN? answer {text.strip()!r} has {len(fields)} fields, expected 4")
    return Idn(*fields)


_ERROR_RE = re.compile(r'^\s*([+-]?\d+)\s*,\s*"((?:[^"]|"")*)"\s*$')


def parse_error(text: str) -> tuple[int, str]:
    """Parse a SYSTem:ERRor? answer ``<code>,"<text>"`` (SCPI 1999, 21.8.8); code 0 = no error."""
    match = _ERROR_RE.match(text)
    if match is None:
        raise BlockError(f'error-queue answer {text.strip()!r} is not <code>,"<text>"')
    return int(match.group(1)), match.group(2).replace('""', '"')


class ErrorQueueStuck(BlockError):
    """The error queue did not report 'no error' within the bound of reads."""

    def __init__(self, errors: list[tuple[int, str]], max_reads: int) -> None:
        self.errors = errors
        super().__init__(f"error queue still not empty after {max_reads} reads")


def drain_errors(ask: Callable[[], str], max_reads: int = 32) -> list[tuple[int, str]]:
    """Read the SCPI error queue until it reports code 0; returns the errors, oldest first.

    ask() sends the error query and returns its answer. At most max_reads reads are made;
    a queue that never empties raises ErrorQueueStuck holding what was read.
    """
    errors: list[tuple[int, str]] = []
    for _ in range(max_reads):
        code, text = parse_error(ask())
        if code == 0:
            return errors
        errors.append((code, text))
    raise ErrorQueueStuck(errors, max_reads)
