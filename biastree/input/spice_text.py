"""The SPICE text layer: logical lines, tokens, numbers, ``.param`` expressions,
``.model`` cards, ``.include`` / ``.lib`` resolution and ``.subckt`` bodies.

SPICE is read as SPICE reads it: case-insensitive names, ``+`` continuation
lines, ``*`` comment lines, ``;`` and ``$`` trailing comments, parentheses
optional around parameter lists, ``key = value`` with or without spaces.
Numbers carry SPICE's scale suffixes (``f p n u m k meg g t``; ``M`` is milli,
``MEG`` mega, ``mil`` a thousandth of an inch) and any unit letters after the
suffix are ignored, as SPICE does (``10uA`` = ``10u``, ``1MEGohm`` = 1e6).

Every object that comes from a line records the file and line it came from,
and every error is one ``file:line: message``.  Expressions are evaluated by a
small, safe arithmetic evaluator (numbers, names, ``+ - * / **`` / ``^``,
unary signs, parentheses and a few functions); anything else is refused.

>>> spice_number("1MEG"), spice_number("2.2mA"), spice_number("10u")
(1000000.0, 0.0022, 1e-05)
>>> deck = parse_text(".param w=2\\n.model qn npn (is={1e-16*w} bf=100)\\n", "x.lib")
>>> deck.models["qn"].value("is"), deck.models["qn"].kind
(2e-16, 'npn')
"""

from __future__ import annotations

import ast
import math
import re
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field
from pathlib import Path

from biastree.errors import BiasTreeError
from biastree.units import _scaled

# SPICE scale suffixes (lower case).  'meg' and 'mil' are checked before the
# one-letter ones; 'm' is milli, as in every SPICE.  No 'a': ngspice reads
# '1e-17A' as 1e-17 amperes, not atto (checked with ngspice 39).
_SCALE: dict[str, int] = {"t": 12, "g": 9, "k": 3, "m": -3, "u": -6, "n": -9, "p": -12, "f": -15}
_NUMBER_HEAD = re.compile(r"^([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)([A-Za-z_µ%]*)$")


class SpiceError(BiasTreeError):
    """A SPICE file could not be read: one ``file:line: message``."""

    def __init__(self, where: str, message: str) -> None:
        self.where = where
        self.message = message
        super().__init__(f"{where}: {message}" if where else message)


def spice_number(text: str) -> float | None:
    """The value of a SPICE number such as ``4.7k``, ``1MEG``, ``10uA``; ``None`` if not one.

    >>> spice_number("1.5e-3V"), spice_number("1mil"), spice_number("abc")
    (0.0015, 2.54e-05, None)
    """
    match = _NUMBER_HEAD.match(text.strip())
    if not match:
        return None
    number, tail = match.group(1), match.group(2).lower()
    if tail.startswith("meg"):
        return _scaled(number, 6)
    if tail.startswith("mil"):
        return float(number) * 25.4e-6
    if tail[:1] in _SCALE:
        return _scaled(number, _SCALE[tail[0]])
    return _scaled(number, 0)  # unit letters only ('V', 'ohm') are ignored


class _Located:
    """``where`` = 'file:line' for the records below, which all carry ``file`` and ``line``."""

    file: str
    line: int

    @property
    def where(self) -> str:
        return f"{self.file}:{self.line}"


@dataclass(frozen=True)
class Line(_Located):
    """One logical line (continuations joined, comments removed) and where it starts."""

    text: str
    file: str
    line: int


    def error(self, message: str) -> SpiceError:
        return SpiceError(self.where, message)

    @property
    def keyword(self) -> str:
        """The first word in lower case (``.model``, ``.param``, ``q1``…)."""
        head = self.text.split(None, 1)
        return head[0].lower() if head else ""


def _strip_comment(text: str) -> str:
    # ';' starts a comment anywhere; '$' only after white space (ngspice's rule),
    # so that names containing '$' survive.  Neither inside {…} or '…'.
    depth, quote = 0, False
    for i, ch in enumerate(text):
        if ch == "'" :
            quote = not quote
        elif ch == "{":
            depth += 1
        elif ch == "}":
            depth = max(0, depth - 1)
        elif not quote and depth == 0 and (ch == ";" or (ch == "$" and (i == 0 or text[i - 1] in " \t"))):
            return text[:i]
    return text


