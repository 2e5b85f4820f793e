"""`sweeper check`: everything that can be known about a plan before an instrument is touched.

Validated plan (done by the loader) -> driver files found and loaded -> requests inside the
drivers' limits -> prediction at a few frequencies -> estimated duration.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from sweeper.circuits import figures
from sweeper.instruments.limits import bench_limits
from sweeper.instruments.roles import ScopeLimits
from sweeper.measure.schedule import capture_window, settle_time_s
from sweeper.measure.settings import EngineSettings
from sweeper.plan.schema import MAX_DURATION_CEILING_S
from sweeper.run.spec import run_spec

if TYPE_CHECKING:
    from sweeper.plan import Plan

#: Assumed cost of one instrument transaction for the estimate, s (LAN SCPI, common practice: a few ms).
TRANSACTION_S = 0.005
#: Transactions per point in steady state (frequency, capture, two fetches).
TRANSACTIONS_PER_POINT = 4


@dataclass
class CheckReport:
    """What `sweeper check` found and predicts."""

    problems: list[str] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    points: int = 0
    start_hz: float = math.nan
    stop_hz: float = math.nan
    duration_s: float = math.nan
    figures: dict[str, float] = field(default_factory=dict)
    table: list[dict[str, float]] = field(default_factory=list)

    @property
    def duration_text(self) -> str:
        """Duration as h:mm:ss, or a dash when unknown."""
        if not math.isfinite(self.duration_s):
            return "-"
        s = int(round(self.duration_s))
        return f"{s // 3600}:{s % 3600 // 60:02d}:{s % 60:02d}"


def locate(plan: "Plan", field_path: str) -> str:
    """`file:line:column: field` prefix for a message about a plan field (best known place)."""
    where = plan.location(field_path) if hasattr(plan, "location") else None
    name = str(plan.path) if plan.path else "<plan>"
    if where:
        return f"{name}:{where[0]}:{where[1]}: {field_path}"
    return f"{name}: {field_path}"


def estimate_duration_s(
    frequencies_hz: np.ndarray,
    settings: EngineSettings,
    scope_limits: ScopeLimits | None,
    transaction_s: float = TRANSACTION_S,
) -> float:
    """Planned sweep time, s: settle + captures (averages) + transactions, per point."""
    total = 0.0
    for f in frequencies_hz:
        total += settle_time_s(f, settings.settle_s, settings.settle_cycles, settings.settle_time_constants,
                               settings.slowest_time_constant_s)
        if scope_limits is not None:
            total += settings.averages * capture_window(f, settings.min_cycles, settings.min_samples,
                                                        scope_limits).duration_s
        total += TRANSACTIONS_PER_POINT * settings.averages * transaction_s
    return total


def check_plan(plan: "Plan", rows: int = 7) -> CheckReport:
    """Check a loaded plan against its drivers' limits and predict its outcome."""
    spec = run_spec(plan)
    report = CheckReport()
    freqs = spec.frequencies_hz
    report.points = int(len(freqs))
    report.start_hz, report.stop_hz = float(freqs.min()), float(freqs.max())
    limits_found, problems = bench_limits(spec.bench)
    for field_path, message in problems:
        report.problems.append(f"{locate(plan, field_path)}: {message}")
    src = limits_found.get("source")
    if src is not None:
        if report.start_hz < src.frequency_min_hz or report.stop_hz > src.frequency_max_hz:
            report.problems.append(
                f"{locate(plan, 'sweep')}: {report.start_hz:g} Hz to {report.stop_hz:g} Hz; expected within the "
                f"source's {src.frequency_min_hz:g} Hz to {src.frequency_max_hz:g} Hz")
        amp = plan.stimulus.amplitude_vpp
        if amp > src.amplitude_max_vpp or amp < src.amplitude_min_vpp:
            report.problems.append(
                f"{locate(plan, 'stimulus.amplitude')}: {amp:g} Vpp; expected within the source's "
                f"{src.amplitude_min_vpp:g} to {src.amplitude_max_vpp:g} Vpp")
    scope_limits = limits_found.get("scope")
    if scope_limits is not None and plan.bench.mode in ("waveform", "scope-measure"):
        if 2.5 * report.stop_hz > scope_limits.max_sample_rate_hz:
            report.problems.append(
                f"{locate(plan, 'sweep')}: {report.stop_hz:g} Hz; expected at most "
                f"{scope_limits.max_sample_rate_hz / 2.5:g} Hz for the scope's {scope_limits.max_sample_rate_hz:g} Sa/s")
        if plan.acquisition.min_samples > scope_limits.max_samples:
            report.problems.append(
                f"{locate(plan, 'acquisition.min_samples')}: {plan.acquisition.min_samples}; expected at most "
                f"the scope's record length {scope_limits.max_samples}")
    meter = limits_found.get("meter")
    if meter is not None and plan.bench.mode == "meter":
        if report.start_hz < meter.frequency_min_hz or report.stop_hz > meter.frequency_max_hz:
            report.problems.append(
                f"{locate(plan, 'sweep')}: {report.start_hz:g} Hz to {report.stop_hz:g} Hz; expected within the "
                f"meter's {meter.frequency_min_hz:g} Hz to {meter.frequency_max_hz:g} Hz")
    report.figures = {k: float(v) for k, v in figures(spec.model).items()}
    report.duration_s = estimate_duration_s(freqs, spec.settings, scope_limits)
    ceiling = plan.sweep.max_duration_s
    if not math.isfinite(report.duration_s) or report.duration_s > MAX_DURATION_CEILING_S:
        report.problems.append(f"{locate(plan, 'sweep')}: an estimated {report.duration_text} per sweep; expected "
                               f"at most {MAX_DURATION_CEILING_S / 86400:g} days (check settle and capture settings)")
    elif report.duration_s > ceiling:
        report.warnings.append(f"{locate(plan, 'sweep.max_duration')}: the estimated {report.duration_text} "
                               f"exceeds max_duration ({ceiling:g} s)")
    pick = np.unique(np.linspace(0, len(freqs) - 1, min(rows, len(freqs))).round().astype(int))
    for i in pick:
        report.table.append({"frequency_hz": float(freqs[i]), **spec.limits.at(int(i))})
    return report
