"""Runs for a report, read from their run files."""

from __future__ import annotations

import os
from collections.abc import Iterable
from typing import Any

import pandas as pd

from sweeper.store.runfile import file_sha256, read_run


def load_run(path: str | os.PathLike[str]) -> tuple[pd.DataFrame, dict[str, Any], str]:
    """One run file as (points frame, metadata, SHA-256 of the file), ready for `render_html`."""
    frame, metadata = read_run(path)
    return frame, metadata, file_sha256(path)


def load_runs(paths: Iterable[str | os.PathLike[str]]) -> list[tuple[pd.DataFrame, dict[str, Any], str]]:
    """Several run files, in the order given."""
    return [load_run(p) for p in paths]
