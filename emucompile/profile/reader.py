"""Safe reading of small YAML 1.2 / JSON documents into plain values with positions.

A profile (and any other small text input: presets, emulator constraints) is
read here into plain Python values -- ``dict``, ``list``, ``str``, ``int``,
``float``, ``bool``, ``None`` -- together with a map from each value's JSON
pointer (RFC 6901) to its line and column in the text, so that every later
message can say ``FILE:LINE:COL``.

Nothing in a document is ever executed or turned into an object of a
program-defined class: the YAML text is only *parsed* (ruamel.yaml's pure
parser, events only) and the values are built here by the YAML 1.2 core
schema. Tags outside that schema (``!!python/object``, ``!!binary``,
``!!timestamp``, local ``!tags``) are refused.

Public entry points: :func:`read_document` (a file) and :func:`parse_text`
(text already in memory). Both return a :class:`Document` and never raise for
bad input; its ``problems`` list says what is wrong. :func:`dump_yaml` is the
way back: a plain document as YAML 1.2 text that :func:`parse_text` reads
back equal.

Length (about 770 lines, above the package's ~600): one concern, a YAML 1.2
core-schema reader built on parser events with positions, whose scalar
resolution, collection building and refusals share one state; split, the
pieces would pass that state around.

References
----------
.. [YAML12] YAML Ain't Markup Language version 1.2.2 (2021), section 10.3
   "Core Schema" (the regular expressions used by :func:`_resolve_plain`).
.. [RFC6901] P. Bryan, K. Zyp, M. Nottingham, "JavaScript Object Notation
   (JSON) Pointer", RFC 6901, 2013.
.. [RFC8259] T. Bray (ed.), "The JavaScript Object Notation (JSON) Data
   Interchange Format", RFC 8259, 2017 (no NaN or Infinity; names SHOULD be
   unique -- here they must be).
"""

from __future__ import annotations

import copy
import json
import math
import os
import re
from dataclasses import dataclass, field
from typing import Any

from emucompile.errors import Problem

MAX_DOCUMENT_BYTES = 1024 * 1024
"""Largest file accepted (1 MiB): a profile is a small hand-written text file."""

MAX_NODES = 100_000
"""Most values one document may expand to, aliases included (alias-bomb guard)."""

MAX_DEPTH = 64
"""Deepest nesting of mappings and sequences accepted."""

FORMATS = ("yaml", "json")


@dataclass
class Document:
    """A document read from text: its value, where each value stands, and the problems found.

    Attributes
    ----------
    filename : str
        The name used in messages (the path as given, or a label such as ``<text>``).
    format : {"yaml", "json"}
    value : object
        The plain value; None when the text could not be read at all
        (``readable`` is then False).
    problems : list of Problem
        Everything wrong with the text itself (syntax, duplicate keys, refused
        tags, numbers too large, ...), in the order found.
    positions : dict
        JSON pointer of a value -> (line, column), both 1-based.
    key_positions : dict
        JSON pointer of a mapping member -> (line, column) of its key.
    replaced : set
        Pointers whose value stands in for one that could not be read (a
        refused tag gives None, a number too large an infinity, JSON's NaN a
        NaN); a problem says so, and later checks need not repeat it.
    readable : bool
        False when no value could be built (file missing, syntax error, ...).
    """

    filename: str
    format: str
    value: Any = None
    problems: list = field(default_factory=list)
    positions: dict = field(default_factory=dict)
    key_positions: dict = field(default_factory=dict)
    replaced: set = field(default_factory=set)
    readable: bool = True

    def locate(self, pointer: str, *, key: bool = False) -> tuple[int | None, int | None]:
        """Line and column of ``pointer`` (of its key with ``key=True``), else of its nearest ancestor."""
        if key and pointer in self.key_positions:
            return self.key_positions[pointer]
        while True:
            if pointer in self.positions:
                return self.positions[pointer]
            if not pointer:
                return None, None
            pointer = pointer.rsplit("/", 1)[0]

    def problem(
        self,
        pointer: str,
        message: str,
        hint: str | None = None,
        *,
        severity: str = "error",
        key: bool = False,
    ) -> Problem:
        """A :class:`Problem` located at ``pointer`` in this document."""
        line, column = self.locate(pointer, key=key)
        return Problem(
            file=self.filename,
            pointer=pointer,
            message=message,
            hint=hint,
            line=line,
            column=column,
            severity=severity,
        )


