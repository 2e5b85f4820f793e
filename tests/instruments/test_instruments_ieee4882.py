"""IEEE 488.2 block, *IDN? and SCPI error-queue helpers.

References: IEEE Std 488.2-1992, 8.7.9 (definite-length arbitrary block response data
``#<n><length><bytes>``, indefinite form ``#0<bytes>`` ended by NL^END) and 10.14 (*IDN?:
four comma-separated fields); SCPI 1999 Vol. 2, 21.8 (SYSTem:ERRor? answers
``<code>,"<text>"``, 0 = no error). Sample encodings are checked against numpy's own
``frombuffer``/``tobytes`` as the reference implementation.
"""

from __future__ import annotations

import io

import numpy as np
import pytest

from sweeper.instruments import ieee4882
from sweeper.instruments.ieee4882 import BlockError


def test_definite_block_worked_example() -> None:
    # IEEE 488.2 8.7.9: '#' then one digit n, then n digits of byte count, then the bytes.
    block = ieee4882.parse_block(b"#15HELLO\n")
    assert block.payload == b"HELLO"
    assert block.rest == b"\n"
    assert not block.indefinite


def test_definite_block_payload_may_hold_terminators() -> None:
    payload = b"\n\r#9\x00\xff\n"
    data = ieee4882.format_block(payload) + b"\n"
    assert data.startswith(b"#17")  # 7 payload bytes
    assert ieee4882.parse_block(data).payload == payload


def test_zero_length_block() -> None:
    assert ieee4882.parse_block(b"#10").payload == b""


def test_leading_blanks_are_skipped() -> None:
    assert ieee4882.parse_block(b"  #13abc").payload == b"abc"


def test_indefinite_block() -> None:
    # IEEE 488.2 8.7.9: #0 form runs to the END; the final NL is not data.
    block = ieee4882.parse_block(b"#0ab\ncd\n")
    assert block.indefinite
    assert block.payload == b"ab\ncd"
    assert ieee4882.format_block(b"xyz", indefinite=True) == b"#0xyz\n"


@pytest.mark.parametrize(
    ("data", "words"),
    [
        (b"#3010abc", "truncated block: header announces 10 bytes, only 3"),
        (b"#", "truncated block header"),
        (b"#4", "truncated block header"),
        (b"#312", "truncated block header"),
        (b"X15HELLO", "not an arbitrary block"),
        (b"#A5HELLO", "'#' must be followed by a digit"),
        (b"#2x5HELLO", "is not 2 decimal digits"),
    ],
)
def test_bad_blocks_are_named(data: bytes, words: str) -> None:
    with pytest.raises(BlockError, match=words.replace("(", r"\(")):
        ieee4882.parse_block(data)


def test_read_block_from_a_stream() -> None:
    payload = bytes(range(256)) * 3
    stream = io.BytesIO(ieee4882.format_block(payload) + b"\nNEXT")
    block = ieee4882.read_block(stream.read, stream.read)
    assert block.payload == payload
    assert stream.read() == b"\nNEXT"  # the terminator is left for the caller


def test_read_block_truncated_stream() -> None:
    stream = io.BytesIO(b"#41000" + b"x" * 999)
    with pytest.raises(BlockError, match="announces 1000 bytes, only 999 arrived"):
        ieee4882.read_block(stream.read, stream.read)


def test_read_block_indefinite_stream() -> None:
    stream = io.BytesIO(b"#0\x01\n\x02\n")
    assert ieee4882.read_block(stream.read, stream.read).payload == b"\x01\n\x02"


@pytest.mark.parametrize("sample", ["int8", "int16", "float32"])
@pytest.mark.parametrize("order", ["little", "big"])
def test_samples_against_numpy(sample: str, order: str) -> None:
    rng = np.random.default_rng(4882)
    dtype = np.dtype({"little": "<", "big": ">"}[order] + {"int8": "i1", "int16": "i2", "float32": "f4"}[sample])
    if dtype.kind == "i":
        info = np.iinfo(dtype)
        values = rng.integers(info.min, info.max, size=1000, endpoint=True).astype(dtype)
    else:
        values = rng.normal(0.0, 3.0, size=1000).astype(dtype)
    raw = values.tobytes()  # numpy is the reference encoder
    decoded = ieee4882.decode_samples(raw, sample, order)
    np.testing.assert_array_equal(decoded, np.frombuffer(raw, dtype=dtype))
    assert decoded.dtype.isnative
    assert ieee4882.encode_samples(values, sample, order) == raw


def test_byte_order_matters() -> None:
    # 0x0102 little-endian is 513, big-endian 258 (plain arithmetic).
    assert ieee4882.decode_samples(b"\x01\x02", "int16", "little")[0] == 0x0201
    assert ieee4882.decode_samples(b"\x01\x02", "int16", "big")[0] == 0x0102


def test_ragged_payload_is_refused() -> None:
    with pytest.raises(BlockError, match="not a whole number of int16 samples"):
        ieee4882.decode_samples(b"\x00\x01\x02", "int16")
    with pytest.raises(BlockError, match="unknown sample type"):
        ieee4882.decode_samples(b"", "int12")  # type: ignore[arg-type]


def test_encode_refuses_values_that_do_not_fit() -> None:
    with pytest.raises(BlockError, match="do not fit int8"):
        ieee4882.encode_samples(np.array([200]), "int8")


def test_parse_idn() -> None:
    idn = ieee4882.parse_idn("Sweeper Sim,CAP-2A,SIM-CA-0001,1.0\n")
    assert (idn.maker, idn.model, idn.serial, idn.firmware) == ("Sweeper Sim", "CAP-2A", "SIM-CA-0001", "1.0")
    # the firmware field may itself hold commas: only the first three split
    assert ieee4882.parse_idn("A,B,C,fw 1,2").firmware == "fw 1,2"
    with pytest.raises(BlockError, match="has 2 fields, expected 4"):
        ieee4882.parse_idn("A,B")


@pytest.mark.parametrize(
    ("answer", "expected"),
    [
        ('0,"No error"', (0, "No error")),
        ('+0,"No error"\n', (0, "No error")),
        ('-222,"Data out of range"', (-222, "Data out of range")),
        ('-113,"Undefined header;FOO:BAR"', (-113, "Undefined header;FOO:BAR")),
        ('-100,"say ""hi"""', (-100, 'say "hi"')),  # SCPI strings double embedded quotes
        ("  42 , \"device specific\" ", (42, "device specific")),
    ],
)
def test_parse_error(answer: str, expected: tuple[int, str]) -> None:
    assert ieee4882.parse_error(answer) == expected


@pytest.mark.parametrize("answer", ["", "No error", '0,No error', '"0","x"', '1.5,"x"'])
def test_parse_error_malformed(answer: str) -> None:
    with pytest.raises(BlockError, match="is not <code>"):
        ieee4882.parse_error(answer)


def test_drain_errors_reads_until_zero() -> None:
    answers = iter(['-222,"Data out of range"', '-113,"Undefined header"', '0,"No error"', "never read"])
    reads = []

    def ask() -> str:
        reads.append(1)
        return next(answers)

    assert ieee4882.drain_errors(ask) == [(-222, "Data out of range"), (-113, "Undefined header")]
    assert len(reads) == 3


def test_drain_errors_is_bounded() -> None:
    with pytest.raises(ieee4882.ErrorQueueStuck) as info:
        ieee4882.drain_errors(lambda: '-350,"Queue overflow"', max_reads=5)
    assert len(info.value.errors) == 5
