"""Virtual bench: simulated SCPI instruments over pyvisa-sim, answering from the bench's physics.

Use::

    from sweeper.sim import SimConfig, open_sim_resource_manager
    rm, bench = open_sim_resource_manager(SimConfig(circuit=dut, noise_v=0.5e-3, seed=7))
    gen = rm.open_resource("TCPIP0::sim-gen::5025::SOCKET", read_termination="\\n", write_termination="\\n")

`bench.clock` is the simulated clock (now_s, sleep); `bench.counters` counts messages per
resource. Dialects: DIALECTS.md.
"""

from sweeper.sim.bench import GeneratorSettings, SimBench, SimConfig
from sweeper.sim.clock import SimClock
from sweeper.sim.drift import Drift
from sweeper.sim.faults import FaultAction, FaultPlan
from sweeper.sim.library import SimDevice, SweeperSimLibrary, open_sim_resource_manager
from sweeper.sim.probes import Probe, ProbedDut

GENERATOR_RESOURCE = "TCPIP0::sim-gen::5025::SOCKET"
SCOPE_A_RESOURCE = "TCPIP0::sim-scope-a::5025::SOCKET"
SCOPE_B_RESOURCE = "TCPIP0::sim-scope-b::5025::SOCKET"
METER_RESOURCE = "TCPIP0::sim-meter::5025::SOCKET"

__all__ = [
    "GENERATOR_RESOURCE",
    "METER_RESOURCE",
    "SCOPE_A_RESOURCE",
    "SCOPE_B_RESOURCE",
    "Drift",
    "FaultAction",
    "FaultPlan",
    "GeneratorSettings",
    "Probe",
    "ProbedDut",
    "SimBench",
    "SimClock",
    "SimConfig",
    "SimDevice",
    "SweeperSimLibrary",
    "open_sim_resource_manager",
]