def read_document(
    source, *, format: str | None = None, max_bytes: int = MAX_DOCUMENT_BYTES
) -> Document:
    """Read a YAML 1.2 or JSON file safely; never raises for bad input.

    Parameters
    ----------
    source : str or os.PathLike
        Path of the file.
    format : {"yaml", "json"}, optional
        Overrides the guess: ``.json`` is JSON, ``.yaml``/``.yml`` YAML, any
        other name JSON when the text starts with ``{`` and YAML otherwise.
    max_bytes : int
        Files larger than this are refused (default 1 MiB).

    Returns
    -------
    Document
        ``readable`` is False and ``problems`` holds one line when the file is
        missing, a directory, unreadable, too large, empty or not UTF-8.
    """
    filename = os.fspath(source)
    if format is not None and format not in FORMATS:
        raise ValueError(f"format must be one of {FORMATS} or None, got {format!r}")
    guessed = format or _format_from_name(filename)

    def unreadable(message, hint=None, line=None, column=None):
        problem = Problem(filename, "", message, hint, line, column)
        return Document(filename, guessed or "yaml", problems=[problem], readable=False)

    try:
        if not os.path.exists(filename):
            return unreadable("no such file", "check the path")
        if os.path.isdir(filename):
            return unreadable("is a directory, not a profile file", "name a .yaml or .json file")
        with open(filename, "rb") as stream:
            data = stream.read(max_bytes + 1)
    except OSError as error:
        return unreadable(f"cannot read the file: {error.strerror or error}")
    if len(data) > max_bytes:
        return unreadable(
            f"the file is larger than the {max_bytes // 1024} KiB limit",
            "a profile is a small text file; is this the right file?",
        )
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as error:
        line = data.count(b"\n", 0, error.start) + 1
        column = error.start - (data.rfind(b"\n", 0, error.start) + 1) + 1
        return unreadable(
            f"not UTF-8 text: byte 0x{data[error.start]:02x} at byte offset {error.start} "
            "cannot be decoded",
            "save the file as UTF-8",
            line,
            column,
        )
    return parse_text(text, filename=filename, format=guessed)


def parse_text(text: str, *, filename: str = "<text>", format: str | None = "yaml") -> Document:
    """Parse YAML 1.2 or JSON text into a :class:`Document`; never raises for bad input.

    ``format=None`` takes JSON when the text starts with ``{`` or ``[``, YAML otherwise.
    """
    if format is not None and format not in FORMATS:
        raise ValueError(f"format must be one of {FORMATS} or None, got {format!r}")
    if text.startswith("\ufeff"):
        text = text[1:]
    if format is None:
        format = "json" if text.lstrip()[:1] in ("{", "[") else "yaml"
    document = Document(filename, format)
    if not text.strip():
        document.problems.append(Problem(filename, "", "the file is empty"))
        document.readable = False
        return document
    if format == "json":
        _parse_json(text, document)
    else:
        _parse_yaml(text, document)
    return document


def dump_yaml(value, *, comment: str | None = None) -> str:
    """A plain document (dict, list, str, int, float, bool, None) as YAML 1.2 block text.

    Mappings are written in block style, keys in their order; a list item
    that is a mapping or list of scalars only is written on one line in flow
    style (``- {delay_ns: 0, power_db: -4.4}``). A string is plain when the
    YAML 1.2 core schema reads it back as that string, else double-quoted
    (a JSON string, which is a valid YAML double-quoted scalar). ``comment``
    lines go first, each after ``# ``.

    Raises
    ------
    ValueError
        For a value that is not plain data, or not finite; or, as a guard, when
        the text would not read back to an equal document.
    """
    lines = [f"# {line}".rstrip() for line in (comment or "").splitlines()]
    if isinstance(value, dict) and value:
        _dump_mapping(value, 0, lines)
    else:
        lines.append(_dump_flow(value))
    text = "\n".join(lines) + "\n"
    back = parse_text(text, format="yaml")
    if back.problems or back.value != value:
        raise ValueError("internal: the YAML text does not read back to the same document")
    return text


