"""Safe YAML to plain Python values, with the 1-based line of every mapping key and sequence item.

``read_yaml(text, source=...)`` returns ``(data, lines, problems)``: ``data`` holds only dict, list,
str, int, float, bool and None; ``lines`` maps a key path such as ``("checks", 2, "critical")`` to
the line where that key (or list item) starts; ``problems`` lists what was refused (duplicate
keys, tags, aliases that expand too far). Scalars resolve as YAML 1.2 core does, because that is
how people write them: ``1e5`` and ``1.0e5`` are floats (PyYAML's YAML 1.1 rules read them as
strings), ``-3`` stays an int, ``010`` is ten, only ``true``/``false`` are booleans (``no`` is
the text "no"), ``18:00`` is text and dates stay text.
"""

from __future__ import annotations

import math
import re
from typing import Any

import yaml
from yaml.nodes import MappingNode, Node, ScalarNode, SequenceNode

from watcher.errors import ConfigProblem

KeyPath = tuple[str | int, ...]

# A real lab config has a few hundred nodes; aliases can multiply that without bound
# ("billion laughs"), so expansion stops well before memory or time become a problem.
MAX_NODES = 100_000

_TAG = "tag:yaml.org,2002:"
_BOOL_RE = re.compile(r"^(?:true|True|TRUE|false|False|FALSE)$")
_NULL_RE = re.compile(r"^(?:~|null|Null|NULL|)$")
_INT_RE = re.compile(r"^[-+]?[0-9]+$|^0x[0-9a-fA-F]+$|^0o[0-7]+$")
_FLOAT_RE = re.compile(
    r"""^(?:[-+]?(?:[0-9]+\.[0-9]*|\.[0-9]+)(?:[eE][-+]?[0-9]+)?
        |[-+]?[0-9]+[eE][-+]?[0-9]+
        |[-+]?\.(?:inf|Inf|INF)
        |\.(?:nan|NaN|NAN))$""",
    re.VERBOSE,
)
_ALLOWED_TAGS = frozenset(_TAG + t for t in ("str", "int", "float", "bool", "null", "map", "seq"))


# libyaml's parser and composer where PyYAML was built with it (the wheels are): 0.5 ms for
# the embedded default config against 6 ms in pure Python, on every `check` and reload.
try:
    from yaml import CSafeLoader as _SafeLoader
except ImportError:  # a PyYAML built without libyaml
    from yaml import SafeLoader as _SafeLoader  # type: ignore[assignment]


class LineLoader(_SafeLoader):
    """PyYAML's safe loader with YAML 1.2 core scalar rules; values are built by ``read_yaml``.

    Only the composer and resolver are used: construction walks the node tree itself so that it
    can record lines, reject duplicate keys and count alias expansions.
    """

    yaml_implicit_resolvers: dict[Any, Any] = {}  # noqa: RUF012 (PyYAML's class-level table)


for _tag, _regex, _first in (
    ("bool", _BOOL_RE, "tTfF"),
    ("null", _NULL_RE, ["~", "n", "N", ""]),
    ("int", _INT_RE, "-+0123456789"),
    ("float", _FLOAT_RE, "-+0123456789."),
    ("merge", re.compile(r"^<<$"), "<"),
):
    LineLoader.add_implicit_resolver(_TAG + _tag, _regex, list(_first))


def resolve_plain(text: str) -> str | int | float | bool | None:
    """The value a plain (unquoted) scalar ``text`` stands for, by the rules above."""
    if _NULL_RE.match(text):
        return None
    if _BOOL_RE.match(text):
        return text.lower() == "true"
    if _INT_RE.match(text):
        return _to_int(text)
    if _FLOAT_RE.match(text):
        return _to_float(text)
    return text


def format_path(path: KeyPath) -> str:
    """``("checks", 2, "critical")`` -> ``checks[2].critical``."""
    out = ""
    for part in path:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += f".{part}" if out else part
    return out


def read_yaml(text: str, *, source: str) -> tuple[Any, dict[KeyPath, int], list[ConfigProblem]]:
    """Parse one YAML document safely.

    Args:
        text: the YAML text.
        source: the file name as the user gave it, for messages.

    Returns:
        ``(data, lines, problems)``; ``data`` is None when the text cannot be parsed at all.
    """
    loader = LineLoader(text)
    try:
        node = loader.get_single_node()
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        line = mark.line + 1 if mark is not None else None
        reason = " ".join(str(p) for p in (exc.context, exc.problem) if p)
        return None, {}, [ConfigProblem(source, line, "", f"not valid YAML: {reason}")]
    except yaml.YAMLError as exc:  # e.g. a byte that YAML does not allow
        return None, {}, [ConfigProblem(source, None, "", f"not valid YAML: {exc}")]
    finally:
        loader.dispose()
    if node is None:
        return None, {}, []
    builder = _Builder(source)
    try:
        data = builder.build(node, ())
    except _TooLarge:
        return None, {}, [builder.too_large_problem(node)]
    return data, builder.lines, builder.problems


