"""The file-based models as the prediction uses them: a plan's netlist or golden curve becomes its
model curve and limits (sweeper.verdict.prediction.predict_limits through sweeper.circuits.file_models)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from sweeper.circuits.file_models import file_model_band, file_model_circuit
from sweeper.circuits.golden import golden_band
from sweeper.circuits.netlist import bands
from sweeper.plan import load_plan_text
from sweeper.run.spec import plan_frequencies
from sweeper.verdict.prediction import nominal_circuit, predict_limits

CONFIGS = Path(__file__).resolve().parents[2] / "configs"
NETLIST_PLAN = (CONFIGS / "aa4-netlist.yaml").read_text(encoding="utf-8")


@pytest.mark.parametrize("band", ["worst-case", "monte-carlo"])
def test_a_netlist_plans_limits_are_its_band_widened_by_the_allowance(band: str) -> None:
    plan = load_plan_text(NETLIST_PLAN.replace("band: monte-carlo", f"band: {band}"))
    f = plan_frequencies(plan)
    limits = predict_limits(plan.model, plan.limits, f).as_arrays()
    circuit = nominal_circuit(plan.model)
    mc = plan.limits.monte_carlo
    expected = (bands.worst_case_band(circuit, f) if band == "worst-case" else
                bands.monte_carlo_band(circuit, f, mc.samples, tuple(mc.percentiles), mc.seed, mc.distribution))
    allowance = plan.limits.allowance_gain_db
    np.testing.assert_allclose(limits["gain_hi_db"], expected.gain_hi_db + allowance, atol=1e-12)
    np.testing.assert_allclose(limits["gain_lo_db"], expected.gain_lo_db - allowance, atol=1e-12)
    np.testing.assert_allclose(limits["model_gain_db"], expected.nominal_gain_db, atol=1e-12)


def test_a_golden_plans_limits_are_the_golden_band_and_a_netlist_without_band_has_none() -> None:
    plan = load_plan_text((CONFIGS / "aa4-golden.yaml").read_text(encoding="utf-8"), base_dir=CONFIGS)
    f = plan_frequencies(plan)
    limits = predict_limits(plan.model, plan.limits, f).as_arrays()
    expected = golden_band(plan.model.golden_curve, f, "uncertainty", 2.0)
    np.testing.assert_allclose(limits["gain_hi_db"], expected.gain_hi_db + plan.limits.allowance_gain_db, atol=1e-12)
    netlist = load_plan_text(NETLIST_PLAN).model.parsed_netlist
    circuit = file_model_circuit(netlist, {}, nominal_circuit(load_plan_text(NETLIST_PLAN).model).loading)
    assert file_model_band(circuit, f, "none") is None
    with pytest.raises(ValueError, match="no parts"):
        file_model_circuit(plan.model.golden_curve, {"R1": 1.0}, circuit.loading)
