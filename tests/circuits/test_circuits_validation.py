"""Bad input is refused with a message naming what was wrong; optional parts get defaults."""

from __future__ import annotations

import math

import numpy as np
import pytest

from sweeper.circuits import COMPONENTS, build_circuit
from sweeper.circuits.catalog import ARMS


def test_unknown_topology() -> None:
    with pytest.raises(ValueError, match=r"topology: given 'rc-lopass', expected one of .*rc-lowpass"):
        build_circuit("rc-lopass", {"R": 1e3, "C": 1e-9})


def test_missing_component_is_named() -> None:
    with pytest.raises(ValueError, match=r"rc-lowpass: component 'C': missing, expected a capacitance > 0 F"):
        build_circuit("rc-lowpass", {"R": 1e3})


def test_unknown_component_is_named() -> None:
    with pytest.raises(ValueError, match=r"rc-lowpass: component 'L': unknown, expected one of: R, C"):
        build_circuit("rc-lowpass", {"R": 1e3, "C": 1e-9, "L": 1e-3})


@pytest.mark.parametrize("value", [-1e3, 0.0, math.inf, math.nan, "1k"])
def test_bad_required_value_is_named_with_what_was_given(value: object) -> None:
    with pytest.raises(ValueError, match=r"rc-lowpass: component 'R': given .*expected a resistance > 0 Ohm"):
        build_circuit("rc-lowpass", {"R": value, "C": 1e-9})


def test_optional_parts() -> None:
    # Defaults from the catalog: inductor resistance 0 Ohm, no load resistor (inf).
    circuit = build_circuit("lc-supply", {"L": 1e-5, "C": 1e-4})
    assert circuit.values == {"L": 1e-5, "C": 1e-4, "RL": 0.0, "RC": 0.0, "RLOAD": math.inf}
    assert build_circuit("rl-highpass", {"R": 1e3, "L": 1e-3, "RL": 0.0}).values["RL"] == 0.0
    with pytest.raises(ValueError, match=r"'RL': given -1\.0"):
        build_circuit("rl-highpass", {"R": 1e3, "L": 1e-3, "RL": -1.0})
    with pytest.raises(ValueError, match="'RLOAD': given 0"):
        build_circuit("lc-supply", {"L": 1e-5, "C": 1e-4, "RLOAD": 0})


def test_rational_checks() -> None:
    with pytest.raises(ValueError, match=r"poles_hz.*conjugate pairs"):
        build_circuit("rational", {}, poles_hz=(-100 + 50j,))
    with pytest.raises(ValueError, match=r"zeros_hz.*conjugate pairs"):
        build_circuit("rational", {}, zeros_hz=(-100 + 50j, -100 - 60j), poles_hz=(-1.0, -2.0))
    with pytest.raises(ValueError, match="gain"):
        build_circuit("rational", {}, poles_hz=(-1.0,), gain=0.0)
    with pytest.raises(ValueError, match="'rational' topology only"):
        build_circuit("rc-lowpass", {"R": 1e3, "C": 1e-9}, poles_hz=(-1.0,))
    with pytest.raises(ValueError, match="component 'R': unknown, expected one of: no components"):
        build_circuit("rational", {"R": 1.0})


def test_frequencies_must_be_positive() -> None:
    circuit = build_circuit("rc-lowpass", {"R": 1e3, "C": 1e-9})
    with pytest.raises(ValueError, match="frequency_hz"):
        circuit.response(np.array([0.0, 1e3]))


def _names(arm) -> list[str]:
    return [arm] if isinstance(arm, str) else [name for part in arm[1:] for name in _names(part)]


def test_arms_use_every_catalog_component_once() -> None:
    for topology, specs in COMPONENTS.items():
        if topology == "rational":
            assert topology not in ARMS
            continue
        used = [name for arm in ARMS[topology] for name in _names(arm)]
        assert sorted(used) == sorted(spec.name for spec in specs), topology
