"""Benchmark: waveform block transfer over a loopback SCPI socket through pyvisa-py.

Run:  /tmp/venv/bin/python bench/bench_transfer.py [--repeats 5]

Scope A of the simulated bench is served on 127.0.0.1 (sweeper.sim.serve) and read through
pyvisa-py with sweeper's Link.query_block (IEEE 488.2 definite-length block, read raw so LF
bytes inside the data do not end it), using the chunk size of drivers/sim-scope-a.yaml. For
each record length the acquisition (`CAPT:TAKE;*OPC?`, the simulator computing and quantising the
record) is timed apart from the transfer (`LANE1:BLOC?`: the server building the block, the
socket, pyvisa-py's reads, the block parser), and every transfer is checked against the
server's own codes with numpy. The same transfers on the pyvisa-sim bench (its fast read
path, no socket) are shown for comparison. Throughput is payload bytes / transfer time, in
MB/s (10^6 bytes per second); the median of the repeats is shown.

Side by side with each loopback read, the same block is read over a plain socket of the standard
library (one sendall, then recv_into a buffer of the announced size: the floor for this server
and machine), and the ratio raw time / Link time is printed (1.0: the Link costs nothing more;
0.5: it takes twice as long). The two reads alternate, so machine noise hits both.
"""

from __future__ import annotations

import argparse
import socket
import statistics
import sys
import time

import numpy as np
import pyvisa

from sweeper.circuits import Loading, build_circuit
from sweeper.instruments.driverfile import find_driver, load_driver, repository_drivers_dir
from sweeper.instruments.link import Link
from sweeper.instruments.transport import prepare_session
from sweeper.sim import GENERATOR_RESOURCE, SCOPE_A_RESOURCE, SimConfig, open_sim_resource_manager
from sweeper.sim.serve import serve_bench

RECORDS = (10_000, 100_000, 1_000_000)
TERM = {"read_termination": "\n", "write_termination": "\n"}
WIDTH_BITS = {"int16": 16, "int8": 8}  # the scope's CAPTure:WIDTh for each sample format


def config() -> SimConfig:
    """An RC low-pass DUT with 0.5 mV of noise (the demo plan's)."""
    circuit = build_circuit("rc-lowpass", {"R": 1.6e3, "C": 100e-9}, Loading(reference="input"))
    return SimConfig(circuit=circuit, noise_v=0.5e-3, seed=1)


def _recv_exact(sock: socket.socket, count: int) -> bytearray:
    buffer = bytearray(count)
    view, got = memoryview(buffer), 0
    while got < count:
        n = sock.recv_into(view[got:], count - got)
        if n == 0:
            raise SystemExit("raw socket: the server closed the connection")
        got += n
    return buffer


def raw_block(sock: socket.socket, command: str) -> bytes:
    """One definite-length block read over a plain socket: header, payload, terminator."""
    sock.sendall(command.encode("ascii") + b"\n")
    head = _recv_exact(sock, 2)
    digits = int(_recv_exact(sock, int(chr(head[1]))).decode("ascii"))
    payload = _recv_exact(sock, digits + 1)  # the payload and its LF terminator
    return bytes(payload[:-1])


