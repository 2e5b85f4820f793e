"""Read a test plan from YAML and report every problem with its file, line, column and field.

The YAML is composed into a node tree with yaml.SafeLoader (nothing is ever constructed from
tags or evaluated); the loader builds plain data from the nodes itself, remembering where each
key and value was written, so that every pydantic error and every cross-field finding can be
pointed at the exact spot. Anything that goes wrong, from a missing file to a duplicate key, ends
up as a Problem inside one PlanError.
"""

from __future__ import annotations

import difflib
import hashlib
import inspect
import types
import typing
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import yaml
from pydantic import BaseModel, ValidationError
from yaml.nodes import MappingNode, Node, ScalarNode, SequenceNode

from sweeper.plan.schema import LOCATED, Finding, Plan, RuleError
from sweeper.plan.units import QuantityError

MAX_NODES = 100_000  # a plan has a few hundred nodes; this stops alias bombs
MAX_DEPTH = 64
# YAML must use the keys (aliases), not the Python attribute names; pydantic >= 2.11 can say so.
_ALIASES_ONLY = {"by_name": False} if "by_name" in inspect.signature(BaseModel.model_validate).parameters else {}

_MAP = "tag:yaml.org,2002:map"
_SEQ = "tag:yaml.org,2002:seq"
_MERGE = "tag:yaml.org,2002:merge"
_VALUE = "tag:yaml.org,2002:value"
_SCALAR_TAGS = {
    "tag:yaml.org,2002:str",
    "tag:yaml.org,2002:int",
    "tag:yaml.org,2002:float",
    "tag:yaml.org,2002:bool",
    "tag:yaml.org,2002:null",
    "tag:yaml.org,2002:timestamp",
}


@dataclass(frozen=True)
class Problem:
    """One located problem in a plan.

    line and column are 1-based (0 when the problem has no position, e.g. a missing file).
    field is the dotted YAML path ("sweep.stop", "limits.masks[0].to"); given is the value as
    written ("" when absent); expected is the explanation shown after the field.
    """

    file: str
    line: int
    column: int
    field: str
    given: str
    expected: str

    def __str__(self) -> str:
        where = f"{self.file}:{self.line}:{self.column}" if self.line > 0 else self.file
        return f"{where}: {self.field}: {self.expected}" if self.field else f"{where}: {self.expected}"


class PlanError(Exception):
    """A plan that cannot be used; carries every problem found."""

    def __init__(self, problems: list[Problem]) -> None:
        self.problems = list(problems)
        super().__init__(self.problems)  # args hold the problems, so the error pickles intact

    def __str__(self) -> str:
        return "\n".join(str(problem) for problem in self.problems)


