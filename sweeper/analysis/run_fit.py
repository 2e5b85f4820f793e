"""Fit a filed run: re-read its plan from the run's metadata and fit the plan's model to its
points, with the catalogued-topology fit (`extract.fit_parts`) or the netlist fit
(`netlist_fit.fit_netlist_parts`)."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from sweeper.analysis.extract import Extraction, ExtractionError, fit_parts
from sweeper.analysis.netlist_fit import fit_netlist_parts


def extract(frame: Any, metadata: Mapping[str, Any], *, reference: str | None = None) -> Extraction:
    """Fit the run's plan model to its points (frame columns frequency_hz, gain_db, phase_deg,
    u_gain_db, u_phase_deg, flags); the plan is re-read from metadata["plan_yaml"].

    Raises ExtractionError when the run holds no readable plan or the model cannot be fitted.
    """
    from sweeper.plan import PlanError, load_plan_text
    from sweeper.verdict.prediction import (
        model_loading,
        nominal_circuit,
        nominal_values,
        tolerances,
    )

    text = metadata.get("plan_yaml")
    if not isinstance(text, str) or not text.strip():
        raise ExtractionError("the run holds no plan text (metadata plan_yaml)")
    try:
        plan = load_plan_text(text, f"{metadata.get('run_id') or 'run'}:plan", model_files=metadata.get("model_files"))
    except PlanError as exc:
        first = exc.problems[0] if exc.problems else "invalid plan"
        raise ExtractionError(f"the run's plan cannot be re-read: {first}") from None
    columns = {name: frame[name].to_numpy() for name in
               ("frequency_hz", "gain_db", "phase_deg", "u_gain_db", "u_phase_deg") if name in frame}
    missing = [n for n in ("frequency_hz", "gain_db", "phase_deg") if n not in columns]
    if missing:
        raise ExtractionError(f"the points lack {', '.join(missing)}")
    n = len(columns["frequency_hz"])
    if plan.model.circuit in ("netlist", "golden"):
        if plan.model.circuit == "golden":
            raise ExtractionError("a golden-curve model has no parts to fit")
        return fit_netlist_parts(
            columns["frequency_hz"], columns["gain_db"], columns["phase_deg"],
            columns.get("u_gain_db", np.full(n, np.nan)), columns.get("u_phase_deg", np.full(n, np.nan)),
            nominal_circuit(plan.model), flags=frame["flags"].to_numpy() if "flags" in frame else None)
    return fit_parts(
        columns["frequency_hz"], columns["gain_db"], columns["phase_deg"],
        columns.get("u_gain_db", np.full(n, np.nan)), columns.get("u_phase_deg", np.full(n, np.nan)),
        plan.model.circuit, nominal_values(plan.model), tolerances(plan.model), model_loading(plan.model),
        flags=frame["flags"].to_numpy() if "flags" in frame else None, reference=reference,
    )