def logical_lines(text: str, file: str, title: bool = False) -> list[Line]:
    """Split SPICE text into logical lines.

    ``title=True`` drops the first line, as a simulator does with a deck's title.

    >>> [(l.text, l.line) for l in logical_lines("R1 a b\\n+ 1k ; one\\n* c\\nR2 a 0 2k", "n.cir")]
    [('R1 a b 1k', 1), ('R2 a 0 2k', 4)]
    """
    out: list[Line] = []
    raw = text.splitlines()
    start = 1 if title else 0
    for number, physical in enumerate(raw[start:], start=start + 1):
        stripped = physical.strip()
        if not stripped or stripped.startswith("*"):
            continue
        body = _strip_comment(stripped).strip()
        if body.startswith("+"):
            if not out:
                raise SpiceError(f"{file}:{number}", "continuation line '+' with no line before it")
            last = out[-1]
            joined = f"{last.text} {body[1:].strip()}".strip()
            out[-1] = Line(joined, last.file, last.line)
            continue
        if body:
            out.append(Line(body, file, number))
    return out


def tokens(text: str) -> list[str]:
    """Words of a line: ``{…}`` and ``'…'`` kept whole, ``(``, ``)`` and ``,``
    outside them treated as spaces, and ``key = value`` glued to ``key=value``.

    >>> tokens(".model q npn (IS = 1e-16 bf={2*50}, vaf='a + 1')")
    ['.model', 'q', 'npn', 'IS=1e-16', 'bf={2*50}', "vaf='a + 1'"]
    """
    words: list[str] = []
    current = ""
    depth, quote, paren = 0, False, 0
    for ch in text:
        if quote:
            current += ch
            quote = ch != "'"
        elif ch == "'":
            quote = True
            current += ch
        elif ch in "{}":
            depth += 1 if ch == "{" else -1
            current += ch
        elif depth > 0:
            current += ch  # inside braces: kept whole
        elif paren > 0 and ch != ")":
            current += ch  # inside a call's parentheses: kept whole
            paren += ch == "("
        elif ch == "(" and "=" in current:
            current += ch  # a value such as agauss(0,1,1) or (1+2), unbraced
            paren += 1
        elif ch == ")" and paren > 0:
            current += ch
            paren -= 1
        elif ch.isspace() or ch in "(),":
            if current:
                words.append(current)
            current = ""
        else:
            current += ch
    if current:
        words.append(current)
    glued: list[str] = []
    i = 0
    while i < len(words):
        word = words[i]
        if word == "=" and glued and i + 1 < len(words):
            glued[-1] = f"{glued[-1]}={words[i + 1]}"
            i += 2
            continue
        if word.endswith("=") and i + 1 < len(words) and len(word) > 1:
            glued.append(word + words[i + 1])
            i += 2
            continue
        if word.startswith("=") and glued and len(word) > 1:
            glued[-1] = glued[-1] + word
            i += 1
            continue
        glued.append(word)
        i += 1
    return glued


def split_params(words: Iterable[str]) -> tuple[list[str], dict[str, str]]:
    """Positional words and ``key=value`` pairs (keys in lower case, order kept)."""
    positional: list[str] = []
    named: dict[str, str] = {}
    for word in words:
        key, sep, value = word.partition("=")
        if sep and key and not key.startswith(("{", "'")):
            named[key.lower()] = value
        else:
            positional.append(word)
    return positional, named


_NAME_EQ = re.compile(r"([A-Za-z_][\w.$]*)\s*=(?!=)")


def assignments(text: str) -> list[tuple[str, str]]:
    """``name=value`` pairs where a value runs up to the next ``name=`` (at the
    outer level), as ``.param`` reads them: ``x = {a} + f(1, 2) y=2``.

    >>> assignments("x = {a} + g(0, 1) y=2")
    [('x', '{a} + g(0, 1)'), ('y', '2')]
    >>> assignments("oops")
    [('', 'oops')]
    """
    starts: list[tuple[int, int, str]] = []
    depth, quote = 0, False
    i = 0
    while i < len(text):
        ch = text[i]
        if ch == "'":
            quote = not quote
        elif not quote and ch in "{(":
            depth += 1
        elif not quote and ch in "})":
            depth -= 1
        elif not quote and depth == 0 and (i == 0 or text[i - 1] in " \t,"):
            match = _NAME_EQ.match(text, i)
            if match:
                starts.append((i, match.end(), match.group(1)))
                i = match.end()
                continue
        i += 1
    if not starts or text[: starts[0][0]].strip():
        head = text[: starts[0][0]] if starts else text
        return [("", head.strip())]
    out = []
    for k, (_, value_start, name) in enumerate(starts):
        value_end = starts[k + 1][0] if k + 1 < len(starts) else len(text)
        out.append((name, text[value_start:value_end].strip().rstrip(",").strip()))
    return out


