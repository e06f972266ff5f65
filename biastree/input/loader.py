"""Read a plan file (YAML or JSON) into a validated ``Plan``.

A pipeline of small steps: read text → parse to plain data (keeping the
YAML node tree for line numbers) → validate with the pydantic models →
check the tree's structure.  Every problem found is collected and raised
together as one ``PlanError``; the file itself is only ever read.
"""

from __future__ import annotations

import difflib
import json
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Union, get_args, get_origin

import yaml
from pydantic import BaseModel, ValidationError

from biastree.errors import PlanError, Problem, format_path, shown
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
    # problems found while parsing that leave the data usable (duplicate keys):
    # reported together with the field and structural problems
    problems: list[Problem] = field(default_factory=list)

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
    expanded = 0  # values added by aliases of containers, counted as if written out
    sizes: dict[int, int] = {}

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
                if key == "<<" and not getattr(event, "style", "x"):  # plain style: None or empty
                    problems.append(Problem(format_path(path + (key,)),
                                            "YAML merge keys (<<) are not supported: write the keys out "
                                            "(an alias of a whole mapping, key: *name, works)", line))
                    top[2] = _BAD_KEY
                    return
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
                        if value is not None and value not in container and value != "<<":
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
                problems.append(Problem("", f"unknown alias *{shown(event.anchor)}", event.start_mark.line + 1))
                continue
            target = anchors[event.anchor]
            if isinstance(target, (dict, list)):
                expanded += _size(target, sizes)
                if expanded > MAX_EXPANDED:
                    problems.append(Problem("", f"aliases expand to more than {MAX_EXPANDED:,} values "
                                                "(an alias bomb?); write the plan out", event.start_mark.line + 1))
                    break
            place(target, event, False)
        elif kind is yaml.DocumentStartEvent:
            documents += 1
            if documents > 1:
                problems.append(Problem("", "a plan file holds one YAML document", event.start_mark.line + 1))
                break
    return root


_BAD_KEY = object()
MAX_EXPANDED = 1_000_000


def _size(container: Any, sizes: dict[int, int]) -> int:
    """Values in ``container`` with every shared (aliased) part counted each
    time it appears; memoised by identity, without recursion."""
    stack = [(container, False)]
    while stack:
        node, done = stack.pop()
        if id(node) in sizes:
            continue
        items = node.values() if isinstance(node, dict) else node
        children = [c for c in items if isinstance(c, (dict, list))]
        if done:
            total = len(node) + sum(sizes.get(id(c), 0) for c in children)
            sizes[id(node)] = min(total, 10 * MAX_EXPANDED)
        else:
            stack.append((node, True))
            stack.extend((c, False) for c in children if id(c) not in sizes)
    return sizes[id(container)]


class _Pairs:
    """JSON object hook: the first of duplicate keys wins (as in YAML), and
    each duplicate is remembered so it can be reported with its line."""

    def __init__(self) -> None:
        self.duplicates: list[str] = []

    def __call__(self, pairs: list[tuple[str, Any]]) -> dict[str, Any]:
        out: dict[str, Any] = {}
        for key, value in pairs:
            if key in out:
                self.duplicates.append(key)
            else:
                out[key] = value
        return out


def _json_duplicates(text: str, keys: list[str]) -> list[Problem]:
    """Duplicate keys of a JSON text with their lines: JSON is (nearly) YAML
    flow syntax, so the YAML event walk finds them with their key paths."""
    found: list[Problem] = []
    try:
        _build(_events(text), found)
    except yaml.YAMLError:
        found = []
    found = [p for p in found if p.message.startswith("duplicate key")]
    if found:
        return found
    return [Problem("", f"duplicate key '{shown(k)}' (each name may appear once)") for k in keys]


def _yaml_problem(exc: yaml.YAMLError, text: str) -> Problem:
    """One line for a YAML error, with its line; no parser position dump."""
    if isinstance(exc, yaml.reader.ReaderError):
        line = text.count("\n", 0, exc.position) + 1
        char = exc.character
        code = f"U+{ord(char) if isinstance(char, str) else int(char):04X}"
        return Problem("", f"control character {code} is not allowed in a plan (remove it, or write it "
                           "escaped inside double quotes)", line)
    mark = getattr(exc, "problem_mark", None)
    what = getattr(exc, "problem", None) or str(exc).splitlines()[0]
    at_tab = mark is not None and 0 <= mark.index < len(text) and text[mark.index] == "\t"
    if "'\\t'" in what or "tab" in what or at_tab:
        what += " (a tab: YAML indents with spaces only)"
    line = mark.line + 1 if mark is not None else None
    return Problem("", f"YAML syntax error: {what}", line)


