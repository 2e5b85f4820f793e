"""Invented example boards as netlists, with the handbook design equations that set their parts.

Sallen-Key, unity gain (common practice, any active-filter handbook): R1 from the stage input
to node a, R2 from a to the non-inverting input b, C1 from a to the output (feedback), C2 from
b to ground, the op-amp as a follower. H(s) = 1 / (1 + s C2 (R1 + R2) + s^2 R1 R2 C1 C2), so
f0 = 1 / (2 pi sqrt(R1 R2 C1 C2)) and Q = sqrt(R1 R2 C1 C2) / (C2 (R1 + R2)); with R1 = R2 = R,
C1 = 2 Q / (w0 R) and C2 = 1 / (2 Q w0 R). Butterworth stage Qs of order n: 1 / (2 cos((2k - 1)
pi / (2 n))).

Multiple-feedback band-pass (common practice): R1 from the input to node a, R2 from a to
ground, C1 from a to the inverting input, C2 from a to the output, R3 from the output to the
inverting input, the non-inverting input grounded. With C1 = C2 = C: f0 = sqrt((R1 + R2) /
(R1 R2 R3)) / (2 pi C), gain at f0 = -R3 / (2 R1), Q = pi f0 R3 C; for a wanted f0, Q and gain
A: R1 = Q / (w0 C A), R2 = Q / (w0 C (2 Q^2 - A)), R3 = 2 Q / (w0 C).

Doubly terminated LC ladder, Butterworth of order 5 (common practice, normalised element
values g_k = 2 sin((2k - 1) pi / 10)): Rs, shunt C, series L, shunt C, series L, shunt C, RL =
Rs; capacitors g / (w0 R), inductors g R / w0. Its H = V(out) / V(in) is half the Butterworth
function (the terminations halve the passband).
"""

from __future__ import annotations

import math


def sallen_key_stage(name: str, a: str, b: str, q: float, f0_hz: float, r_ohm: float = 10e3,
                     opamp: str = "", tolerance: str = "") -> str:
    """Netlist lines of one unity-gain Sallen-Key low-pass stage from node a to node b."""
    w0 = 2 * math.pi * f0_hz
    c_feedback = 2 * q / (w0 * r_ohm)
    c_ground = 1 / (2 * q * w0 * r_ohm)
    tol_r, tol_c = (f" tol={tolerance.split(',')[0]}", f" tol={tolerance.split(',')[1]}") if tolerance else ("", "")
    return (f"R{name}1 {a} {name}a {r_ohm!r}{tol_r}\n"
            f"R{name}2 {name}a {name}b {r_ohm!r}{tol_r}\n"
            f"C{name}1 {name}a {b} {c_feedback!r}{tol_c}\n"
            f"C{name}2 {name}b 0 {c_ground!r}{tol_c}\n"
            f"X{name} {name}b {b} {b} opamp {opamp}\n")


def butterworth_qs(order: int) -> list[float]:
    """Stage Qs of an even-order Butterworth low-pass (handbook formula)."""
    return [1 / (2 * math.cos((2 * k - 1) * math.pi / (2 * order))) for k in range(1, order // 2 + 1)]


def butterworth_sallen_key(order: int = 4, f0_hz: float = 10e3, opamp: str = "", tolerance: str = "") -> str:
    """A unity-gain Butterworth low-pass of even order as cascaded Sallen-Key stages, in -> out."""
    qs = butterworth_qs(order)
    nodes = ["in", *(f"s{i}" for i in range(1, len(qs))), "out"]
    text = f"* Butterworth low-pass, order {order}, {f0_hz:g} Hz, unity-gain Sallen-Key stages\n.input in\n.output out\n"
    for i, q in enumerate(qs):
        text += sallen_key_stage(chr(ord("A") + i), nodes[i], nodes[i + 1], q, f0_hz, opamp=opamp, tolerance=tolerance)
    return text


def mfb_bandpass(f0_hz: float = 1e3, q: float = 5.0, gain: float = 2.0, c_f: float = 10e-9, opamp: str = "") -> str:
    """A multiple-feedback band-pass (design equations in the module docstring)."""
    w0 = 2 * math.pi * f0_hz
    r1 = q / (w0 * c_f * gain)
    r2 = q / (w0 * c_f * (2 * q * q - gain))
    r3 = 2 * q / (w0 * c_f)
    return (f"* multiple-feedback band-pass, f0 {f0_hz:g} Hz, Q {q:g}, gain {gain:g}\n.input in\n.output out\n"
            f"R1 in a {r1!r} tol=1%\nR2 a 0 {r2!r} tol=1%\nC1 a inv {c_f!r} tol=5%\nC2 a out {c_f!r} tol=5%\n"
            f"R3 out inv {r3!r} tol=1%\nXU1 0 inv out opamp {opamp}\n")


def lc_ladder_5(f0_hz: float = 10e3, r_ohm: float = 1e3) -> str:
    """A doubly terminated 5th-order Butterworth LC ladder (module docstring), in -> out."""
    w0 = 2 * math.pi * f0_hz
    g = [2 * math.sin((2 * k - 1) * math.pi / 10) for k in range(1, 6)]
    return (f"* 5th-order Butterworth LC ladder, {f0_hz:g} Hz, {r_ohm:g} Ohm terminations\n.input in\n.output out\n"
            f"RS in n1 {r_ohm!r} tol=1%\n"
            f"C1 n1 0 {g[0] / (w0 * r_ohm)!r} tol=5%\n"
            f"L2 n1 n2 {g[1] * r_ohm / w0!r} tol=5%\n"
            f"C3 n2 0 {g[2] / (w0 * r_ohm)!r} tol=5%\n"
            f"L4 n2 out {g[3] * r_ohm / w0!r} tol=5%\n"
            f"C5 out 0 {g[4] / (w0 * r_ohm)!r} tol=5%\n"
            f"RL out 0 {r_ohm!r} tol=1%\n")