# --- safe arithmetic --------------------------------------------------------

def _nominal(mean: float, *_rest: float) -> float:
    # Statistical functions of model libraries evaluate to their mean: biastree
    # applies mismatch and corners itself, on top of the nominal card.
    return mean


FUNCTIONS: dict[str, Callable[..., float]] = {
    "sqrt": math.sqrt, "exp": math.exp, "log": math.log, "ln": math.log, "log10": math.log10,
    "abs": abs, "min": min, "max": max, "pow": math.pow, "pwr": math.pow,
    "agauss": _nominal, "gauss": _nominal, "aunif": _nominal, "unif": _nominal,
}
_BINARY = {ast.Add: lambda a, b: a + b, ast.Sub: lambda a, b: a - b, ast.Mult: lambda a, b: a * b,
           ast.Div: lambda a, b: a / b, ast.Pow: lambda a, b: a ** b}
_SUFFIXED = re.compile(r"(?<![A-Za-z_\d.])((?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)([A-Za-z_µ]*)")


def _python_text(expr: str) -> str:
    text = expr.strip()
    if len(text) >= 2 and text[0] in "{'" and text[-1] in "}'":
        text = text[1:-1].strip()
    text = text.replace("^", "**").replace("{", "(").replace("}", ")")
    # numbers with a scale suffix become plain numbers (the exponent is taken greedily first)
    return _SUFFIXED.sub(lambda m: repr(spice_number(m.group(0))) if m.group(2) else m.group(0), text)


def evaluate(expr: str, lookup: Callable[[str], float], where: str = "") -> float:
    """Value of a SPICE expression; ``lookup`` gives a parameter's value by lower-case name.

    >>> evaluate("{2*w + sqrt(4u)}", {"w": 1.5}.__getitem__)
    3.002
    >>> evaluate("1k", {}.get)
    1000.0
    """
    number = spice_number(expr.strip().strip("{}'").strip()) if expr.strip() else None
    if number is not None:
        return number
    text = _python_text(expr)
    try:
        tree = ast.parse(text, mode="eval")
    except SyntaxError:
        raise SpiceError(where, f"cannot read the expression '{expr}'") from None

    def walk(node: ast.AST) -> float:
        if isinstance(node, ast.Expression):
            return walk(node.body)
        if isinstance(node, ast.Constant) and isinstance(node.value, (int, float)) \
                and not isinstance(node.value, bool):
            return float(node.value)
        if isinstance(node, ast.BinOp) and type(node.op) in _BINARY:
            left, right = walk(node.left), walk(node.right)
            try:
                return float(_BINARY[type(node.op)](left, right))
            except (ZeroDivisionError, OverflowError):
                raise SpiceError(where, f"'{expr}': division by zero or overflow") from None
        if isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.UAdd, ast.USub)):
            value = walk(node.operand)
            return -value if isinstance(node.op, ast.USub) else value
        if isinstance(node, ast.Name):
            return lookup(node.id.lower())
        if isinstance(node, ast.Call) and isinstance(node.func, ast.Name) and not node.keywords:
            name = node.func.id.lower()
            if name not in FUNCTIONS:
                raise SpiceError(where, f"'{expr}': function '{node.func.id}' is not supported "
                                        f"(allowed: {', '.join(sorted(FUNCTIONS))})")
            try:
                return float(FUNCTIONS[name](*[walk(a) for a in node.args]))
            except (TypeError, ValueError, OverflowError):
                raise SpiceError(where, f"'{expr}': bad arguments to {node.func.id}()") from None
        shown = ast.unparse(node) if hasattr(ast, "unparse") else type(node).__name__
        raise SpiceError(where, f"'{expr}': '{shown}' is not allowed in an expression "
                                "(numbers, names, + - * / ** and a few functions only)")

    return walk(tree)


# --- cards, subcircuits, decks ----------------------------------------------

@dataclass
class ModelCard(_Located):
    """A ``.model NAME TYPE (params)`` card; values kept as text until asked for."""

    name: str  # lower case
    kind: str  # npn, pnp, nmos, pmos, d, … (lower case)
    params: dict[str, str]
    file: str
    line: int
    scope: Scope


    def value(self, key: str, default: float | None = None) -> float:
        text = self.params.get(key.lower())
        if text is None:
            if default is None:
                raise SpiceError(self.where, f"model {self.name} has no parameter {key}")
            return default
        return evaluate(text, self.scope.lookup(self.where), self.where)

    def values(self) -> dict[str, float]:
        """Every parameter evaluated (lower-case keys)."""
        return {key: self.value(key) for key in self.params}


