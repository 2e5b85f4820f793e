"""Campaigns: one plan swept again and again (warm-up and drift studies), each sweep its own run.

A campaign is a schedule (`Schedule`: a count of sweeps, an interval between sweep starts, a
total duration, or a combination) and a campaign id that every run of it carries in its
metadata (`campaign_id`, which the catalog indexes) together with its place in the campaign:
`campaign_sweep` (1-based), `campaign_offset_s` (when it started on the campaign clock, s) and
`campaign_schedule`.

Timing. Sweep starts sit on a grid: sweep k is due `k * every_s` after the campaign started.
A sweep that overruns its slot delays the next one, which then takes the first grid slot not
yet passed (missed slots are skipped, not made up in a burst). Without an interval the sweeps
run back to back. With a duration, no sweep starts at or after it.

The campaign clock follows the bench clock idea: on a simulated bench that does not run in
real time (`bench.simulation.realtime: false`, the default) the wait between sweeps is not
slept, the campaign clock jumps ahead instead, so a "every 10 min for 8 h" campaign on the
simulated bench finishes in seconds with the same number of sweeps and the same schedule
offsets. On a visa bench, or a simulated one with realtime true, the wait is a real sleep.

Stopping. `stop_after_run()` is asked before each sweep and during waits: when it turns true
the campaign ends after the current sweep. `stop_now()` is passed to the sweep itself: the
current sweep is interrupted (its points are kept, the source is switched off) and the
campaign ends. A campaign also ends after `max_consecutive_errors` sweeps in a row ended in a
run error (an instrument that keeps failing is not retried all night).
"""

from __future__ import annotations

import math
import secrets
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import TYPE_CHECKING, Protocol

import pandas as pd

from sweeper.campaigns.board import override_metadata, plan_for_board
from sweeper.campaigns.drift import Sweep, drift_table
from sweeper.measure.point import Point, Verdict
from sweeper.run.outcome import EXIT_FAIL, EXIT_INTERRUPTED, EXIT_PASS, EXIT_RUN_ERROR, RunOutcome
from sweeper.run.runner import execute_run
from sweeper.store.catalog import Catalog, CatalogError, RunRecord, default_catalog_path
from sweeper.store.runfile import read_run

if TYPE_CHECKING:
    from sweeper.plan import Plan

WAIT_SLICE_S = 0.2  # a real wait checks the stop request at least this often, s


class CampaignError(ValueError):
    """A campaign that cannot be found (no run, or several campaigns, match the id)."""


class CampaignReadError(CampaignError):
    """A campaign whose catalog or run files cannot be read."""


@dataclass(frozen=True)
class Schedule:
    """How often to sweep: `count` sweeps, one every `every_s` seconds, for `duration_s` seconds.
    At least one of count and duration_s is required; every_s alone would never end."""

    count: int | None = None
    every_s: float | None = None
    duration_s: float | None = None

    def __post_init__(self) -> None:
        if self.count is None and self.duration_s is None:
            raise ValueError("give a number of sweeps (count) or a duration (or both)")
        if self.count is not None and self.count < 1:
            raise ValueError(f"count must be at least 1, not {self.count}")
        for name in ("every_s", "duration_s"):
            value = getattr(self, name)
            if value is not None and not (math.isfinite(value) and value > 0):
                raise ValueError(f"{name} must be a positive time, not {value!r}")

    def as_metadata(self) -> dict[str, float | int | None]:
        """The schedule as plain values for run metadata (s)."""
        return {"count": self.count, "every_s": self.every_s, "duration_s": self.duration_s}

    def planned_sweeps(self) -> int | None:
        """Number of sweeps the schedule allows when it is fixed in advance, else None."""
        slots = math.ceil(self.duration_s / self.every_s) if self.every_s and self.duration_s else None
        if self.count is not None and slots is not None:
            return min(self.count, slots)
        return self.count if self.count is not None else slots


class CampaignClock(Protocol):
    """Time since the campaign started and a wait that can be cut short."""

    def now_s(self) -> float: ...

    def wait_until(self, when_s: float, stop: Callable[[], bool]) -> None: ...


class WallClock:
    """Real time: waits sleep, in slices, and return early when `stop()` turns true."""

    def __init__(self) -> None:
        self._origin_s = time.monotonic()

    def now_s(self) -> float:
        """Seconds since the campaign started (monotonic)."""
        return time.monotonic() - self._origin_s

    def wait_until(self, when_s: float, stop: Callable[[], bool]) -> None:
        """Sleep until `when_s` (s since the start) or until stop() is true."""
        while not stop():
            left_s = when_s - self.now_s()
            if left_s <= 0:
                return
            time.sleep(min(left_s, WAIT_SLICE_S))


