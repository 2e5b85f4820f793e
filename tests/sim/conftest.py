"""Fixtures for the simulated-bench tests: real pyvisa sessions over the extended pyvisa-sim."""

from __future__ import annotations

from collections.abc import Callable, Iterator

import pytest
from sim_rig import TERMINATION, Rig

from sweeper.sim import (
    GENERATOR_RESOURCE,
    METER_RESOURCE,
    SCOPE_A_RESOURCE,
    SCOPE_B_RESOURCE,
    SimConfig,
    open_sim_resource_manager,
)


@pytest.fixture
def open_rig() -> Iterator[Callable[..., Rig]]:
    """Factory: open_rig(circuit, **SimConfig fields) -> Rig; everything is closed afterwards."""
    managers = []

    def make(circuit, **config) -> Rig:
        rm, bench = open_sim_resource_manager(SimConfig(circuit=circuit, **config))
        managers.append(rm)
        opened = [rm.open_resource(name, **TERMINATION) for name in (GENERATOR_RESOURCE, SCOPE_A_RESOURCE, SCOPE_B_RESOURCE, METER_RESOURCE)]
        return Rig(bench, *opened)

    yield make
    for rm in managers:
        rm.close()
