"""The simulated bench over real sockets: loopback SCPI servers reached through pyvisa-py.

Checks: the same RC sweep over the sockets and on the pyvisa-sim bench agree within their
uncertainties and both match scipy.signal.freqs; a 1,000,000-sample int16 block crosses the
socket intact; the driver file's terminations, timeout and chunk size reach the pyvisa
resource; the servers bind to loopback unless told otherwise.
"""

from __future__ import annotations

import math
import socket
from pathlib import Path

import numpy as np
import pytest
import pyvisa
from transport_rig import loopback_plan, phase_difference_deg, rc_plan, rc_reference

from sweeper.instruments.bench import open_bench
from sweeper.run.spec import bench_spec, sim_config
from sweeper.instruments.driverfile import find_driver, load_driver, repository_drivers_dir
from sweeper.instruments.link import Link
from sweeper.run.runner import execute_run
from sweeper.sim import SimConfig
from sweeper.sim.serve import serve_bench


def _arrays(points) -> dict[str, np.ndarray]:
    return {k: np.array([getattr(p, k) for p in points]) for k in ("frequency_hz", "gain_db", "phase_deg",
                                                                   "u_gain_db", "u_phase_deg")}


def test_rc_sweep_over_sockets_agrees_with_pyvisa_sim_bench_and_scipy(tmp_path: Path) -> None:
    sim_plan = rc_plan(tmp_path / "sim.yaml")
    on_sim = execute_run(sim_plan, tmp_path / "runs")
    assert on_sim.status == "complete", on_sim.error
    results = {"sim": _arrays(on_sim.points)}
    for seed in (3, 11):  # 3: the sim run's seed; 11: independent noise
        plan_for_dut = rc_plan(tmp_path / f"dut{seed}.yaml", seed=seed)
        with serve_bench(sim_config(plan_for_dut)) as served:
            plan = loopback_plan(tmp_path / f"loop{seed}.yaml", served.resources)
            outcome = execute_run(plan, tmp_path / "runs")
            assert outcome.status == "complete", outcome.error
            assert served.connections["generator"] >= 1 and served.connections["scope-a"] >= 1
            assert not served.bench.generator.output_on  # the run switched the source off
        results[f"socket{seed}"] = _arrays(outcome.points)
    sim = results["sim"]
    for name, got in results.items():
        assert len(got["frequency_hz"]) == 10
        # The engine may nudge a frequency by up to 1/samples (relative) against coherent sampling.
        np.testing.assert_allclose(got["frequency_hz"], sim["frequency_hz"], rtol=1e-3)
        gain_ref, phase_ref = rc_reference(got["frequency_hz"])  # outside reference: scipy.signal.freqs
        # Issue tolerances for a sweep at about 40 dB SNR (as in the engine tests): 0.05 dB, 0.5 degree.
        assert np.max(np.abs(got["gain_db"] - gain_ref)) < 0.05, name
        assert np.max(np.abs(phase_difference_deg(got["phase_deg"], phase_ref))) < 0.5, name
    for name in ("socket3", "socket11"):
        got = results[name]
        # Two independent measurements of the same DUT agree within their combined standard
        # uncertainty times k; k = 4 because 20 comparisons are made at once and the fit's
        # uncertainty omits the 8-bit quantiser's small bias (JCGM 100:2008 combination in quadrature).
        u_gain = np.hypot(got["u_gain_db"], sim["u_gain_db"])
        u_phase = np.hypot(got["u_phase_deg"], sim["u_phase_deg"])
        assert np.all(np.abs(got["gain_db"] - sim["gain_db"]) <= 4 * u_gain + 1e-4), name
        assert np.all(np.abs(phase_difference_deg(got["phase_deg"], sim["phase_deg"])) <= 4 * u_phase + 1e-3), name
    # Same seed, same physics: the socket only carries bytes, so the points match the
    # pyvisa-sim bench's far inside their uncertainty (only the DUT transient's tail, seen after
    # real rather than simulated settling time, can differ).
    assert np.all(np.abs(results["socket3"]["gain_db"] - sim["gain_db"]) <= 0.1 * sim["u_gain_db"] + 1e-6)


def test_million_sample_int16_block_arrives_intact(tmp_path: Path) -> None:
    plan = rc_plan(tmp_path / "plan.yaml")
    samples = 1_000_000
    with serve_bench(sim_config(plan), instruments=("generator", "scope-a")) as served:
        rm = pyvisa.ResourceManager("@py")
        try:
            gen = rm.open_resource(served.resources["generator"], read_termination="\n", write_termination="\n",
                                   timeout=5000)
            gen.write("STIM:SWIN 2;STIM:TONE 1000;DRIV:ENAB ON")
            driver = load_driver(find_driver("sim-scope-a.yaml", [repository_drivers_dir()])).driver
            scope = rm.open_resource(served.resources["scope-a"], read_termination="\n", write_termination="\n",
                                     timeout=20000, chunk_size=driver.connection.chunk_size)
            link = Link(scope, "scope")
            link.write(f"LANE1:DIV 0.5;CAPT:RATE 1e6;CAPT:LENG {samples};CAPT:WIDT 16")
            assert link.query("CAPT:TAKE;*OPC?") == "1"
            payload = link.query_block("LANE1:BLOC?")
            assert link.query("SYST:ERR?") == '0,"No error"'
        finally:
            rm.close()
        expected = served.model("scope-a").capture.codes[0].astype("<i2") * 256  # what the scope sent
    # IEEE 488.2 definite-length block: the payload is exactly 2 bytes per int16 sample.
    assert len(payload) == 2 * samples
    received = np.frombuffer(payload, dtype="<i2")
    np.testing.assert_array_equal(received, expected)  # bit for bit (numpy)
    # The test means something only if the binary data holds LF bytes (the message terminator),
    # which a termination-based read would have stopped at.
    assert payload.count(b"\n") > 100