def pointer_join(pointer: str, token) -> str:
    """Append one reference token to a JSON pointer, escaping ``~`` and ``/`` [RFC6901]_."""
    return pointer + "/" + str(token).replace("~", "~0").replace("/", "~1")


def pointer_tokens(pointer: str) -> list[str]:
    """The unescaped reference tokens of a JSON pointer."""
    if not pointer:
        return []
    return [t.replace("~1", "/").replace("~0", "~") for t in pointer[1:].split("/")]


# -- helpers ---------------------------------------------------------------------


class _Stop(Exception):
    """Reading cannot go on (syntax error, alias bomb); the problem is already recorded."""


_CORE_TAG = "tag:yaml.org,2002:"
_SCALAR_TAGS = {_CORE_TAG + t for t in ("str", "int", "float", "bool", "null")}
_COLLECTION_TAGS = {"map": _CORE_TAG + "map", "seq": _CORE_TAG + "seq"}

# YAML 1.2.2 section 10.3.2, "Tag Resolution" of the core schema [YAML12]_.
_NULL = re.compile(r"null|Null|NULL|~|")
_BOOL_TRUE = re.compile(r"true|True|TRUE")
_BOOL_FALSE = re.compile(r"false|False|FALSE")
_INT10 = re.compile(r"[-+]?[0-9]+")
_INT8 = re.compile(r"0o[0-7]+")
_INT16 = re.compile(r"0x[0-9a-fA-F]+")
_FLOAT = re.compile(r"[-+]?(\.[0-9]+|[0-9]+(\.[0-9]*)?)([eE][-+]?[0-9]+)?")
_INF = re.compile(r"[-+]?(\.inf|\.Inf|\.INF)")
_NAN = re.compile(r"\.nan|\.NaN|\.NAN")
# RFC 8259 section 6: the grammar of a JSON number.
_JSON_NUMBER = re.compile(r"-?(0|[1-9][0-9]*)(\.[0-9]+)?([eE][-+]?[0-9]+)?")
_JSON_NON_NUMBERS = {"NaN": float("nan"), "Infinity": float("inf"), "-Infinity": float("-inf")}
_MAX_INT_DIGITS = 310  # 10**309 already exceeds the largest float


def _format_from_name(filename: str) -> str | None:
    suffix = os.path.splitext(filename)[1].lower()
    if suffix == ".json":
        return "json"
    if suffix in (".yaml", ".yml"):
        return "yaml"
    return None


def _parse_yaml(text: str, document: Document) -> None:
    _build_from_events(text, document, json_mode=False)


def _parse_json(text: str, document: Document) -> None:
    # The json module is the judge of syntax (its line/column on error); the
    # values and their positions come from the same event walk as YAML, since
    # JSON text is YAML 1.2 flow text.
    try:
        json.loads(text, parse_constant=float, parse_int=len)  # syntax only: no 5000-digit int is converted
    except json.JSONDecodeError as error:
        document.problems.append(
            Problem(
                document.filename, "", f"JSON syntax error: {error.msg}",
                None, error.lineno, error.colno,
            )
        )
        document.readable = False
        return
    except RecursionError:
        document.problems.append(
            Problem(document.filename, "", f"nested deeper than {MAX_DEPTH} levels")
        )
        document.readable = False
        return
    saved = len(document.problems)
    if _build_from_events(text, document, json_mode=True) != "parser":
        return
    # Valid JSON the YAML parser cannot take (keys over 1024 characters, ...):
    # read it again without positions, still refusing duplicates and NaN.
    del document.problems[saved:]
    document.positions.clear()
    document.key_positions.clear()
    document.readable = True
    document.value = _json_without_positions(text, document)


