"""A located problem: where in a user's file something is wrong, what kind of wrong, what was
given and what was expected, and the one place where such problems are rendered as text.

Plans, driver files, station files and netlists all report through this shape, so a reader
(a person, a test, a program) meets one form everywhere::

    plan.yaml:14:5: sweep.stop: '10 kF' is not a frequency (expected Hz, e.g. '100 kHz')
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass

Loc = tuple[str | int, ...]


def dotted(loc: Iterable[str | int]) -> str:
    """('limits', 'masks', 0, 'to') -> 'limits.masks[0].to'; () -> ''."""
    out = ""
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += ("." if out else "") + str(part)
    return out


@dataclass(frozen=True)
class Problem:
    """One problem in a file, with its place.

    file: the file's name as the user gave it. line, column: 1-based (0 when the problem has no
    place in the text, e.g. a missing file). loc: the path of keys and list indices in the
    file's structure (a netlist uses (line number, element name)). kind: a stable name for
    programs and tests ('missing', 'unknown_key', 'bad_quantity', 'duplicate_key', ...).
    given: the value as written ('' when absent). expected: what would have been right.
    message: the sentence shown after the field; when empty it reads "given ...; expected ...".
    """

    file: str
    line: int
    column: int
    loc: Loc = ()
    kind: str = "invalid"
    given: str = ""
    expected: str = ""
    message: str = ""

    @property
    def field(self) -> str:
        """The dotted path of loc ("sweep.stop"); '' for a problem with the file as a whole."""
        return dotted(self.loc)

    @property
    def text(self) -> str:
        """The sentence after the field."""
        if self.message:
            return self.message
        if self.given and self.expected:
            return f"given {self.given}; expected {self.expected}"
        return self.expected or self.given or self.kind.replace("_", " ")

    def __str__(self) -> str:
        where = f"{self.file}:{self.line}:{self.column}" if self.line > 0 else self.file
        return f"{where}: {self.field}: {self.text}" if self.field else f"{where}: {self.text}"


class LocatedError(ValueError):
    """A file that cannot be used; carries every problem found, in file order."""

    def __init__(self, problems: Sequence[Problem]) -> None:
        self.problems = list(problems)
        super().__init__(self.problems)  # args hold the problems, so the error pickles intact

    def __str__(self) -> str:
        return "\n".join(str(problem) for problem in self.problems)

    @property
    def kinds(self) -> list[str]:
        """The kinds of the problems, in order (for programs and tests)."""
        return [problem.kind for problem in self.problems]


def sorted_unique(problems: Iterable[Problem]) -> list[Problem]:
    """Problems in file order, each reported once."""
    seen: set[tuple[object, ...]] = set()
    out = []
    for problem in sorted(problems, key=lambda p: (p.line, p.column, p.field)):
        key = (problem.line, problem.column, problem.field, problem.text)
        if key not in seen:
            seen.add(key)
            out.append(problem)
    return out


def file_problem(file: str, kind: str, message: str, given: str = "") -> Problem:
    """A problem with the file as a whole (no line: missing, unreadable, not UTF-8 ...)."""
    return Problem(file, 0, 0, (), kind, given, "", message)
