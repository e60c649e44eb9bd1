"""Regular expressions in ``applies_to``: refuse the shapes that backtrack catastrophically.

Python's ``re`` has no time limit and holds the GIL while it matches, so ``re:(a+)+$`` against a
long file name spins one core for minutes: no watchdog ping, SIGTERM not acted on. Validation
refuses the shapes that make a backtracking matcher exponential, found on the parsed pattern:

- a quantified group that contains a variable quantifier, ``(a+)+``, ``(\\d{2,4})*``, ``(a?)*``;
- a quantified alternation whose branches can start with the same character or be empty,
  ``(a|ab)+``, ``(\\d|1)*``, ``(x|)*``.

Both are the same ambiguity: one text can be split among the repetitions in exponentially many
ways. Possessive quantifiers and atomic groups (Python 3.11) never backtrack and are accepted.
The pattern's length is capped too, and ``watcher.config.model.matches_applies_to`` matches
regexes only against names no longer than a file name can be, which bounds what remains
(polynomial shapes such as ``.*a.*a.*``).
"""

from __future__ import annotations

import importlib
import re
from typing import Any

# re's own parser (``re._parser`` since 3.11, ``sre_parse`` before): the tree the matcher runs.
_parser: Any = importlib.import_module("re._parser")
_c: Any = importlib.import_module("re._constants")

MAX_REGEX_CHARS = 200  # longer than any file-name rule a lab writes; bounds the work per name

# Characters a first-character set is computed over: ASCII covers file names in practice, and a
# set that is "everything" (``.``, a negated class) overlaps anything anyway.
_UNIVERSE = frozenset(range(128))
_CATEGORIES: dict[Any, frozenset[int]] = {
    _c.CATEGORY_DIGIT: frozenset(c for c in _UNIVERSE if chr(c).isdigit()),
    _c.CATEGORY_WORD: frozenset(c for c in _UNIVERSE if chr(c).isalnum() or chr(c) == "_"),
    _c.CATEGORY_SPACE: frozenset(c for c in _UNIVERSE if chr(c).isspace()),
}
_CATEGORIES[_c.CATEGORY_NOT_DIGIT] = _UNIVERSE - _CATEGORIES[_c.CATEGORY_DIGIT]
_CATEGORIES[_c.CATEGORY_NOT_WORD] = _UNIVERSE - _CATEGORIES[_c.CATEGORY_WORD]
_CATEGORIES[_c.CATEGORY_NOT_SPACE] = _UNIVERSE - _CATEGORIES[_c.CATEGORY_SPACE]
_REPEATS = (_c.MAX_REPEAT, _c.MIN_REPEAT)
_ZERO_WIDTH = (_c.AT,)


def regex_problem(pattern: str) -> str | None:
    """None when ``pattern`` is safe to match against file names, else why it is refused."""
    if len(pattern) > MAX_REGEX_CHARS:
        return f"regular expression is {len(pattern)} characters long (at most {MAX_REGEX_CHARS})"
    try:
        tree = _parser.parse(pattern)
    except re.error as exc:
        return f"bad regular expression {pattern!r}: {exc}"
    shape = _backtracking_shape(list(tree), inside_repeat=False)
    if shape is None:
        return None
    return (
        f"regular expression {pattern!r} can take exponential time ({shape}); "
        "write it without nesting quantifiers or overlapping alternatives"
    )


def _backtracking_shape(items: list[tuple[Any, Any]], *, inside_repeat: bool) -> str | None:
    """The first catastrophic shape in a parsed (sub)pattern, described, or None."""
    for op, av in items:
        if op in _REPEATS:
            low, high, sub = av
            repeats = high > 1
            if inside_repeat and low != high:
                return "a quantified group contains a quantifier"
            found = _backtracking_shape(list(sub), inside_repeat=inside_repeat or repeats)
            if found is not None:
                return found
        elif op is _c.SUBPATTERN:
            found = _backtracking_shape(list(av[-1]), inside_repeat=inside_repeat)
            if found is not None:
                return found
        elif op is _c.BRANCH:
            branches = [list(b) for b in av[1]]
            if inside_repeat and _branches_overlap(branches):
                return "a quantified alternation has branches that match the same text"
            for branch in branches:
                found = _backtracking_shape(branch, inside_repeat=inside_repeat)
                if found is not None:
                    return found
        elif op is _c.ATOMIC_GROUP:
            continue  # never backtracks into itself
    return None


def _branches_overlap(branches: list[list[tuple[Any, Any]]]) -> bool:
    seen: set[int] = set()
    for branch in branches:
        first, nullable = _first(branch)
        if nullable or seen & first:
            return True
        seen |= first
    return False


def _first(items: list[tuple[Any, Any]]) -> tuple[frozenset[int], bool]:
    """(characters a match of ``items`` can start with, whether it can match the empty text)."""
    out: set[int] = set()
    for op, av in items:
        first, nullable = _first_of(op, av)
        out |= first
        if not nullable:
            return frozenset(out), False
    return frozenset(out), True


def _first_of(op: Any, av: Any) -> tuple[frozenset[int], bool]:
    if op is _c.LITERAL:
        return frozenset({av}) & _UNIVERSE or frozenset({-1}), False
    if op is _c.NOT_LITERAL or op is _c.ANY:
        return _UNIVERSE, False
    if op is _c.IN:
        return _class(av), False
    if op in _ZERO_WIDTH:
        return frozenset(), True
    if op in _REPEATS:
        low, _high, sub = av
        first, nullable = _first(list(sub))
        return first, nullable or low == 0
    if op is _c.SUBPATTERN or op is _c.ATOMIC_GROUP:
        return _first(list(av[-1]))
    if op is _c.BRANCH:
        out: set[int] = set()
        any_nullable = False
        for branch in av[1]:
            first, nullable = _first(list(branch))
            out |= first
            any_nullable = any_nullable or nullable
        return frozenset(out), any_nullable
    # Back-references, look-arounds, conditionals: unknown, so taken as overlapping anything.
    return _UNIVERSE, True


def _class(items: list[tuple[Any, Any]]) -> frozenset[int]:
    chars: set[int] = set()
    negate = False
    for op, av in items:
        if op is _c.NEGATE:
            negate = True
        elif op is _c.LITERAL:
            chars |= {av} & _UNIVERSE
        elif op is _c.RANGE:
            chars |= set(range(av[0], av[1] + 1)) & _UNIVERSE
        elif op is _c.CATEGORY:
            chars |= _CATEGORIES.get(av, _UNIVERSE)
        else:
            chars |= _UNIVERSE
    return _UNIVERSE - chars if negate else frozenset(chars)