def time_transfers(gen, scope_link: Link, scope_model_codes, fmt: str, points: int, repeats: int,
                   raw: socket.socket | None = None) -> dict[str, float]:
    """Median acquisition and transfer times (s) for one format and record length; checks every
    block. With a raw socket to the same scope, the same block is also read raw, alternately."""
    scope_link.write(f"LANE1:DIV 0.5;CAPT:RATE 1e6;CAPT:LENG {points};CAPT:WIDT {WIDTH_BITS[fmt]}")
    acquire, transfer, raw_s = [], [], []
    for _ in range(repeats):
        start = time.perf_counter()
        assert scope_link.query("CAPT:TAKE;*OPC?") == "1"
        acquire.append(time.perf_counter() - start)
        start = time.perf_counter()
        payload = scope_link.query_block("LANE1:BLOC?")
        transfer.append(time.perf_counter() - start)
        sent = scope_model_codes()
        received = np.frombuffer(payload, dtype="<i2" if fmt == "int16" else "i1")
        expected = sent.astype("<i2") * 256 if fmt == "int16" else sent.astype("i1")
        if not np.array_equal(received, expected):
            raise SystemExit(f"block of {points} {fmt} samples arrived damaged")
        if raw is not None:
            start = time.perf_counter()
            raw_payload = raw_block(raw, "LANE1:BLOC?")
            raw_s.append(time.perf_counter() - start)
            if raw_payload != payload:
                raise SystemExit("the raw socket read a different block")
    size = points * (2 if fmt == "int16" else 1)
    t = statistics.median(transfer)
    result = {"bytes": size, "acquire_s": statistics.median(acquire), "transfer_s": t, "mb_s": size / t / 1e6}
    if raw_s:
        result["raw_s"] = statistics.median(raw_s)
        result["ratio"] = statistics.median(r / x for r, x in zip(raw_s, transfer))
    return result


def run_bench(rm, generator: str, scope: str, codes, repeats: int, chunk_size: int,
              raw_address: tuple[str, int] | None = None) -> list[tuple]:
    gen = rm.open_resource(generator, timeout=10_000, **TERM)
    prepare_session(gen)
    gen.write("STIM:SWIN 2;STIM:TONE 1000;DRIV:ENAB ON")
    resource = rm.open_resource(scope, timeout=60_000, chunk_size=chunk_size, **TERM)
    prepare_session(resource)
    link = Link(resource, "scope")
    raw = None
    if raw_address is not None:
        raw = socket.create_connection(raw_address, timeout=60)
        raw.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
    rows = []
    try:
        for fmt in ("int16", "int8"):
            for points in RECORDS:
                rows.append((fmt, points, time_transfers(gen, link, codes, fmt, points, repeats, raw)))
    finally:
        if raw is not None:
            raw.close()
    gen.write("DRIV:ENAB OFF")
    return rows


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=5)
    args = parser.parse_args()
    chunk = load_driver(find_driver("sim-scope-a.yaml", [repository_drivers_dir()])).driver.connection.chunk_size
    results = {}
    with serve_bench(config(), instruments=("generator", "scope-a")) as served:
        rm = pyvisa.ResourceManager("@py")
        try:
            scope = served.resources["scope-a"]  # TCPIP0::127.0.0.1::<port>::SOCKET
            address = ("127.0.0.1", int(scope.split("::")[2]))
            results["loopback socket, pyvisa-py"] = run_bench(
                rm, served.resources["generator"], scope,
                lambda: served.model("scope-a").capture.codes[0], args.repeats, chunk, address)
        finally:
            rm.close()
    rm, _bench = open_sim_resource_manager(config())
    try:
        library = rm.visalib
        scope_device = library.devices[SCOPE_A_RESOURCE]
        results["pyvisa-sim bench (no socket)"] = run_bench(
            rm, GENERATOR_RESOURCE, SCOPE_A_RESOURCE, lambda: scope_device.model.capture.codes[0], args.repeats,
            chunk)
    finally:
        rm.close()
    print(f"Waveform block transfer, chunk size {chunk} B (sim-scope-a.yaml), median of {args.repeats}; "
          "every block checked against the sent codes (numpy)")
    print(f"{'path':<30}{'format':>7}{'samples':>10}{'bytes':>10}{'acquire ms':>12}{'transfer ms':>13}{'MB/s':>8}"
          f"{'raw ms':>9}{'raw/Link':>10}")
    for path, rows in results.items():
        for fmt, points, r in rows:
            extra = f"{r['raw_s'] * 1e3:>9.2f}{r['ratio']:>10.2f}" if "raw_s" in r else ""
            print(f"{path:<30}{fmt:>7}{points:>10}{r['bytes']:>10}{r['acquire_s'] * 1e3:>12.1f}"
                  f"{r['transfer_s'] * 1e3:>13.1f}{r['mb_s']:>8.1f}{extra}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
