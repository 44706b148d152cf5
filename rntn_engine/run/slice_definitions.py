"""Slice definitions for `rntn evaluate`: which nodes of a treebank a slice holds, read from the
command line (``--slice NAME=KIND[:VALUE]``) or from a slice file (TOML, in a format of our own).

Kinds (``value`` on the command line; keys in a slice file):

    phrase-words       phrases (nodes) whose words include any word of a list, case ignored
                       command line: ``negation=phrase-words:not,never,hardly``; file: ``words = [...]``
    tree-words         every node of the trees whose words include any word of a list, case ignored
                       command line: ``contrast=tree-words:but``; file: ``words = [...]``
    phrase-length      phrases of a number of words in a range (both ends included)
                       command line: ``short=phrase-length:2-5``, ``long=phrase-length:11-``,
                       ``single=phrase-length:1``; file: ``min = 2``, ``max = 5`` (either may be left out)
    root-class         every node of the trees whose gold root class is one of a list of classes,
                       given by number or by the run's class names
                       command line: ``negative=root-class:0,1``; file: ``classes = [0, 1]``
    opposite-children  composition points: internal nodes whose two children have gold labels on
                       opposite sides of the scale (one negative, one positive; the sides of the
                       binary scores, run/scores.py), so the node must weigh one against the other
                       command line: ``clash=opposite-children``; file: no other key

A slice file holds one TOML table per slice; the table's name is the slice's name::

    [negation]
    kind = "phrase-words"
    words = ["not", "never", "hardly", "barely"]

Errors are one line: ``FILE:LINE:COL`` for TOML syntax (from the TOML reader), ``FILE:LINE`` of
the table or key at fault for a missing or unknown key or a value of the wrong type.
"""

from __future__ import annotations

import re
import sys
from dataclasses import dataclass
from pathlib import Path

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

from rntn_engine.data.errors import InputError

SLICE_KINDS = ("phrase-words", "tree-words", "phrase-length", "root-class", "opposite-children")
# the keys each kind takes in a slice file besides "kind", and whether each is required
_KEYS = {"phrase-words": {"words": True}, "tree-words": {"words": True},
         "phrase-length": {"min": False, "max": False}, "root-class": {"classes": True},
         "opposite-children": {}}


class SliceFileError(InputError):
    """A slice file (or a ``--slice`` value) that does not follow the slice format."""


@dataclass(frozen=True)
class SliceDefinition:
    """One slice: its name, kind and the kind's values (module docstring)."""

    name: str
    kind: str
    words: tuple[str, ...] = ()  # phrase-words, tree-words: lower case
    min_words: int = 1  # phrase-length
    max_words: int | None = None  # phrase-length; None: no upper end
    classes: tuple[int | str, ...] = ()  # root-class: numbers or class names

    def describe(self) -> str:
        if self.kind in ("phrase-words", "tree-words"):
            return f"{self.kind}: {', '.join(self.words)}"
        if self.kind == "phrase-length":
            top = "" if self.max_words is None else str(self.max_words)
            return f"phrase-length: {self.min_words}-{top}"
        if self.kind == "root-class":
            return f"root-class: {', '.join(map(str, self.classes))}"
        return self.kind

    def class_numbers(self, names: list[str]) -> tuple[int, ...]:
        """The root classes as numbers, names looked up in ``names`` (the class names 0..C-1)."""
        numbers = []
        for c in self.classes:
            if isinstance(c, int):
                number = c
            elif c in names:
                number = names.index(c)
            elif c.isdigit():
                number = int(c)
            else:
                raise ValueError(f"slice {self.name!r}: no class is named {c!r} (classes: {', '.join(names)})")
            if not 0 <= number < len(names):
                raise ValueError(f"slice {self.name!r}: class {number} is outside 0..{len(names) - 1}")
            numbers.append(number)
        return tuple(numbers)


