"""YAML read safely into plain data, remembering where every key and value was written.

The text is composed into a node tree with yaml.SafeLoader (nothing is ever constructed from
tags or evaluated); plain data is built from the nodes here, so that every later problem can be
pointed at its line and column. Duplicate keys, unknown tags, self-references and alias bombs
are problems, not surprises. Used for plans, driver files and station files alike.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import yaml
from yaml.nodes import MappingNode, Node, ScalarNode, SequenceNode

from sweeper.located.problem import Loc, LocatedError, Problem, dotted, file_problem

MAX_NODES = 100_000  # a plan has a few hundred nodes; this stops alias bombs
MAX_DEPTH = 64

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
BOM = "\ufeff"


def read_text_file(path: str | Path, what: str = "file",
                   error: type[LocatedError] = LocatedError) -> tuple[bytes, str]:
    """(bytes as stored, text) of a UTF-8 file; `error` (a LocatedError) when it cannot be read.

    A leading byte-order mark is kept in the text (so the text hashes like the bytes);
    `compose` skips it. what: the noun used in messages ("plan file", "driver file").
    """
    try:
        return _read_text_file(path, what)
    except LocatedError as exc:
        raise error(exc.problems) from None


def _read_text_file(path: str | Path, what: str) -> tuple[bytes, str]:
    name = str(path)
    try:
        data = Path(path).read_bytes()
    except FileNotFoundError:
        raise LocatedError([file_problem(name, "file_missing", "no such file")]) from None
    except IsADirectoryError:
        raise LocatedError([file_problem(name, "not_a_file", f"is a directory, not a {what}")]) from None
    except OSError as exc:
        raise LocatedError([file_problem(name, "file_unreadable", f"cannot be read ({exc.strerror or exc})")]) from None
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        before = data[: exc.start]
        line = before.count(b"\n") + 1
        column = exc.start - (before.rfind(b"\n") + 1) + 1
        byte = data[exc.start : exc.start + 1].hex()
        message = f"the file is not UTF-8 text (byte 0x{byte} here); save it as UTF-8"
        raise LocatedError([Problem(name, line, column, (), "not_utf8", f"0x{byte}", "UTF-8 text", message)]) from None
    return data, text


class YamlTree:
    """Plain data built from one YAML document, with the node of every key and value by path."""

    def __init__(self, filename: str, text: str) -> None:
        self.filename = filename
        self.text = text[1:] if text.startswith(BOM) else text
        self.values: dict[Loc, Node] = {}
        self.keys: dict[Loc, Node] = {}
        self.problems: list[Problem] = []
        self.broken: set[Loc] = set()  # paths whose value was refused while reading
        self.root: Node | None = None
        self._count = 0
        self._constructor = yaml.SafeLoader("")  # scalars only: int, float, bool, null, timestamp

    # -- reading ------------------------------------------------------------------------

    def compose(self) -> Node | None:
        """The document's root node (None for an empty document); LocatedError for bad YAML."""
        loader = None
        problem = None
        try:
            loader = yaml.SafeLoader(self.text)
            self.root = loader.get_single_node()
            return self.root
        except yaml.MarkedYAMLError as exc:
            mark = exc.problem_mark or exc.context_mark
            line, column = (mark.line + 1, mark.column + 1) if mark is not None else (1, 1)
            message = exc.problem or exc.context or "not valid YAML"
            if exc.problem and exc.context and exc.context_mark is not None:
                started = exc.context_mark
                message += f" ({exc.context} at line {started.line + 1}, column {started.column + 1})"
            problem = Problem(self.filename, line, column, (), "yaml_syntax", "", "well-formed YAML",
                              f"YAML syntax: {message}")
        except yaml.reader.ReaderError as exc:
            before = self.text[: exc.position]
            line = before.count("\n") + 1
            column = exc.position - (before.rfind("\n") + 1) + 1
            code = exc.character if isinstance(exc.character, int) else ord(str(exc.character)[:1] or "\0")
            problem = Problem(self.filename, line, column, (), "bad_character", f"U+{code:04X}", "printable text",
                              f"the file cannot contain the character U+{code:04X}")
        except yaml.YAMLError as exc:
            problem = Problem(self.filename, 1, 1, (), "yaml_syntax", "", "well-formed YAML", f"YAML: {exc}")
        except RecursionError:
            problem = Problem(self.filename, 1, 1, (), "too_deep", "", "", "the file is nested too deeply")
        finally:
            if loader is not None:
                loader.dispose()
        raise LocatedError([problem])

    def build(self) -> Any:
        """Plain data of the composed document (problems met are kept in self.problems)."""
        if self.root is None:
            return None
        try:
            return self._build(self.root, (), 0, frozenset())
        except _TooBig:
            raise LocatedError([Problem(self.filename, 1, 1, (), "too_big", "", "",
                                        f"the file expands to more than {MAX_NODES} YAML nodes")]) from None
        except RecursionError:
            raise LocatedError([Problem(self.filename, 1, 1, (), "too_deep", "", "",
                                        "the file is nested too deeply")]) from None

    def problem(self, node: Node | None, path: Loc, kind: str, given: str, message: str) -> None:
        """Record a problem at a node met while reading."""
        line, column = (node.start_mark.line + 1, node.start_mark.column + 1) if node is not None else (1, 1)
        self.problems.append(Problem(self.filename, line, column, path, kind, given, "", message))

    def written(self, node: Node) -> str:
        """The node's text as written, on one line and short; unquoted text is shown in quotes."""
        text = self.text[node.start_mark.index : node.end_mark.index].strip()
        text = " ".join(text.split())
        text = text if len(text) <= 60 else text[:57] + "..."
        if isinstance(node, ScalarNode) and node.style is None and node.tag == "tag:yaml.org,2002:str":
            return repr(text)
        return text

    def _build(self, node: Node, path: Loc, depth: int, ancestors: frozenset[int]) -> Any:
        self._count += 1
        if self._count > MAX_NODES:
            raise _TooBig
        self.values[path] = node
        if depth > MAX_DEPTH or id(node) in ancestors:
            self.problem(node, path, "too_deep", self.written(node), "is nested too deeply (or refers to itself)")
            return None
        ancestors = ancestors | {id(node)}
        if isinstance(node, ScalarNode):
            return self._scalar(node, path)
        if isinstance(node, SequenceNode):
            if node.tag != _SEQ:
                self._bad_tag(node, path)
            return [self._build(item, (*path, index), depth + 1, ancestors) for index, item in enumerate(node.value)]
        if isinstance(node, MappingNode):
            if node.tag != _MAP:
                self._bad_tag(node, path)
            return self._mapping(node, path, depth, ancestors)
        self.problem(node, path, "invalid", "", "is not a YAML value")
        return None

    def _bad_tag(self, node: Node, path: Loc) -> None:
        self.problem(node, path, "unsupported_tag", self.written(node), f"YAML tag {node.tag!r} is not supported here")
        self.broken.add(path)

    def _scalar(self, node: ScalarNode, path: Loc) -> Any:
        if node.tag == _VALUE:
            return node.value  # a lone "=" (YAML 1.1 value key): plain text to us
        if node.tag not in _SCALAR_TAGS:
            self._bad_tag(node, path)
            return node.value
        if self._unpaired_surrogate(node, path, node.value):
            return ""
        try:
            return self._constructor.construct_object(node)
        except (yaml.YAMLError, ValueError, OverflowError) as exc:
            self.problem(node, path, "bad_yaml_value", self.written(node), f"is not a valid YAML value ({exc})")
            self.broken.add(path)
            return node.value

    def _unpaired_surrogate(self, node: Node, path: Loc, text: str) -> bool:
        """Refuse text holding an unpaired UTF-16 surrogate (a "\\ud800" escape): it is no character,
        cannot be stored as UTF-8 nor printed. True when refused (a problem recorded)."""
        for position, char in enumerate(text):
            if 0xD800 <= ord(char) <= 0xDFFF:
                self.problem(node, path, "bad_character", f"U+{ord(char):04X}", f"holds U+{ord(char):04X} at "
                             f"position {position + 1}, an unpaired surrogate that is not a character")
                self.broken.add(path)
                return True
        return False

    def _mapping(self, node: MappingNode, path: Loc, depth: int, ancestors: frozenset[int]) -> dict:
        explicit: list[tuple[Node, Node]] = []
        merged: list[tuple[Node, Node]] = []
        for key_node, value_node in node.value:
            if isinstance(key_node, ScalarNode) and key_node.tag == _MERGE:
                merged.extend(self._merge_sources(value_node, path))
            else:
                explicit.append((key_node, value_node))
        result: dict[str, Any] = {}
        first_seen: dict[str, Node] = {}
        for key_node, _value_node in explicit:
            if not isinstance(key_node, ScalarNode):
                self.problem(key_node, path, "key_not_text", self.written(key_node), "a key must be plain text")
                continue
            key = key_node.value
            if self._unpaired_surrogate(key_node, path, key):
                continue
            if key in first_seen:
                first = first_seen[key].start_mark
                self.problem(key_node, (*path, key), "duplicate_key", key,
                             f"duplicate key {key!r} (first at line {first.line + 1}, column {first.column + 1})")
                continue
            first_seen[key] = key_node
        for key_node, _value_node in merged:
            if isinstance(key_node, ScalarNode) and key_node.value not in first_seen:
                first_seen[key_node.value] = key_node  # the first merged mapping wins, explicit keys win over all
        for key_node, value_node in merged + explicit:
            if not isinstance(key_node, ScalarNode):
                continue
            key = key_node.value
            if first_seen.get(key) is not key_node:
                continue  # a later duplicate, or a merged key overridden by an explicit one
            self.keys[(*path, key)] = key_node
            result[key] = self._build(value_node, (*path, key), depth + 1, ancestors)
        return result

    def _merge_sources(self, value_node: Node, path: Loc) -> list[tuple[Node, Node]]:
        sources = value_node.value if isinstance(value_node, SequenceNode) else [value_node]
        pairs: list[tuple[Node, Node]] = []
        for source in sources:
            if not isinstance(source, MappingNode):
                self.problem(source, path, "bad_merge", self.written(source), "a merge key '<<' needs a mapping")
                continue
            pairs.extend(source.value)
        return pairs

    # -- pointing -----------------------------------------------------------------------

    def locate(self, loc: Loc, at_key: bool = False) -> tuple[Node | None, bool]:
        """The node to point at for loc, and whether loc itself is written in the file.

        A block mapping or list is pointed at by its key line; a path that is not written (a
        missing key) by the key of its nearest written parent.
        """
        if loc in self.values:
            if at_key and loc in self.keys:
                return self.keys[loc], True
            node = self.values[loc]
            if isinstance(node, (MappingNode, SequenceNode)) and not node.flow_style and loc in self.keys:
                return self.keys[loc], True
            return node, True
        for depth in range(len(loc) - 1, -1, -1):
            parent = loc[:depth]
            if parent in self.values:
                if parent in self.keys:
                    return self.keys[parent], False
                return self.values[parent] if parent else self.root, False
        return self.root, False

    def position(self, loc: Loc, at_key: bool = False) -> tuple[int, int]:
        """1-based (line, column) to report a problem at loc; (1, 1) when nothing is known."""
        node, _ = self.locate(loc, at_key)
        if node is None:
            return 1, 1
        return node.start_mark.line + 1, node.start_mark.column + 1

    def at(self, loc: Loc, kind: str, message: str, given: str | None = None, expected: str = "",
           at_key: bool = False) -> Problem:
        """A Problem at loc (given defaults to the text written there, if any)."""
        node, present = self.locate(loc, at_key)
        if given is None:
            given = self.written(self.values[loc]) if present and loc in self.values else ""
        line, column = (node.start_mark.line + 1, node.start_mark.column + 1) if node is not None else (1, 1)
        return Problem(self.filename, line, column, tuple(loc), kind, given, expected, message)

    def locations(self) -> dict[str, tuple[int, int]]:
        """(line, column) of every written path, by dotted name (for checks made later)."""
        out = {}
        for path in self.values:
            if path:
                out[dotted(path)] = self.position(path)
        return out


class _TooBig(Exception):
    pass


def load_yaml(text: str, filename: str) -> tuple[YamlTree, Any]:
    """Compose and build a document: (tree, plain data); LocatedError for unreadable YAML.

    Problems met while building (duplicate keys, tags) are left in tree.problems for the
    caller to report together with its own.
    """
    tree = YamlTree(filename, text)
    tree.compose()
    return tree, tree.build()