def _json_without_positions(text: str, document: Document):
    def pairs_hook(pairs):
        result = {}
        for key, value in pairs:
            if key in result:
                document.problems.append(
                    Problem(document.filename, "", f"duplicate key {key!r}", "each key may appear once")
                )
                continue
            result[key] = value
        return result

    # NaN and Infinity are kept here; the profile checks refuse them, naming their pointer.
    value = json.loads(text, object_pairs_hook=pairs_hook, parse_constant=_JSON_NON_NUMBERS.get,
                       parse_int=_json_int)
    try:
        return _clean_strings(value, document, "", 0)
    except _Stop:
        document.problems.append(Problem(document.filename, "", f"nested deeper than {MAX_DEPTH} levels"))
        document.readable = False
        return None


def _clean_strings(value, document, pointer, depth):
    if isinstance(value, str):
        return _clean_text(value, document, pointer)
    if isinstance(value, (list, dict)) and depth >= MAX_DEPTH:
        raise _Stop
    if isinstance(value, list):
        return [_clean_strings(v, document, pointer_join(pointer, i), depth + 1)
                for i, v in enumerate(value)]
    if isinstance(value, dict):
        return {
            _clean_text(k, document, pointer):
                _clean_strings(v, document, pointer_join(pointer, k), depth + 1)
            for k, v in value.items()
        }
    return value


def _clean_text(text: str, document: Document, pointer: str) -> str:
    """Join escaped UTF-16 surrogate pairs; refuse lone surrogates (they are not text)."""
    try:
        text.encode("utf-8")
        return text
    except UnicodeEncodeError:
        pass
    try:
        return text.encode("utf-16", "surrogatepass").decode("utf-16")
    except UnicodeDecodeError:
        document.problems.append(
            document.problem(pointer, "a string holds an unpaired UTF-16 surrogate escape",
                             "only whole characters are allowed")
        )
        return text.encode("utf-8", "replace").decode("utf-8")


def _build_from_events(text: str, document: Document, *, json_mode: bool) -> str | None:
    """Fill ``document`` from the parser's events; returns "parser" when the YAML parser failed."""
    from ruamel.yaml import YAML
    from ruamel.yaml import error as yaml_error

    builder = _Builder(document, json_mode)
    failure = None
    try:
        builder.run(iter(YAML(typ="safe", pure=True).parse(text)))
    except _Stop:
        document.readable = False
    except yaml_error.MarkedYAMLError as error:
        failure = "parser"
        mark = error.problem_mark or error.context_mark
        line, column = (mark.line + 1, mark.column + 1) if mark else (None, None)
        what = error.problem or error.context or "cannot be parsed"
        kind = "JSON" if json_mode else "YAML"
        document.problems.append(
            Problem(document.filename, "", f"{kind} syntax error: {what}", None, line, column)
        )
        document.readable = False
    except yaml_error.YAMLError as error:
        # ReaderError: a character YAML does not allow (control characters).
        failure = "parser"
        position = getattr(error, "position", None)
        line = column = None
        if position is not None:
            line, column = _line_column(text, position)
        detail = str(error).splitlines()[0]
        document.problems.append(
            Problem(document.filename, "", f"cannot be read: {detail}", None, line, column)
        )
        document.readable = False
    if not document.readable:
        document.value = None
    return failure


def _line_column(text: str, offset: int) -> tuple[int, int]:
    line = text.count("\n", 0, offset) + 1
    return line, offset - (text.rfind("\n", 0, offset) + 1) + 1