class _TooLarge(Exception):
    pass


class _Builder:
    """Turns composed nodes into plain values, recording lines and problems."""

    def __init__(self, source: str) -> None:
        self.source = source
        self.lines: dict[KeyPath, int] = {}
        self.problems: list[ConfigProblem] = []
        self._count = 0
        self._active: set[int] = set()  # node ids on the current branch, to catch recursive aliases

    def too_large_problem(self, node: Node) -> ConfigProblem:
        return ConfigProblem(
            self.source,
            node.start_mark.line + 1,
            "",
            f"refused: aliases expand to more than {MAX_NODES} values (an alias bomb?)",
        )

    def _problem(self, node: Node, path: KeyPath, message: str) -> None:
        self.problems.append(
            ConfigProblem(self.source, node.start_mark.line + 1, format_path(path), message)
        )

    def build(self, node: Node, path: KeyPath) -> Any:
        self._count += 1
        if self._count > MAX_NODES:
            raise _TooLarge
        if id(node) in self._active:
            self._problem(node, path, "refused: an alias refers to itself (recursive anchor)")
            return None
        if node.tag not in _ALLOWED_TAGS and not (
            isinstance(node, ScalarNode) and node.tag == _TAG + "merge"
        ):
            self._problem(node, path, f"refused: YAML tag {node.tag!r} is not allowed here")
            return None
        if isinstance(node, ScalarNode):
            return self._scalar(node, path)
        self._active.add(id(node))
        try:
            if isinstance(node, SequenceNode):
                return self._sequence(node, path)
            if isinstance(node, MappingNode):
                return self._mapping(node, path)
        finally:
            self._active.discard(id(node))
        return None  # pragma: no cover - the composer makes only these three kinds

    def _scalar(self, node: ScalarNode, path: KeyPath) -> Any:
        text = node.value
        if node.tag == _TAG + "str":
            return text
        if node.tag == _TAG + "null":
            return None
        if node.tag == _TAG + "bool":
            if not _BOOL_RE.match(text):
                self._problem(node, path, f"expected true or false, got {text!r}")
                return None
            return text.lower() == "true"
        if node.tag == _TAG + "int":
            if not _INT_RE.match(text):
                self._problem(node, path, f"expected an integer, got {text!r}")
                return None
            return _to_int(text)
        if node.tag == _TAG + "float":
            if _INT_RE.match(text):
                return float(_to_int(text))
            if not _FLOAT_RE.match(text):
                self._problem(node, path, f"expected a number, got {text!r}")
                return None
            return _to_float(text)
        self._problem(node, path, "YAML merge keys ('<<') are not supported; write the keys out")
        return None

    def _sequence(self, node: SequenceNode, path: KeyPath) -> list[Any]:
        out: list[Any] = []
        for i, item in enumerate(node.value):
            self.lines[(*path, i)] = item.start_mark.line + 1
            out.append(self.build(item, (*path, i)))
        return out

    def _mapping(self, node: MappingNode, path: KeyPath) -> dict[str, Any]:
        out: dict[str, Any] = {}
        for key_node, value_node in node.value:
            line = key_node.start_mark.line + 1
            if not isinstance(key_node, ScalarNode):
                self._problem(key_node, path, "keys must be plain text, got a list or mapping")
                continue
            if key_node.tag == _TAG + "merge":
                self._problem(
                    key_node, path, "YAML merge keys ('<<') are not supported; write the keys out"
                )
                continue
            if key_node.tag not in _ALLOWED_TAGS:
                self._problem(key_node, path, f"refused: YAML tag {key_node.tag!r} on a key")
                continue
            key = key_node.value
            if key in out:
                first = self.lines.get((*path, key))
                self._problem(
                    key_node, path, f"duplicate key {key!r} (first given on line {first})"
                )
                continue
            self.lines[(*path, key)] = line
            out[key] = self.build(value_node, (*path, key))
        return out


def _to_int(text: str) -> int:
    if text.startswith("0x"):
        return int(text[2:], 16)
    if text.startswith("0o"):
        return int(text[2:], 8)
    return int(text, 10)


def _to_float(text: str) -> float:
    lowered = text.lower()
    if lowered.endswith(".inf"):
        return -math.inf if lowered.startswith("-") else math.inf
    if lowered == ".nan":
        return math.nan
    return float(text)
