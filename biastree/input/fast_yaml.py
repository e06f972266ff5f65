"""A fast reader for the plain subset of YAML that plan files use.

Plans are block mappings and sequences of plain scalars, one-line flow
mappings (``- {to: m1, ratio: 2}``) and one-line flow sequences
(``voltage: [0.5V, 1.2V]``), with comments.  ``read`` parses exactly that
subset with string methods, several times faster than walking libyaml's
events from Python, and gives the same plain data as the loader's event
walk: every scalar its text as a string (libyaml's C loader marks plain scalars
with style ``''``, so the walk never turns ``~`` or ``null`` into ``None``;
an empty value is ``""``).

Anything outside the subset (quotes, anchors and aliases, tags, block
scalars, multi-line scalars or flows, duplicate or merge keys, directives,
a second document, tabs, control or non-ASCII-printable characters, …)
makes ``read`` return ``None``, and the loader takes its full path, which
also gives every error message with its line.  So this reader never has to
produce an error message: a text it accepts is one the full path reads
without a problem, to the same data (tests/test_fast_paths.py compares
both on the samples, generated plans and mutated texts).
"""

from __future__ import annotations

import re
from typing import Any

# characters that never occur in the subset (quotes, escapes, anchors, tags,
# block scalars, reserved indicators, tabs and carriage returns)
_OUTSIDE = re.compile(r"[\\&!|>@`]")
# a plain scalar may not start with these (indicators, aliases, directives)
_BAD_START = frozenset("-?:,[]{}#&*!|>'\"%@` ")
_FLOW_CHARS = re.compile(r"[\[\]{},#]")
_MAX_DEPTH = 64
# the plainest scalars (names, numbers with units), checked by one regex:
# no spaces, no indicators anywhere, not starting with '*', '%' or '- '
_S = r"(?:[A-Za-z0-9_.+/(~=$;<]|-(?=[^\s,{}\[\]]))[A-Za-z0-9_.+\-/*^%()~=$;<]*"
_SIMPLE = re.compile(_S)
_SIMPLE_MAP = re.compile(rf"\{{{_S}: {_S}(?:, {_S}: {_S})*\}}")


class _Outside(Exception):
    """The text leaves the subset: the caller takes the full YAML path."""


def _scalar(text: str, flow: bool) -> Any:
    """One plain scalar (already stripped) as the event walk gives it."""
    first = text[0]
    if first in _BAD_START and not (first == "-" and len(text) > 1 and text[1] != " "):
        raise _Outside
    if ": " in text or text.endswith(":") or " #" in text:
        raise _Outside
    if flow:
        if ":" in text or _FLOW_CHARS.search(text):
            raise _Outside
    elif "[" in text or "]" in text or "{" in text or "}" in text or "#" in text:
        raise _Outside
    return text


def _key(text: str) -> str:
    if not text or text != text.strip() or text == "<<":
        raise _Outside
    if text[0] in _BAD_START or ":" in text or _FLOW_CHARS.search(text):
        raise _Outside
    return text


def _flow(text: str) -> Any:
    """A one-line flow mapping or sequence of plain scalars."""
    inner = text[1:-1]
    if _SIMPLE_MAP.fullmatch(text):
        pairs = [item.split(": ") for item in inner.split(", ")]
        out = dict(pairs)  # type: ignore[arg-type]
        if len(out) != len(pairs) or "<<" in out:
            raise _Outside
        return out
    value, end = _flow_node(text, 0, 0)
    if end != len(text):
        raise _Outside
    return value


def _flow_node(text: str, i: int, depth: int) -> tuple[Any, int]:
    """The flow mapping, sequence or plain scalar at ``text[i]`` (no spaces
    before it) and the index just after it."""
    if depth > _MAX_DEPTH:
        raise _Outside
    opener = text[i]
    if opener not in "{[":
        j = i
        n = len(text)
        while j < n and text[j] not in ",]}":
            j += 1
        return _scalar(text[i:j].rstrip(" "), True), j
    closer = "}" if opener == "{" else "]"
    out: Any = {} if opener == "{" else []
    i = _skip(text, i + 1)
    if text[i] == closer:
        return out, i + 1
    while True:
        if opener == "{":
            colon = text.find(": ", i)
            if colon < 0:
                raise _Outside
            key = _key(text[i:colon].rstrip(" "))
            if key in out:
                raise _Outside
            value, i = _flow_node(text, _skip(text, colon + 2), depth + 1)
            out[key] = value
        else:
            value, i = _flow_node(text, i, depth + 1)
            out.append(value)
        i = _skip(text, i)
        if text[i] == closer:
            return out, i + 1
        if text[i] != ",":
            raise _Outside
        i = _skip(text, i + 1)
        if text[i] in ",]}":
            raise _Outside  # an empty entry


def _skip(text: str, i: int) -> int:
    while text[i] == " ":
        i += 1
    return i


