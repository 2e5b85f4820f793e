"""The plan's `faults` section and bench.simulation.faults: defaults, partial overrides, and
located messages for mistakes."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest
from run_rig import load, plan_text

from sweeper.plan import PlanError
from sweeper.run.runner import execute_run
from sweeper.run.supervise import estimate_run_bytes, space_problem


def test_fault_policy_defaults_and_partial_override(tmp_path: Path) -> None:
    plan = load(plan_text(faults="{timeout: {retries: 5}, clipping: {action: abort}}"), tmp_path)
    f = plan.faults
    # A kind given in part keeps its other defaults.
    assert (f.timeout.retries, f.timeout.backoff_s, f.timeout.reopens, f.timeout.then) == (5, 0.5, 1, "abort")
    assert (f.connection_lost.retries, f.connection_lost.reopens, f.connection_lost.then) == (0, 2, "abort")
    assert (f.malformed_response.retries, f.malformed_response.then) == (2, "skip")
    assert (f.scpi_error.retries, f.scpi_error.then) == (0, "abort")
    assert f.clipping.action == "abort" and f.low_signal.action == "flag"
    assert f.check_errors == "configuration" and f.write_failure.min_free_mb == 16


def test_mistakes_are_located(tmp_path: Path) -> None:
    text = plan_text(faults="{scpi_error: {then: skipp}, timeout: {backoff: -1 s}}",
                     injections="[{kind: timeout}, {kind: write_failure, at_point: 2, role: scope},"
                                " {kind: melted, at_point: 1}, {kind: timeout, probability: 200 %}]")
    with pytest.raises(PlanError) as caught:
        load(text, tmp_path)
    shown = [str(p) for p in caught.value.problems]
    where = str(tmp_path / "plan.yaml")
    assert all(s.startswith(where + ":") for s in shown)  # file:line:column: field: ...
    joined = "\n".join(shown)
    assert "bench.simulation.faults[0]: give at_point or probability" in joined
    assert "bench.simulation.faults[1].role: does not apply to a write_failure" in joined
    assert "bench.simulation.faults[2].kind: 'melted' is not one of" in joined
    assert "bench.simulation.faults[3].probability: " in joined and "at most 100 %" in joined
    assert "faults.scpi_error.then: 'skipp' is not one of 'skip' or 'abort'" in joined
    assert "faults.timeout.backoff: '-1 s' must be a finite time" in joined


def test_faults_are_injected_on_a_simulated_bench_only(tmp_path: Path) -> None:
    text = plan_text(injections="[{kind: timeout, at_point: 1}]").replace("kind: simulated", "kind: visa")
    outcome = execute_run(load(text, tmp_path), tmp_path / "runs")
    assert outcome.status == "error" and "simulated bench only" in outcome.error
    assert not (tmp_path / "runs").exists() or not list((tmp_path / "runs").glob("*.journal"))


def test_unwritable_output_folder_is_refused_before_any_instrument(tmp_path: Path) -> None:
    blocker = tmp_path / "a-file"
    blocker.write_text("not a folder")
    outcome = execute_run(load(plan_text(), tmp_path), blocker / "runs")
    assert outcome.status == "error" and outcome.exit_code == 3
    assert "cannot be written" in outcome.error and "nothing was run" in outcome.error
    assert outcome.transcript_path is None  # no instrument was touched


def test_free_space_is_checked_against_the_run_size(tmp_path: Path) -> None:
    small = estimate_run_bytes(20, 2000, keep_waveforms=False)
    # Waveforms add two channels of float64 per point: 16 bytes per sample kept, at least.
    assert estimate_run_bytes(20, 2000, keep_waveforms=True) - small >= 20 * 2000 * 16
    assert space_problem(tmp_path, small) is None
    free = shutil.disk_usage(tmp_path).free
    problem = space_problem(tmp_path, free)  # a run as big as the free space: refused
    assert problem is not None and "MB free" in problem
