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
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time

import numpy as np
import pyvisa

from sweeper.circuits import Loading, build_circuit
from sweeper.instruments.driverfile import find_driver, load_driver, repository_drivers_dir
from sweeper.instruments.link import Link
from sweeper.instruments.transport import disable_nagle
from sweeper.sim import GENERATOR_RESOURCE, SCOPE_A_RESOURCE, SimConfig, open_sim_resource_manager
from sweeper.sim.serve import serve_bench

RECORDS = (10_000, 100_000, 1_000_000)
TERM = {"read_termination": "\n", "write_termination": "\n"}
WIDTH_BITS = {"int16": 16, "int8": 8}  # the scope's CAPTure:WIDTh for each sample format


def config() -> SimConfig:
    """An RC low-pass DUT with 0.5 mV of noise (the demo plan's)."""
    circuit = build_circuit("rc-lowpass", {"R": 1.6e3, "C": 100e-9}, Loading(reference="input"))
    return SimConfig(circuit=circuit, noise_v=0.5e-3, seed=1)


def time_transfers(gen, scope_link: Link, scope_model_codes, fmt: str, points: int, repeats: int) -> dict[str, float]:
    """Median acquisition and transfer times (s) for one format and record length; checks every block."""
    scope_link.write(f"LANE1:DIV 0.5;CAPT:RATE 1e6;CAPT:LENG {points};CAPT:WIDT {WIDTH_BITS[fmt]}")
    acquire, transfer = [], []
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
    size = points * (2 if fmt == "int16" else 1)
    t = statistics.median(transfer)
    return {"bytes": size, "acquire_s": statistics.median(acquire), "transfer_s": t, "mb_s": size / t / 1e6}


def run_bench(rm, generator: str, scope: str, codes, repeats: int, chunk_size: int) -> list[tuple]:
    gen = rm.open_resource(generator, timeout=10_000, **TERM)
    disable_nagle(gen)
    gen.write("STIM:SWIN 2;STIM:TONE 1000;DRIV:ENAB ON")
    resource = rm.open_resource(scope, timeout=60_000, chunk_size=chunk_size, **TERM)
    disable_nagle(resource)
    link = Link(resource, "scope")
    rows = []
    for fmt in ("int16", "int8"):
        for points in RECORDS:
            rows.append((fmt, points, time_transfers(gen, link, codes, fmt, points, repeats)))
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
            results["loopback socket, pyvisa-py"] = run_bench(
                rm, served.resources["generator"], served.resources["scope-a"],
                lambda: served.model("scope-a").capture.codes[0], args.repeats, chunk)
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
    print(f"{'path':<30}{'format':>7}{'samples':>10}{'bytes':>10}{'acquire ms':>12}{'transfer ms':>13}{'MB/s':>8}")
    for path, rows in results.items():
        for fmt, points, r in rows:
            print(f"{path:<30}{fmt:>7}{points:>10}{r['bytes']:>10}{r['acquire_s'] * 1e3:>12.1f}"
                  f"{r['transfer_s'] * 1e3:>13.1f}{r['mb_s']:>8.1f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