class SkippingClock:
    """Bench-clock time for a simulated bench: real time spent in sweeps counts, waits do not
    sleep but move the clock forward at once."""

    def __init__(self) -> None:
        self._origin_s = time.monotonic()
        self._skipped_s = 0.0

    def now_s(self) -> float:
        """Seconds since the campaign started: real time plus every wait skipped."""
        return time.monotonic() - self._origin_s + self._skipped_s

    def wait_until(self, when_s: float, stop: Callable[[], bool]) -> None:
        """Jump forward to `when_s` (s since the start) without sleeping."""
        if not stop():
            self._skipped_s += max(0.0, when_s - self.now_s())


def clock_for(plan: Plan) -> CampaignClock:
    """SkippingClock for a simulated bench not in real time, else WallClock."""
    simulated = plan.bench.kind == "simulated" and not plan.bench.simulation.realtime
    return SkippingClock() if simulated else WallClock()


def new_campaign_id(when: datetime | None = None) -> str:
    """A sortable, unique campaign id: 'camp-' + UTC time + a random suffix."""
    when = when or datetime.now(UTC)
    return f"camp-{when.strftime('%Y%m%dT%H%M%SZ')}-{secrets.token_hex(3)}"


@dataclass
class CampaignSweep:
    """One sweep of a campaign: its 1-based number, when it was due and started on the
    campaign clock (s), and the run's outcome."""

    number: int
    due_s: float
    started_s: float
    outcome: RunOutcome


@dataclass
class CampaignResult:
    """What a campaign did. `ended_by`: "schedule", "stop request", "interrupted" (a sweep was
    stopped part way) or "errors" (too many run errors in a row)."""

    campaign_id: str
    schedule: Schedule
    sweeps: list[CampaignSweep] = field(default_factory=list)
    ended_by: str = "schedule"
    skipped_slots: int = 0

    @property
    def exit_code(self) -> int:
        """130 interrupted or stopped by request, 3 any run error, 1 any sweep not a clean pass, else 0."""
        if self.ended_by in ("interrupted", "stop request"):
            return EXIT_INTERRUPTED
        outcomes = [s.outcome for s in self.sweeps]
        if any(o.status == "error" for o in outcomes):
            return EXIT_RUN_ERROR
        if any(o.verdict != Verdict.PASS for o in outcomes):
            return EXIT_FAIL
        return EXIT_PASS


def run_campaign(
    plan: Plan,
    out_dir: str | Path,
    schedule: Schedule,
    *,
    campaign_id: str | None = None,
    clock: CampaignClock | None = None,
    stop_after_run: Callable[[], bool] | None = None,
    stop_now: Callable[[], bool] | None = None,
    on_sweep_start: Callable[[int, float, float], None] | None = None,
    on_sweep_end: Callable[[CampaignSweep], None] | None = None,
    on_point: Callable[[Point], None] | None = None,
    keep_waveforms: bool = False,
    max_consecutive_errors: int = 3,
    sim_board: Callable[[int], Mapping[str, float | str] | None] | None = None,
) -> CampaignResult:
    """Sweep the plan on its schedule, each sweep its own run filed in the catalog beside the
    runs, all with one campaign id. Never raises for instrument faults (they end that run).

    on_sweep_start(number, due_s, started_s) and on_sweep_end(sweep) report progress.
    sim_board(number) is the demo/test hook of `sweeper.campaigns.board`: the simulated board's true
    part values for sweep `number` (1-based; None keeps the plan's), recorded in the run.
    A KeyboardInterrupt ends the campaign as "interrupted" and the result is still returned.
    """
    out_dir = Path(out_dir)
    campaign_id = campaign_id or new_campaign_id()
    clock = clock or clock_for(plan)
    stop_after = stop_after_run or (lambda: False)
    result = CampaignResult(campaign_id, schedule)
    slot = 0
    errors_in_row = 0
    try:
        while True:
            number = len(result.sweeps) + 1
            if schedule.count is not None and number > schedule.count:
                break
            due_s = slot * schedule.every_s if schedule.every_s else clock.now_s()
            if schedule.duration_s is not None and due_s >= schedule.duration_s:
                break
            clock.wait_until(due_s, stop_after)
            if stop_after():
                result.ended_by = "stop request"
                break
            started_s = clock.now_s()
            if on_sweep_start:
                on_sweep_start(number, due_s, started_s)
            components = sim_board(number) if sim_board else None
            metadata = {
                "campaign_sweep": number,
                "campaign_offset_s": started_s,
                "campaign_due_s": due_s,
                "campaign_schedule": schedule.as_metadata(),
                **override_metadata(plan, components),
            }
            outcome = execute_run(plan_for_board(plan, sim_components=components), out_dir, on_point=on_point,
                                  should_stop=stop_now, keep_waveforms=keep_waveforms, campaign=campaign_id,
                                  extra_metadata=metadata)
            sweep = CampaignSweep(number, due_s, started_s, outcome)
            result.sweeps.append(sweep)
            if on_sweep_end:
                on_sweep_end(sweep)
            if outcome.status == "interrupted":
                result.ended_by = "interrupted"
                break
            errors_in_row = errors_in_row + 1 if outcome.status == "error" else 0
            if errors_in_row >= max_consecutive_errors:
                result.ended_by = "errors"
                break
            if stop_after():
                result.ended_by = "stop request"
                break
            if schedule.every_s:
                next_slot = max(slot + 1, math.ceil(clock.now_s() / schedule.every_s))
                result.skipped_slots += next_slot - slot - 1
                slot = next_slot
    except KeyboardInterrupt:  # Ctrl-C outside a sweep (e.g. during a real wait): the runs are filed
        result.ended_by = "interrupted"
    return result


