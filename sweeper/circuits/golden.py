"""A golden curve as the model: the measured response of a known-good board, read from CSV.

The file has a header row naming its columns; `frequency_hz`, `gain_db` and `phase_deg` are
required, `u_gain_db` and `u_phase_deg` (standard uncertainties, k = 1) optional, other
columns are ignored; the column names of `sweeper export --to csv` ("frequency [Hz]", "gain
[dB]", ...) are read as these, so an exported golden run is a golden file as it is.
Lines starting with `#` are comments. Frequencies must rise strictly; every value must be a
finite number. Problems are `sweeper.located.Problem`s with the file, line and column.

Between its points the curve is interpolated linearly in log frequency (gain in dB, phase
unwrapped, uncertainties too). The interpolation's own error is bounded by the textbook
remainder of linear interpolation, (x - x0)(x1 - x) |y''| / 2, with y'' estimated from second
differences of the points on either side (the larger one); that bound is taken as a standard
uncertainty (on the safe side: a bound b spread uniformly would be b / sqrt(3)) and added in
quadrature to the interpolated standard uncertainty of the points; at a golden frequency it
is zero. Outside its range the curve is not a model:
`sweeper.plan` refuses a sweep that leaves it, and `response` holds the end values only so
that the simulated bench can evaluate harmonics and DC.
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass, field

import numpy as np

from sweeper.circuits.bands import Band, wrap_deg
from sweeper.circuits.loading import Loading
from sweeper.located import LocatedError, Problem

TOPOLOGY = "golden"
REQUIRED = ("frequency_hz", "gain_db", "phase_deg")
OPTIONAL = ("u_gain_db", "u_phase_deg")
ALIASES = {  # the column names of `sweeper export --to csv`
    "frequency [Hz]": "frequency_hz",
    "gain [dB]": "gain_db",
    "phase [degree]": "phase_deg",
    "u_gain [dB]": "u_gain_db",
    "u_phase [degree]": "u_phase_deg",
}
BANDS = ("uncertainty", "fixed")


class GoldenError(LocatedError):
    """A golden-curve file that cannot be used; carries every problem found."""


@dataclass(frozen=True, eq=False)
class GoldenCurve:
    """A golden board's response: frequencies (Hz, rising), gain (dB), phase (degrees, unwrapped
    along frequency) and optional standard uncertainties (dB, degrees; None when absent)."""

    frequency_hz: np.ndarray
    gain_db: np.ndarray
    phase_deg: np.ndarray
    u_gain_db: np.ndarray | None = None
    u_phase_deg: np.ndarray | None = None
    file: str = "<golden>"
    loading: Loading = field(default_factory=Loading)
    topology: str = TOPOLOGY

    @property
    def has_uncertainty(self) -> bool:
        """Whether the file gave both uncertainty columns."""
        return self.u_gain_db is not None and self.u_phase_deg is not None

    def covers(self, frequency_hz: np.ndarray) -> np.ndarray:
        """Which frequencies (Hz) lie within the curve's range (bool array)."""
        f = np.asarray(frequency_hz, dtype=float)
        return (f >= self.frequency_hz[0] * (1 - 1e-12)) & (f <= self.frequency_hz[-1] * (1 + 1e-12))

    def gain_phase(self, frequency_hz: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Interpolated gain (dB) and phase (degrees, unwrapped) at each frequency (Hz)."""
        x = np.log(np.asarray(frequency_hz, dtype=float))
        grid = np.log(self.frequency_hz)
        return np.interp(x, grid, self.gain_db), np.interp(x, grid, self.phase_deg)

    def uncertainty(self, frequency_hz: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Standard uncertainty (dB, degrees) of the interpolated curve at each frequency (Hz):
        the interpolated uncertainty of the points (0 when the file has none) and the
        interpolation error estimate, in quadrature (module docstring)."""
        x = np.log(np.asarray(frequency_hz, dtype=float))
        grid = np.log(self.frequency_hz)
        out = []
        for values, u in ((self.gain_db, self.u_gain_db), (self.phase_deg, self.u_phase_deg)):
            stated = np.interp(x, grid, u) if u is not None else np.zeros_like(x)
            out.append(np.hypot(stated, _interpolation_error(x, grid, values)))
        return out[0], out[1]

    def response(self, frequency_hz: np.ndarray | float) -> np.ndarray | complex:
        """Complex response at each frequency (Hz) from the interpolated gain and phase; end values
        held outside the curve's range (0 Hz included)."""
        f = np.asarray(frequency_hz, dtype=float)
        clipped = np.clip(f, self.frequency_hz[0], self.frequency_hz[-1])
        gain, phase = self.gain_phase(clipped)
        h = 10.0 ** (gain / 20.0) * np.exp(1j * np.radians(phase))
        return complex(h) if f.ndim == 0 else h

    def input_impedance_ohm(self, frequency_hz: np.ndarray | float) -> np.ndarray | complex:
        """The curve says nothing about the board's input: taken as open (inf), Ohm."""
        f = np.asarray(frequency_hz, dtype=float)
        z = np.full(f.shape, complex(np.inf, 0.0))
        return complex(z) if f.ndim == 0 else z

    def slowest_time_constant_s(self) -> float:
        """Largest group delay -d phase / d omega over the curve, s (0 when the phase never falls):
        an estimate of how long the board takes to settle (exact for a first-order low-pass, whose
        group delay at DC is its time constant)."""
        omega = 2 * np.pi * self.frequency_hz
        delay = -np.diff(np.radians(self.phase_deg)) / np.diff(omega)
        largest = float(np.max(delay)) if delay.size else 0.0
        return largest if largest > 0 else 0.0

    def figures(self) -> dict[str, float]:
        """Derived figures over the curve's range (keys of sweeper.circuits.figures.FIGURE_KEYS)."""
        from sweeper.circuits.figures import response_figures

        return response_figures(self.response, float(self.frequency_hz[0]), float(self.frequency_hz[-1]),
                                self.slowest_time_constant_s())


def _interpolation_error(x: np.ndarray, grid: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Error bound of linear interpolation at x: (x - x0)(x1 - x) / 2 times the larger |second
    derivative| estimated at the two neighbouring points (second divided differences); exact
    for a parabola, and on the safe side where the curvature grows towards one neighbour."""
    if grid.size < 3:
        return np.zeros_like(x)
    second = np.zeros(grid.size)
    dx = np.diff(grid)
    slopes = np.diff(values) / dx
    second[1:-1] = 2 * np.diff(slopes) / (dx[1:] + dx[:-1])
    second[0], second[-1] = second[1], second[-2]
    right = np.clip(np.searchsorted(grid, x), 1, grid.size - 1)
    left = right - 1
    curvature = np.maximum(np.abs(second[left]), np.abs(second[right]))
    span = np.clip((x - grid[left]) * (grid[right] - x), 0.0, None)
    return span * curvature / 2


def read_golden_text(text: str, file: str = "<golden>") -> GoldenCurve:
    """Parse golden-curve CSV text (module docstring); GoldenError listing every problem."""
    problems: list[Problem] = []

    def problem(line: int, column: int, kind: str, given: str, message: str) -> None:
        problems.append(Problem(file, line, column, (), kind, given, "", message))

    lines = [(number, line) for number, line in enumerate(text.lstrip("\ufeff").split("\n"), start=1)
             if line.strip() and not line.lstrip().startswith("#")]
    if not lines:
        raise GoldenError([Problem(file, 0, 0, (), "empty", "", "a header row and points",
                                   "the golden file is empty (expected a header row: frequency_hz,gain_db,phase_deg)")])
    header_line, header_text = lines[0]
    header = next(csv.reader(io.StringIO(header_text)))
    names = [ALIASES.get(name.strip(), name.strip()) for name in header]
    starts = _field_columns(header_text)
    columns: dict[str, int] = {}
    for i, name in enumerate(names):
        if name in columns:
            problem(header_line, starts[i], "duplicate_column", repr(name), f"column {name!r} is given twice")
        columns.setdefault(name, i)
    missing = [name for name in REQUIRED if name not in columns]
    if missing:
        problem(header_line, 1, "missing_column", header_text.strip()[:60],
                f"the header lacks {', '.join(missing)} (expected columns frequency_hz, gain_db, phase_deg and "
                "optionally u_gain_db, u_phase_deg)")
        raise GoldenError(problems)
    wanted = [name for name in (*REQUIRED, *OPTIONAL) if name in columns]
    data: dict[str, list[float]] = {name: [] for name in wanted}
    where: list[int] = []
    for number, line in lines[1:]:
        fields = next(csv.reader(io.StringIO(line)))
        starts = _field_columns(line)
        row: dict[str, float] = {}
        for name in wanted:
            i = columns[name]
            if i >= len(fields):
                problem(number, len(line) + 1, "missing_value", "", f"the row has no {name} (column {i + 1})")
                continue
            text_value = fields[i].strip()
            try:
                value = float(text_value)
            except ValueError:
                value = math.nan
            if not math.isfinite(value) or (name.startswith("u_") and value < 0):
                expected = "a number >= 0" if name.startswith("u_") else "a finite number"
                hint = " (a skipped point? remove the row)" if text_value.lower() == "nan" else ""
                problem(number, starts[i] if i < len(starts) else 1, "bad_value", repr(text_value),
                        f"{name}: {text_value!r} is not {expected}{hint}")
                continue
            row[name] = value
        if len(row) == len(wanted):
            for name in wanted:
                data[name].append(row[name])
            where.append(number)
    f = np.array(data["frequency_hz"])
    for i in range(f.size):
        if f[i] <= 0:
            problem(where[i], 1, "bad_value", repr(float(f[i])), "frequency_hz must be above 0 Hz")
        elif i and f[i] <= f[i - 1]:
            problem(where[i], 1, "not_increasing", repr(float(f[i])),
                    f"frequency_hz {f[i]:g} does not rise above the row before ({f[i - 1]:g}): sort the rows, "
                    "one row per frequency")
    if not problems and f.size < 2:
        problem(header_line, 1, "too_few_points", str(f.size), "a golden curve needs at least 2 points")
    if problems:
        raise GoldenError(sorted(problems, key=lambda p: (p.line, p.column)))
    phase = np.degrees(np.unwrap(np.radians(np.array(data["phase_deg"]))))
    u_gain = np.array(data["u_gain_db"]) if "u_gain_db" in data else None
    u_phase = np.array(data["u_phase_deg"]) if "u_phase_deg" in data else None
    return GoldenCurve(f, np.array(data["gain_db"]), phase, u_gain, u_phase, file)


def _field_columns(line: str) -> list[int]:
    """1-based column where each comma-separated field of a line starts (quotes not split)."""
    starts, inside = [1], False
    for i, char in enumerate(line):
        if char == '"':
            inside = not inside
        elif char == "," and not inside:
            starts.append(i + 2)
    return starts


def golden_band(curve: GoldenCurve, frequency_hz: np.ndarray, band: str = "uncertainty",
                coverage_factor: float = 2.0, gain_db: float = 0.0, phase_deg: float = 0.0) -> Band:
    """The curve and its band at frequency_hz (Hz): +- coverage_factor times the curve's standard
    uncertainty ("uncertainty"), or +- gain_db and phase_deg ("fixed")."""
    if band not in BANDS:
        raise ValueError(f"golden band: given {band!r}, expected one of {', '.join(BANDS)}")
    f = np.asarray(frequency_hz, dtype=float)
    gain, phase = curve.gain_phase(f)
    nominal_phase = wrap_deg(phase)
    if band == "uncertainty":
        u_gain, u_phase = curve.uncertainty(f)
        half_gain, half_phase = coverage_factor * u_gain, coverage_factor * u_phase
    else:
        half_gain, half_phase = np.full(f.shape, float(gain_db)), np.full(f.shape, float(phase_deg))
    return Band(f, gain, nominal_phase, gain - half_gain, gain + half_gain, nominal_phase - half_phase,
                nominal_phase + half_phase)