def _words(values: list[str], what: str) -> tuple[str, ...]:
    words = tuple(dict.fromkeys(w.strip().lower() for w in values))
    if not words or not all(words):
        raise ValueError(f"{what} needs at least one word, and no empty word")
    return words


def _length_range(low: int | None, high: int | None) -> tuple[int, int | None]:
    low = 1 if low is None else low
    if low < 1:
        raise ValueError(f"the shortest phrase length must be at least 1, got {low}")
    if high is not None and high < low:
        raise ValueError(f"the longest phrase length {high} is below the shortest {low}")
    return low, high


def slice_from_option(text: str) -> SliceDefinition:
    """A slice from ``NAME=KIND[:VALUE]`` (module docstring); ValueError with what was expected."""
    name, equals, rest = text.partition("=")
    name = name.strip()
    if not equals or not name:
        raise ValueError(f"expected NAME=KIND[:VALUE], got {text!r}")
    kind, _, value = rest.partition(":")
    kind = kind.strip()
    if kind not in SLICE_KINDS:
        raise ValueError(f"slice {name!r}: unknown kind {kind!r} (expected one of {', '.join(SLICE_KINDS)})")
    value = value.strip()
    if kind == "opposite-children":
        if value:
            raise ValueError(f"slice {name!r}: opposite-children takes no value, got {value!r}")
        return SliceDefinition(name, kind)
    if not value:
        raise ValueError(f"slice {name!r}: {kind} needs a value after ':' (e.g. {_EXAMPLE[kind]})")
    if kind in ("phrase-words", "tree-words"):
        return SliceDefinition(name, kind, words=_words(value.split(","), f"slice {name!r}"))
    if kind == "phrase-length":
        match = re.fullmatch(r"(\d+)(-(\d*))?", value)
        if not match:
            raise ValueError(f"slice {name!r}: expected a length N, a range N-M or an open range N-, got {value!r}")
        low = int(match.group(1))
        high = low if match.group(2) is None else (int(match.group(3)) if match.group(3) else None)
        try:
            low, high = _length_range(low, high)
        except ValueError as exc:
            raise ValueError(f"slice {name!r}: {exc}") from None
        return SliceDefinition(name, kind, min_words=low, max_words=high)
    classes = tuple(int(c) if c.strip().isdigit() else c.strip() for c in value.split(","))
    if not all(str(c) for c in classes):
        raise ValueError(f"slice {name!r}: an empty class in {value!r}")
    return SliceDefinition(name, kind, classes=classes)


_EXAMPLE = {"phrase-words": "phrase-words:not,never", "tree-words": "tree-words:but",
            "phrase-length": "phrase-length:2-5", "root-class": "root-class:0,1"}


class _Lines:
    """Where tables and keys stand in a TOML text, for errors the TOML reader cannot locate."""

    def __init__(self, text: str) -> None:
        self.lines = text.splitlines()

    def table(self, name: str) -> int | None:
        pattern = re.compile(r"\s*\[\s*(" + re.escape(name) + r"|\"" + re.escape(name) + r"\"|'"
                             + re.escape(name) + r"')\s*\]")
        for number, line in enumerate(self.lines, 1):
            if pattern.match(line):
                return number
        return None

    def key_outside_tables(self, key: str) -> int | None:
        pattern = re.compile(r"\s*(" + re.escape(key) + r"|\"" + re.escape(key) + r"\")\s*=")
        for number, line in enumerate(self.lines, 1):
            if re.match(r"\s*\[", line):
                break
            if pattern.match(line):
                return number
        return None

    def key(self, table: str, key: str) -> int | None:
        start = self.table(table)
        if start is None:
            return None
        pattern = re.compile(r"\s*(" + re.escape(key) + r"|\"" + re.escape(key) + r"\")\s*=")
        for number in range(start + 1, len(self.lines) + 1):
            line = self.lines[number - 1]
            if re.match(r"\s*\[", line):
                break
            if pattern.match(line):
                return number
        return start