class _Tree:
    """Plain data built from YAML nodes, with the nodes of every key and value by path."""

    def __init__(self, filename: str, text: str) -> None:
        self.filename = filename
        self.text = text
        self.values: dict[tuple[Any, ...], Node] = {}
        self.keys: dict[tuple[Any, ...], Node] = {}
        self.problems: list[Problem] = []
        self.broken: set[tuple[Any, ...]] = set()  # paths whose value was refused while reading
        self.count = 0
        self._constructor = yaml.SafeLoader("")  # scalars only: resolves int, float, bool, null, timestamp

    def problem(self, node: Node | None, path: tuple[Any, ...], given: str, expected: str) -> None:
        line, column = (node.start_mark.line + 1, node.start_mark.column + 1) if node is not None else (1, 1)
        self.problems.append(Problem(self.filename, line, column, dotted(path), given, expected))

    def written(self, node: Node) -> str:
        """The node's text as written, on one line and short; unquoted text is shown in quotes."""
        text = self.text[node.start_mark.index : node.end_mark.index].strip()
        text = " ".join(text.split())
        text = text if len(text) <= 60 else text[:57] + "..."
        if isinstance(node, ScalarNode) and node.style is None and node.tag == "tag:yaml.org,2002:str":
            return repr(text)
        return text

    def build(self, node: Node, path: tuple[Any, ...], depth: int, ancestors: frozenset[int]) -> Any:
        self.count += 1
        if self.count > MAX_NODES:
            raise _TooBig
        self.values[path] = node
        if depth > MAX_DEPTH or id(node) in ancestors:
            self.problem(node, path, self.written(node), "is nested too deeply (or refers to itself)")
            return None
        ancestors = ancestors | {id(node)}
        if isinstance(node, ScalarNode):
            return self._scalar(node, path)
        if isinstance(node, SequenceNode):
            if node.tag != _SEQ:
                self.problem(node, path, self.written(node), f"YAML tag {node.tag!r} is not supported here")
                self.broken.add(path)
            return [self.build(item, (*path, index), depth + 1, ancestors) for index, item in enumerate(node.value)]
        if isinstance(node, MappingNode):
            if node.tag != _MAP:
                self.problem(node, path, self.written(node), f"YAML tag {node.tag!r} is not supported here")
                self.broken.add(path)
            return self._mapping(node, path, depth, ancestors)
        self.problem(node, path, "", "is not a YAML value")
        return None

    def _scalar(self, node: ScalarNode, path: tuple[Any, ...]) -> Any:
        if node.tag == _VALUE:
            return node.value  # a lone "=" (YAML 1.1 value key): plain text to us
        if node.tag not in _SCALAR_TAGS:
            self.problem(node, path, self.written(node), f"YAML tag {node.tag!r} is not supported here")
            self.broken.add(path)
            return node.value
        try:
            return self._constructor.construct_object(node)
        except (yaml.YAMLError, ValueError, OverflowError) as exc:
            self.problem(node, path, self.written(node), f"is not a valid YAML value ({exc})")
            self.broken.add(path)
            return node.value

    def _mapping(self, node: MappingNode, path: tuple[Any, ...], depth: int, ancestors: frozenset[int]) -> dict:
        explicit: list[tuple[Node, Node]] = []
        merged: list[tuple[Node, Node]] = []
        for key_node, value_node in node.value:
            if isinstance(key_node, ScalarNode) and key_node.tag == _MERGE:
                merged.extend(self._merge_sources(value_node, path))
            else:
                explicit.append((key_node, value_node))
        result: dict[str, Any] = {}
        first_seen: dict[str, Node] = {}
        for key_node, value_node in explicit:
            if not isinstance(key_node, ScalarNode):
                self.problem(key_node, path, self.written(key_node), "a key must be plain text")
                continue
            key = key_node.value
            if key in first_seen:
                first = first_seen[key].start_mark
                self.problem(
                    key_node,
                    (*path, key),
                    key,
                    f"duplicate key {key!r} (first at line {first.line + 1}, column {first.column + 1})",
                )
                continue
            first_seen[key] = key_node
        for key_node, value_node in merged:
            if isinstance(key_node, ScalarNode) and key_node.value not in first_seen:
                first_seen[key_node.value] = key_node  # the first merged mapping wins, explicit keys win over all
        for key_node, value_node in merged + explicit:
            if not isinstance(key_node, ScalarNode):
                continue
            key = key_node.value
            if first_seen.get(key) is not key_node:
                continue  # a later duplicate, or a merged key overridden by an explicit one
            self.keys[(*path, key)] = key_node
            result[key] = self.build(value_node, (*path, key), depth + 1, ancestors)
        return result

    def _merge_sources(self, value_node: Node, path: tuple[Any, ...]) -> list[tuple[Node, Node]]:
        sources = value_node.value if isinstance(value_node, SequenceNode) else [value_node]
        pairs: list[tuple[Node, Node]] = []
        for source in sources:
            if not isinstance(source, MappingNode):
                self.problem(source, path, self.written(source), "a merge key '<<' needs a mapping")
                continue
            pairs.extend(source.value)
        return pairs


class _TooBig(Exception):
    pass


def dotted(path: tuple[Any, ...]) -> str:
    """('limits', 'masks', 0, 'to') -> 'limits.masks[0].to'."""
    out = ""
    for part in path:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += ("." if out else "") + str(part)
    return out


def load_plan(path: str | Path) -> Plan:
    """Read and validate a plan file; raises PlanError listing every problem."""
    path = Path(path)
    name = str(path)
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        raise PlanError([Problem(name, 0, 0, "", "", "no such file")]) from None
    except IsADirectoryError:
        raise PlanError([Problem(name, 0, 0, "", "", "is a directory, not a plan file")]) from None
    except OSError as exc:
        raise PlanError([Problem(name, 0, 0, "", "", f"cannot be read ({exc.strerror or exc})")]) from None
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        before = data[: exc.start]
        line = before.count(b"\n") + 1
        column = exc.start - (before.rfind(b"\n") + 1) + 1
        byte = data[exc.start : exc.start + 1].hex()
        not_utf8 = f"the file is not UTF-8 text (byte 0x{byte} here); save it as UTF-8"
        raise PlanError([Problem(name, line, column, "", f"0x{byte}", not_utf8)]) from None
    plan = _load(text, name)
    plan._sha256 = hashlib.sha256(data).hexdigest()
    plan._path = path
    return plan


def load_plan_text(text: str, filename: str = "<plan>") -> Plan:
    """Validate a plan given as text; filename only labels the problems. Raises PlanError."""
    plan = _load(text, filename)
    plan._sha256 = hashlib.sha256(text.encode("utf-8", "surrogatepass")).hexdigest()
    return plan


