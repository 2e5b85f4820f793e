"""A bench as data: which instruments play which role, over which VISA resource, with which
driver file. Built from a plan (or a station file) before anything is opened."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

#: Resource and driver used on a simulated bench when the plan names none for a role.
SIM_DEFAULTS = {
    "source": ("TCPIP0::sim-gen::5025::SOCKET", "sim-generator.yaml"),
    "scope": ("TCPIP0::sim-scope-a::5025::SOCKET", "sim-scope-a.yaml"),
    "meter": ("TCPIP0::sim-meter::5025::SOCKET", "sim-meter.yaml"),
}


def roles_for(mode: str) -> tuple[str, str]:
    """The roles a bench mode uses: ('source', 'meter') in meter mode, else ('source', 'scope')."""
    return ("source", "meter") if mode == "meter" else ("source", "scope")


@dataclass(frozen=True)
class RoleSpec:
    """One instrument of a bench: its role, VISA resource, driver file (a name looked up in the
    bench's driver folders, or a path) and session timeout (None: the driver file's).

    field: where the plan names it ('bench.scope'), for located messages.
    """

    role: str
    resource: str
    driver: str
    timeout_s: float | None = None
    field: str = ""


@dataclass(frozen=True)
class BenchSpec:
    """Which instruments a run opens, and how: the bench a plan (or station) describes.

    kind: 'simulated' or 'visa'; mode: 'waveform' | 'scope-measure' | 'meter'; visa_library:
    the pyvisa backend ('@py' when None, '@sim' for the simulated bench); search_path: folders
    where driver files are looked up; sim: the sweeper.sim SimConfig of a simulated bench.
    """

    kind: str
    mode: str
    roles: tuple[RoleSpec, ...]
    visa_library: str | None = None
    search_path: tuple[Path, ...] = ()
    sim: Any = None

    @property
    def simulated(self) -> bool:
        """True when the bench is the built-in simulator (kind simulated, or the @sim library)."""
        return self.kind == "simulated" or (self.visa_library or "").strip() == "@sim"

    def role(self, name: str) -> RoleSpec | None:
        """The spec of one role, or None when the bench has no such instrument."""
        return next((r for r in self.roles if r.role == name), None)
