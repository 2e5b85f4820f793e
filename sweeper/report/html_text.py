"""Text for HTML pages: every value from a run file, a plan, an instrument or a person is
escaped before it reaches a page (quotes too, so it is safe inside attributes)."""

from __future__ import annotations

import html
from typing import Any

from sweeper.report.runinfo import text


def esc(value: Any) -> str:
    """Any value as escaped HTML text (quotes escaped too, safe inside attributes)."""
    return html.escape(text(value), quote=True)