@dataclass
class Subckt(_Located):
    """A ``.subckt`` with its ports, default parameters and body lines (as text)."""

    name: str
    ports: list[str]
    params: dict[str, str]
    lines: list[Line]
    file: str
    line: int
    scope: Scope



@dataclass
class Scope:
    """Parameters visible at one level (a file, or a subcircuit body), with a parent."""

    params: dict[str, tuple[str, str]] = field(default_factory=dict)  # name -> (expr, where)
    parent: Scope | None = None
    overrides: dict[str, float] = field(default_factory=dict)

    def child(self, params: Mapping[str, tuple[str, str]]) -> Scope:
        return Scope(dict(params), self)

    def lookup(self, where: str) -> Callable[[str], float]:
        return lambda name: self.param(name, where, ())

    def param(self, name: str, where: str, seen: tuple[str, ...] = ()) -> float:
        if name in self.overrides:
            return self.overrides[name]
        if name in self.params:
            if name in seen:
                raise SpiceError(where, f"parameter '{name}' is defined by itself "
                                        f"({' -> '.join(seen + (name,))})")
            expr, at = self.params[name]
            # A parameter's expression is read in the scope where it is defined.
            return evaluate(expr, lambda other: self.param(other, at, seen + (name,)), at)
        if self.parent is not None:
            return self.parent.param(name, where, seen)
        raise SpiceError(where, f"unknown parameter '{name}'")


@dataclass
class Deck:
    """Everything read from a file and what it includes."""

    scope: Scope
    models: dict[str, ModelCard] = field(default_factory=dict)
    subckts: dict[str, Subckt] = field(default_factory=dict)
    lines: list[Line] = field(default_factory=list)  # element and other lines, top level
    files: list[str] = field(default_factory=list)  # every file read, in order

    def model(self, name: str, where: str = "") -> ModelCard:
        card = self.models.get(name.lower())
        if card is None:
            raise SpiceError(where, f"no .model named '{name}' (found: "
                                    f"{', '.join(sorted(self.models)[:8]) or 'none'})")
        return card


def _read(path: Path, where: str) -> str:
    try:
        return path.read_text(encoding="utf-8", errors="replace")
    except OSError as err:
        raise SpiceError(where, f"cannot read '{path}': {err.strerror or err}") from None


def _unquote(word: str) -> str:
    return word.strip().strip("'\"")


def _section(lines: list[Line], name: str, file: str, where: str) -> list[Line]:
    """The lines of ``.lib NAME`` … ``.endl`` inside a library file."""
    wanted = name.lower()
    body: list[Line] = []
    inside = False
    found = []
    for line in lines:
        words = line.text.split()
        head = words[0].lower()
        if head == ".lib" and len(words) == 2 and not inside:
            found.append(words[1])
            if words[1].lower() == wanted:
                inside = True
                continue
        if head == ".endl" and inside:
            return body
        if inside:
            body.append(line)
    if inside:
        raise SpiceError(where, f"section '{name}' of {file} has no .endl")
    raise SpiceError(where, f"{file} has no section '{name}' (sections: {', '.join(found) or 'none'})")