def _load(text: str, filename: str) -> Plan:
    if not isinstance(text, str):
        raise PlanError([Problem(filename, 0, 0, "", type(text).__name__, "plan text must be a string")])
    tree = _Tree(filename, text)
    root = _compose(text, filename)
    if root is None:
        empty = "the plan is empty (expected a mapping with plan: 1, name, ...)"
        raise PlanError([Problem(filename, 1, 1, "", "", empty)])
    if not isinstance(root, MappingNode):
        raise PlanError(
            [
                Problem(
                    filename,
                    root.start_mark.line + 1,
                    root.start_mark.column + 1,
                    "",
                    tree.written(root),
                    "the top level of a plan must be a mapping of sections (plan: 1, name: ..., dut: ...)",
                )
            ]
        )
    try:
        data = tree.build(root, (), 0, frozenset())
    except _TooBig:
        too_big = f"the plan expands to more than {MAX_NODES} YAML nodes"
        raise PlanError([Problem(filename, 1, 1, "", "", too_big)]) from None
    except RecursionError:
        raise PlanError([Problem(filename, 1, 1, "", "", "the plan is nested too deeply")]) from None
    problems = list(tree.problems)
    plan = None
    try:
        plan = Plan.model_validate(data, **_ALIASES_ONLY)
    except ValidationError as exc:
        for loc, error in _flatten(exc.errors(), ()):
            if loc not in tree.broken:  # already reported while reading the YAML
                problems.append(_problem(tree, root, loc, error))
    except RecursionError:
        problems.append(Problem(filename, 1, 1, "", "", "the plan is nested too deeply"))
    if problems or plan is None:
        raise PlanError(_sorted_unique(problems))
    plan._source_text = text
    plan._locations = {}
    for path in tree.values:
        if path:
            node, _ = _locate(tree, root, path, at_key=False)
            plan._locations[dotted(path)] = (node.start_mark.line + 1, node.start_mark.column + 1)
    return plan


def _compose(text: str, filename: str) -> Node | None:
    loader = None
    try:
        loader = yaml.SafeLoader(text)
        return loader.get_single_node()
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        line, column = (mark.line + 1, mark.column + 1) if mark is not None else (1, 1)
        message = exc.problem or exc.context or "not valid YAML"
        if exc.problem and exc.context and exc.context_mark is not None:
            started = exc.context_mark
            message += f" ({exc.context} at line {started.line + 1}, column {started.column + 1})"
        raise PlanError([Problem(filename, line, column, "", "", f"YAML syntax: {message}")]) from None
    except yaml.reader.ReaderError as exc:
        before = text[: exc.position]
        line = before.count("\n") + 1
        column = exc.position - (before.rfind("\n") + 1) + 1
        code = exc.character if isinstance(exc.character, int) else ord(str(exc.character)[:1] or "\0")
        raise PlanError(
            [Problem(filename, line, column, "", f"U+{code:04X}", f"a plan cannot contain the character U+{code:04X}")]
        ) from None
    except yaml.YAMLError as exc:
        raise PlanError([Problem(filename, 1, 1, "", "", f"YAML: {exc}")]) from None
    except RecursionError:
        raise PlanError([Problem(filename, 1, 1, "", "", "the plan is nested too deeply")]) from None
    finally:
        if loader is not None:
            loader.dispose()


def _flatten(errors: list[Any], prefix: tuple[Any, ...]) -> list[tuple[tuple[Any, ...], Finding | dict[str, Any]]]:
    """Expand located errors (Findings, nested pydantic errors) into (absolute loc, item) pairs."""
    out: list[tuple[tuple[Any, ...], Finding | dict[str, Any]]] = []
    for error in errors:
        if isinstance(error, Finding):
            out.append(((*prefix, *error.loc), error))
            continue
        loc = (*prefix, *error.get("loc", ()))
        if error.get("type") == LOCATED:
            out.extend(_flatten(error["ctx"]["findings"], loc))
        else:
            out.append((loc, error))
    return out


def _problem(tree: _Tree, root: Node, loc: tuple[Any, ...], error: Finding | dict[str, Any]) -> Problem:
    at_key = isinstance(error, Finding) and error.at == "key" or (
        isinstance(error, dict) and error.get("type") == "extra_forbidden"
    )
    node, present = _locate(tree, root, loc, at_key)
    given = tree.written(tree.values[loc]) if present and loc in tree.values else ""
    if isinstance(error, Finding):
        message = f"{given or '(value)'} {error.message}" if error.follows_value else error.message
    else:
        message = _describe(error, loc, given)
    line, column = (node.start_mark.line + 1, node.start_mark.column + 1)
    return Problem(tree.filename, line, column, dotted(loc), given, message)


