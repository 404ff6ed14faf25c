"""YAML with positions: every value remembers its file, line and field path.

The loaders for specs, design files, stock lists and the transistor catalog read their
files through :func:`load_yaml` and a :class:`Reader`, which collects every problem it
finds (unknown key with a "did you mean", wrong type, missing field, bad value) instead of
stopping at the first, and raises them all together as one
:class:`~optimizer.errors.FileProblems`.
"""

from __future__ import annotations

import difflib
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, TypeVar

import yaml

from ..errors import FileProblems, InputError, Problem, ValueSyntaxError, display_path

__all__ = ["Node", "Reader", "load_yaml", "load_yaml_text"]

T = TypeVar("T")


@dataclass
class Node:
    """One YAML value with its position.

    ``value`` is a ``dict[str, Node]`` for a mapping, a ``list[Node]`` for a sequence and a
    plain Python scalar (str, int, float, bool, None) otherwise. ``line`` is 1-based.
    """

    value: Any
    line: int
    path: str
    key_lines: dict[str, int] = field(default_factory=dict)

    @property
    def is_map(self) -> bool:
        return isinstance(self.value, dict)

    @property
    def is_list(self) -> bool:
        return isinstance(self.value, list)

    def plain(self) -> Any:
        """The value with positions stripped (for echoing back in messages)."""
        if self.is_map:
            return {k: v.plain() for k, v in self.value.items()}
        if self.is_list:
            return [v.plain() for v in self.value]
        return self.value


def _join(path: str, key: str | int) -> str:
    if isinstance(key, int):
        return f"{path}[{key + 1}]"
    return f"{path}.{key}" if path else str(key)


def _convert(node: yaml.Node, path: str, problems: list[Problem], file: str) -> Node:
    line = node.start_mark.line + 1
    if isinstance(node, yaml.MappingNode):
        out: dict[str, Node] = {}
        key_lines: dict[str, int] = {}
        for knode, vnode in node.value:
            key = knode.value if isinstance(knode, yaml.ScalarNode) else str(knode.value)
            kline = knode.start_mark.line + 1
            if key in out:
                problems.append(
                    Problem(file, kline, _join(path, key), f"is given twice (first on line {key_lines[key]})")
                )
                continue
            key_lines[key] = kline
            out[key] = _convert(vnode, _join(path, key), problems, file)
        return Node(out, line, path, key_lines)
    if isinstance(node, yaml.SequenceNode):
        return Node([_convert(v, _join(path, i), problems, file) for i, v in enumerate(node.value)], line, path)
    # Scalars: resolve with the safe constructor so 4700 is an int and 4K7 a string.
    value = yaml.SafeLoader.construct_scalar(_SCALAR_LOADER, node)
    tag = node.tag
    if tag == "tag:yaml.org,2002:int":
        value = int(str(value).replace("_", ""), 0) if str(value).lower().startswith(("0x", "0o")) else int(str(value).replace("_", ""))
    elif tag == "tag:yaml.org,2002:float":
        value = _SCALAR_LOADER.construct_yaml_float(node)
    elif tag == "tag:yaml.org,2002:bool":
        value = _SCALAR_LOADER.construct_yaml_bool(node)
    elif tag == "tag:yaml.org,2002:null":
        value = None
    return Node(value, line, path)


_SCALAR_LOADER = yaml.SafeLoader("")


def load_yaml_text(text: str, file: str) -> Node:
    """Parse YAML text into a :class:`Node` tree; raise FileProblems on bad syntax."""
    try:
        root = yaml.compose(text, Loader=yaml.SafeLoader)
    except yaml.MarkedYAMLError as err:
        mark = err.problem_mark or err.context_mark
        line = mark.line + 1 if mark else 0
        what = err.problem or "the YAML cannot be read"
        cmark = err.context_mark
        if err.context and cmark is not None and cmark.line + 1 != line:
            what += f" ({err.context} that starts on line {cmark.line + 1})"
        raise FileProblems([Problem(file, line, "", f"YAML syntax: {what}")]) from None
    except yaml.YAMLError as err:
        raise FileProblems([Problem(file, 0, "", f"YAML syntax: {err}")]) from None
    if root is None:
        raise FileProblems([Problem(file, 1, "", "the file is empty")])
    problems: list[Problem] = []
    tree = _convert(root, "", problems, file)
    if problems:
        raise FileProblems(problems)
    return tree


def load_yaml(path: str | Path) -> Node:
    """Read a YAML file into a :class:`Node` tree.

    Raises
    ------
    FileProblems
        When the file is missing, unreadable, or not valid YAML.
    """
    p = Path(path)
    shown = display_path(p)
    try:
        text = p.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise FileProblems([Problem(shown, 0, "", "the file does not exist")]) from None
    except IsADirectoryError:
        raise FileProblems([Problem(shown, 0, "", "is a folder, not a file")]) from None
    except UnicodeDecodeError:
        raise FileProblems([Problem(shown, 0, "", "is not UTF-8 text")]) from None
    except OSError as err:
        raise FileProblems([Problem(shown, 0, "", f"cannot be read ({err.strerror})")]) from None
    return load_yaml_text(text, shown)


def _type_name(value: Any) -> str:
    if value is None:
        return "nothing"
    if isinstance(value, bool):
        return "true/false"
    if isinstance(value, dict):
        return "a mapping"
    if isinstance(value, list):
        return "a list"
    if isinstance(value, (int, float)):
        return "a number"
    return "text"