def read_slice_file(path: str | Path) -> list[SliceDefinition]:
    """Every slice of a slice file, in file order; :class:`SliceFileError` (one line, located) on bad input."""
    path = str(path)
    try:
        with open(path, "rb") as fh:
            raw = fh.read()
    except OSError as exc:
        raise SliceFileError(path, f"cannot read the slice file ({exc.strerror or exc})") from None
    try:
        text = raw.decode("utf-8")
        data = tomllib.loads(text)
    except UnicodeDecodeError as exc:
        raise SliceFileError(path, f"not UTF-8 text ({exc.reason} at byte {exc.start})") from None
    except tomllib.TOMLDecodeError as exc:
        message = str(exc)
        where = re.search(r"\(at line (\d+), column (\d+)\)", message)
        message = re.sub(r"\s*\(at (line \d+, column \d+|end of document)\)", "", message)
        if where:
            line, column = int(where.group(1)), int(where.group(2))
        else:  # "at end of document": the place after the last character
            line, column = text.count("\n") + 1, len(text) - (text.rfind("\n") + 1) + 1
        raise SliceFileError(path, f"not valid TOML: {message}", line, column) from None
    where = _Lines(text)
    if not data:
        raise SliceFileError(path, "no slice defined (expected tables such as [negation] with a kind = ... line)")
    slices = []
    for name, table in data.items():
        if not isinstance(table, dict):
            raise SliceFileError(path, f"{name!r} is not a table: each slice is a table, e.g. [{name}] with "
                                 f"kind = \"phrase-words\" under it", where.key_outside_tables(name))
        slices.append(_slice_from_table(path, name, table, where))
    return slices


def _slice_from_table(path: str, name: str, table: dict, where: _Lines) -> SliceDefinition:
    def fail(message: str, key: str | None = None) -> SliceFileError:
        line = where.key(name, key) if key else where.table(name)
        return SliceFileError(path, f"slice [{name}]: {message}", line)

    kind = table.get("kind")
    if kind is None:
        raise fail(f"missing key 'kind' (one of {', '.join(SLICE_KINDS)})")
    if kind not in SLICE_KINDS:
        raise fail(f"kind must be one of {', '.join(SLICE_KINDS)}, got {kind!r}", "kind")
    keys = _KEYS[kind]
    for key in table:
        if key != "kind" and key not in keys:
            allowed = ", ".join(["kind", *keys])
            raise fail(f"unknown key {key!r} for kind {kind} (keys: {allowed})", key)
    for key, required in keys.items():
        if required and key not in table:
            raise fail(f"kind {kind} needs the key {key!r}")
    if kind in ("phrase-words", "tree-words"):
        words = table["words"]
        if not isinstance(words, list) or not all(isinstance(w, str) for w in words):
            raise fail(f"words must be a list of strings, e.g. [\"not\", \"never\"], got {words!r}", "words")
        try:
            return SliceDefinition(name, kind, words=_words(words, "words"))
        except ValueError as exc:
            raise fail(str(exc), "words") from None
    if kind == "phrase-length":
        for key in ("min", "max"):
            value = table.get(key)
            if value is not None and (not isinstance(value, int) or isinstance(value, bool)):
                raise fail(f"{key} must be a whole number of words, got {value!r}", key)
        try:
            low, high = _length_range(table.get("min"), table.get("max"))
        except ValueError as exc:
            raise fail(str(exc), "min" if "max" not in table else "max") from None
        return SliceDefinition(name, kind, min_words=low, max_words=high)
    if kind == "root-class":
        classes = table["classes"]
        if (not isinstance(classes, list) or not classes
                or not all(isinstance(c, str) and c or isinstance(c, int) and not isinstance(c, bool) and c >= 0
                           for c in classes)):
            raise fail(f"classes must be a non-empty list of class numbers or class names, got {classes!r}",
                       "classes")
        return SliceDefinition(name, kind, classes=tuple(classes))
    return SliceDefinition(name, kind)
