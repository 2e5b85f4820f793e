"""Located problems in the user's files: one shape (file, line, column, path, kind, given,
expected), one YAML reader that remembers where everything was written, one translator of
validation errors, one renderer. Used by plans, driver files, station files and netlists."""

from sweeper.located.problem import Loc, LocatedError, Problem, dotted, file_problem, sorted_unique
from sweeper.located.pydantic_errors import describe, problems_from_errors
from sweeper.located.rules import LOCATED, Finding, RuleError, raise_located
from sweeper.located.yamltree import YamlTree, load_yaml, read_text_file

__all__ = [
    "LOCATED",
    "Finding",
    "Loc",
    "LocatedError",
    "Problem",
    "RuleError",
    "YamlTree",
    "describe",
    "dotted",
    "file_problem",
    "load_yaml",
    "problems_from_errors",
    "raise_located",
    "read_text_file",
    "sorted_unique",
]
