"""Read a test plan from YAML and report every problem with its file, line, column and field.

The YAML is read by the shared located-YAML reader (sweeper.located), which remembers where each
key and value was written, so that every validation error and every cross-field finding can be
pointed at the exact spot. Anything that goes wrong, from a missing file to a duplicate key,
ends up as a Problem inside one PlanError.

The plan's SHA-256 is of the file's bytes as read (a leading UTF-8 byte-order mark included);
its stored text is those bytes decoded, so the text always hashes to the recorded SHA-256.
"""

from __future__ import annotations

import hashlib
import inspect
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from pydantic import BaseModel, ValidationError
from yaml.nodes import MappingNode

from sweeper.located import (
    LocatedError,
    Problem,
    YamlTree,
    problems_from_errors,
    read_text_file,
    sorted_unique,
)
from sweeper.plan.model_files import read_model_files
from sweeper.plan.schema import Plan

# YAML must use the keys (aliases), not the Python attribute names; pydantic >= 2.11 can say so.
_ALIASES_ONLY = {"by_name": False} if "by_name" in inspect.signature(BaseModel.model_validate).parameters else {}


class PlanError(LocatedError):
    """A plan that cannot be used; carries every problem found."""


def load_plan(path: str | Path) -> Plan:
    """Read and validate a plan file; raises PlanError listing every problem. Model files
    (netlist_file, golden.file) are read relative to the plan's folder."""
    path = Path(path)
    data, text = read_text_file(path, "plan file", PlanError)
    plan = _load(text, str(path), path.parent)
    plan._sha256 = hashlib.sha256(data).hexdigest()
    plan._path = path
    return plan


def load_plan_text(text: str, filename: str = "<plan>", *, base_dir: str | Path | None = None,
                   model_files: Mapping[str, Any] | None = None) -> Plan:
    """Validate a plan given as text; filename only labels the problems. Raises PlanError.

    base_dir: the folder model files are read from (the current one when None); model_files:
    their texts as `Plan.model_files` keeps them (a run's), used instead of the disk."""
    plan = _load(text, filename, Path(base_dir) if base_dir is not None else None, model_files)
    plan._sha256 = hashlib.sha256(text.encode("utf-8", "surrogatepass")).hexdigest()
    return plan


def _load(text: str, filename: str, base_dir: Path | None = None,
          stored: Mapping[str, Any] | None = None) -> Plan:
    if not isinstance(text, str):
        raise PlanError([Problem(filename, 0, 0, (), "not_text", type(text).__name__, "text",
                                 "plan text must be a string")])
    tree = YamlTree(filename, text)
    try:
        root = tree.compose()
        if root is None:
            raise PlanError([Problem(filename, 1, 1, (), "empty", "", "a mapping",
                                     "the plan is empty (expected a mapping with plan: 1, name, ...)")])
        if not isinstance(root, MappingNode):
            raise PlanError([Problem(filename, root.start_mark.line + 1, root.start_mark.column + 1, (),
                                     "not_a_mapping", tree.written(root), "a mapping",
                                     "the top level of a plan must be a mapping of sections (plan: 1, name: ..., dut: ...)")])
        data = tree.build()
    except PlanError:
        raise
    except LocatedError as exc:
        raise PlanError(exc.problems) from None
    problems = list(tree.problems)
    found, file_problems = read_model_files(data, tree, base_dir, stored)
    problems.extend(file_problems)
    plan = None
    try:
        plan = Plan.model_validate(data, context={"model_files": found}, **_ALIASES_ONLY)
    except ValidationError as exc:
        problems.extend(problems_from_errors(exc.errors(), tree, Plan))
    except RecursionError:
        problems.append(Problem(filename, 1, 1, (), "too_deep", "", "", "the plan is nested too deeply"))
    if problems or plan is None:
        raise PlanError(sorted_unique(problems))
    plan._source_text = text
    plan._locations = tree.locations()
    plan._model_files = found.archive
    return plan