class _Builder:
    """Builds plain values from parser events (our own small YAML composer and constructor)."""

    def __init__(self, document: Document, json_mode: bool):
        self.document = document
        self.json_mode = json_mode
        self.count = 0
        self.aliases_used = False
        self.anchors: dict[str, tuple[Any, int, list, list]] = {}

    def run(self, events) -> None:
        from ruamel.yaml import events as ev

        documents = 0
        for event in events:
            if isinstance(event, ev.DocumentStartEvent):
                documents += 1
                if documents > 1:
                    self._stop(
                        event, "",
                        "a second document starts here; a profile file holds one document",
                        "remove the '---' line or split the file",
                    )
                self.document.value, _ = self._node(next(events), events, "", 0)
        if documents == 0:
            self._stop(None, "", "the file holds no document (only comments?)")

    def _stop(self, event, pointer, message, hint=None):
        problem = self.document.problem(pointer, message, hint)
        if event is not None:
            problem = _at(problem, event)
        self.document.problems.append(problem)
        raise _Stop

    def _error(self, event, pointer, message, hint=None, *, replaced=True):
        self.document.problems.append(_at(self.document.problem(pointer, message, hint), event))
        if replaced:
            self.document.replaced.add(pointer)

    def _node(self, event, events, pointer: str, depth: int):
        """Build the value that starts with ``event``; returns (value, size, positions, key positions).

        The positions lists are relative to ``pointer`` so that an anchored
        value can be placed again under an alias.
        """
        from ruamel.yaml import events as ev

        self.count += 1
        if self.count > MAX_NODES:
            if self.aliases_used:
                self._stop(event, pointer, f"too many aliases: the document expands to more than "
                           f"{MAX_NODES} values", "an alias bomb? write the values out")
            self._stop(event, pointer, f"more than {MAX_NODES} values in one document")
        here = (event.start_mark.line + 1, event.start_mark.column + 1)
        self.document.positions[pointer] = here
        if isinstance(event, ev.AliasEvent):
            return self._alias(event, pointer)
        anchor = getattr(event, "anchor", None)
        start = self.count
        if isinstance(event, ev.ScalarEvent):
            value = self._scalar(event, pointer)
        elif isinstance(event, (ev.MappingStartEvent, ev.SequenceStartEvent)):
            if depth >= MAX_DEPTH:
                self._stop(event, pointer, f"nested deeper than {MAX_DEPTH} levels")
            self._check_collection_tag(event, pointer)
            if isinstance(event, ev.MappingStartEvent):
                value = self._mapping(events, pointer, depth)
            else:
                value = self._sequence(events, pointer, depth)
        else:  # pragma: no cover - the parser only yields the events above here
            self._stop(event, pointer, f"unexpected {type(event).__name__}")
        if anchor is not None:
            self._remember(anchor, pointer, value, self.count - start + 1)
        return value, self.count - start + 1

    def _alias(self, event, pointer):
        name = event.anchor
        if name not in self.anchors:
            self._stop(event, pointer, f"unknown alias *{name}", "define the anchor &" + name + " first")
        value, size, positions, key_positions = self.anchors[name]
        self.aliases_used = True
        self.count += size - 1
        if self.count > MAX_NODES:
            self._stop(event, pointer, f"too many aliases: the document expands to more than "
                       f"{MAX_NODES} values", "an alias bomb? write the values out")
        for relative, where in positions:
            self.document.positions.setdefault(pointer + relative, where)
        for relative, where in key_positions:
            self.document.key_positions.setdefault(pointer + relative, where)
        return copy.deepcopy(value), size

    def _remember(self, anchor, pointer, value, size):
        n = len(pointer)
        positions = [(p[n:], w) for p, w in self.document.positions.items()
                     if p == pointer or p.startswith(pointer + "/")]
        key_positions = [(p[n:], w) for p, w in self.document.key_positions.items()
                         if p.startswith(pointer + "/")]
        self.anchors[anchor] = (value, size, positions, key_positions)

    def _mapping(self, events, pointer, depth):
        from ruamel.yaml import events as ev

        result: dict[str, Any] = {}
        first_seen: dict[str, tuple[int, int]] = {}
        while True:
            key_event = next(events)
            if isinstance(key_event, ev.MappingEndEvent):
                return result
            key_place = (key_event.start_mark.line + 1, key_event.start_mark.column + 1)
            if not isinstance(key_event, ev.ScalarEvent):
                self._stop(key_event, pointer, "a mapping key must be plain text, not a "
                           "mapping, sequence or alias", "write the key as text")
            key = _clean_text(key_event.value, self.document, pointer)
            if key_event.tag not in (None, "!", _CORE_TAG + "str"):
                self._error(key_event, pointer, f"tag {_short_tag(key_event.tag)} is not allowed "
                            "on a key", "keys are text", replaced=False)
            child = pointer_join(pointer, key)
            if key in first_seen:
                line, column = first_seen[key]
                self._error(key_event, child, f"duplicate key {key!r} (first at line {line}, "
                            f"column {column})", "each key may appear once in a mapping",
                            replaced=False)
                self._node(next(events), events, pointer + "/\0duplicate", depth + 1)
                self._forget(pointer + "/\0duplicate")
                continue
            first_seen[key] = key_place
            self.document.key_positions[child] = key_place
            value, _ = self._node(next(events), events, child, depth + 1)
            result[key] = value

    def _forget(self, pointer):
        for table in (self.document.positions, self.document.key_positions):
            for p in [p for p in table if p == pointer or p.startswith(pointer + "/")]:
                del table[p]

    def _sequence(self, events, pointer, depth):
        from ruamel.yaml import events as ev

        result = []
        while True:
            event = next(events)
            if isinstance(event, ev.SequenceEndEvent):
                return result
            value, _ = self._node(event, events, pointer_join(pointer, len(result)), depth + 1)
            result.append(value)

    def _check_collection_tag(self, event, pointer):
        from ruamel.yaml import events as ev

        expected = _COLLECTION_TAGS["map" if isinstance(event, ev.MappingStartEvent) else "seq"]
        if event.tag not in (None, "!", expected):
            self._error(event, pointer, f"tag {_short_tag(event.tag)} is not allowed",
                        "only the YAML 1.2 core schema is read: !!str !!int !!float !!bool "
                        "!!null !!map !!seq; nothing in a profile is ever executed")

    def _scalar(self, event, pointer):
        text = _clean_text(event.value, self.document, pointer)
        tag = event.tag
        plain = event.style is None
        if tag is None and not plain or tag == "!" or tag == _CORE_TAG + "str":
            return text
        if tag is not None and tag not in _SCALAR_TAGS:
            self._error(event, pointer, f"tag {_short_tag(tag)} is not allowed",
                        "only the YAML 1.2 core schema is read: !!str !!int !!float !!bool "
                        "!!null !!map !!seq; nothing in a profile is ever executed")
            return None
        if self.json_mode:
            return self._json_scalar(event, pointer, text)
        value = _resolve_plain(text, None if tag is None else tag[len(_CORE_TAG):])
        if value is _UNRESOLVED:
            self._error(event, pointer, f"{text!r} is not a valid {_short_tag(tag)} value")
            return None
        return self._checked_number(event, pointer, text, value)

    def _json_scalar(self, event, pointer, text):
        if text in ("true", "false"):
            return text == "true"
        if text == "null":
            return None
        if text in _JSON_NON_NUMBERS:
            self._error(event, pointer, f"{text} is not a JSON number", "write a finite number")
            return _JSON_NON_NUMBERS[text]
        if _JSON_NUMBER.fullmatch(text):
            is_int = not any(c in text for c in ".eE")
            value = _to_int(text) if is_int else float(text)
            return self._checked_number(event, pointer, text, value)
        self._error(event, pointer, f"{text!r} is not a JSON value")  # pragma: no cover
        return None

    def _checked_number(self, event, pointer, text, value):
        too_large = (
            value is _TOO_LARGE
            or isinstance(value, float) and value in (float("inf"), float("-inf"))
            and not _INF.fullmatch(text)
        )
        if isinstance(value, int) and not isinstance(value, bool) and value is not _TOO_LARGE:
            try:
                float(value)
            except OverflowError:
                too_large = True
        if too_large and not any(c in text for c in ".eE"):
            self._error(event, pointer, f"the integer {_shorten(text)} ({len(text.lstrip('+-'))} digits) is "
                        "too large for any value of a profile", "is a digit too many?")
        elif too_large:
            self._error(event, pointer, f"the number {_shorten(text)} is too large for a "
                        "floating-point value", "is a digit or an exponent too many?")
            return float("inf") if not text.startswith("-") else float("-inf")
        return value