def _locate(tree: _Tree, root: Node, loc: tuple[Any, ...], at_key: bool) -> tuple[Node, bool]:
    """The node to point at, and whether loc itself is written in the file."""
    if loc in tree.values:
        if at_key and loc in tree.keys:
            return tree.keys[loc], True
        node = tree.values[loc]
        if isinstance(node, (MappingNode, SequenceNode)) and not node.flow_style and loc in tree.keys:
            return tree.keys[loc], True  # a block collection: point at its key line
        return node, True
    for depth in range(len(loc) - 1, -1, -1):
        parent = loc[:depth]
        if parent in tree.values:
            if parent in tree.keys:
                return tree.keys[parent], False
            return tree.values[parent] if parent else root, False
    return root, False


def _describe(error: dict[str, Any], loc: tuple[Any, ...], given: str) -> str:
    """Turn one pydantic error into a sentence in the plan's terms."""
    kind = error.get("type", "")
    ctx = error.get("ctx") or {}
    shown = given or repr(error.get("input"))
    last = loc[-1] if loc else ""
    if kind == "missing":
        what = "section" if _model_at(loc) is not None else "key"
        return f"missing required {what} {last!r}"
    if kind == "extra_forbidden":
        allowed = _allowed_keys(loc[:-1])
        if not allowed:
            return f"unknown key {last!r}"
        close = difflib.get_close_matches(str(last), allowed, n=1)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        return f"unknown key {last!r} (expected one of: {', '.join(allowed)}){hint}"
    if error.get("input") is None and not given:
        return f"{last!r} has no value" if last != "" else "has no value"
    if kind == "value_error":
        exc = ctx.get("error")
        if isinstance(exc, QuantityError):
            return str(exc)
        if isinstance(exc, RuleError):
            return f"{shown} {exc.tail}"
        return str(exc) if exc is not None else error.get("msg", "")
    if kind == "literal_error":
        return f"{shown} is not one of {ctx.get('expected', '')}"
    if kind in {"int_type", "int_parsing", "int_from_float"}:
        return f"{shown} is not a whole number"
    if kind in {"float_type", "float_parsing"}:
        return f"{shown} is not a number"
    if kind in {"bool_type", "bool_parsing"}:
        return f"{shown} is not true or false"
    if kind == "string_type":
        return f"{shown} is not text (put it in quotes)"
    if kind in {"list_type", "tuple_type"}:
        return f"{shown} is not a list (expected e.g. [a, b])"
    if kind in {"dict_type", "model_type", "model_attributes_type"}:
        return f"{shown} is not a mapping (expected key: value pairs)"
    if kind == "too_short":
        return f"{shown} has too few entries (expected {ctx.get('min_length')})"
    if kind == "too_long":
        return f"{shown} has too many entries (expected {ctx.get('max_length')})"
    message = str(error.get("msg", "is not valid"))
    return f"{shown}: {message[:1].lower()}{message[1:]}"


def _allowed_keys(loc: tuple[Any, ...]) -> list[str]:
    """The YAML keys a mapping at loc takes, from the schema; [] when unknown."""
    model = _model_at(loc)
    if model is None:
        return []
    return [field.alias or name for name, field in model.model_fields.items()]


def _model_at(loc: tuple[Any, ...]) -> type[BaseModel] | None:
    current: Any = Plan
    parts = list(loc)
    while True:
        current = _unwrap(current)
        if isinstance(current, type) and issubclass(current, BaseModel):
            if not parts:
                return current
            part = parts.pop(0)
            field = next(
                (f for name, f in current.model_fields.items() if (f.alias or name) == part),
                None,
            )
            if field is None:
                return None
            current = field.annotation
            continue
        origin = typing.get_origin(current)
        if origin in (list, tuple) and parts and isinstance(parts[0], int):
            parts.pop(0)
            args = typing.get_args(current)
            current = args[0] if args else None
            continue
        if origin is dict and parts:
            parts.pop(0)
            current = typing.get_args(current)[1]
            continue
        return None


def _unwrap(annotation: Any) -> Any:
    """Strip Annotated and Optional from a type."""
    while True:
        origin = typing.get_origin(annotation)
        if origin is typing.Annotated:
            annotation = typing.get_args(annotation)[0]
        elif origin in (typing.Union, types.UnionType):
            members = [arg for arg in typing.get_args(annotation) if arg is not type(None)]
            if len(members) != 1:
                return annotation
            annotation = members[0]
        else:
            return annotation


def _sorted_unique(problems: list[Problem]) -> list[Problem]:
    seen: set[tuple[Any, ...]] = set()
    out = []
    for problem in sorted(problems, key=lambda p: (p.line, p.column, p.field)):
        key = (problem.line, problem.column, problem.field, problem.expected)
        if key not in seen:
            seen.add(key)
            out.append(problem)
    return out
