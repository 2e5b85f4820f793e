"""Live view of a running sweep: a local web page that follows the run's journal."""

from sweeper.live.server import (
    LiveError,
    LiveServer,
    LiveView,
    is_loopback,
    make_server,
)
from sweeper.live.state import (
    Snapshot,
    find_source,
    journal_snapshot,
    read_snapshot,
    runfile_snapshot,
    source_for,
)

__all__ = [
    "LiveError",
    "LiveServer",
    "LiveView",
    "Snapshot",
    "find_source",
    "is_loopback",
    "journal_snapshot",
    "make_server",
    "read_snapshot",
    "runfile_snapshot",
    "source_for",
]