def _at(problem: Problem, event) -> Problem:
    """The problem placed at an event's mark (the precise place in the text)."""
    from dataclasses import replace

    mark = event.start_mark
    return replace(problem, line=mark.line + 1, column=mark.column + 1)


_UNRESOLVED = object()
_TOO_LARGE = object()


def _resolve_plain(text: str, tag: str | None):
    """A plain scalar by the YAML 1.2 core schema [YAML12]_, or under an explicit core tag."""
    if tag in (None, "null") and _NULL.fullmatch(text):
        return None
    if tag in (None, "bool"):
        if _BOOL_TRUE.fullmatch(text):
            return True
        if _BOOL_FALSE.fullmatch(text):
            return False
    if tag in (None, "int", "float"):
        number = None
        if _INT10.fullmatch(text):
            number = _to_int(text)
        elif _INT8.fullmatch(text):
            number = _to_int(text[2:], 8)
        elif _INT16.fullmatch(text):
            number = _to_int(text[2:], 16)
        if number is not None:
            if tag == "float" and number is not _TOO_LARGE:
                try:
                    return float(number)
                except OverflowError:
                    return _TOO_LARGE
            return number
    if tag in (None, "float"):
        if _FLOAT.fullmatch(text):
            return float(text)
        if _INF.fullmatch(text):
            return float("-inf") if text.startswith("-") else float("inf")
        if _NAN.fullmatch(text):
            return float("nan")
    if tag is None:
        return text
    return _UNRESOLVED


