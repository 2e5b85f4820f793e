"""Analysis of runs: parameter extraction (fit the model's part values, name the likely
out-of-tolerance part) and comparison of runs (batch spread, drift at chosen frequencies)."""

from sweeper.analysis.compare import (
    Drift,
    Response,
    Spread,
    batch_spread,
    difference_summary,
    drift,
    response_of,
    values_at,
)
from sweeper.analysis.extract import (
    Extraction,
    ExtractionError,
    FittedParameter,
    PartHypothesis,
    extraction_rows,
    fit_parts,
    format_value,
)
from sweeper.analysis.run_fit import extract

__all__ = [
    "Drift",
    "Extraction",
    "ExtractionError",
    "FittedParameter",
    "PartHypothesis",
    "Response",
    "Spread",
    "batch_spread",
    "difference_summary",
    "drift",
    "extract",
    "extraction_rows",
    "fit_parts",
    "format_value",
    "response_of",
    "values_at",
]