class Reader:
    """Reads fields out of a :class:`Node` tree and collects the problems it finds.

    Every ``get_*``/``opt_*`` method returns ``None`` after recording a problem, so a loader
    can keep going and report every problem in the file at once; call :meth:`raise_if_any`
    at the end.
    """

    def __init__(self, file: str) -> None:
        self.file = file
        self.problems: list[Problem] = []

    # -- recording ------------------------------------------------------------------------
    def problem(self, where: Node | int, fieldpath: str, message: str) -> None:
        line = where.line if isinstance(where, Node) else where
        self.problems.append(Problem(self.file, line, fieldpath, message))

    def raise_if_any(self) -> None:
        if self.problems:
            raise FileProblems(self.problems)

    # -- structure ------------------------------------------------------------------------
    def mapping(self, node: Node | None, what: str = "a mapping of fields") -> dict[str, Node] | None:
        if node is None:
            return None
        if not node.is_map:
            self.problem(node, node.path, f"must be {what} (got {_type_name(node.value)}: {node.plain()!r})")
            return None
        return node.value

    def keys(self, node: Node, allowed: Iterable[str], required: Iterable[str] = ()) -> dict[str, Node] | None:
        """Check a mapping's keys; report unknown ones with a suggestion and missing ones."""
        allowed = list(allowed)
        m = self.mapping(node, "a mapping with the fields " + ", ".join(allowed))
        if m is None:
            return None
        for key in m:
            if key not in allowed:
                close = difflib.get_close_matches(key, allowed, n=1, cutoff=0.6)
                hint = f"; did you mean {close[0]!r}?" if close else ""
                self.problem(
                    node.key_lines.get(key, node.line),
                    _join(node.path, key),
                    f"unknown field{hint} (allowed here: {', '.join(allowed)})",
                )
        for key in required:
            if key not in m:
                self.problem(node, _join(node.path, key) if node.path else key, "is missing")
        return m

    def seq(self, node: Node | None, what: str = "a list") -> list[Node] | None:
        if node is None:
            return None
        if not node.is_list:
            self.problem(node, node.path, f"must be {what} (got {_type_name(node.value)}: {node.plain()!r})")
            return None
        return node.value

    # -- scalars --------------------------------------------------------------------------
    def parse(self, node: Node | None, fn: Callable[[Any], T]) -> T | None:
        """Apply a parser to a scalar; a ValueSyntaxError or InputError becomes a problem."""
        if node is None:
            return None
        if node.is_map or node.is_list:
            self.problem(node, node.path, f"must be a single value (got {_type_name(node.value)})")
            return None
        try:
            return fn(node.value)
        except ValueSyntaxError as err:
            hint = f"; {err.hint}" if err.hint else ""
            self.problem(node, node.path, f"{err.text!r} is not a valid {err.kind}: {err.reason}{hint}")
        except InputError as err:
            self.problem(node, node.path, str(err))
        return None

    def text(self, node: Node | None) -> str | None:
        if node is None:
            return None
        if not isinstance(node.value, str) or not node.value.strip():
            self.problem(node, node.path, f"must be text (got {_type_name(node.value)}: {node.plain()!r})")
            return None
        return node.value.strip()

    def choice(self, node: Node | None, options: Iterable[str]) -> str | None:
        if node is None:
            return None
        options = list(options)
        value = node.value
        if isinstance(value, str) and value in options:
            return value
        close = difflib.get_close_matches(str(value), options, n=1, cutoff=0.5)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        self.problem(node, node.path, f"{node.plain()!r} is not allowed{hint} (allowed: {', '.join(options)})")
        return None

    def integer(self, node: Node | None, lo: int | None = None, hi: int | None = None) -> int | None:
        if node is None:
            return None
        v = node.value
        if isinstance(v, bool) or not isinstance(v, int):
            self.problem(node, node.path, f"must be a whole number (got {_type_name(v)}: {node.plain()!r})")
            return None
        if (lo is not None and v < lo) or (hi is not None and v > hi):
            rng = f"from {lo} to {hi}" if lo is not None and hi is not None else (f"at least {lo}" if lo is not None else f"at most {hi}")
            self.problem(node, node.path, f"{v} is out of range (allowed: {rng})")
            return None
        return v

    def number(self, node: Node | None, lo: float | None = None, hi: float | None = None) -> float | None:
        if node is None:
            return None
        v = node.value
        if isinstance(v, bool) or not isinstance(v, (int, float)):
            self.problem(node, node.path, f"must be a number (got {_type_name(v)}: {node.plain()!r})")
            return None
        if (lo is not None and v < lo) or (hi is not None and v > hi):
            self.problem(node, node.path, f"{v} is out of range (allowed: {lo} to {hi})")
            return None
        return float(v)

    def boolean(self, node: Node | None) -> bool | None:
        if node is None:
            return None
        if not isinstance(node.value, bool):
            self.problem(node, node.path, f"must be true or false (got {node.plain()!r})")
            return None
        return node.value

    def in_range(self, node: Node, value: float | None, lo: float, hi: float, shown: Callable[[float], str]) -> float | None:
        """Check an already-parsed SI value against [lo, hi]; ``shown`` formats bounds."""
        if value is None:
            return None
        if not lo <= value <= hi:
            self.problem(node, node.path, f"{node.plain()!r} is out of range (allowed: {shown(lo)} to {shown(hi)})")
            return None
        return value