def _has_surrogate(data: Any) -> bool:
    stack = [data]
    while stack:
        node = stack.pop()
        if isinstance(node, str):
            if any("\ud800" <= c <= "\udfff" for c in node):
                return True
        elif isinstance(node, dict):
            stack.extend(node.keys())
            stack.extend(node.values())
        elif isinstance(node, list):
            stack.extend(node)
    return False


def parse_text(text: str, source: str = "plan", fmt: str | None = None, fast: bool = True) -> Document:
    """Parse plan text (YAML, or JSON when ``fmt == 'json'``) to plain data.

    A UTF-8 byte-order mark is accepted in both formats.  ``fast`` first
    tries the fast readers (``fast_yaml`` for the plain YAML subset plans
    use, orjson for JSON without duplicate keys); a text they do not take
    goes the full way, which gives every message with its line.
    """
    problems: list[Problem] = []
    if text.startswith("\ufeff"):
        text = text[1:]
    if fast:
        data = _fast_json(text) if fmt == "json" else _fast_yaml(text)
        if isinstance(data, dict):
            return Document(data, text, source)
    if fmt == "json":
        hook = _Pairs()
        try:
            data = json.loads(text, object_pairs_hook=hook)
        except json.JSONDecodeError as exc:
            raise PlanError([Problem("", f"JSON syntax error: {exc.msg} (column {exc.colno})", exc.lineno)], source) from None
        except RecursionError:
            raise PlanError([Problem("", "JSON nested too deeply for a plan")], source) from None
        except ValueError as exc:  # e.g. an integer of more digits than Python converts
            raise PlanError([Problem("", f"JSON: {shown(str(exc), 120)}")], source) from None
        if hook.duplicates:
            problems += _json_duplicates(text, hook.duplicates)
    else:
        try:
            data = _build(_events(text), problems)
        except yaml.YAMLError as exc:
            raise PlanError([_yaml_problem(exc, text)], source) from None
    if ("\\u" in text or "\\U" in text) and _has_surrogate(data):
        raise PlanError([Problem("", "a string holds a lone surrogate escape (e.g. \\ud800), which is not a character")],
                        source)
    fatal = [p for p in problems if not p.message.startswith("duplicate key")]
    if fatal:
        raise PlanError(problems, source)
    if not isinstance(data, dict):
        raise PlanError([Problem("", "a plan must be a mapping of keys (title, supply, devices, reference, mirrors, loads)", 1)], source)
    return Document(data, text, source, problems=problems)


def _fast_yaml(text: str) -> Any:
    """The fast reader's data (None: the full path reads the text).  It
    matches the walk over libyaml's C events; without libyaml the walk's
    pure-Python events differ (plain nulls), so then the walk always runs."""
    if _Loader is not getattr(yaml, "CBaseLoader", None):
        return None
    from biastree.input.fast_yaml import read

    return read(text)


_JSON_KEY = re.compile(r'"\s*:')


def _fast_json(text: str) -> Any:
    """orjson's reading of ``text`` when it has no duplicate key, else None.

    A duplicate key would leave fewer entries than keys written; every key
    is a closing quote followed by a colon, so counting those (a string
    holding one counts too, and only sends the text the full way) proves
    there is none.  Texts orjson refuses (NaN, huge integers, lone
    surrogates, syntax errors) also go the full way, for its messages.
    """
    import orjson

    try:
        data = orjson.loads(text)
    except (orjson.JSONDecodeError, ValueError, RecursionError):
        return None
    if not isinstance(data, dict):
        return None
    entries, stack = 0, [data]
    while stack:
        node = stack.pop()
        if type(node) is dict:
            entries += len(node)
            stack.extend(v for v in node.values() if type(v) in (dict, list))
        else:
            stack.extend(v for v in node if type(v) in (dict, list))
    return data if entries == len(_JSON_KEY.findall(text)) else None


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
    "model_attributes_type": "must be a mapping of keys",
    "string_too_long": "must be at most {max_length} characters",
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


