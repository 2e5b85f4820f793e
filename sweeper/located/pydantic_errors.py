"""Pydantic validation errors turned into located problems, in the terms of the user's file.

Errors are expanded (a LOCATED error carries Findings of cross-field rules), placed with the
YAML tree that was validated, and given a stable kind and a sentence. Keys are the file's
keys (field aliases), so an unknown key is answered with the keys that would be valid.
"""

from __future__ import annotations

import difflib
import types
import typing
from typing import Any

from pydantic import BaseModel

from sweeper.located.problem import Loc, Problem
from sweeper.located.rules import LOCATED, Finding, RuleError
from sweeper.located.yamltree import YamlTree

#: pydantic error types -> our stable problem kinds.
KINDS: dict[str, str] = {
    "missing": "missing",
    "extra_forbidden": "unknown_key",
    "literal_error": "not_one_of",
    "enum": "not_one_of",
    "int_type": "not_whole_number",
    "int_parsing": "not_whole_number",
    "int_from_float": "not_whole_number",
    "int_parsing_size": "out_of_range",
    "float_type": "not_a_number",
    "float_parsing": "not_a_number",
    "finite_number": "not_finite",
    "bool_type": "not_true_false",
    "bool_parsing": "not_true_false",
    "string_type": "not_text",
    "list_type": "not_a_list",
    "tuple_type": "not_a_list",
    "dict_type": "not_a_mapping",
    "model_type": "not_a_mapping",
    "model_attributes_type": "not_a_mapping",
    "too_short": "too_short",
    "too_long": "too_long",
    "greater_than": "out_of_range",
    "greater_than_equal": "out_of_range",
    "less_than": "out_of_range",
    "less_than_equal": "out_of_range",
}


def flatten(errors: list[Any], prefix: Loc = ()) -> list[tuple[Loc, Finding | dict[str, Any]]]:
    """Expand located errors (Findings, nested pydantic errors) into (absolute loc, item) pairs."""
    out: list[tuple[Loc, Finding | dict[str, Any]]] = []
    for error in errors:
        if isinstance(error, Finding):
            out.append(((*prefix, *error.loc), error))
            continue
        loc = (*prefix, *(part for part in error.get("loc", ()) if not _is_union_tag(part)))
        if error.get("type") == LOCATED:
            out.extend(flatten(error["ctx"]["findings"], loc))
        else:
            out.append((loc, error))
    return out


def _is_union_tag(part: object) -> bool:
    """pydantic puts a union member's name ('function-after[...]', 'list[str]') into loc."""
    return isinstance(part, str) and ("[" in part and part.endswith("]"))


def problems_from_errors(errors: list[Any], tree: YamlTree, root_model: type[BaseModel] | None) -> list[Problem]:
    """Every error as a located Problem (errors at paths already refused while reading are skipped)."""
    problems = []
    for loc, error in flatten(errors):
        if loc not in tree.broken:
            problems.append(problem_of(tree, loc, error, root_model))
    return problems


def problem_of(tree: YamlTree, loc: Loc, error: Finding | dict[str, Any],
               root_model: type[BaseModel] | None) -> Problem:
    """One error as a Problem placed in the tree."""
    at_key = (isinstance(error, Finding) and error.at == "key") or (
        isinstance(error, dict) and error.get("type") == "extra_forbidden"
    )
    node, present = tree.locate(loc, at_key)
    given = tree.written(tree.values[loc]) if present and loc in tree.values else ""
    if isinstance(error, Finding):
        message = f"{given or '(value)'} {error.message}" if error.follows_value else error.message
        kind, expected = error.kind, ""
    else:
        kind, message, expected = describe(error, loc, given, root_model)
    line, column = (node.start_mark.line + 1, node.start_mark.column + 1) if node is not None else (1, 1)
    return Problem(tree.filename, line, column, tuple(loc), kind, given, expected, message)


