"""Property: a mutated plan never crashes `check` (nor `run`, which checks the same way first).

Every outcome is a sound plan (exit 0) or located problems (exit 2, each naming the file and the
line); nothing else escapes. The mutations include the kinds an adversarial probe found
crashing or passing absurd plans: huge integers, infinite and tiny values, 'open' resistances,
deleted sections, 100 % tolerances, a rational model with gain 0, absurd settle times, counts
and point numbers, hostile text in serials.

In-process (the loader and `check_plan`, as the CLI calls them) to keep 2000+ examples fast; a
few subprocess cases show that no traceback reaches the terminal.
"""

from __future__ import annotations

import copy
import math
import os
import re
import subprocess
import sys
import tempfile
from pathlib import Path
from typing import Any

import pytest
import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from sweeper.plan import PlanError, load_plan
from sweeper.run.check import check_plan

ROOT = Path(__file__).resolve().parents[2]
SOURCES = [ROOT / "configs" / "rc-antialias.yaml", ROOT / "configs" / "rl-highpass.yaml",
           ROOT / "configs" / "lc-supply.yaml", Path(__file__).resolve().parent / "fixtures" / "rational-meter.yaml"]
TREES = [yaml.safe_load(p.read_text(encoding="utf-8")) for p in SOURCES]
EXAMPLES = 2000  # the issue asks for at least 2000 mutated plans in CI

# Fields (present or not in a source) that mutations set, with the hostile values tried.
FIELDS = [
    ("sweep", "start"), ("sweep", "stop"), ("sweep", "points_per_decade"), ("sweep", "points"),
    ("sweep", "frequencies"),
    ("acquisition", "min_cycles"), ("acquisition", "min_samples"), ("acquisition", "settle_time"),
    ("acquisition", "settle_cycles"), ("acquisition", "settle_time_constants"), ("acquisition", "averages"),
    ("acquisition", "max_averages"), ("acquisition", "target_uncertainty", "gain"),
    ("stimulus", "amplitude"), ("stimulus", "offset"), ("stimulus", "load"), ("stimulus", "max_amplitude"),
    ("model", "components", "R", "value"), ("model", "components", "C", "value"),
    ("model", "components", "R", "tolerance"), ("model", "components", "C", "tolerance"),
    ("model", "components", "L", "value"),
    ("model", "loading", "source_resistance"), ("model", "loading", "probe_resistance"),
    ("model", "loading", "probe_capacitance"), ("model", "loading", "load_resistance"),
    ("model", "gain"), ("model", "poles"), ("model", "zeros"),
    ("limits", "coverage_factor"), ("limits", "monte_carlo", "samples"), ("limits", "band"),
    ("limits", "allowance", "gain"), ("limits", "max_duration"),
    ("bench", "simulation", "seed"), ("bench", "simulation", "noise"), ("bench", "simulation", "skew"),
    ("bench", "simulation", "components", "C"), ("bench", "source", "timeout"),
    ("faults", "timeout", "retries"), ("faults", "timeout", "backoff"),
    ("dut", "serial"), ("dut", "board"), ("name",), ("metadata", "operator"),
]
HOSTILE = st.one_of(
    st.sampled_from([
        10**30, -(10**30), 10**400, 1e308, -1e308, 1e-300, 0, -1, 1, 2, 1e9, 1e12, 1e8, 1e6, 0.5,
        math.inf, -math.inf, math.nan, "1e400 kOhm", "1e-300 uF", "open", "short", "inf", "-inf", "nan",
        "1e30 F", "1e9 s", "1e308", "100 %", "99.999 %", "1e400", "0 Hz", "1e400 Hz", "1e-9", "1e300 Hz",
        "high-z", "monte-carlo", "worst-case", "[/]", "[bold]x", ":x:", "\ud800", "", "   ",
        [0], [1e400], [[-1e308, 1e308]], [[-50, 1000], [-50, -1000]], ["1e-300 Hz"], list(range(5)),
        {"value": "1e400 kOhm"}, {"value": "open", "tolerance": "100 %"}, "10 min", "1e6 h", "1 s",
    ]),
    st.integers(min_value=-(10**40), max_value=10**40),
    st.floats(allow_nan=True, allow_infinity=True),
    st.builds(lambda x, u: f"{x:g} {u}", st.floats(allow_nan=False, allow_infinity=True),
              st.sampled_from(["Hz", "kOhm", "uF", "s", "%", "dB", "Vpp", "mH", "h", "min"])),
)


def _set(tree: dict, path: tuple, value: Any) -> None:
    node = tree
    for part in path[:-1]:
        child = node.get(part) if isinstance(node, dict) else None
        if not isinstance(child, dict):
            child = {}
            node[part] = child
        node = child
    node[path[-1]] = value


def _delete(tree: dict, path: tuple) -> None:
    node = tree
    for part in path[:-1]:
        node = node.get(part) if isinstance(node, dict) else None
        if not isinstance(node, dict):
            return
    node.pop(path[-1], None)


def _mutate(data: st.DataObject, tree: dict) -> dict:
    kind = data.draw(st.sampled_from(["set", "set", "set", "delete", "rational-gain-0", "points", "huge-int"]))
    if kind == "set":
        _set(tree, data.draw(st.sampled_from(FIELDS)), data.draw(HOSTILE))
    elif kind == "delete":
        choices = [("model", "components"), ("model",), ("sweep",), ("stimulus", "amplitude"), ("model", "circuit"),
                   ("bench", "source"), ("bench", "scope"), ("dut",), ("sweep", "stop"), ("model", "loading")]
        _delete(tree, data.draw(st.sampled_from(choices)))
    elif kind == "rational-gain-0":
        tree["model"] = {"circuit": "rational", "zeros": [], "poles": [-1000], "gain": data.draw(
            st.sampled_from([0, 0.0, -0.0, 1e-320, 1e308, math.inf]))}
        tree.setdefault("limits", {})["band"] = data.draw(st.sampled_from(["none", "worst-case", "monte-carlo"]))
    elif kind == "points":
        sweep = tree["sweep"] = {"start": "10 Hz", "stop": "100 kHz"}
        sweep[data.draw(st.sampled_from(["points", "points_per_decade"]))] = data.draw(
            st.sampled_from([10**9, 10**6, 1e308, 200_001, 100_000, 1e-300, 10**30]))
    else:
        _set(tree, data.draw(st.sampled_from(FIELDS)), data.draw(st.integers(10**18, 10**60)))
    return tree


