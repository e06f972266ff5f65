"""Read a plan file (YAML or JSON) into a validated ``Plan``.

A pipeline of small steps: read text → parse to plain data (keeping the
YAML node tree for line numbers) → validate with the pydantic models →
check the tree's structure.  Every problem found is collected and raised
together as one ``PlanError``; the file itself is only ever read.
"""

from __future__ import annotations

import difflib
import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Union, get_args, get_origin

import yaml
from pydantic import BaseModel, ValidationError

from biastree.errors import PlanError, Problem, format_path
from biastree.input.model import BjtModel, MosModel, Plan

# libyaml's C parser when present; only its events are used (no resolver).
_Loader = getattr(yaml, "CBaseLoader", yaml.BaseLoader)


@dataclass
class Document:
    """Plain data of a plan file plus what is needed to find lines in it."""

    data: Any
    text: str
    source: str
    _lines: dict[tuple[Any, ...], int] | None = None

    def line_of(self, path: tuple[Any, ...]) -> int | None:
        """1-based line of the deepest key on ``path`` that exists in the file.

        Line numbers are only gathered when a message needs one (a second
        pass over the parser's events), so valid plans load at full speed.
        """
        if self._lines is None:
            try:
                self._lines = {}
                _build(_events(self.text), [], self._lines)
            except yaml.YAMLError:
                pass
        path = tuple(path)
        while path and path not in self._lines:
            path = path[:-1]
        return self._lines.get(path, 1 if self._lines else None)


# --- step 1: text → plain data ----------------------------------------------


_NULLS = ("", "~", "null", "Null", "NULL")


def _events(text: str) -> Any:
    """The parser's events, pulled straight from the (C) parser."""
    loader = _Loader(text)
    try:
        get = loader.get_event
        while True:
            event = get()
            yield event
            if type(event) is yaml.StreamEndEvent:
                return
    finally:
        loader.dispose()


def _build(events: Any, problems: list[Problem], lines: dict[tuple[Any, ...], int] | None = None) -> Any:
    """Parser events → plain Python data, avoiding YAML 1.1 surprises.

    Every scalar stays a string (the unit parser and the models read numbers
    from it), so ``1e-17`` is not left a string by accident, a load called
    ``no`` or ``on`` is not a boolean, and ``0777`` is not octal.  Duplicate
    keys are errors.  Walking events directly is several times faster than
    composing YAML nodes, which matters for plans of 100k loads.
    """
    root: Any = None
    # stack entries: [container, path, pending key (mappings only)]
    stack: list[list[Any]] = []
    anchors: dict[str, Any] = {}
    documents = 0

    def place(value: Any, event: Any, is_key_candidate: bool) -> None:
        nonlocal root
        line = event.start_mark.line + 1
        if not stack:
            root = value
            if lines is not None:
                lines[()] = line
            return
        top = stack[-1]
        container, path = top[0], top[1]
        if isinstance(container, dict):
            if top[2] is None:
                if not is_key_candidate:
                    problems.append(Problem(format_path(path), "keys must be plain names", line))
                    top[2] = _BAD_KEY
                    return
                key = "" if value is None else str(value)
                if key in container:
                    problems.append(Problem(format_path(path + (key,)), "duplicate key (each name may appear once)", line))
                    top[2] = _BAD_KEY
                    return
                top[2] = key
                if lines is not None:
                    lines[path + (key,)] = line
                return
            key, top[2] = top[2], None
            if key is not _BAD_KEY:
                container[key] = value
        else:
            if lines is not None:
                lines[path + (len(container),)] = line
            container.append(value)

    def child_path() -> tuple[Any, ...]:
        if not stack:
            return ()
        top = stack[-1]
        if isinstance(top[0], dict):
            return top[1] + (top[2],)
        return top[1] + (len(top[0]),)

    scalar, alias = yaml.ScalarEvent, yaml.AliasEvent
    starts = (yaml.MappingStartEvent, yaml.SequenceStartEvent)
    ends = (yaml.MappingEndEvent, yaml.SequenceEndEvent)
    for event in events:
        kind = type(event)
        if kind is scalar:
            value = None if event.style is None and event.value in _NULLS else event.value
            if event.anchor:
                anchors[event.anchor] = value
            # fast paths (no line numbers wanted): a key, or a value for a known key
            if stack and lines is None:
                top = stack[-1]
                container = top[0]
                if type(container) is dict:
                    key = top[2]
                    if key is None:
                        if value is not None and value not in container:
                            top[2] = value
                            continue
                    elif key is not _BAD_KEY:
                        container[key] = value
                        top[2] = None
                        continue
            place(value, event, True)
        elif kind in starts:
            container: Any = {} if kind is yaml.MappingStartEvent else []
            path = child_path()
            if event.anchor:
                anchors[event.anchor] = container
            place(container, event, False)
            stack.append([container, path, None])
        elif kind in ends:
            stack.pop()
        elif kind is alias:
            if event.anchor not in anchors:
                problems.append(Problem("", f"unknown alias *{event.anchor}", event.start_mark.line + 1))
                continue
            place(anchors[event.anchor], event, False)
        elif kind is yaml.DocumentStartEvent:
            documents += 1
            if documents > 1:
                problems.append(Problem("", "a plan file holds one YAML document", event.start_mark.line + 1))
                break
    return root