def describe(error: dict[str, Any], loc: Loc, given: str,
             root_model: type[BaseModel] | None) -> tuple[str, str, str]:
    """(kind, sentence, what was expected) of one pydantic error, in the file's terms."""
    kind = error.get("type", "")
    ours = KINDS.get(kind, "invalid")
    ctx = error.get("ctx") or {}
    shown = given or repr(error.get("input"))
    last = loc[-1] if loc else ""
    if kind == "missing":
        what = "section" if model_at(root_model, loc) is not None else "key"
        return ours, f"missing required {what} {last!r}", f"a {what} {last!r}"
    if kind == "extra_forbidden":
        allowed = allowed_keys(root_model, loc[:-1])
        if not allowed:
            return ours, f"unknown key {last!r}", "no key here"
        close = difflib.get_close_matches(str(last), allowed, n=1)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        expected = f"one of: {', '.join(allowed)}"
        return ours, f"unknown key {last!r} (expected {expected}){hint}", expected
    if error.get("input") is None and not given:
        return "no_value", (f"{last!r} has no value" if last != "" else "has no value"), "a value"
    if kind == "value_error":
        exc = ctx.get("error")
        if isinstance(exc, RuleError):
            return exc.kind, exc.sentence(shown), exc.tail
        text = str(exc) if exc is not None else str(error.get("msg", ""))
        return "invalid", text, text
    choices = str(ctx.get("expected", ""))
    simple: dict[str, tuple[str, str]] = {  # pydantic type -> (sentence after the value, what was expected)
        "literal_error": (f"is not one of {choices}", f"one of {choices}"),
        "enum": (f"is not one of {choices}", f"one of {choices}"),
        "int_type": ("is not a whole number", "a whole number"),
        "int_parsing": ("is not a whole number", "a whole number"),
        "int_from_float": ("is not a whole number", "a whole number"),
        "int_parsing_size": ("is too large for a whole number", "a whole number of a usable size"),
        "float_type": ("is not a number", "a number"),
        "float_parsing": ("is not a number", "a number"),
        "finite_number": ("is not a finite number", "a finite number"),
        "bool_type": ("is not true or false", "true or false"),
        "bool_parsing": ("is not true or false", "true or false"),
        "string_type": ("is not text (put it in quotes)", "text"),
        "list_type": ("is not a list (expected e.g. [a, b])", "a list"),
        "tuple_type": ("is not a list (expected e.g. [a, b])", "a list"),
        "dict_type": ("is not a mapping (expected key: value pairs)", "a mapping"),
        "model_type": ("is not a mapping (expected key: value pairs)", "a mapping"),
        "model_attributes_type": ("is not a mapping (expected key: value pairs)", "a mapping"),
        "too_short": (f"has too few entries (expected at least {ctx.get('min_length')})",
                      f"at least {ctx.get('min_length')} entries"),
        "too_long": (f"has too many entries (expected at most {ctx.get('max_length')})",
                     f"at most {ctx.get('max_length')} entries"),
        "greater_than": (f"must be above {_number(ctx.get('gt'))}", f"above {_number(ctx.get('gt'))}"),
        "greater_than_equal": (f"must be at least {_number(ctx.get('ge'))}", f"at least {_number(ctx.get('ge'))}"),
        "less_than": (f"must be below {_number(ctx.get('lt'))}", f"below {_number(ctx.get('lt'))}"),
        "less_than_equal": (f"must be at most {_number(ctx.get('le'))}", f"at most {_number(ctx.get('le'))}"),
    }
    if kind in simple:
        tail, expected = simple[kind]
        return ours, f"{shown} {tail}", expected
    message = str(error.get("msg", "is not valid"))
    for prefix in ("Value error, ", "Assertion failed, "):
        if message.startswith(prefix):
            message = message[len(prefix):]
    return ours, f"{shown}: {message[:1].lower()}{message[1:]}", message


def _number(value: object) -> str:
    """A bound as written in a sentence: 0.0 -> '0', 1e-06 -> '1e-06'."""
    return f"{value:g}" if isinstance(value, (int, float)) and not isinstance(value, bool) else str(value)


def allowed_keys(root_model: type[BaseModel] | None, loc: Loc) -> list[str]:
    """The keys a mapping at loc takes, from the schema; [] when unknown."""
    model = model_at(root_model, loc)
    if model is None:
        return []
    return [field.alias or name for name, field in model.model_fields.items()]


def model_at(root_model: type[BaseModel] | None, loc: Loc) -> type[BaseModel] | None:
    """The pydantic model that validates the mapping at loc, or None."""
    if root_model is None:
        return None
    current: Any = root_model
    parts = list(loc)
    while True:
        current = _unwrap(current)
        if isinstance(current, type) and issubclass(current, BaseModel):
            if not parts:
                return current
            part = parts.pop(0)
            field = next((f for name, f in current.model_fields.items() if (f.alias or name) == part), None)
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