class _Reader:
    def __init__(self, deck: Deck) -> None:
        self.deck = deck
        self.cache: dict[Path, list[Line]] = {}
        self.stack: list[str] = []

    def file_lines(self, path: Path, where: str) -> list[Line]:
        path = path.resolve()
        if path not in self.cache:
            self.cache[path] = logical_lines(_read(path, where), str(path))
            self.deck.files.append(str(path))
        return self.cache[path]

    def include(self, line: Line, words: list[str], scope: Scope) -> None:
        base = Path(line.file).parent
        head = words[0].lower()
        if len(words) < 2:
            raise line.error(f"{head} needs a file name")
        target = (base / _unquote(words[1])).resolve() if not Path(_unquote(words[1])).is_absolute() \
            else Path(_unquote(words[1]))
        key = f"{target}#{words[2].lower() if len(words) > 2 else ''}"
        if key in self.stack:
            raise line.error(f"{head} of '{words[1]}' includes itself")
        if not target.is_file():
            raise line.error(f"{head}: file '{words[1]}' not found (looked in {base})")
        self.stack.append(key)
        lines = self.file_lines(target, line.where)
        if head == ".lib":
            if len(words) < 3:
                raise line.error(".lib FILE needs a section name (.lib FILE SECTION)")
            lines = _section(lines, words[2], words[1], line.where)
        self.read(lines, scope, self.deck.lines)
        self.stack.pop()

    def read(self, lines: list[Line], scope: Scope, out: list[Line]) -> None:
        i = 0
        while i < len(lines):
            line = lines[i]
            words = tokens(line.text)
            head = words[0].lower()
            if head in (".include", ".inc") or (head == ".lib" and len(words) == 3):
                self.include(line, line.text.split(), scope)
            elif head == ".lib" and len(words) == 2:  # a section in a file read whole: skip to .endl
                i = self._skip_section(lines, i)
            elif head == ".param":
                self.param(line, scope)
            elif head == ".model":
                self.model(line, words, scope)
            elif head == ".subckt":
                i = self.subckt(lines, i, scope)
            elif head in (".ends", ".endl"):
                raise line.error(f"{head} without a matching {'.subckt' if head == '.ends' else '.lib'}")
            elif head in (".end",):
                return
            else:
                out.append(line)
            i += 1

    def _skip_section(self, lines: list[Line], i: int) -> int:
        for j in range(i + 1, len(lines)):
            if lines[j].keyword == ".endl":
                return j
        raise lines[i].error(f"section '{lines[i].text.split()[1]}' has no .endl")

    @staticmethod
    def param(line: Line, scope: Scope) -> None:
        body = line.text.split(None, 1)[1] if len(line.text.split(None, 1)) > 1 else ""
        pairs = assignments(body) if body.strip() else []
        if not pairs:
            raise line.error(".param needs name=value")
        for name, value in pairs:
            if not name or not value:
                raise line.error(f".param: '{name or value}' is not name=value")
            scope.params[name.lower()] = (value, line.where)

    def model(self, line: Line, words: list[str], scope: Scope) -> None:
        if len(words) < 3 or "=" in words[1] or "=" in words[2]:
            raise line.error(".model needs a name and a type: .model NAME TYPE (params)")
        positional, named = split_params(words[3:])
        if positional:
            raise line.error(f".model {words[1]}: '{positional[0]}' is not key=value")
        name = words[1].lower()
        self.deck.models[name] = ModelCard(name, words[2].lower(), named, line.file, line.line, scope)

    def subckt(self, lines: list[Line], i: int, scope: Scope) -> int:
        line = lines[i]
        words = tokens(line.text)
        if len(words) < 2:
            raise line.error(".subckt needs a name")
        ports, named = split_params(w for w in words[2:] if w.lower() != "params:")
        body: list[Line] = []
        depth = 1
        for j in range(i + 1, len(lines)):
            head = lines[j].keyword
            if head == ".subckt":
                depth += 1
            elif head == ".ends":
                depth -= 1
                if depth == 0:
                    params = {k: (v, line.where) for k, v in named.items()}
                    inner = scope.child(params)
                    self._body_params(body, inner)
                    self.deck.subckts[words[1].lower()] = Subckt(
                        words[1].lower(), ports, dict(named), body, line.file, line.line, inner)
                    self._body_models(body, inner)
                    return j
            body.append(lines[j])
        raise line.error(f".subckt {words[1]} has no .ends")

    def _body_params(self, body: list[Line], scope: Scope) -> None:
        for line in body:
            if line.keyword == ".param":
                self.param(line, scope)

    def _body_models(self, body: list[Line], scope: Scope) -> None:
        # Models defined inside a subcircuit are found by name too (open PDKs
        # wrap each device this way); they read the subcircuit's parameters.
        for line in body:
            if line.keyword == ".model":
                self.model(line, tokens(line.text), scope)


def parse_text(text: str, file: str, title: bool = False,
               params: Mapping[str, float] | None = None) -> Deck:
    """Read SPICE text (``file`` names it in messages and anchors relative includes)."""
    deck = Deck(Scope(overrides=dict(params or {})))
    _Reader(deck).read(logical_lines(text, file, title), deck.scope, deck.lines)
    return deck


def read_file(path: str | Path, section: str | None = None,
              params: Mapping[str, float] | None = None) -> Deck:
    """Read a model file, or one ``.lib`` section of it, with everything it includes.

    ``params`` override ``.param`` values by lower-case name.
    """
    path = Path(path).resolve()
    deck = Deck(Scope(overrides={k.lower(): v for k, v in (params or {}).items()}))
    reader = _Reader(deck)
    lines = reader.file_lines(path, str(path))
    if section is not None:
        lines = _section(lines, section, str(path), str(path))
    reader.read(lines, deck.scope, deck.lines)
    return deck