def _describe(err: dict[str, Any], data: Any, model: Any = Plan) -> tuple[tuple[Any, ...], str]:
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
        allowed = _fields_at(parent, model)
        if allowed is None and len(parent) == 2 and parent[0] == "devices":
            dev = data.get("devices", {}).get(parent[1], {})
            kind_name = dev.get("kind") if isinstance(dev, dict) else None
            if kind_name in ("npn", "pnp", "nmos", "pmos"):
                allowed = _device_fields(kind_name)
                other = _device_fields("nmos" if kind_name in ("npn", "pnp") else "npn") - allowed
                if key in other:
                    return loc, f"'{key}' is a parameter of {'MOS' if kind_name in ('npn', 'pnp') else 'bipolar'} devices, not of a {kind_name}"
        if (len(parent) == 2 and parent[0] == "devices" and key in ("beta", "va")
                and isinstance(data.get("devices", {}).get(parent[1]), dict)
                and "card" in data["devices"][parent[1]]):
            card_name = {"beta": "BF", "va": "VAF"}[key]
            return loc, f"{key} cannot be given with a card: the card's {card_name} is used"
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


def validate(doc: Document, model: Any = Plan) -> Any:
    """Validate plain data against the plan models (or another strict model of
    the same family, e.g. the planner's block list); all problems at once.

    When some fields are invalid, the structural checks still run on a copy
    of the plan in which the broken entries are replaced by neutral ones, and
    the problems they find are reported too unless they depend on a broken
    part (a feed, the supply, a device kind).
    """
    from biastree.input.checks import raw_name_problems, structure_tagged

    # model files named by devices are found relative to the plan's folder
    base = str(Path(doc.source).resolve().parent) if Path(doc.source).is_file() else None
    try:
        plan = model.model_validate(doc.data, context={"base": base})
    except ValidationError as exc:
        problems = []
        seen = set()
        errors = exc.errors(include_url=False)
        described = [_describe(err, doc.data, model) for err in errors]
        # a misspelt required key is one slip: said once, at the misspelling
        missing = {loc for loc, message in described if message == _MESSAGES["missing"]}
        meant: set[tuple[Any, ...]] = set()
        for k, (loc, message) in enumerate(described):
            close = re.search(r"\(did you mean '(.+)'\?\)$", message) if loc else None
            if close and loc[:-1] + (close.group(1),) in missing - meant:
                meant.add(loc[:-1] + (close.group(1),))
                described[k] = loc, f"unknown key (did you mean '{close.group(1)}'? it is required and missing)"
        described = [(loc, "" if loc in meant and message == _MESSAGES["missing"] else message)
                     for loc, message in described]
        for loc, message in described:
            if not message:
                continue
            key = (loc, message)
            if key in seen:
                continue
            seen.add(key)
            problems.append(Problem(format_path(loc), message, doc.line_of(loc)))
        # names that resolve to nothing are worth reporting in the same run
        flagged = {p.path for p in problems}
        for loc, message in (raw_name_problems(doc.data) if model is Plan else ()):
            if format_path(loc) not in flagged:
                flagged.add(format_path(loc))
                problems.append(Problem(format_path(loc), message, doc.line_of(loc)))
        for loc, message in (_structure_despite(doc.data, errors) if model is Plan else ()):
            if format_path(loc) not in flagged:
                problems.append(Problem(format_path(loc), message, doc.line_of(loc)))
        raise PlanError(_sorted(doc.problems + problems), doc.source) from None
    if doc.problems:
        tagged = structure_tagged(plan) if model is Plan else []
        found = [Problem(format_path(loc), message, doc.line_of(loc)) for loc, message, _ in tagged]
        raise PlanError(_sorted(doc.problems + found), doc.source)
    return plan


def _sorted(problems: list[Problem]) -> list[Problem]:
    return sorted(problems, key=lambda p: (p.line is None, p.line or 0))


# --- structural checks when some fields are invalid -------------------------

