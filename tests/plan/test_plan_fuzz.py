"""Property: whatever a plan file contains, load_plan_text returns a Plan or raises PlanError.

Hypothesis mutates valid plans (the reference plan and the fixtures) at two levels: the parsed
structure (delete, rename, retype, duplicate, restructure entries, random text in values) and
the raw text (random characters, deleted spans, duplicated, swapped and re-indented lines).
"""

from __future__ import annotations

import copy
import math
from pathlib import Path
from typing import Any

import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from sweeper.plan import Plan, PlanError, load_plan_text

ROOT = Path(__file__).resolve().parents[2]
SOURCES = [
    ROOT / "configs" / "rc-antialias.yaml",
    Path(__file__).resolve().parent / "fixtures" / "base-plan.yaml",
    Path(__file__).resolve().parent / "fixtures" / "rational-meter.yaml",
]
TEXTS = [path.read_text(encoding="utf-8") for path in SOURCES]
TREES = [yaml.safe_load(text) for text in TEXTS]

UNITS = ["Hz", "kHz", "MHz", "mHz", "Ohm", "kOhm", "nF", "uF", "mH", "V", "mV", "Vpp", "Vrms", "Vpk",
         "%", "dB", "deg", "rad", "s", "ms", "min", "", "k", "n", "m", "M", "kF", "KHz"]

# Characters that matter to YAML, plus some that matter to us (units, signs, non-ASCII).
YAML_ALPHABET = st.sampled_from(list(":-[]{}#&*!|>'\"%@`,? \n\t\\.0123456789eEkMmunpHzVOhFdB\u00b5\u03a9\u2212\u00b0xyz"))

SCALARS = st.one_of(
    st.none(),
    st.booleans(),
    st.integers(min_value=-(10**30), max_value=10**30),
    st.floats(allow_nan=True, allow_infinity=True),
    st.text(max_size=20),
    st.text(alphabet=YAML_ALPHABET, max_size=20),
    st.builds(lambda n, u: f"{n:g} {u}".strip(), st.floats(min_value=-1e12, max_value=1e12), st.sampled_from(UNITS)),
    st.sampled_from(["high-z", "open", "inf", "log", "linear", "meter", "visa", "rational", "rc-lowpass", "[1, 2]"]),
)
VALUES = st.recursive(
    SCALARS,
    lambda children: st.one_of(
        st.lists(children, max_size=4),
        st.dictionaries(st.text(min_size=1, max_size=8), children, max_size=3),
    ),
    max_leaves=6,
)

# 200 structural + 150 textual = 350 mutated plans per run (the brief asks for at least 300);
# each load takes a few ms, PyYAML's pure-Python scanner being most of it.
STRUCTURAL_EXAMPLES = 200
TEXT_EXAMPLES = 150


def _slots(node: Any, path: tuple[Any, ...] = ()) -> list[tuple[Any, ...]]:
    """Paths of every entry (mapping key or list index) in a parsed plan."""
    out: list[tuple[Any, ...]] = []
    if isinstance(node, dict):
        for key, value in node.items():
            out.append((*path, key))
            out.extend(_slots(value, (*path, key)))
    elif isinstance(node, list):
        for index, value in enumerate(node):
            out.append((*path, index))
            out.extend(_slots(value, (*path, index)))
    return out


def _parent(tree: Any, path: tuple[Any, ...]) -> Any:
    for part in path[:-1]:
        tree = tree[part]
    return tree


def _mutate_tree(data: st.DataObject, tree: Any) -> Any:
    operation = data.draw(
        st.sampled_from(["delete", "rename", "retype", "random-text", "wrap-list", "wrap-map", "flatten", "move", "nudge"])
    )
    slots = _slots(tree)
    if not slots:
        return data.draw(VALUES)
    path = data.draw(st.sampled_from(slots))
    parent, key = _parent(tree, path), path[-1]
    if operation == "delete":
        del parent[key]
    elif operation == "rename" and isinstance(parent, dict):
        new_key = data.draw(st.one_of(st.text(max_size=12), st.just(str(key).upper()), st.just(str(key)[::-1])))
        parent[new_key] = parent.pop(key)
    elif operation == "retype":
        parent[key] = data.draw(VALUES)
    elif operation == "random-text":
        parent[key] = data.draw(st.text(alphabet=YAML_ALPHABET, max_size=30))
    elif operation == "wrap-list":
        parent[key] = [parent[key]]
    elif operation == "wrap-map":
        parent[key] = {"value": parent[key]}
    elif operation == "flatten" and isinstance(parent[key], dict):
        parent[key] = list(parent[key].items())
    elif operation == "move" and isinstance(tree, dict) and tree:
        section = data.draw(st.sampled_from(list(tree)))
        if isinstance(parent, dict) and section != key:
            moved = tree.get("moved")
            if not isinstance(moved, dict):  # an earlier mutation may have replaced it
                moved = tree["moved"] = {}
            moved[str(key)] = parent.pop(key)
    elif operation == "nudge" and isinstance(parent[key], (int, float)) and not isinstance(parent[key], bool):
        parent[key] = parent[key] * data.draw(st.sampled_from([-1, 0, 0.5, 10, 1e6, math.inf]))
    return tree