def test_driver_connection_settings_reach_the_pyvisa_resource(tmp_path: Path) -> None:
    dut = rc_plan(tmp_path / "dut.yaml")
    scope_driver = load_driver(find_driver("sim-scope-a.yaml", [repository_drivers_dir()])).driver
    source_driver = load_driver(find_driver("sim-generator.yaml", [repository_drivers_dir()])).driver
    with serve_bench(sim_config(dut), instruments=("generator", "scope-a")) as served:
        with open_bench(bench_spec(loopback_plan(tmp_path / "a.yaml", served.resources))) as bench:
            source, scope = bench.links
            for link, driver in ((source, source_driver), (scope, scope_driver)):
                assert link.resource.read_termination == driver.connection.read_termination
                assert link.resource.write_termination == driver.connection.write_termination
                assert link.resource.chunk_size == driver.connection.chunk_size
                assert link.timeout_s == pytest.approx(driver.connection.timeout_s)  # the plan names none
            assert type(link.resource.visalib).__module__.startswith("pyvisa_py")  # pyvisa-py by default
        with open_bench(bench_spec(loopback_plan(tmp_path / "b.yaml", served.resources, timeout_s=0.75))) as bench:
            assert [link.timeout_s for link in bench.links] == [pytest.approx(0.75)] * 2  # the plan's wins


def _other_local_address() -> str | None:
    """An address of this host that is not loopback, if it has one (no packet is sent)."""
    probe = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
    try:
        probe.connect(("192.0.2.1", 9))  # TEST-NET-1 (RFC 5737): only picks the outgoing interface
        address = probe.getsockname()[0]
    except OSError:
        return None
    finally:
        probe.close()
    return None if address.startswith("127.") or address == "0.0.0.0" else address


def test_servers_bind_to_loopback_only_by_default(tmp_path: Path) -> None:
    config = sim_config(rc_plan(tmp_path / "dut.yaml"))
    with serve_bench(config) as served:
        assert set(served.addresses) == {"generator", "scope-a", "scope-b", "meter"}
        assert all(address == "127.0.0.1" for address, _ in served.addresses.values())
        assert all(r.startswith("TCPIP0::127.0.0.1::") and r.endswith("::SOCKET") for r in served.resources.values())
        other = _other_local_address()
        if other is not None:  # reaching the same port through another interface must fail
            with pytest.raises(OSError):
                socket.create_connection((other, served.ports["generator"]), timeout=1.0).close()
    with pytest.raises(ValueError, match="allow_remote"):
        serve_bench(config, host="0.0.0.0")


def test_scope_measure_mode_runs_over_sockets(tmp_path: Path) -> None:
    dut = rc_plan(tmp_path / "dut.yaml")
    with serve_bench(sim_config(dut), instruments=("generator", "scope-a")) as served:
        plan = loopback_plan(tmp_path / "sm.yaml", served.resources, mode="scope-measure", start="1 kHz",
                             stop="10 kHz", ppd=1)
        outcome = execute_run(plan, tmp_path / "runs")
    assert outcome.status == "complete", outcome.error
    got = _arrays(outcome.points)
    gain_ref, phase_ref = rc_reference(got["frequency_hz"])  # scipy.signal.freqs
    # A scope's own max - min amplitude and crossing phase on an 8-bit record: 0.3 dB and 1 degree
    # (noise biases max - min upwards by a few LSB; common practice for scope measurements).
    assert np.max(np.abs(got["gain_db"] - gain_ref)) < 0.3
    assert np.max(np.abs(phase_difference_deg(got["phase_deg"], phase_ref))) < 1.0
    assert all(p.captures >= 3 for p in outcome.points)  # at least three readings (type A)
    assert all(math.isfinite(p.u_gain_db) and p.u_gain_db > 0 for p in outcome.points)


def test_simulated_config_is_shared_physics(tmp_path: Path) -> None:
    # The served bench is the SimBench of sweeper.sim (no second physics): its config is the
    # plan's, and its devices answer the same identities as the pyvisa-sim bench.
    plan = rc_plan(tmp_path / "dut.yaml", seed=5)
    config = sim_config(plan)
    assert isinstance(config, SimConfig) and config.seed == 5 and config.noise_v == pytest.approx(0.5e-3)
    with serve_bench(config, instruments=("meter",)) as served:
        assert served.bench.config is config
        rm = pyvisa.ResourceManager("@py")
        try:
            meter = rm.open_resource(served.resources["meter"], read_termination="\n", write_termination="\n",
                                     timeout=2000)
            assert meter.query("*IDN?") == "Sweeper Sim,RATIO-1,SIM-RA-0001,1.0"  # DIALECTS.md
        finally:
            rm.close()