LOCATED = re.compile(r"^(?P<file>[^:]+\.yaml):(?P<line>\d+):(?P<column>\d+): ")


def outcome(path: Path) -> int:
    """The exit code `check` gives for the plan file (0 or 2); anything else raises, as in the CLI."""
    try:
        plan = load_plan(path)
    except PlanError as error:
        assert error.problems
        for problem in error.problems:
            match = LOCATED.match(str(problem))
            assert match and match["file"] == str(path) and int(match["line"]) >= 1, str(problem)
        return 2
    report = check_plan(plan)
    if report.problems:
        for problem in report.problems:
            match = LOCATED.match(str(problem))
            assert match and match["file"] == str(path) and int(match["line"]) >= 1, str(problem)
        return 2
    assert report.points >= 1 and math.isfinite(report.duration_s)
    return 0


_TMP = Path(tempfile.mkdtemp(prefix="sweeper-hostile-plan-"))


@settings(deadline=None, max_examples=EXAMPLES, suppress_health_check=[HealthCheck.too_slow], database=None)
@given(data=st.data(), source=st.integers(0, len(TREES) - 1), steps=st.integers(1, 3))
def test_mutated_plans_exit_0_or_located_2(data: st.DataObject, source: int, steps: int) -> None:
    tree = copy.deepcopy(TREES[source])
    for _ in range(steps):
        tree = _mutate(data, tree)
    path = _TMP / "mutated.yaml"
    path.write_text(yaml.safe_dump(tree, sort_keys=False, allow_unicode=True), encoding="utf-8",
                    errors="surrogatepass")
    assert outcome(path) in (0, 2)


# The probe's findings one by one: each a located refusal (exit 2).
CASES = {
    "huge-int-samples": (("acquisition", "min_samples"), 10**30),
    "resistance-open": (("model", "components", "R", "value"), "open"),
    "resistance-1e400": (("model", "components", "R", "value"), "1e400 kOhm"),
    "ppd-1e308": (("sweep", "points_per_decade"), 1e308),
    "mc-samples-1e8": (("limits", "monte_carlo", "samples"), 10**8),
    "cap-1e-300": (("model", "components", "C", "value"), "1e-300 uF"),
    "tolerance-100": (("model", "components", "C", "tolerance"), "100 %"),
    "settle-1e9": (("acquisition", "settle_time"), "1e9 s"),
    "settle-tc-1e308": (("acquisition", "settle_time_constants"), 1e308),
    "settle-cycles-1e12": (("acquisition", "settle_cycles"), 1e12),
    "min-cycles-1e-9": (("acquisition", "min_cycles"), 1e-9),
    "cap-1e30": (("model", "components", "C", "value"), "1e30 F"),
}


@pytest.mark.parametrize("name", list(CASES))
def test_each_finding_of_the_probe_is_a_located_refusal(tmp_path: Path, name: str) -> None:
    field, value = CASES[name]
    tree = copy.deepcopy(TREES[0])
    _set(tree, field, value)
    path = tmp_path / f"{name}.yaml"
    path.write_text(yaml.safe_dump(tree, sort_keys=False), encoding="utf-8")
    assert outcome(path) == 2


def test_deleted_components_rational_gain_0_and_a_million_points_are_refused(tmp_path: Path) -> None:
    cases = []
    tree = copy.deepcopy(TREES[0])
    del tree["model"]["components"]
    cases.append(tree)
    tree = copy.deepcopy(TREES[0])
    tree["model"] = {"circuit": "rational", "poles": [-1000], "gain": 0}
    cases.append(tree)
    tree = copy.deepcopy(TREES[0])
    tree["sweep"] = {"start": "10 Hz", "stop": "100 kHz", "points": 10**6}
    cases.append(tree)
    for i, tree in enumerate(cases):
        path = tmp_path / f"case{i}.yaml"
        path.write_text(yaml.safe_dump(tree, sort_keys=False), encoding="utf-8")
        assert outcome(path) == 2, i


@pytest.mark.parametrize("field,value", [(("acquisition", "settle_time"), "1e9 s"),
                                         (("limits", "monte_carlo", "samples"), 10**30),
                                         (("model", "components", "R", "value"), "open")])
def test_no_traceback_reaches_the_terminal(tmp_path: Path, field: tuple, value: Any) -> None:
    tree = copy.deepcopy(TREES[0])
    _set(tree, field, value)
    path = tmp_path / "bad.yaml"
    path.write_text(yaml.safe_dump(tree, sort_keys=False), encoding="utf-8")
    env = {**os.environ, "COLUMNS": "200"}
    for command in ("check", "run"):
        result = subprocess.run([sys.executable, "-m", "sweeper", command, str(path)], capture_output=True,
                                text=True, env=env, timeout=120, cwd=tmp_path)
        assert result.returncode == 2, result.stdout + result.stderr
        assert "Traceback" not in result.stdout + result.stderr
        assert LOCATED.match(result.stderr.splitlines()[0].replace(str(tmp_path) + "/", "")) or \
            result.stderr.startswith(f"{path}:"), result.stderr
