"""Netlist model figures (issue #16): Monte Carlo speed, agreement with ngspice, diagnose.

Prints:
- the time of a Monte Carlo band of 1000 samples x 200 frequencies of a 20-node netlist (a
  12th-order Sallen-Key anti-alias filter with single-pole op-amps and an output RC, 26
  toleranced parts), median of 5, and side by side the same solves done the plain way (every
  sample and frequency as one dense matrix, numpy.linalg.solve in batches), with the ratio;
- the largest gain and phase differences to ngspice's AC analysis (when ngspice is installed)
  for the netlists the tests check: 4th-order Butterworth Sallen-Key (ideal and single-pole
  op-amps), multiple-feedback band-pass, 5th-order LC ladder, the catalogued topologies;
- over seeded sweeps of the demo board with C3 20 % high (configs/aa4-netlist-wrong-cap.yaml,
  0.2 % range noise): how often C3 is named, and how often its 95 % interval (C3 alone, the
  others nominal, which is how that board was built) holds the true 2.495 nF; time per diagnose.

Run: .venv/bin/python bench/bench_netlist.py [diagnose runs, default 40]
"""

from __future__ import annotations

import statistics
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests" / "circuits"))  # the ngspice rig and example netlists of the tests
sys.path.insert(0, str(ROOT / "tests" / "analysis"))

from netlist_examples import (  # noqa: E402
    butterworth_qs,
    butterworth_sallen_key,
    lc_ladder_5,
    mfb_bandpass,
    sallen_key_stage,
)
from ngspice_rig import NGSPICE, db_and_degrees_apart, ngspice_ac  # noqa: E402
from test_circuits_scipy_reference import EXAMPLES  # noqa: E402

from sweeper.circuits.loading import Loading  # noqa: E402
from sweeper.circuits.netlist import NetlistCircuit, mna, parse_netlist  # noqa: E402
from sweeper.circuits.netlist.bands import monte_carlo_band  # noqa: E402
from sweeper.circuits.netlist.catalog import catalog_netlist  # noqa: E402


def twenty_node_netlist() -> str:
    """12th-order Butterworth, six Sallen-Key stages (3 nodes each), an output RC: 20 nodes."""
    opamp = "a0=100dB gbw=10meg rout=50"
    text = ".input in\n.output out\n"
    nodes = ["in", *(f"s{i}" for i in range(1, 7))]
    for i, q in enumerate(butterworth_qs(12)):
        text += sallen_key_stage(chr(ord("A") + i), nodes[i], nodes[i + 1], q, 20e3, opamp=opamp, tolerance="1%,5%")
    return text + "RPOST s6 out 1k tol=1%\nCPOST out 0 1n tol=5%\n"


def dense_solve(system: mna.System, values: np.ndarray, frequency_hz: np.ndarray) -> np.ndarray:
    """The plain way: one dense complex matrix per sample and frequency, numpy.linalg.solve."""
    g, c = mna.stamped(system, values)
    n, s = system.size, 2j * np.pi * frequency_hz
    out = np.empty((values.shape[0], frequency_hz.size), dtype=complex)
    for k in range(0, values.shape[0], 50):
        a = g[k:k + 50, None, :n, :n] + s[None, :, None, None] * c[k:k + 50, None, :n, :n]
        b = -(g[k:k + 50, None, :n, n] + s[None, :, None] * c[k:k + 50, None, :n, n])
        out[k:k + 50] = np.linalg.solve(a, b[..., None])[..., 0][..., system.output]
    return out