def campaign_records(runs_dir: str | Path, campaign_id: str) -> list[tuple[RunRecord, Path]]:
    """The catalog records of a campaign (id, or a unique prefix of one), oldest first.
    Raises CampaignError when no campaign, or several, match."""
    path = default_catalog_path(runs_dir)
    if not path.exists():
        raise CampaignError(f"{path}: no catalog here (expected one beside the runs)")
    try:
        with Catalog(path) as catalog:
            records = catalog.find(campaign=campaign_id)
            if not records and campaign_id:
                matching = [r for r in catalog.find() if r.campaign.startswith(campaign_id)]
                ids = sorted({r.campaign for r in matching})
                if len(ids) > 1:
                    raise CampaignError(f"{campaign_id!r} matches several campaigns ({', '.join(ids[:5])}); "
                                        "give more of the id")
                records = matching
            resolved = [(r, catalog.resolve(r)) for r in records]
    except CatalogError as exc:
        raise CampaignReadError(str(exc)) from None
    if not resolved:
        raise CampaignError(f"no run in {path} belongs to a campaign {campaign_id!r}")
    resolved.sort(key=lambda pair: (pair[0].start_utc, pair[0].run_id))
    return resolved


def _read_sweep(path: Path) -> tuple[float, Sweep]:
    """A run file as a campaign sweep, with its campaign_sweep number (inf when absent)."""
    try:
        frame, meta = read_run(path)
    except Exception as exc:  # noqa: BLE001 - any unreadable file is reported with its path
        raise CampaignReadError(f"{path}: cannot read run file: {exc}") from None
    order = float(meta.get("campaign_sweep", math.inf))
    offset_s = float(meta.get("campaign_offset_s", math.nan))
    return order, Sweep(str(meta.get("run_id", path.stem)), str(meta.get("start_utc", "")), frame, offset_s)


def _in_campaign_order(found: list[tuple[float, Sweep]]) -> list[Sweep]:
    ordered = sorted(enumerate(found), key=lambda item: (item[1][0], item[0]))
    return [sweep for _, (_, sweep) in ordered]


def load_campaign(runs_dir: str | Path, campaign_id: str) -> list[Sweep]:
    """The campaign's sweeps read from their run files, in campaign order (campaign_sweep,
    then start time). Raises CampaignError for an unknown campaign, CampaignReadError for an
    unreadable catalog or run file."""
    return _in_campaign_order([_read_sweep(path) for _, path in campaign_records(runs_dir, campaign_id)])


def result_sweeps(result: CampaignResult) -> list[Sweep]:
    """The sweeps of a campaign just run, read back from their run files (sweeps without a
    point are left out), in campaign order. Raises CampaignReadError for an unreadable file."""
    return _in_campaign_order([_read_sweep(s.outcome.run_path) for s in result.sweeps if s.outcome.points])


def campaign_drift(runs_dir: str | Path, campaign_id: str) -> tuple[pd.DataFrame, list[Sweep]]:
    """The drift table of a filed campaign (see `sweeper.campaigns.drift.drift_table`) and its sweeps."""
    sweeps = load_campaign(runs_dir, campaign_id)
    return drift_table(sweeps), sweeps


def write_drift_csv(table: pd.DataFrame, path: str | Path) -> None:
    """Write a drift table as CSV (UTF-8, header row, full float precision)."""
    table.to_csv(path, index=False, float_format="%.17g")
