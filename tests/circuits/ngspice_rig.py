"""Run ngspice (Debian's package, batch mode, as a subprocess) on our netlists: the reference
simulator for the netlist tests.

Our netlist (after our own parser) is written as a plain SPICE deck: every node and element
renamed (n1, R1, ...), values in full float precision, the bench's source as `V... AC 1`, the
bench loading as explicit elements (output probe R || C, load resistor; for the "source"
reference the source resistance and the channel-1 probe), and our op-amps as standard SPICE
elements: an ideal op-amp as a VCVS of gain IDEAL_GAIN; a single-pole op-amp with the same
linear model we solve, a VCVS of gain a0 into a 1 Ohm / (a0 / (2 pi gbw)) F pole, a unity
VCVS buffer and rout in series. ngspice's AC analysis (`.ac dec`) is written with `wrdata` at
full precision (16 significant digits; checked: an RC low-pass agrees with its closed form to
the last printed digit).
"""

from __future__ import annotations

import math
import shutil
import subprocess
import tempfile
from pathlib import Path

import numpy as np
import pytest

from sweeper.circuits.loading import Loading
from sweeper.circuits.netlist.elements import GROUND, OPAMP, SOURCE, Netlist

NGSPICE = shutil.which("ngspice")
IDEAL_GAIN = 1e9  # open-loop gain standing in for an ideal op-amp in ngspice

needs_ngspice = pytest.mark.skipif(
    NGSPICE is None, reason="ngspice is not installed (Debian package 'ngspice'; .ci/run installs it when it can)")


def deck(netlist: Netlist, loading: Loading | None = None) -> tuple[str, str, str]:
    """(deck text without analysis lines, driven node, output node) in ngspice's names."""
    loading = loading or Loading()
    names: dict[str, str] = {GROUND: "0"}

    def node(name: str) -> str:
        return names.setdefault(name, f"n{len(names)}")

    lines = ["* sweeper netlist for ngspice"]
    count = 0

    def element(letter: str, *fields: object) -> None:
        nonlocal count
        count += 1
        lines.append(f"{letter}{count} " + " ".join(str(f) for f in fields))

    for e in netlist.elements:
        if e.kind in ("R", "C", "L"):
            element(e.kind, node(e.nodes[0]), node(e.nodes[1]), repr(e.value))
        elif e.kind == "E":
            element("E", *(node(n) for n in e.nodes), repr(e.value))
        elif e.kind == OPAMP:
            plus, minus, out = (node(n) for n in e.nodes)
            amp = e.opamp
            assert amp is not None and not (math.isinf(amp.a0) and not math.isinf(amp.gbw_hz)), "integrator op-amp"
            if amp.ideal:
                element("E", out, "0", plus, minus, repr(IDEAL_GAIN))
                continue
            gain_node, pole_node, buffer_node = (node(f"{e.name}#{k}") for k in ("gain", "pole", "buffer"))
            element("E", gain_node, "0", plus, minus, repr(amp.a0))
            if math.isinf(amp.gbw_hz):
                pole_node = gain_node
            else:
                element("R", gain_node, pole_node, "1")
                element("C", pole_node, "0", repr(amp.a0 / (2 * math.pi * amp.gbw_hz)))
            element("E", buffer_node if amp.rout_ohm > 0 else out, "0", pole_node, "0", "1")
            if amp.rout_ohm > 0:
                element("R", buffer_node, out, repr(amp.rout_ohm))
        else:
            assert e.kind != SOURCE
    dut_in, out = node(netlist.input_node), node(netlist.output_node)
    driven = dut_in
    if loading.reference == "source" and loading.source_resistance_ohm > 0:
        driven = node("#source")
        element("R", driven, dut_in, repr(loading.source_resistance_ohm))
        if math.isfinite(loading.probe_resistance_ohm):
            element("R", dut_in, "0", repr(loading.probe_resistance_ohm))
        if loading.probe_capacitance_f > 0:
            element("C", dut_in, "0", repr(loading.probe_capacitance_f))
    if math.isfinite(loading.probe_resistance_ohm):
        element("R", out, "0", repr(loading.probe_resistance_ohm))
    if loading.probe_capacitance_f > 0:
        element("C", out, "0", repr(loading.probe_capacitance_f))
    if math.isfinite(loading.load_resistance_ohm):
        element("R", out, "0", repr(loading.load_resistance_ohm))
    lines.append(f"Vbench {driven} 0 DC 0 AC 1")
    return "\n".join(lines) + "\n", driven, out


def ngspice_ac(netlist: Netlist, start_hz: float, stop_hz: float, points_per_decade: int,
               loading: Loading | None = None) -> tuple[np.ndarray, np.ndarray]:
    """(frequencies Hz, complex V(out) / V(driven)) from ngspice's AC analysis, log-spaced."""
    assert NGSPICE is not None
    text, _, out = deck(netlist, loading)
    with tempfile.TemporaryDirectory() as folder:
        result = Path(folder) / "ac.txt"
        script = (text + "\n.control\nset wr_singlescale\nset wr_vecnames\noption numdgt=15\n"
                  f"ac dec {points_per_decade} {start_hz!r} {stop_hz!r}\n"
                  f"wrdata {result} v({out})\nquit\n.endc\n.end\n")
        cir = Path(folder) / "deck.cir"
        cir.write_text(script)
        run = subprocess.run([NGSPICE, "-b", str(cir)], capture_output=True, text=True, timeout=120, cwd=folder)
        if run.returncode != 0 or not result.exists():
            raise AssertionError(f"ngspice failed ({run.returncode}):\n{run.stdout}\n{run.stderr}\n{script}")
        data = np.loadtxt(result, skiprows=1)
    return data[:, 0], data[:, 1] + 1j * data[:, 2]


def db_and_degrees_apart(ours: np.ndarray, reference: np.ndarray) -> tuple[float, float]:
    """Largest |gain difference| (dB) and |phase difference| (degrees, wrapped) between two responses."""
    ratio = ours / reference
    return float(np.max(np.abs(20 * np.log10(np.abs(ratio))))), float(np.max(np.abs(np.degrees(np.angle(ratio)))))