def _duplicate_line(data: st.DataObject, text: str) -> str:
    lines = text.splitlines(keepends=True)
    index = data.draw(st.integers(min_value=0, max_value=len(lines) - 1))
    return "".join(lines[: index + 1] + [lines[index]] + lines[index + 1 :])


def _check(text: str) -> None:
    """The property itself: a Plan or a PlanError whose problems are well formed."""
    try:
        plan = load_plan_text(text, "fuzz.yaml")
    except PlanError as error:
        assert error.problems
        for problem in error.problems:
            assert problem.file == "fuzz.yaml"
            assert problem.line >= 0 and problem.column >= 0
            assert problem.text and problem.kind  # a sentence and a stable kind for programs
            assert problem.kind != "invalid", str(problem)  # every problem a plan can have is a named kind
            assert str(problem).startswith("fuzz.yaml")
        assert len(str(error).splitlines()) >= len(error.problems)
    else:
        assert isinstance(plan, Plan)
        assert plan.source_text == text


@settings(deadline=None, max_examples=STRUCTURAL_EXAMPLES, suppress_health_check=[HealthCheck.too_slow])
@given(data=st.data(), source=st.integers(min_value=0, max_value=len(TREES) - 1), steps=st.integers(1, 4))
def test_structural_mutations(data: st.DataObject, source: int, steps: int) -> None:
    tree = copy.deepcopy(TREES[source])
    for _ in range(steps):
        tree = _mutate_tree(data, tree)
    text = yaml.safe_dump(tree, sort_keys=False, allow_unicode=True)
    if data.draw(st.booleans()):
        text = _duplicate_line(data, text)  # a mapping line repeated is a duplicate key
    _check(text)


@settings(deadline=None, max_examples=TEXT_EXAMPLES, suppress_health_check=[HealthCheck.too_slow])
@given(data=st.data(), source=st.integers(min_value=0, max_value=len(TEXTS) - 1), steps=st.integers(1, 3))
def test_text_mutations(data: st.DataObject, source: int, steps: int) -> None:
    text = TEXTS[source]
    for _ in range(steps):
        operation = data.draw(st.sampled_from(["insert", "delete", "duplicate", "swap", "indent", "replace-value"]))
        lines = text.splitlines(keepends=True)
        if operation == "insert":
            at = data.draw(st.integers(0, len(text)))
            text = text[:at] + data.draw(st.text(alphabet=YAML_ALPHABET, min_size=1, max_size=12)) + text[at:]
        elif operation == "delete":
            at = data.draw(st.integers(0, len(text)))
            text = text[:at] + text[at + data.draw(st.integers(1, 40)) :]
        elif operation == "duplicate" and lines:
            text = _duplicate_line(data, text)
        elif operation == "swap" and len(lines) > 1:
            i = data.draw(st.integers(0, len(lines) - 1))
            j = data.draw(st.integers(0, len(lines) - 1))
            lines[i], lines[j] = lines[j], lines[i]
            text = "".join(lines)
        elif operation == "indent" and lines:
            i = data.draw(st.integers(0, len(lines) - 1))
            lines[i] = data.draw(st.sampled_from(["  ", " ", "\t", "- "])) + lines[i]
            text = "".join(lines)
        elif operation == "replace-value" and lines:
            i = data.draw(st.integers(0, len(lines) - 1))
            head, colon, _ = lines[i].partition(": ")
            if colon:
                lines[i] = head + colon + data.draw(st.text(max_size=15)).replace("\n", " ") + "\n"
                text = "".join(lines)
    _check(text)
