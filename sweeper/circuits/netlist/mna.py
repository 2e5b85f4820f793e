"""Modified nodal analysis of a netlist, vectorised over frequencies and part-value samples.

Unknowns are the node voltages (ground excluded) and one branch current per inductor,
controlled source and op-amp; every element stamps into two real matrices G and C, so that
the circuit's equations are (G + s C) x = 0 with the driven node's voltage fixed at 1 V:
affine in s (an inductor's branch equation v+ - v- - s L i = 0; a single-pole op-amp's
(1/a0 + s / (2 pi gbw)) v_o - (v+ - v-) = 0; the ideal op-amp is the limit a0 = gbw = inf).
With the driven node's column moved to the right-hand side and its row kept apart (it gives
the current the bench supplies), each sample and frequency is one sparse linear solve; all of
them share a sparsity pattern, so they are solved together by a planned LU elimination
(`batched_lu`) with the pivot checks a circuit simulator makes. The poles are the finite
eigenvalues of the pencil (G_r, C_r), from its generalised Schur form (QZ, scipy.linalg.qz).

Part values come as arrays of shape (K, P) (K samples of the P parts); responses are (K, F)
for F frequencies. Work is done in chunks of about BATCH systems, so memory stays bounded
(a few tens of MB) whatever K and F are.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg

from sweeper.circuits.loading import Loading
from sweeper.circuits.netlist.batched_lu import Elimination
from sweeper.circuits.netlist.elements import CAPACITOR, GROUND, INDUCTOR, OPAMP, RESISTOR, VCVS, Netlist

BATCH = 2048  # systems (sample x frequency) solved together: big enough to hide Python's cost, small enough for the cache
DRIVEN = "#source"  # the node the source EMF sits on when the plan refers H to the source
_DC_BAND = -1000  # the band of 0 Hz
_SINGULAR = 1e-13  # |S_ii| and |T_ii| both below this times the pencil's norm: the equations are singular


@dataclass(frozen=True)
class System:
    """The compiled equations of a netlist under a bench loading (see module docstring).

    size: unknowns of the reduced system; output: index of the output node in it; parts:
    names in value order; g_fixed, c_fixed: (n + 1, n + 1) stamps of everything that is not a
    part, the driven node last; g_parts, c_parts: (P, n + 1, n + 1) stamps of one unit of each
    part (a resistor's stamp is scaled by 1/R, a capacitor's by C, an inductor's by L);
    reciprocal: which parts stamp 1/value. input_row: index of the DUT's input node among
    the unknowns, -1 when it is the driven node itself.
    """

    size: int
    output: int
    parts: tuple[str, ...]
    g_fixed: np.ndarray
    c_fixed: np.ndarray
    g_parts: np.ndarray
    c_parts: np.ndarray
    reciprocal: np.ndarray
    input_row: int
    eliminations: dict = field(default_factory=dict, compare=False, repr=False)  # planned per decade band


def compile_system(netlist: Netlist, loading: Loading | None = None, reference: str | None = None) -> System:
    """The MNA stamps of a netlist under loading (probe R || C and load resistor at the output;
    for the "source" reference the source resistance in series with the driven input and the
    channel-1 probe at the input node)."""
    loading = loading or Loading()
    reference = reference or loading.reference
    through_source = reference == "source" and loading.source_resistance_ohm > 0
    nodes = [n for n in netlist.nodes if n != netlist.input_node]
    if through_source:
        nodes.append(netlist.input_node)
    index = {name: i for i, name in enumerate(nodes)}
    branches = [e for e in netlist.elements if e.kind in (INDUCTOR, VCVS, OPAMP)]
    internal = [e for e in branches if e.kind == OPAMP and e.opamp is not None and e.opamp.rout_ohm > 0]
    for element in internal:
        index[f"{element.name}#out"] = len(index)
    branch_index = {e.name: len(index) + i for i, e in enumerate(branches)}
    n = len(index) + len(branches)
    driven = n  # the driven node is the last row and column
    if through_source:
        index[DRIVEN] = driven
    else:
        index[netlist.input_node] = driven
    index[GROUND] = -1
    g = np.zeros((n + 1, n + 1))
    c = np.zeros((n + 1, n + 1))
    parts = netlist.parts
    g_parts = np.zeros((len(parts), n + 1, n + 1))
    c_parts = np.zeros((len(parts), n + 1, n + 1))

    def two_terminal(matrix: np.ndarray, a: int, b: int, value: float) -> None:
        for i, j, sign in ((a, a, 1.0), (b, b, 1.0), (a, b, -1.0), (b, a, -1.0)):
            if i >= 0 and j >= 0:
                matrix[i, j] += sign * value

    def put(matrix: np.ndarray, i: int, j: int, value: float) -> None:
        if i >= 0 and j >= 0:
            matrix[i, j] += value

    reciprocal = np.zeros(len(parts), dtype=bool)
    for p, element in enumerate(parts):
        a, b = (index[node] for node in element.nodes)
        if element.kind == RESISTOR:
            two_terminal(g_parts[p], a, b, 1.0)
            reciprocal[p] = True
        elif element.kind == CAPACITOR:
            two_terminal(c_parts[p], a, b, 1.0)
        else:  # inductor: KCL incidence of its current, branch equation v_a - v_b - s L i = 0
            k = branch_index[element.name]
            put(g, a, k, 1.0)
            put(g, b, k, -1.0)
            put(g, k, a, 1.0)
            put(g, k, b, -1.0)
            c_parts[p, k, k] = -1.0
    for element in branches:
        k = branch_index[element.name]
        if element.kind == VCVS:  # i enters n+ and leaves n-; v+ - v- - gain (vc+ - vc-) = 0
            plus, minus, c_plus, c_minus = (index[node] for node in element.nodes)
            put(g, plus, k, -1.0)
            put(g, minus, k, 1.0)
            put(g, k, plus, 1.0)
            put(g, k, minus, -1.0)
            put(g, k, c_plus, -element.value)
            put(g, k, c_minus, element.value)
        elif element.kind == OPAMP:  # (1/a0 + s/wt) v_o - (v+ - v-) = 0; i enters v_o from ground
            assert element.opamp is not None
            plus, minus, out = (index[node] for node in element.nodes)
            amp = element.opamp
            o = index[f"{element.name}#out"] if amp.rout_ohm > 0 else out
            if amp.rout_ohm > 0:
                two_terminal(g, o, out, 1.0 / amp.rout_ohm)
            put(g, o, k, -1.0)
            put(g, k, o, 0.0 if math.isinf(amp.a0) else 1.0 / amp.a0)
            put(c, k, o, 0.0 if math.isinf(amp.gbw_hz) else 1.0 / (2 * math.pi * amp.gbw_hz))
            put(g, k, plus, -1.0)
            put(g, k, minus, 1.0)
    out = index[netlist.output_node]
    g[out, out] += loading.output_conductance_s
    c[out, out] += loading.probe_capacitance_f
    input_row = -1
    if through_source:
        input_row = index[netlist.input_node]
        two_terminal(g, driven, input_row, 1.0 / loading.source_resistance_ohm)
        g[input_row, input_row] += loading.probe_conductance_s
        c[input_row, input_row] += loading.probe_capacitance_f
    return System(n, out, tuple(e.name for e in parts), g, c, g_parts, c_parts, reciprocal, input_row)


def stamped(system: System, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(G, C) of each sample: arrays (K, n + 1, n + 1) for part values (K, P)."""
    values = np.atleast_2d(values)
    factors = np.where(system.reciprocal, 1.0 / values, values)
    g = system.g_fixed + np.einsum("kp,pij->kij", np.where(system.reciprocal, factors, 0.0), system.g_parts)
    c = system.c_fixed + np.einsum("kp,pij->kij", np.where(system.reciprocal, 0.0, factors), system.c_parts)
    return g, c


def _pattern(system: System) -> tuple[np.ndarray, np.ndarray]:
    """(rows, cols) of every entry of the reduced matrix G_r + s C_r that any sample can fill."""
    if "pattern" in system.eliminations:
        return system.eliminations["pattern"]
    n = system.size
    mask = (system.g_fixed[:n, :n] != 0) | (system.c_fixed[:n, :n] != 0)
    if system.g_parts.size:
        mask |= np.any(system.g_parts[:, :n, :n] != 0, axis=0) | np.any(system.c_parts[:, :n, :n] != 0, axis=0)
    system.eliminations["pattern"] = np.nonzero(mask)
    return system.eliminations["pattern"]


def _elimination(system: System, band: int, g: np.ndarray, c: np.ndarray) -> Elimination:
    """The planned elimination for frequencies in one decade band (cached on the system)."""
    key = band
    if key not in system.eliminations:
        n = system.size
        s = 2j * np.pi * 10.0 ** (band + 0.5) if band > _DC_BAND else 0.0
        rows, cols = _pattern(system)
        system.eliminations[key] = Elimination(n, rows, cols, g[:n, :n] + s * c[:n, :n])
    return system.eliminations[key]


def solve(system: System, values: np.ndarray, frequency_hz: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(H, I) at each sample and frequency: H = V(output) / V(driven) and I the current the
    driven node supplies per volt (siemens), arrays (K, F). Values (K, P) in the system's part
    order; frequencies in Hz (>= 0). Where the equations are singular the results are NaN.

    Frequencies are taken a decade at a time, each decade with its own planned elimination
    (batched_lu), in chunks of samples of about BATCH systems; a call of at most BATCH systems
    in all is one batch, planned for its middle decade (the pivot checks catch the rest).
    """
    values = np.atleast_2d(np.asarray(values, dtype=float))
    f = np.atleast_1d(np.asarray(frequency_hz, dtype=float))
    k_total, n = values.shape[0], system.size
    g, c = stamped(system, values)
    h = np.empty((k_total, f.size), dtype=complex)
    current = np.empty((k_total, f.size), dtype=complex)
    if n == 0:
        h[:] = np.nan
        current[:] = g[:, 0, 0][:, None] + 2j * np.pi * f[None, :] * c[:, 0, 0][:, None]
        return h, current
    rows, cols = _pattern(system)
    with np.errstate(divide="ignore"):
        bands = np.where(f > 0, np.floor(np.log10(np.where(f > 0, f, 1.0))), _DC_BAND).astype(int)
    if k_total * f.size <= BATCH and np.all(f > 0):
        bands[:] = int(np.floor(np.mean(np.log10(f))))
    for band in np.unique(bands):
        where = np.flatnonzero(bands == band)
        s = 2j * np.pi * f[where]
        plan = _elimination(system, int(band), g[0], c[0])
        chunk = max(1, BATCH // where.size)
        for start in range(0, k_total, chunk):
            gk, ck = g[start:start + chunk], c[start:start + chunk]
            kc = gk.shape[0]
            # batch index = sample * len(where) + frequency
            entries = (gk[:, rows, cols][:, None, :] + s[None, :, None] * ck[:, rows, cols][:, None, :])
            rhs = -(gk[:, None, :n, n] + s[None, :, None] * ck[:, None, :n, n])
            x = plan.solve(entries.reshape(-1, rows.size).T, rhs.reshape(-1, n).T)
            x = x.T.reshape(kc, where.size, n)
            h[start:start + kc, where] = x[:, :, system.output]
            current[start:start + kc, where] = (np.einsum("kn,kfn->kf", gk[:, n, :n], x)
                                                + s[None, :] * np.einsum("kn,kfn->kf", ck[:, n, :n], x)
                                                + gk[:, n, n][:, None] + s[None, :] * ck[:, n, n][:, None])
    return h, current


@dataclass(frozen=True)
class _Schur:
    """One sample's reduced pencil in generalised Schur form (poles and the singularity check)."""

    s: np.ndarray  # (n, n) upper triangular
    t: np.ndarray

    @property
    def s_diag(self) -> np.ndarray:
        return np.diag(self.s)

    @property
    def t_diag(self) -> np.ndarray:
        return np.diag(self.t)


def _schur(system: System, g: np.ndarray, c: np.ndarray) -> _Schur:
    n = system.size
    s, t, _, _ = scipy.linalg.qz(g[:n, :n], c[:n, :n], output="complex")
    return _Schur(s, t)


def poles_rad_s(system: System, values: np.ndarray) -> np.ndarray:
    """Finite eigenvalues of the reduced pencil (rad/s, complex): the natural frequencies of the
    circuit with its driven node held, values (P,) or (1, P). Modes at exactly 0 Hz, as many as
    G_r lacks in rank (a node reached only through capacitors holds its charge; an ideal
    integrator holds its DC state), are left out: a sine sweep neither excites nor waits for them."""
    g, c = stamped(system, np.atleast_2d(values)[:1])
    n = system.size
    if n == 0:
        return np.zeros(0, dtype=complex)
    form = _schur(system, g[0], c[0])
    scale = max(np.abs(form.t).max(), 1e-300)
    finite = np.abs(form.t_diag) > 1e-12 * scale
    with np.errstate(divide="ignore", invalid="ignore"):
        poles = -form.s_diag[finite] / form.t_diag[finite]
    zero_modes = n - int(np.linalg.matrix_rank(g[0][:n, :n]))
    if zero_modes > 0:
        poles = poles[np.argsort(np.abs(poles))][zero_modes:]
    return poles


def singular_problem(netlist: Netlist) -> str:
    """Why the netlist's equations have no unique solution at its nominal values, or ''."""
    system = compile_system(netlist)
    if system.size == 0:
        return ""
    g, c = stamped(system, np.array([[netlist.nominal[name] for name in system.parts]]))
    form = _schur(system, g[0], c[0])
    norm_s = max(np.abs(form.s).max(), 1e-300)
    norm_t = max(np.abs(form.t).max(), 1e-300)
    degenerate = (np.abs(form.s_diag) <= _SINGULAR * norm_s) & (np.abs(form.t_diag) <= _SINGULAR * norm_t)
    if np.any(degenerate):
        return ("the circuit's equations have no unique solution at any frequency (two sources or op-amp "
                "outputs tied together, an op-amp without feedback, or a loop of ideal sources?)")
    return ""
