"""Read a netlist: a subset of the SPICE element-line format, with every problem located.

The subset (one element or directive per line; `*` starts a comment line, `;` a comment to the
end of the line; a line starting with `+` continues the one before; names and nodes are not
case-sensitive; node 0, or gnd, is ground)::

    R<name> <n+> <n-> <value> [tol=<percent>]      resistor, Ohm
    C<name> <n+> <n-> <value> [tol=<percent>]      capacitor, F
    L<name> <n+> <n-> <value> [tol=<percent>]      inductor, H
    V<name> <n+> 0 [AC 1]                          the bench's source: n+ is the input node
    E<name> <n+> <n-> <c+> <c-> <gain>             voltage-controlled voltage source
    X<name> <in+> <in-> <out> opamp [a0=<gain>] [gbw=<Hz>] [rout=<Ohm>]
                                                   op-amp: ideal without parameters, else
                                                   single-pole (sweeper.circuits.netlist.elements.OpAmp)
    X<name> <node>... <subcircuit>                 an instance of a .subckt
    .subckt <name> <port>... / .ends [<name>]      a subcircuit definition (no parameters)
    .input <node>                                  the node the bench drives (or a V element)
    .output <node>                                 the node whose voltage is measured
    .end                                           optional; nothing after it is read

Our extensions to SPICE are the tolerance per part (`tol=1%`), the built-in `opamp` and the
`.input` / `.output` lines. Values are SPICE numbers (`sweeper.circuits.netlist.values`).
The first line is an ordinary line, not a title: start a title with `*`.

Every problem is a `sweeper.located.Problem` with the file, line and column the user reads:
a netlist written inside a plan reports lines of the plan file (the caller passes `place`,
which maps a line and column of the netlist text to the file's). Problem kinds:
unknown_element, unknown_directive, bad_syntax, wrong_node_count, bad_value,
unknown_parameter, duplicate_element, duplicate_source, bad_source, unknown_subcircuit,
recursive_subcircuit, unterminated_subcircuit, misplaced_directive, missing_input,
missing_output, bad_output, dangling_node, floating_node, singular_circuit.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

from sweeper.circuits.netlist.elements import (
    CAPACITOR,
    GROUND,
    GROUND_ALIASES,
    INDUCTOR,
    OPAMP,
    PART_KINDS,
    RESISTOR,
    SOURCE,
    VCVS,
    Element,
    Netlist,
    OpAmp,
)
from sweeper.circuits.netlist.values import ValueProblem, parse_gain, parse_tolerance, parse_value
from sweeper.located import LocatedError, Loc, Problem

Place = Callable[[int, int], tuple[int, int]]
"""(line, column) in the netlist text, 1-based -> (line, column) in the file the user reads."""

SUPPORTED = "R, C, L, V, E or X"
DIRECTIVES = (".input", ".output", ".subckt", ".ends", ".end", ".title")
MAX_DEPTH = 16  # subcircuits nested deeper than this are refused (a cycle is caught sooner)
OPAMP_PARAMETERS = ("a0", "gbw", "rout")


class NetlistError(LocatedError):
    """A netlist that cannot be used; carries every problem found, in file order."""


@dataclass(frozen=True)
class _Token:
    text: str
    line: int  # in the netlist text, 1-based
    column: int


@dataclass
class _Line:
    tokens: list[_Token]

    @property
    def head(self) -> _Token:
        return self.tokens[0]


@dataclass
class _Raw:
    """An element line read once (a subcircuit's lines are read once, however often it is used)."""

    name: str
    kind: str  # R C L V E X
    nodes: list[_Token]
    value: float = 0.0
    tolerance_frac: float = 0.0
    opamp: OpAmp | None = None
    subcircuit: str = ""  # X: the subcircuit's name, lower case ("opamp" for the built-in)
    token: _Token = field(default_factory=lambda: _Token("", 0, 0))


@dataclass
class _Subcircuit:
    name: str
    ports: list[_Token]
    lines: list[_Line]
    token: _Token


class _Reader:
    def __init__(self, text: str, file: str, place: Place | None, loc_prefix: Loc) -> None:
        self.text = text
        self.file = file
        self.place = place or (lambda line, column: (line, column))
        self.loc_prefix = tuple(loc_prefix)
        self.problems: list[Problem] = []

    # -- reporting ---------------------------------------------------------------------

    def problem(self, token: _Token | None, kind: str, what: str, message: str, given: str | None = None,
                expected: str = "") -> None:
        line, column = self.place(token.line, token.column) if token is not None else self.place(1, 1)
        shown = given if given is not None else (repr(token.text) if token is not None else "")
        loc = self.loc(what)
        self.problems.append(Problem(self.file, line, column, loc, kind, shown, expected, message))

    def loc(self, what: str) -> Loc:
        """The problem's loc: the prefix, then the element or directive ('.output' reads 'output'
        after a prefix, so that the dotted field stays 'model.netlist.output')."""
        if not what:
            return self.loc_prefix
        return (*self.loc_prefix, what.lstrip(".") if self.loc_prefix else what)

    # -- lines ---------------------------------------------------------------------------

    def logical_lines(self) -> list[_Line]:
        lines: list[_Line] = []
        for number, raw in enumerate(self.text.split("\n"), start=1):
            raw = raw.rstrip("\r")
            stripped = raw.lstrip()
            if not stripped or stripped.startswith("*"):
                continue
            cut = _comment_start(raw)
            tokens = _tokens(raw[:cut], number)
            if not tokens:
                continue
            if tokens[0].text.startswith("+"):
                first = tokens[0]
                rest = [_Token(first.text[1:], first.line, first.column + 1)] if len(first.text) > 1 else []
                if not lines:
                    self.problem(first, "bad_syntax", "", "a continuation line (+) needs a line before it")
                    continue
                lines[-1].tokens.extend(rest + tokens[1:])
                continue
            lines.append(_Line(tokens))
        return lines


def _comment_start(line: str) -> int:
    """Index where an inline comment starts (';', or '$' after a blank), else len(line)."""
    cut = len(line)
    semicolon = line.find(";")
    if semicolon >= 0:
        cut = semicolon
    for i, char in enumerate(line[:cut]):
        if char == "$" and (i == 0 or line[i - 1] in " \t"):
            return i
    return cut


def _tokens(line: str, number: int) -> list[_Token]:
    """Whitespace-separated tokens; 'k = v', 'k= v' and 'k =v' become one token 'k=v'."""
    out: list[_Token] = []
    i = 0
    raw: list[_Token] = []
    while i < len(line):
        if line[i] in " \t,()":
            i += 1
            continue
        start = i
        while i < len(line) and line[i] not in " \t,()":
            i += 1
        raw.append(_Token(line[start:i], number, start + 1))
    for token in raw:
        if out and (token.text.startswith("=") or out[-1].text.endswith("=")):
            previous = out.pop()
            out.append(_Token(previous.text + token.text, previous.line, previous.column))
        else:
            out.append(token)
    return out


def _node(token: _Token) -> str:
    name = token.text.lower()
    return GROUND if name in GROUND_ALIASES else name


def parse_netlist(text: str, file: str = "<netlist>", *, place: Place | None = None, loc_prefix: Loc = (),
                  check_solvable: bool = True) -> Netlist:
    """Parse and check a netlist (module docstring); NetlistError listing every problem.

    file: the name shown in problems; place: maps netlist (line, column) to the file's (for a
    netlist inside a plan); loc_prefix: the problems' loc starts with it (e.g. ("model",
    "netlist")). check_solvable: also refuse a circuit whose equations have no unique solution
    (checked numerically at the nominal values).
    """
    reader = _Reader(text, file, place, loc_prefix)
    top, subcircuits, directives = _structure(reader, reader.logical_lines())
    raws = {id(line): _read_element(reader, line, subcircuits) for line in _all_lines(top, subcircuits)}
    elements: list[Element] = []
    _flatten(reader, top, raws, subcircuits, "", {}, elements, [])
    netlist = _finish(reader, elements, directives)
    if netlist is not None and check_solvable and not reader.problems:
        from sweeper.circuits.netlist.mna import singular_problem  # numerics on the finished netlist

        message = singular_problem(netlist)
        if message:
            line, column = (netlist.output_line, 1) if netlist.output_line else reader.place(1, 1)
            reader.problems.append(Problem(file, line, column, reader.loc(".output"), "singular_circuit",
                                           "", "a circuit with one solution", message))
    if reader.problems or netlist is None:
        raise NetlistError(sorted(reader.problems, key=lambda p: (p.line, p.column)))
    return netlist


def _all_lines(top: list[_Line], subcircuits: dict[str, _Subcircuit]) -> list[_Line]:
    return top + [line for sub in subcircuits.values() for line in sub.lines]


def _structure(reader: _Reader, lines: list[_Line]) -> tuple[list[_Line], dict[str, _Subcircuit], dict[str, _Token]]:
    """Split into top-level element lines, subcircuit definitions and the .input/.output nodes."""
    top: list[_Line] = []
    subcircuits: dict[str, _Subcircuit] = {}
    directives: dict[str, Any] = {}
    current: _Subcircuit | None = None
    for line in lines:
        head = line.head
        word = head.text.lower()
        if not word.startswith("."):
            (current.lines if current is not None else top).append(line)
            continue
        args = line.tokens[1:]
        if word == ".end":
            break
        if word == ".title":
            continue
        if word == ".subckt":
            if current is not None:
                reader.problem(head, "misplaced_directive", ".subckt",
                               f"a .subckt inside .subckt {current.name!r} (definitions cannot be nested; "
                               "close it with .ends first)")
                continue
            if not args:
                reader.problem(head, "bad_syntax", ".subckt", "expected .subckt <name> <port>...")
                continue
            name = args[0].text.lower()
            if name in subcircuits or name == OPAMP:
                reader.problem(args[0], "duplicate_element", ".subckt",
                               f"subcircuit {args[0].text!r} is defined twice"
                               + (" (opamp is built in)" if name == OPAMP else ""))
            current = _Subcircuit(name, args[1:], [], args[0])
            for port in args[1:]:
                if "=" in port.text:
                    reader.problem(port, "unknown_parameter", ".subckt",
                                   "subcircuit parameters are not supported (expected port nodes only)")
            continue
        if word == ".ends":
            if current is None:
                reader.problem(head, "misplaced_directive", ".ends", "an .ends without a .subckt before it")
            else:
                if args and args[0].text.lower() != current.name:
                    reader.problem(args[0], "bad_syntax", ".ends",
                                   f"closes {args[0].text!r}, but the open subcircuit is {current.token.text!r}")
                if current.name not in subcircuits:
                    subcircuits[current.name] = current
                current = None
            continue
        if word in (".input", ".output"):
            if current is not None:
                reader.problem(head, "misplaced_directive", word, f"{word} belongs outside subcircuits")
                continue
            if len(args) != 1:
                reader.problem(head, "bad_syntax", word, f"expected {word} <node> (one node)")
                continue
            if word in directives:
                reader.problem(head, "duplicate_element", word, f"{word} is given twice")
                continue
            directives[word] = args[0]
            continue
        reader.problem(head, "unknown_directive", head.text,
                       f"{head.text} is not supported here (expected one of: {', '.join(DIRECTIVES)})")
    if current is not None:
        reader.problem(current.token, "unterminated_subcircuit", ".subckt",
                       f"subcircuit {current.token.text!r} has no .ends")
        subcircuits.setdefault(current.name, current)
    return top, subcircuits, directives


def _read_element(reader: _Reader, line: _Line, subcircuits: dict[str, _Subcircuit]) -> _Raw | None:
    """One element line, or None (problems recorded)."""
    head = line.head
    name = head.text
    letter = name[0].upper()
    args = line.tokens[1:]
    positional = [t for t in args if "=" not in t.text]
    keyed = [t for t in args if "=" in t.text]
    if letter in PART_KINDS:
        return _read_part(reader, head, letter, positional, keyed)
    if letter == SOURCE:
        return _read_source(reader, head, positional, keyed)
    if letter == VCVS:
        if len(positional) != 5 or keyed:
            reader.problem(head, "wrong_node_count", name,
                           f"expected {name} <n+> <n-> <c+> <c-> <gain> (a voltage-controlled voltage source)",
                           given=" ".join(t.text for t in line.tokens))
            return None
        try:
            gain = parse_value(positional[4].text, "number")
        except ValueProblem as exc:
            reader.problem(positional[4], "bad_value", name, f"{positional[4].text!r} {exc}")
            return None
        if gain == 0:
            reader.problem(positional[4], "bad_value", name, "a gain of 0 leaves its output undriven")
            return None
        return _Raw(name, VCVS, positional[:4], value=gain, token=head)
    if letter == "X":
        return _read_instance(reader, head, positional, keyed, subcircuits)
    hint = " (a SPICE title line? start it with '*')" if len(line.tokens) > 1 and not any(
        c.isdigit() for c in "".join(t.text for t in line.tokens[1:3])) else ""
    reader.problem(head, "unknown_element", name,
                   f"{name!r} is not an element this netlist reader knows (names start with {SUPPORTED}){hint}")
    return None


def _read_part(reader: _Reader, head: _Token, letter: str, positional: list[_Token], keyed: list[_Token]) -> _Raw | None:
    name = head.text
    kind = PART_KINDS[letter]
    if len(positional) != 3:
        reader.problem(head, "wrong_node_count", name, f"expected {name} <n+> <n-> <value> [tol=<percent>]",
                       given=" ".join(t.text for t in [head, *positional, *keyed]))
        return None
    token = positional[2]
    ok = True
    try:
        value = parse_value(token.text, kind)
        if not value > 0:
            raise ValueProblem(f"must be above 0 (expected {kind} > 0)")
    except ValueProblem as exc:
        reader.problem(token, "bad_value", name, f"{token.text!r} {exc}")
        value, ok = 1.0, False
    tolerance = 0.0
    for item in keyed:
        key, _, text = item.text.partition("=")
        if key.lower() != "tol":
            reader.problem(item, "unknown_parameter", name, f"unknown parameter {key!r} (expected tol=<percent>)")
            ok = False
            continue
        try:
            tolerance = parse_tolerance(text)
        except ValueProblem as exc:
            reader.problem(item, "bad_value", name, f"{text!r} {exc}")
            ok = False
    if positional[0].text.lower() == positional[1].text.lower():
        reader.problem(head, "bad_syntax", name, f"both ends on node {positional[0].text!r} (shorted)")
        ok = False
    return _Raw(name, letter, positional[:2], value=value, tolerance_frac=tolerance, token=head) if ok else None


def _read_source(reader: _Reader, head: _Token, positional: list[_Token], keyed: list[_Token]) -> _Raw | None:
    name = head.text
    if len(positional) < 2 or keyed:
        reader.problem(head, "wrong_node_count", name, f"expected {name} <input node> 0 [AC 1]")
        return None
    rest = [t.text.lower() for t in positional[2:]]
    for t in positional[2:]:
        if t.text.lower() in ("ac", "dc"):
            continue
        try:
            parse_value(t.text, "number")
        except ValueProblem:
            reader.problem(t, "bad_syntax", name, f"{t.text!r}: expected {name} <input node> 0 [AC 1] [DC 0]")
            return None
    if rest and rest[0] not in ("ac", "dc"):
        reader.problem(positional[2], "bad_syntax", name, f"expected {name} <input node> 0 [AC 1] [DC 0]")
        return None
    if _node(positional[1]) != GROUND:
        reader.problem(positional[1], "bad_source", name,
                       "the source's second node must be ground (0): the bench drives the input node against ground")
        return None
    return _Raw(name, SOURCE, positional[:2], token=head)


def _read_instance(reader: _Reader, head: _Token, positional: list[_Token], keyed: list[_Token],
                   subcircuits: dict[str, _Subcircuit]) -> _Raw | None:
    name = head.text
    if not positional:
        reader.problem(head, "wrong_node_count", name, f"expected {name} <node>... <subcircuit>")
        return None
    sub = positional[-1].text.lower()
    nodes = positional[:-1]
    if sub == OPAMP:
        if len(nodes) != 3:
            reader.problem(head, "wrong_node_count", name,
                           f"expected {name} <in+> <in-> <out> opamp [a0=...] [gbw=...] [rout=...]",
                           given=" ".join(t.text for t in [head, *positional]))
            return None
        params: dict[str, float] = {}
        for item in keyed:
            key, _, text = item.text.partition("=")
            key = key.lower()
            try:
                if key == "a0":
                    params[key] = parse_gain(text)
                elif key == "gbw":
                    params[key] = parse_value(text, "frequency")
                elif key == "rout":
                    params[key] = parse_value(text, "resistance")
                else:
                    reader.problem(item, "unknown_parameter", name,
                                   f"unknown op-amp parameter {key!r} (expected {', '.join(OPAMP_PARAMETERS)})")
                    return None
            except ValueProblem as exc:
                reader.problem(item, "bad_value", name, f"{text!r} {exc}")
                return None
            if not (params[key] > 0 or (key == "rout" and params[key] == 0)):
                reader.problem(item, "bad_value", name, f"{key} must be above 0" + (" (or 0)" if key == "rout" else ""))
                return None
        opamp = OpAmp(params.get("a0", math.inf), params.get("gbw", math.inf), params.get("rout", 0.0))
        return _Raw(name, OPAMP, nodes, opamp=opamp, subcircuit=OPAMP, token=head)
    if keyed:
        reader.problem(keyed[0], "unknown_parameter", name, "subcircuit parameters are not supported")
        return None
    if sub not in subcircuits:
        known = ", ".join(["opamp", *(s.token.text for s in subcircuits.values())])
        reader.problem(positional[-1], "unknown_subcircuit", name,
                       f"no subcircuit {positional[-1].text!r} (expected one of: {known})")
        return None
    definition = subcircuits[sub]
    if len(nodes) != len(definition.ports):
        reader.problem(head, "wrong_node_count", name,
                       f"{len(nodes)} node(s) for subcircuit {definition.token.text!r}, which has "
                       f"{len(definition.ports)} port(s)")
        return None
    return _Raw(name, "X", nodes, subcircuit=sub, token=head)


def _flatten(reader: _Reader, lines: Sequence[_Line], raws: dict[int, _Raw | None],
             subcircuits: dict[str, _Subcircuit], prefix: str, ports: dict[str, str],
             out: list[Element], stack: list[str]) -> None:
    """Append the elements of `lines`, instance prefix and port mapping applied, recursively."""

    def mapped(token: _Token) -> str:
        node = _node(token)
        if node == GROUND:
            return GROUND
        if node in ports:
            return ports[node]
        return f"{prefix}{node}" if prefix else node

    for line in lines:
        raw = raws.get(id(line))
        if raw is None:
            continue
        name = f"{prefix}{raw.name}"
        nodes = tuple(mapped(t) for t in raw.nodes)
        place = reader.place(raw.token.line, raw.token.column)
        if raw.kind == "X":
            if raw.subcircuit in stack or len(stack) >= MAX_DEPTH:
                reader.problem(raw.token, "recursive_subcircuit", name,
                               f"subcircuit {raw.subcircuit!r} uses itself (through {' > '.join(stack)})")
                continue
            definition = subcircuits[raw.subcircuit]
            inner = {_node(p): n for p, n in zip(definition.ports, nodes)}
            _flatten(reader, definition.lines, raws, subcircuits, f"{name}.", inner, out, [*stack, raw.subcircuit])
            continue
        out.append(Element(name, raw.kind, nodes, raw.value, raw.tolerance_frac, raw.opamp, place[0], place[1]))


def _finish(reader: _Reader, elements: list[Element], directives: dict[str, _Token]) -> Netlist | None:
    """Whole-circuit checks: names, source, input, output, dangling and floating nodes."""
    seen: dict[str, Element] = {}
    for element in elements:
        key = element.name.lower()
        if key in seen:
            first = seen[key]
            _at(reader, element, "duplicate_element",
                f"{element.name!r} is defined twice (first at line {first.line}); names are not case-sensitive")
        else:
            seen[key] = element
    sources = [e for e in elements if e.kind == SOURCE]
    for extra in sources[1:]:
        _at(reader, extra, "duplicate_source", f"a second source {extra.name!r}: the bench drives one input")
    input_token = directives.get(".input")
    output_token = directives.get(".output")
    spelling: dict[str, str] = {}
    for element in elements:
        for node in element.nodes:
            spelling.setdefault(node, node)
    nodes = {n for e in elements for n in e.nodes} - {GROUND}
    input_node, input_line = "", 0
    if input_token is not None:
        input_node = _node(input_token)
        input_line = reader.place(input_token.line, input_token.column)[0]
        if input_node not in nodes:
            reader.problem(input_token, "missing_input", ".input", f"no element is connected to node {input_token.text!r}")
            input_node = ""
        if sources and input_node and sources[0].nodes[0] != input_node:
            _at(reader, sources[0], "bad_source", f"drives node {sources[0].nodes[0]!r}, but .input names "
                f"{input_token.text!r}: give one of them, or the same node")
    elif sources:
        input_node, input_line = sources[0].nodes[0], sources[0].line
    else:
        reader.problem(None, "missing_input", ".input",
                       "no input: add a line '.input <node>' (or a source 'V1 <node> 0 AC 1')", given="")
    if input_node == GROUND and input_token is not None:
        reader.problem(input_token, "missing_input", ".input", "the input cannot be ground")
        input_node = ""
    output_node, output_line = "", 0
    if output_token is None:
        reader.problem(None, "missing_output", ".output",
                       "no output: add a line '.output <node>' naming the node whose voltage is measured", given="")
    else:
        output_node = _node(output_token)
        output_line = reader.place(output_token.line, output_token.column)[0]
        if output_node == GROUND:
            reader.problem(output_token, "bad_output", ".output", "the output cannot be ground")
            output_node = ""
        elif output_node not in nodes:
            reader.problem(output_token, "missing_output", ".output",
                           f"no element is connected to the output node {output_token.text!r}")
            output_node = ""
        elif output_node == input_node:
            reader.problem(output_token, "bad_output", ".output", "the output node is the input node")
            output_node = ""
    circuit = [e for e in elements if e.kind != SOURCE]
    if not [e for e in circuit if e.kind != SOURCE]:
        reader.problem(None, "missing_output", "", "the netlist has no elements", given="")
        return None
    for element in circuit:
        if element.kind in (VCVS, OPAMP) and input_node and element.nodes[-1 if element.kind == OPAMP else 0] == input_node:
            _at(reader, element, "bad_output", f"{element.name} drives the input node, which the bench drives")
    _dangling(reader, circuit, {input_node, output_node})
    _floating(reader, circuit, input_node)
    if not (input_node and output_node):
        return None
    return Netlist(tuple(circuit), input_node, output_node, reader.file, input_line, output_line, spelling)


def _at(reader: _Reader, element: Element, kind: str, message: str) -> None:
    reader.problems.append(Problem(reader.file, element.line, element.column, (*reader.loc_prefix, element.name),
                                   kind, repr(element.name), "", message))


def _dangling(reader: _Reader, elements: list[Element], bench_nodes: set[str]) -> None:
    """A node touched by one element terminal only (the bench's input and output count as one)."""
    count: dict[str, int] = {}
    first: dict[str, Element] = {}
    for element in elements:
        for node in element.nodes:
            count[node] = count.get(node, 0) + 1
            first.setdefault(node, element)
    for node, n in count.items():
        if node != GROUND and n + (1 if node in bench_nodes else 0) < 2:
            _at(reader, first[node], "dangling_node",
                f"node {node!r} of {first[node].name} connects to nothing else (a typo in a node name?)")


def _floating(reader: _Reader, elements: list[Element], input_node: str) -> None:
    """A node with no conducting path (through any element, capacitors included) to ground or the
    input: its voltage is undefined. Controlled-source and op-amp inputs only sense; outputs of
    op-amps are ground-referenced."""
    parent: dict[str, str] = {}

    def root(node: str) -> str:
        parent.setdefault(node, node)
        while parent[node] != node:
            parent[node] = parent[parent[node]]
            node = parent[node]
        return node

    def join(a: str, b: str) -> None:
        parent[root(a)] = root(b)

    if input_node:
        join(input_node, GROUND)
    for element in elements:
        for node in element.nodes:
            root(node)
        if element.kind in (RESISTOR, CAPACITOR, INDUCTOR):
            join(element.nodes[0], element.nodes[1])
        elif element.kind == VCVS:
            join(element.nodes[0], element.nodes[1])
        elif element.kind == OPAMP:
            join(element.nodes[2], GROUND)
    reported: set[str] = set()
    ground = root(GROUND)
    for element in elements:
        for node in element.nodes:
            if node != GROUND and root(node) != ground and root(node) not in reported:
                reported.add(root(node))
                _at(reader, element, "floating_node",
                    f"node {node!r} of {element.name} has no path to ground or the input: its voltage is undefined")
