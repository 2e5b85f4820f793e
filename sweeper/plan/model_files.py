"""The files a plan's model names: a netlist (inline or a file) and a golden curve (CSV).

Read by the plan loader before validation, so that their problems come out located in the
file the user reads (an inline netlist in the plan's own lines and columns) and so that the
schema can check names that depend on them (bench.simulation.components of a netlist's
parts). The texts read are kept with their SHA-256 (`ModelFiles.archive`), so a run file
holds everything its model was built from, and re-reading a run's plan later uses the stored
texts, not whatever lies on disk then.
"""

from __future__ import annotations

import hashlib
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from yaml.nodes import ScalarNode

from sweeper.circuits.golden import GoldenCurve, GoldenError, read_golden_text
from sweeper.circuits.netlist.elements import Netlist
from sweeper.circuits.netlist.parse import NetlistError, parse_netlist
from sweeper.located import LocatedError, Problem, YamlTree, read_text_file

NETLIST, GOLDEN = "netlist", "golden"
FILE_MODELS = (NETLIST, GOLDEN)


@dataclass
class ModelFiles:
    """What the model's files gave: the parsed netlist or golden curve (None when absent or
    unusable; `failed` says the latter, its problems already reported) and the texts read."""

    netlist: Netlist | None = None
    golden: GoldenCurve | None = None
    failed: bool = False
    archive: dict[str, dict[str, str]] = field(default_factory=dict)  # name as written -> {sha256, text}


def read_model_files(data: Any, tree: YamlTree, base_dir: Path | None,
                     stored: Mapping[str, Any] | None = None) -> tuple[ModelFiles, list[Problem]]:
    """Read and parse the model files of a plan's plain data (as built by `tree`).

    base_dir: the folder file names are relative to (the plan's; the current one when None);
    stored: texts by name, as `ModelFiles.archive` keeps them, used instead of the disk.
    Returns what was read and the problems found (none when the model names no file).
    """
    found = ModelFiles()
    problems: list[Problem] = []
    model = data.get("model") if isinstance(data, dict) else None
    if not isinstance(model, dict):
        return found, problems
    circuit = model.get("circuit")
    try:
        if circuit == NETLIST:
            inline, name = model.get("netlist"), model.get("netlist_file")
            if isinstance(inline, str) and name is None:
                found.netlist = parse_netlist(inline, tree.filename, place=_inline_place(tree, ("model", "netlist")),
                                              loc_prefix=("model", "netlist"))
            elif isinstance(name, str) and inline is None and name.strip():
                text, shown = _file_text(name, ("model", "netlist_file"), tree, base_dir, stored, found)
                found.netlist = parse_netlist(text, shown)
        elif circuit == GOLDEN:
            spec = model.get("golden")
            name = spec.get("file") if isinstance(spec, dict) else None
            if isinstance(name, str) and name.strip():
                text, shown = _file_text(name, ("model", "golden", "file"), tree, base_dir, stored, found)
                found.golden = read_golden_text(text, shown)
    except (NetlistError, GoldenError, LocatedError) as exc:
        found.failed = True
        problems.extend(exc.problems)
    return found, problems


def _file_text(name: str, loc: tuple[str, ...], tree: YamlTree, base_dir: Path | None,
               stored: Mapping[str, Any] | None, found: ModelFiles) -> tuple[str, str]:
    """(text, name to show in problems) of a model file; LocatedError at the plan field if unreadable."""
    entry = (stored or {}).get(name)
    path = Path(name) if base_dir is None or Path(name).is_absolute() else base_dir / name
    shown = str(path)
    if isinstance(entry, Mapping) and isinstance(entry.get("text"), str):
        text = entry["text"]
    else:
        try:
            data, text = read_text_file(path, "model file")
        except LocatedError as exc:
            first = exc.problems[0]
            raise LocatedError([tree.at(loc, first.kind, f"{shown}: {first.text}")]) from None
        text = data.decode("utf-8-sig")
    found.archive[name] = {"sha256": hashlib.sha256(text.encode("utf-8")).hexdigest(), "text": text}
    return text, shown


def _inline_place(tree: YamlTree, loc: tuple[str, ...]):
    """Map (line, column) of an inline netlist's text to the plan file's (1-based).

    A literal block scalar (`netlist: |`) maps exactly: its text starts on the line after the
    indicator, indented by the block's indentation. Other styles map line 1 to where the value
    starts and later lines to that same line (write inline netlists as literal blocks).
    """
    node = tree.values.get(loc)
    if not isinstance(node, ScalarNode):
        return None
    start_line, start_column = node.start_mark.line, node.start_mark.column  # 0-based
    if node.style == "|":
        lines = tree.text.split("\n")
        indent = 0
        for line in lines[start_line + 1:]:
            if line.strip():
                indent = len(line) - len(line.lstrip(" "))
                break
        return lambda line, column: (start_line + 1 + line, indent + column)
    quote = 1 if node.style in ("'", '"') else 0
    return lambda line, column: ((start_line + 1, start_column + quote + column) if line == 1
                                 else (start_line + 1, start_column + 1))