_BAD_KEY = object()


def _reject_duplicates(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
    out = dict(pairs)
    if len(out) != len(pairs):
        seen: set[str] = set()
        duplicate = next(k for k, _ in pairs if k in seen or seen.add(k))  # type: ignore[func-returns-value]
        raise ValueError(f"duplicate key '{duplicate}'")
    return out


def parse_text(text: str, source: str = "plan", fmt: str | None = None) -> Document:
    """Parse plan text (YAML, or JSON when ``fmt == 'json'``) to plain data."""
    problems: list[Problem] = []
    if fmt == "json":
        try:
            data = json.loads(text, object_pairs_hook=_reject_duplicates)
        except json.JSONDecodeError as exc:
            raise PlanError([Problem("", f"JSON syntax error: {exc.msg} (column {exc.colno})", exc.lineno)], source) from None
        except ValueError as exc:
            raise PlanError([Problem("", f"JSON: {exc}")], source) from None
        doc = Document(data, text, source)
    else:
        try:
            data = _build(_events(text), problems)
        except yaml.YAMLError as exc:
            mark = getattr(exc, "problem_mark", None)
            what = getattr(exc, "problem", None) or str(exc)
            line = mark.line + 1 if mark is not None else None
            raise PlanError([Problem("", f"YAML syntax error: {what}", line)], source) from None
        doc = Document(data, text, source)
    if problems:
        raise PlanError(problems, source)
    if not isinstance(doc.data, dict):
        raise PlanError([Problem("", "a plan must be a mapping of keys (title, supply, devices, reference, mirrors, loads)", 1)], source)
    return doc


# --- step 2: plain data → Plan --------------------------------------------


def _fields_at(path: tuple[Any, ...], model: Any = Plan) -> set[str] | None:
    """Allowed keys of the model that sits at ``path`` (None if unknown)."""
    current: Any = model
    for key in path:
        origin = get_origin(current)
        if isinstance(current, type) and issubclass(current, BaseModel):
            field = current.model_fields.get(key) or next(
                (f for f in current.model_fields.values() if f.alias == key), None
            )
            if field is None:
                return None
            current = field.annotation
        elif origin is dict:
            current = get_args(current)[1]
        elif origin is list:
            current = get_args(current)[0]
        else:
            return None
        current = _unwrap(current)
    if isinstance(current, type) and issubclass(current, BaseModel):
        return {f.alias or n for n, f in current.model_fields.items()}
    return None


def _unwrap(tp: Any) -> Any:
    # Annotated[X, ...] → X;  Union[Bjt, Mos] (the device union) → stays a union
    while get_origin(tp) is not None and hasattr(tp, "__metadata__"):
        tp = get_args(tp)[0]
    return tp


def _device_fields(kind: str) -> set[str]:
    model = BjtModel if kind in ("npn", "pnp") else MosModel
    return {f.alias or n for n, f in model.model_fields.items()}


_MESSAGES = {
    "missing": "required key is missing",
    "greater_than": "must be > {gt}",
    "greater_than_equal": "must be ≥ {ge}",
    "too_short": "must not be empty",
    "int_parsing": "must be a whole number",
    "int_from_float": "must be a whole number",
    "int_type": "must be a whole number",
    "dict_type": "must be a mapping of keys",
    "list_type": "must be a list",
    "string_type": "must be text",
    "float_type": "must be a number",
    "tuple_type": "must be a value or a [min, max] pair",
}


def _value_at(data: Any, path: tuple[Any, ...]) -> Any:
    for key in path:
        try:
            data = data[key]
        except (KeyError, IndexError, TypeError):
            return None
    return data


def _describe(err: dict[str, Any], data: Any) -> tuple[tuple[Any, ...], str]:
    """Turn one pydantic error into (path, message) in our words."""
    loc = tuple(err["loc"])
    kind = err["type"]
    # The discriminated device union puts the tag into the path: drop it.
    if len(loc) >= 3 and loc[0] == "devices" and loc[2] in ("npn", "pnp", "nmos", "pmos", "card"):
        loc = loc[:2] + loc[3:]
    # A [min, max] voltage that failed both union members: report it once.
    if "voltage" in loc:
        i = loc.index("voltage")
        branch = loc[i + 1] if len(loc) > i + 1 else None
        if isinstance(branch, str) and branch.startswith(("float", "function-", "tuple")):
            # a union of "one value" and "[min, max]": keep only the branch the input was meant for
            value = _value_at(data, loc[:i + 1])
            is_list = isinstance(value, list)
            if is_list and len(value) != 2:
                return loc[: i + 1], f"must be a value or a [min, max] pair (got {len(value)} values)"
            if is_list != branch.startswith("tuple"):
                return (), ""  # the other branch's complaint: dropped
            loc = loc[: i + 1] + tuple(k for k in loc[i + 2:] if isinstance(k, int))
    if kind == "extra_forbidden":
        key = loc[-1]
        parent = loc[:-1]
        allowed = _fields_at(parent)
        if allowed is None and len(parent) == 2 and parent[0] == "devices":
            dev = data.get("devices", {}).get(parent[1], {})
            kind_name = dev.get("kind") if isinstance(dev, dict) else None
            if kind_name in ("npn", "pnp", "nmos", "pmos"):
                allowed = _device_fields(kind_name)
                other = _device_fields("nmos" if kind_name in ("npn", "pnp") else "npn") - allowed
                if key in other:
                    return loc, f"'{key}' is a parameter of {'MOS' if kind_name in ('npn', 'pnp') else 'bipolar'} devices, not of a {kind_name}"
        message = "unknown key"
        if allowed:
            close = difflib.get_close_matches(str(key), sorted(allowed), n=1, cutoff=0.6)
            message += f" (did you mean '{close[0]}'?)" if close else f"; allowed: {', '.join(sorted(allowed))}"
        return loc, message
    if kind == "model_type":
        return loc, "must be a mapping of keys"
    if kind == "union_tag_invalid":
        return loc + ("kind",), "must be one of npn, pnp, nmos, pmos"
    if kind == "union_tag_not_found":
        return loc + ("kind",), "required key is missing (npn, pnp, nmos or pmos)"
    if kind == "literal_error":
        return loc, f"must be one of {err['ctx'].get('expected', '')}"
    if kind == "value_error":
        return loc, str(err["ctx"]["error"])
    template = _MESSAGES.get(kind)
    if template:
        return loc, template.format(**err.get("ctx", {}))
    return loc, err["msg"]


def validate(doc: Document) -> Plan:
    """Validate plain data against the plan models; all problems at once."""
    try:
        # model files named by devices are found relative to the plan's folder
        base = str(Path(doc.source).resolve().parent) if Path(doc.source).is_file() else None
        return Plan.model_validate(doc.data, context={"base": base})
    except ValidationError as exc:
        from biastree.input.checks import raw_name_problems

        problems = []
        seen = set()
        for err in exc.errors(include_url=False):
            loc, message = _describe(err, doc.data)
            if not message:
                continue
            key = (loc, message)
            if key in seen:
                continue
            seen.add(key)
            problems.append(Problem(format_path(loc), message, doc.line_of(loc)))
        # names that resolve to nothing are worth reporting in the same run
        flagged = {p.path for p in problems}
        for loc, message in raw_name_problems(doc.data):
            if format_path(loc) not in flagged:
                problems.append(Problem(format_path(loc), message, doc.line_of(loc)))
        problems.sort(key=lambda p: (p.line is None, p.line or 0))
        raise PlanError(problems, doc.source) from None


# --- the whole pipeline ----------------------------------------------------


def read_text(path: Path) -> str:
    try:
        return path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise PlanError([Problem("", "file not found")], str(path)) from None
    except IsADirectoryError:
        raise PlanError([Problem("", "is a folder, not a plan file")], str(path)) from None
    except UnicodeDecodeError as exc:
        raise PlanError([Problem("", f"not UTF-8 text ({exc.reason} at byte {exc.start})")], str(path)) from None
    except OSError as exc:
        raise PlanError([Problem("", f"cannot read: {exc.strerror}")], str(path)) from None


def load_document(path: Union[str, Path]) -> Document:
    path = Path(path)
    fmt = "json" if path.suffix.lower() == ".json" else "yaml"
    return parse_text(read_text(path), str(path), fmt)