_QUOTED = re.compile(r'"[^"\\]*"' + r"|'[^']*'")


def _value(text: str) -> Any:
    """The value written after ``key: `` or ``- `` on one line."""
    if _SIMPLE.fullmatch(text):
        return text
    if text[0] in "{[":
        return _flow(text)
    if text[0] in "\"'" and _QUOTED.fullmatch(text):
        return text[1:-1]  # quoted: a string, never null; no escapes in the subset
    return _scalar(text, False)


def _content(line: str) -> str:
    """A line without its comment and surrounding spaces."""
    if "#" in line:
        if line.lstrip(" ").startswith("#"):
            return ""
        cut = line.find(" #")
        if cut >= 0:
            line = line[:cut]
        if "#" in line:
            raise _Outside
    content = line.strip(" ")
    if content and _OUTSIDE.search(content):
        raise _Outside
    return content


def _lines(text: str) -> tuple[list[int], list[str]]:
    """Indent and content of every line that holds something (comments
    dropped); ``- key: value`` becomes ``-`` and ``key: value`` one column
    further in, which is what it means."""
    indents: list[int] = []
    contents: list[str] = []
    started = False
    lines = iter(text.split("\n"))
    for line in lines:
        content = _content(line)
        if not content:
            continue
        indent = len(line) - len(line.lstrip(" "))
        if ("{" in content or "[" in content) and (
                content.count("{") + content.count("[") != content.count("}") + content.count("]")):
            # a flow mapping or sequence over several lines: one line, if no scalar is cut
            while content.count("{") + content.count("[") > content.count("}") + content.count("]"):
                if content[-1] not in ",{[":
                    raise _Outside
                more = next(lines, None)
                if more is None or len(more) - len(more.lstrip(" ")) <= indent:
                    raise _Outside
                more = _content(more)
                if not more or more[0] == ",":
                    raise _Outside
                content += " " + more
        if not started:
            started = True
            if content == "---":
                continue
        if content.startswith(("---", "...", "%")):
            raise _Outside
        while content[0] == "-" and (len(content) == 1 or content[1] == " "):
            rest = content[1:].lstrip(" ")
            if not rest or rest[0] in "{[" or (": " not in rest and not rest.endswith(":")):
                break
            # a compact mapping in a sequence entry: "-" then the mapping, indented to its first key
            indents.append(indent)
            contents.append("-")
            indent += len(content) - len(rest)
            content = rest
        indents.append(indent)
        contents.append(content.rstrip(" "))
    return indents, contents


def read(text: str) -> Any:
    """The plain data of ``text``, or ``None`` when it leaves the subset."""
    # (not printable: control characters, the YAML 1.1 line breaks U+0085,
    # U+2028/9, a byte-order mark inside the text, non-breaking spaces)
    if "\t" in text or "\r" in text or not text.replace("\n", "").isprintable():
        return None
    try:
        indents, contents = _lines(text)
        if not indents or indents[0] != 0:
            return None
        data, end = _block(indents, contents, 0, 0, 0)
        if end != len(indents) or not isinstance(data, dict):
            return None
        return data
    except (_Outside, RecursionError, IndexError):
        return None


def _is_item(content: str) -> bool:
    return content[0] == "-" and (len(content) == 1 or content[1] == " ")


def _block(indents: list[int], contents: list[str], i: int, indent: int, depth: int) -> tuple[Any, int]:
    """The block mapping or sequence whose first line is ``i`` at ``indent``."""
    if depth > _MAX_DEPTH:
        raise _Outside
    n = len(indents)
    if _is_item(contents[i]):
        items: list[Any] = []
        while i < n and indents[i] == indent:
            content = contents[i]
            if not _is_item(content):
                break
            rest = content[1:].lstrip(" ")
            i += 1
            if rest:
                items.append(_value(rest))
            elif i < n and indents[i] > indent:
                value, i = _block(indents, contents, i, indents[i], depth + 1)
                items.append(value)
            else:
                items.append("")  # an empty entry: libyaml's empty scalar
        if i < n and indents[i] > indent:
            raise _Outside
        return items, i
    out: dict[str, Any] = {}
    while i < n and indents[i] == indent:
        content = contents[i]
        if _is_item(content):
            raise _Outside
        if content.endswith(":"):
            key, rest = content[:-1], ""
        else:
            key, sep, rest = content.partition(": ")
            if not sep:
                raise _Outside
            rest = rest.lstrip(" ")
        if not _SIMPLE.fullmatch(key) or key == "<<":
            key = _key(key)
        if key in out:
            raise _Outside
        i += 1
        if rest:
            out[key] = _value(rest)
        elif i < n and (indents[i] > indent or (indents[i] == indent and _is_item(contents[i]))):
            out[key], i = _block(indents, contents, i, indents[i], depth + 1)
        else:
            out[key] = ""  # an empty value: libyaml's empty scalar
    if i < n and indents[i] > indent:
        raise _Outside
    return out, i