_NOWHERE = "\u2400"  # a placeholder name no plan can use (a control picture)
_KINDS = ("npn", "pnp", "nmos", "pmos")


def _good_name(value: Any) -> bool:
    return isinstance(value, str) and 0 < len(value) <= 200 and value.isprintable() and value != _NOWHERE


def _neutral_device(raw: Any) -> tuple[dict[str, Any], bool]:
    kind = raw.get("kind") if isinstance(raw, dict) else None
    known = kind in _KINDS
    if kind in ("nmos", "pmos"):
        return {"kind": kind, "kp": "100uA/V^2", "vth": "0.5V", "w": "1um", "l": "1um"}, True
    return {"kind": kind if known else "npn", "is": "1e-16A", "beta": "100"}, known


def _neutral_mirror(raw: Any) -> tuple[dict[str, Any], bool]:
    """A valid mirror keeping the names of ``raw``; False when a feed was lost."""
    from biastree.physics.topologies import TOPOLOGIES

    spec = raw if isinstance(raw, dict) else {}
    out: dict[str, Any] = {"device": spec.get("device") if _good_name(spec.get("device")) else _NOWHERE}
    if isinstance(spec.get("topology"), str) and spec["topology"] in TOPOLOGIES:
        out["topology"] = spec["topology"]
    branches = spec.get("branches")
    kept = True
    out["branches"] = []
    for branch in branches if isinstance(branches, list) else []:
        to = branch.get("to") if isinstance(branch, dict) else None
        kept &= _good_name(to)
        out["branches"].append({"to": to if _good_name(to) else _NOWHERE})
    if not out["branches"]:
        out["branches"], kept = [{"to": _NOWHERE}], False
    return out, kept


def _structure_despite(data: Any, errors: list[Any]) -> list[tuple[tuple[Any, ...], str]]:
    """Structural problems of ``data`` that its field errors leave meaningful."""
    from biastree.input.checks import structure_tagged

    if not isinstance(data, dict) or any(not isinstance(data.get(k), dict) for k in ("devices", "mirrors", "loads", "reference")):
        return []  # without these sections no structure is left to check
    fixed = dict(data)
    broken: set[tuple[Any, ...]] = set()
    copied: set[str] = set()
    feeds_lost, supply_lost = False, False
    unknown_kind: set[str] = set()
    for err in errors:
        loc = tuple(err["loc"])
        if not loc:
            return []
        top = loc[0]
        if top in ("devices", "mirrors", "loads") and len(loc) >= 2:
            name = loc[1]
            if (top, name) in broken or name not in data[top]:
                continue
            if not _good_name(name):
                return []
            broken.add((top, name))
            if top not in copied:
                fixed[top] = dict(data[top])
                copied.add(top)
            raw = data[top][name]
            if top == "devices":
                fixed[top][name], known = _neutral_device(raw)
                if not known:
                    unknown_kind.add(name)
            elif top == "mirrors":
                fixed[top][name], kept = _neutral_mirror(raw)
                feeds_lost |= not kept
            else:
                fixed[top][name] = {"current": "1uA", "tolerance": "1%", "voltage": "0V"}
        elif top == "reference":
            feeds = data["reference"].get("feeds")
            feeds_lost |= not _good_name(feeds)
            fixed["reference"] = {"current": "1uA", "feeds": feeds if _good_name(feeds) else _NOWHERE}
            broken.add(("reference",))
        elif top == "supply":
            fixed["supply"], supply_lost = "1V", True
            broken.add(("supply",))
        elif top in ("devices", "mirrors", "loads"):
            return []  # the section itself (empty, or not a mapping)
        else:  # a section structure does not rest on (or an unknown key): use its default
            fixed.pop(top, None)
            broken.add((top,))
    try:
        plan = Plan.model_validate(fixed)
    except ValidationError:
        return []
    users = {m for m, spec in plan.mirrors.items() if spec.device in unknown_kind}
    out = []
    for path, message, tag in structure_tagged(plan):
        if any(path[: len(b)] == b for b in broken):
            continue
        if (tag == "reach" and feeds_lost) or (tag == "supply" and supply_lost):
            continue
        if tag.startswith("kind:") and users & set(tag.split(":")[1:]):
            continue
        out.append((path, message))
    return out


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
