"""Board models from a netlist: a SPICE-style subset read by our own parser, solved by modified
nodal analysis (numpy, scipy.linalg), vectorised over frequencies and part-value samples."""

from sweeper.circuits.netlist.elements import Element, Netlist, OpAmp
from sweeper.circuits.netlist.model import NetlistCircuit
from sweeper.circuits.netlist.parse import NetlistError, parse_netlist

__all__ = [
    "Element",
    "Netlist",
    "NetlistCircuit",
    "NetlistError",
    "OpAmp",
    "parse_netlist",
]