_PLAIN_TEXT = re.compile(r"[A-Za-z_./(][A-Za-z0-9_./()+ -]*[A-Za-z0-9_.)]|[A-Za-z_]")


def _dump_mapping(mapping: dict, indent: int, lines: list) -> None:
    pad = " " * indent
    for key, item in mapping.items():
        head = f"{pad}{_dump_scalar(key)}:"
        if isinstance(item, dict) and item:
            lines.append(head)
            _dump_mapping(item, indent + 2, lines)
        elif isinstance(item, list) and item and not _flat(item):
            lines.append(head)
            for entry in item:
                if isinstance(entry, dict) and entry and not _flat(entry):
                    lines.append(f"{pad}  -")
                    _dump_mapping(entry, indent + 4, lines)
                else:
                    lines.append(f"{pad}  - {_dump_flow(entry)}")
        else:
            lines.append(f"{head} {_dump_flow(item)}")


def _flat(collection) -> bool:
    """True when every member is a scalar (the collection fits on one line in flow style)."""
    members = collection.values() if isinstance(collection, dict) else collection
    return not any(isinstance(m, (dict, list)) for m in members)


def _dump_flow(value) -> str:
    if isinstance(value, dict):
        return "{" + ", ".join(f"{_dump_scalar(k)}: {_dump_flow(v)}" for k, v in value.items()) + "}"
    if isinstance(value, list):
        return "[" + ", ".join(_dump_flow(v) for v in value) + "]"
    return _dump_scalar(value)


def _dump_scalar(value) -> str:
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if not math.isfinite(value):
            raise ValueError(f"{value} is not a finite number")
        text = repr(value)
        return text if _FLOAT.fullmatch(text) else json.dumps(value)
    if isinstance(value, str):
        # Plain only when it cannot be read as anything else (null, true, 1e3, a key, a comment).
        if _PLAIN_TEXT.fullmatch(value) and _resolve_plain(value, None) == value and "  " not in value:
            return value
        return json.dumps(value)
    raise ValueError(f"cannot write a {type(value).__name__} as YAML")


def _json_int(digits: str):
    """An integer of a JSON text read without positions: beyond a float's range, infinity (then refused)."""
    value = _to_int(digits)
    if value is _TOO_LARGE:
        return float("-inf") if digits.startswith("-") else float("inf")
    return value


def _to_int(digits: str, base: int = 10):
    if len(digits.lstrip("+-0")) > _MAX_INT_DIGITS:
        return _TOO_LARGE
    return int(digits, base)


def _short_tag(tag: str | None) -> str:
    if tag is None:
        return "(none)"
    return "!!" + tag[len(_CORE_TAG):] if tag.startswith(_CORE_TAG) else tag


def _shorten(text: str, limit: int = 24) -> str:
    return text if len(text) <= limit else text[: limit - 3] + "..."


__all__ = [
    "Document",
    "read_document",
    "parse_text",
    "dump_yaml",
    "pointer_join",
    "pointer_tokens",
    "MAX_DOCUMENT_BYTES",
    "MAX_NODES",
    "MAX_DEPTH",
]
