"""Network faults on the loopback servers, injected mid-sweep: each run ends cleanly.

A dropped connection (TCP reset), a stall, a block cut short and a trickle with long gaps are
injected on the scope's waveform transfer after four points, and the generator's connection
is dropped in a further case. Under the plan's fault policies (sweeper.run.supervise) a run either
recovers (every point measured or flagged skipped, the faulted one flagged) or stops; under an
"abort" policy it must stop with status error, exit code 3, the points measured before the
fault kept in the journal and the run file. Either way the served generator's output ends off.
A trickle that still delivers the block within the timeout must lose nothing.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pytest
from transport_rig import loopback_plan, phase_difference_deg, rc_plan, rc_reference, sweeper_in_process

from sweeper.run.spec import sim_config
from sweeper.measure.point import Flag
from sweeper.run.outcome import RunOutcome
from sweeper.run.runner import execute_run
from sweeper.sim.serve import NetFaultPlan, serve_bench
from sweeper.store.journal import read_journal
from sweeper.store.runfile import read_run

#: Session timeout of the faulted runs, s: short, to keep the tests fast; a loopback answer
#: takes well under a millisecond, so 0.5 s is never reached without a fault.
TIMEOUT_S = 0.5
#: Each point fetches two blocks (channels 1 and 2), so letting 8 through faults the fifth point.
BLOCKS_BEFORE_FAULT = 8
POINTS = 10
#: A plan section that stops the run at the first fault of any kind (sweeper.plan.faults).
ABORT = ("faults:\n"
         "  timeout: {retries: 0, reopens: 0, then: abort}\n"
         "  connection_lost: {retries: 0, reopens: 0, then: abort}\n"
         "  malformed_response: {retries: 0, reopens: 0, then: abort}\n")

NETWORK_FAULTS: dict[str, tuple[Callable[[NetFaultPlan], object], str]] = {
    # name: (how to inject it, what the run reports when it stops on it)
    "dropped connection": (lambda f: f.drop_connection("scope-a", contains=":BLOC?", after=BLOCKS_BEFORE_FAULT),
                           "connection"),
    # an orderly close (FIN): pyvisa-py sees no more bytes, so it reads as a timeout; its device
    # clear would spin forever on the closed socket without sweeper.instruments.transport
    "closed connection": (lambda f: f.drop_connection("scope-a", contains=":BLOC?", after=BLOCKS_BEFORE_FAULT,
                                                      reset=False), "timeout"),
    "stall": (lambda f: f.stall("scope-a", 5.0, contains=":BLOC?", after=BLOCKS_BEFORE_FAULT), "timeout"),
    "block cut short": (lambda f: f.cut_block("scope-a", 0.5, contains=":BLOC?", after=BLOCKS_BEFORE_FAULT),
                        "truncated block"),
    # pieces 0.7 s apart: a read waiting for the next one outlasts the 0.5 s session timeout
    "trickle with long gaps": (lambda f: f.trickle("scope-a", 4096, 0.7, contains=":BLOC?",
                                                   after=BLOCKS_BEFORE_FAULT), "truncated block"),
}


def _run(tmp_path: Path, arm: Callable[[NetFaultPlan], object], extra: str = "",
         faulted: tuple[str, ...] = ("scope-a",)) -> tuple[RunOutcome, bool]:
    dut = rc_plan(tmp_path / "dut.yaml")
    faults = NetFaultPlan()
    arm(faults)
    with serve_bench(sim_config(dut), instruments=("generator", "scope-a"), faults=faults) as served:
        plan = loopback_plan(tmp_path / "plan.yaml", served.resources, timeout_s=TIMEOUT_S, extra=extra)
        outcome = execute_run(plan, tmp_path / "runs")
        output_on = served.bench.generator.output_on
    assert [f[0] for f in faults.fired] == list(faulted)  # the fault really fired, once
    return outcome, output_on


def _points_match_reference(points) -> None:
    measured = [p for p in points if not p.flags & Flag.SKIPPED]
    assert measured and all(math.isfinite(p.gain_db) for p in measured)
    f = np.array([p.frequency_hz for p in measured])
    gain_ref, phase_ref = rc_reference(f)  # scipy.signal.freqs
    # Issue tolerances at about 40 dB SNR, as in the engine tests: 0.05 dB, 0.5 degree.
    assert np.max(np.abs(np.array([p.gain_db for p in measured]) - gain_ref)) < 0.05
    assert np.max(np.abs(phase_difference_deg(np.array([p.phase_deg for p in measured]), phase_ref))) < 0.5


def _assert_stopped_with_data_kept(outcome: RunOutcome, output_on: bool, reported: str) -> None:
    assert not output_on  # the served generator's output is off
    assert outcome.status == "error" and outcome.exit_code == 3  # DEVELOPERS.md: instrument or run error
    assert reported in (outcome.error or "").lower()
    measured = len(outcome.points)
    assert 1 <= measured < POINTS
    journal = read_journal(outcome.journal_path)
    frame, _meta = read_run(outcome.run_path)
    assert len(journal.points) == measured and len(frame) == measured  # the data is kept
    assert journal.events[-1]["summary"]["status"] == "error"
    _points_match_reference(journal.points)


def _assert_handled(outcome: RunOutcome, output_on: bool, reported: str) -> None:
    """Under the default policies: recovered (all points, the faulted one flagged) or stopped cleanly."""
    if outcome.status == "error":
        _assert_stopped_with_data_kept(outcome, output_on, reported)
        return
    assert not output_on
    assert outcome.status == "complete" and len(outcome.points) == POINTS
    flagged = [p for p in outcome.points if p.flags & Flag.FAULT]
    assert flagged and all(p.index >= 4 for p in flagged)  # nothing before the fault is touched
    assert len(read_journal(outcome.journal_path).points) == POINTS
    _points_match_reference(outcome.points)


@pytest.mark.parametrize("name", list(NETWORK_FAULTS))
def test_network_fault_under_an_abort_policy_stops_with_data_kept(tmp_path: Path, name: str) -> None:
    arm, reported = NETWORK_FAULTS[name]
    outcome, output_on = _run(tmp_path, arm, extra=ABORT)
    _assert_stopped_with_data_kept(outcome, output_on, reported)


@pytest.mark.parametrize("name", ["dropped connection", "closed connection", "block cut short",
                                  "trickle with long gaps"])
def test_network_fault_under_the_default_policies_is_handled(tmp_path: Path, name: str) -> None:
    arm, reported = NETWORK_FAULTS[name]
    outcome, output_on = _run(tmp_path, arm)
    _assert_handled(outcome, output_on, reported)


def test_slow_trickle_within_the_timeout_loses_nothing(tmp_path: Path) -> None:
    # 1 kB pieces 10 ms apart: a block of 8-15 kB arrives in 16 pieces or fewer, within 0.16 s,
    # so inside the 0.5 s timeout of each VISA read; the block is reassembled and the sweep goes on.
    outcome, output_on = _run(tmp_path, lambda f: f.trickle("scope-a", 1024, 0.01, contains=":BLOC?",
                                                            after=BLOCKS_BEFORE_FAULT))
    assert outcome.status == "complete", outcome.error
    assert len(outcome.points) == POINTS and not output_on
    assert not any(p.flags & Flag.FAULT for p in outcome.points)
    _points_match_reference(outcome.points)


def test_dropped_generator_connection_still_ends_with_output_off(tmp_path: Path) -> None:
    # The source's own link breaks and the policy stops the run: the bench opens a fresh session
    # to the generator to switch its output off.
    outcome, output_on = _run(tmp_path, lambda f: f.drop_connection("generator", contains="STIM:TONE", after=4),
                              extra=ABORT, faulted=("generator",))
    _assert_stopped_with_data_kept(outcome, output_on, "stim:tone")


@pytest.mark.parametrize("reset", [True, False])
def test_cli_run_exits_3_without_traceback_on_a_network_fault(tmp_path: Path, reset: bool) -> None:
    dut = rc_plan(tmp_path / "dut.yaml")
    faults = NetFaultPlan().drop_connection("scope-a", contains=":BLOC?", after=BLOCKS_BEFORE_FAULT, reset=reset)
    with serve_bench(sim_config(dut), instruments=("generator", "scope-a"), faults=faults) as served:
        plan_path = tmp_path / "plan.yaml"
        plan_path.write_text(loopback_plan(plan_path, served.resources, timeout_s=TIMEOUT_S, extra=ABORT).source_text)
        code, stdout, stderr = sweeper_in_process("run", str(plan_path), "--out", str(tmp_path / "runs"))
        assert not served.bench.generator.output_on
    assert code == 3, stdout + stderr
    assert "Traceback" not in stderr and "Traceback" not in stdout
    # An aborted connection is reported as lost; an orderly close reads as silence (pyvisa-py
    # sees no more bytes and times out).
    assert ("connection" if reset else "timeout") in stderr.lower()