def monte_carlo_figures() -> None:
    netlist = parse_netlist(twenty_node_netlist())
    circuit = NetlistCircuit(netlist, loading=Loading(probe_resistance_ohm=1e6, probe_capacitance_f=15e-12))
    f = np.geomspace(1e3, 1e6, 200)
    print(f"netlist: {len(netlist.nodes)} nodes, {len(netlist.parts)} toleranced parts, "
          f"{circuit.system.size} unknowns in the nodal equations")
    monte_carlo_band(circuit, f, samples=50, seed=1)  # plans the eliminations once
    times, plain = [], []
    rng = np.random.default_rng(0)
    values = circuit.part_values() * (1 + 0.05 * rng.uniform(-1, 1, (1000, len(netlist.parts))))
    for _ in range(5):
        start = time.perf_counter()
        monte_carlo_band(circuit, f, samples=1000, seed=1)
        times.append(time.perf_counter() - start)
        start = time.perf_counter()
        dense = dense_solve(circuit.system, values, f)
        plain.append(time.perf_counter() - start)
    ours = mna.solve(circuit.system, values, f)[0]
    print(f"Monte Carlo band, 1000 samples x 200 frequencies: {statistics.median(times):.3f} s median of 5 "
          f"(range {min(times):.3f} .. {max(times):.3f}); dense numpy.linalg.solve of the same systems: "
          f"{statistics.median(plain):.3f} s; ratio {statistics.median(plain) / statistics.median(times):.1f}")
    gain, phase = db_and_degrees_apart(ours, dense)
    print(f"  the two solvers differ by at most {gain:.2e} dB, {phase:.2e} degrees")


def ngspice_figures() -> None:
    if NGSPICE is None:
        print("ngspice: not installed, agreement not measured")
        return
    probes = Loading(source_resistance_ohm=50.0, probe_resistance_ohm=1e6, probe_capacitance_f=15e-12)
    cases = {
        "4th-order Butterworth Sallen-Key, ideal op-amps": (butterworth_sallen_key(4, 10e3), 100.0, 1e6),
        "4th-order Butterworth Sallen-Key, single-pole op-amps": (
            butterworth_sallen_key(4, 10e3, "a0=100dB gbw=10meg rout=50"), 100.0, 1e6),
        "multiple-feedback band-pass": (mfb_bandpass(1e3, 5.0, 2.0, opamp="a0=100dB gbw=10meg rout=50"), 10.0, 1e5),
        "5th-order LC ladder": (lc_ladder_5(10e3), 100.0, 1e6),
    }
    for topology, values in sorted(EXAMPLES.items()):
        cases[f"catalogue {topology}"] = (catalog_netlist(topology, values), 1.0, 1e7)
    worst = (0.0, 0.0)
    for name, (text, low, high) in cases.items():
        netlist = parse_netlist(text)
        f, reference = ngspice_ac(netlist, low, high, 50, probes)
        gain, phase = db_and_degrees_apart(NetlistCircuit(netlist, loading=probes).response(f), reference)
        worst = (max(worst[0], gain), max(worst[1], phase))
        print(f"ngspice, {name}: {f.size} frequencies, at most {gain:.1e} dB, {phase:.1e} degrees apart")
    print(f"ngspice, all {len(cases)} netlists: at most {worst[0]:.1e} dB, {worst[1]:.1e} degrees apart")


def diagnose_figures(runs: int) -> None:
    from analysis_rig import measure_plan

    from sweeper.analysis.run_fit import extract
    from sweeper.plan import load_plan_text

    text = (ROOT / "configs" / "aa4-netlist-wrong-cap.yaml").read_text(encoding="utf-8")
    named = covered = 0
    spent = []
    for seed in range(1, runs + 1):
        frame, metadata = measure_plan(load_plan_text(text.replace("seed: 11", f"seed: {seed}")))
        start = time.perf_counter()
        ex = extract(frame, metadata)
        spent.append(time.perf_counter() - start)
        named += ex.culprit == "C3"
        c3 = ex.parameter("C3")
        covered += c3.low <= 2.495e-9 <= c3.high
    print(f"diagnose, {runs} seeded sweeps of the board with C3 +20 %: C3 named {named}/{runs}, its 95 % interval "
          f"holds 2.495 nF {covered}/{runs}; {statistics.median(spent):.2f} s per diagnose (median)")


if __name__ == "__main__":
    monte_carlo_figures()
    ngspice_figures()
    diagnose_figures(int(sys.argv[1]) if len(sys.argv) > 1 else 40)
