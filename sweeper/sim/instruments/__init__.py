"""Simulated instrument models, one per file; each is the SCPI state machine behind one resource."""

from sweeper.sim.instruments.generator import Generator
from sweeper.sim.instruments.meter import Meter
from sweeper.sim.instruments.scope_a import ScopeA
from sweeper.sim.instruments.scope_b import ScopeB

# devices.yaml device name -> model class
MODELS = {"STIM-1": Generator, "CAP-2A": ScopeA, "SNAP-2B": ScopeB, "RATIO-1": Meter}

__all__ = ["MODELS", "Generator", "Meter", "ScopeA", "ScopeB"]
