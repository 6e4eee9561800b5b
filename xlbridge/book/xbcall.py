"""Read the text of a formula that calls one XB_ worksheet function.

Only the call itself is read: ``=XB_COEFS(B2:B40, Data!A2:A40, 2, "level=0.9")``.
Arguments may be references (every form :mod:`xlbridge.book.refs` reads), numbers, text in
double quotes, TRUE/FALSE, error literals such as ``#N/A``, array constants such as
``{1,2;3,4}``, spill references ``A2#`` (stored as ``_xlfn.ANCHORARRAY(A2)``), an omitted
argument, or another XB_ call.  Anything else (operators, other
functions, ``A1+1``, ``"a"&B2``) raises :class:`Unsupported` naming the part: the runner is
not a formula engine and never guesses a value.

``_xludf.``, ``_xll.`` and an add-in/workbook prefix (``'x.xlam'!XB_COEFS``) are accepted
before the name, and ``@`` / ``_xlfn.SINGLE(...)`` around the call (implicit intersection:
the top-left value).
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from xlbridge.book.refs import Area, NameRef, RefError, TableRef, parse_ref

__all__ = [
    "Arg",
    "ArrayConst",
    "Call",
    "Literal",
    "Missing",
    "Ref",
    "Spill",
    "Unsupported",
    "calls_xb",
    "parse_xb_formula",
]


class Unsupported(ValueError):
    """The formula is not one XB_ call with arguments the runner can read."""


@dataclass(frozen=True)
class Literal:
    """A number (float), text (str), TRUE/FALSE (bool) or error literal (str ``#N/A``)."""

    value: float | str | bool


@dataclass(frozen=True)
class Missing:
    """An omitted argument: ``XB_COEFS(y, x, 2, )``."""


@dataclass(frozen=True)
class Ref:
    text: str
    target: Area | NameRef | TableRef


@dataclass(frozen=True)
class Spill:
    """The whole result of the formula at a cell: ``A2#`` (``_xlfn.ANCHORARRAY(A2)``)."""

    anchor: Ref


@dataclass(frozen=True)
class ArrayConst:
    rows: tuple[tuple[float | str | bool, ...], ...]


@dataclass(frozen=True)
class Call:
    name: str  # upper case, without prefixes
    args: tuple[Arg, ...]
    single: bool = False  # wrapped in @ / _xlfn.SINGLE: the top-left value only


Arg = Literal | Missing | Ref | Spill | ArrayConst | Call

_XB_ANYWHERE = re.compile(r"(?<![A-Za-z0-9_.])XB_[A-Za-z0-9_]*\s*\(", re.IGNORECASE)
_ERRORS = ("#NULL!", "#DIV/0!", "#VALUE!", "#REF!", "#NAME?", "#NUM!", "#N/A",
           "#GETTING_DATA", "#SPILL!", "#CALC!")
_NUMBER = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?%?$")
_FUNC_NAME = re.compile(
    r"""(?P<prefix>(?:'(?:[^']|'')+'|[A-Za-z0-9_.\[\]]+)!|_xludf\.|_xll\.)?"""
    r"""(?P<name>[A-Za-z_][A-Za-z0-9_.]*)\s*\(""",
    re.IGNORECASE,
)
_SINGLE = re.compile(r"_xlfn\.SINGLE\s*\(", re.IGNORECASE)
_ANCHORARRAY = re.compile(r"_xlfn\.ANCHORARRAY\s*\(", re.IGNORECASE)


def calls_xb(formula: str) -> bool:
    """True when the formula text calls an XB_ function anywhere (outside strings)."""
    return bool(_XB_ANYWHERE.search(_strip_strings(formula)))


def end_of_quoted(s: str, i: int) -> int:
    """Index just past the quoted run starting at ``s[i]`` (a ``"`` text or a ``'`` sheet
    name), where a doubled quote stands for one; ``len(s)`` when it is never closed."""
    q, j = s[i], i + 1
    while j < len(s):
        if s[j] == q:
            if s[j + 1 : j + 2] == q:
                j += 2
                continue
            return j + 1
        j += 1
    return len(s)


def _strip_strings(text: str) -> str:
    return re.sub(r'"(?:[^"]|"")*"', '""', text)


class _Parser:
    def __init__(self, text: str) -> None:
        self.s = text
        self.i = 0

    def error(self, what: str) -> Unsupported:
        return Unsupported(what)

    def ws(self) -> None:
        while self.i < len(self.s) and self.s[self.i] in " \t\r\n":
            self.i += 1

    def peek(self) -> str:
        return self.s[self.i] if self.i < len(self.s) else ""

    def call(self) -> Call:
        """``[prefix]XB_NAME( args )`` at the current position."""
        self.ws()
        single = False
        if self.peek() == "@":
            self.i += 1
            single = True
        m = _SINGLE.match(self.s, self.i)
        if m:
            self.i = m.end()
            inner = self.call()
            self.ws()
            if self.peek() != ")":
                raise self.error("_xlfn.SINGLE( ) must hold one XB_ call")
            self.i += 1
            return Call(inner.name, inner.args, True)
        m = _FUNC_NAME.match(self.s, self.i)
        if not m:
            raise self.error(f"expected an XB_ function call at {self.s[self.i:self.i + 20]!r}")
        name = m.group("name").upper()
        if not name.startswith("XB_"):
            raise self.error(
                f"the formula uses {m.group('name')}(); the runner evaluates only XB_ calls "
                "with references, numbers, text and TRUE/FALSE as arguments"
            )
        self.i = m.end()
        args: list[Arg] = []
        self.ws()
        if self.peek() == ")":
            self.i += 1
            return Call(name, (), single)
        while True:
            args.append(self.arg())
            self.ws()
            ch = self.peek()
            if ch == ",":
                self.i += 1
                continue
            if ch == ")":
                self.i += 1
                return Call(name, tuple(args), single)
            if ch == "":
                raise self.error(f"{name}( is not closed with )")
            raise self.error(self._unsupported_at())

    def _unsupported_at(self) -> str:
        rest = self.s[self.i:].strip()
        return (
            f"the argument continues with {rest[:30]!r}; the runner reads arguments that "
            "are a reference, a number, text, TRUE/FALSE or another XB_ call, not "
            "expressions"
        )

    def arg(self) -> Arg:
        self.ws()
        ch = self.peek()
        if ch in (",", ")"):
            return Missing()
        if ch == '"':
            return Literal(self.string())
        if ch == "{":
            return self.array()
        if ch == "#":
            for err in _ERRORS:
                if self.s.upper().startswith(err, self.i):
                    self.i += len(err)
                    return Literal(err)
            raise self.error(f"unknown error literal at {self.s[self.i:self.i + 10]!r}")
        start = self.i
        m = _ANCHORARRAY.match(self.s, self.i)
        if m:  # how a file stores A2#
            self.i = m.end()
            self.ws()
            tok = self.token()
            self.ws()
            if self.peek() != ")":
                raise self.error("_xlfn.ANCHORARRAY( ) must hold one cell reference")
            self.i += 1
            return self._spill(tok)
        if _FUNC_NAME.match(self.s, self.i) or _SINGLE.match(self.s, self.i) or ch == "@":
            m = _FUNC_NAME.match(self.s, self.i)
            if ch == "@" or _SINGLE.match(self.s, self.i) or (
                m and m.group("name").upper().startswith("XB_")
            ):
                return self.call()
            raise self.error(
                f"an argument calls {m.group('name') if m else '?'}(); the runner evaluates "
                "XB_ calls whose arguments are references, numbers, text or TRUE/FALSE"
            )
        token = self.token()
        if not token:
            raise self.error(self._unsupported_at())
        value = _scalar(token)
        if value is not None:
            return Literal(value)
        if token.endswith("#"):
            return self._spill(token[:-1])
        try:
            target = parse_ref(token)
        except RefError as exc:
            self.i = start
            raise self.error(
                f"argument {token!r} is not a reference, number, text or TRUE/FALSE ({exc})"
            ) from None
        return Ref(token, target)

    def _spill(self, token: str) -> Spill:
        try:
            target = parse_ref(token)
        except RefError as exc:
            raise self.error(f"{token}# is not a spill reference ({exc})") from None
        if not (isinstance(target, Area) and target.n_rows == 1 and target.n_cols == 1):
            raise self.error(f"{token}# must name one cell, the top-left cell of a result")
        return Spill(Ref(token, target))

    def token(self) -> str:
        """A reference or number: up to , or ) outside quotes and [ ] brackets."""
        depth, i, s = 0, self.i, self.s
        while i < len(s):
            ch = s[i]
            if ch == "'" and depth == 0:
                i = end_of_quoted(s, i)
                continue
            if ch == "[":
                depth += 1
            elif ch == "]":
                depth -= 1
            elif depth == 0 and (ch in ",)(" or ch in " \t\r\n"):
                break
            elif depth == 0 and ch in '&=<>^*/"{}':
                raise self.error(self._unsupported_from(i))
            elif depth == 0 and ch in "+-" and i > self.i and s[i - 1] not in "eE":
                raise self.error(self._unsupported_from(i))
            i += 1
        tok = s[self.i : i]
        if i < len(s) and s[i] == "(":
            raise self.error(f"an argument calls {tok}(); the runner evaluates only XB_ calls")
        self.i = i
        return tok

    def _unsupported_from(self, i: int) -> str:
        return (
            f"the argument {self.s[self.i:i + 1 + 20].strip()!r} is an expression; the "
            "runner reads arguments that are a reference, a number, text, TRUE/FALSE or "
            "another XB_ call (put the expression in a cell of its own and refer to it)"
        )

    def string(self) -> str:
        assert self.peek() == '"'
        i, out = self.i + 1, []
        while i < len(self.s):
            ch = self.s[i]
            if ch == '"':
                if i + 1 < len(self.s) and self.s[i + 1] == '"':
                    out.append('"')
                    i += 2
                    continue
                self.i = i + 1
                return "".join(out)
            out.append(ch)
            i += 1
        raise self.error("a text argument has no closing \"")

    def array(self) -> ArrayConst:
        assert self.peek() == "{"
        self.i += 1
        rows: list[list[float | str | bool]] = [[]]
        while True:
            self.ws()
            ch = self.peek()
            if ch == '"':
                rows[-1].append(self.string())
            else:
                j = self.i
                while j < len(self.s) and self.s[j] not in ",;}":
                    j += 1
                tok = self.s[self.i : j].strip()
                value = _scalar(tok)
                if value is None:
                    raise self.error(f"array constant element {tok!r} is not a number or text")
                rows[-1].append(value)
                self.i = j
            self.ws()
            ch = self.peek()
            self.i += 1
            if ch == ",":
                continue
            if ch == ";":
                rows.append([])
                continue
            if ch == "}":
                break
            raise self.error("an array constant { } is not closed")
        widths = {len(r) for r in rows}
        if len(widths) != 1:
            raise self.error("the rows of an array constant { } have different lengths")
        return ArrayConst(tuple(tuple(r) for r in rows))


def _scalar(token: str) -> float | str | bool | None:
    t = token.strip()
    up = t.upper()
    if up == "TRUE":
        return True
    if up == "FALSE":
        return False
    if up in _ERRORS:
        return up
    if _NUMBER.match(t):
        if t.endswith("%"):
            return float(t[:-1]) / 100.0
        return float(t)
    return None


def parse_xb_formula(formula: str) -> Call:
    """Parse ``=XB_NAME(args)``; raises :class:`Unsupported` with a message for anything
    the runner cannot evaluate exactly."""
    text = formula.strip()
    if text.startswith("="):
        text = text[1:]
    p = _Parser(text)
    p.ws()
    head = text.lstrip()
    m = _FUNC_NAME.match(head)
    direct = head.startswith("@") or bool(_SINGLE.match(head)) or bool(
        m and m.group("name").upper().startswith("XB_")
    )
    if not direct and calls_xb(text):
        raise Unsupported(
            "the formula uses an XB_ function inside a larger expression; the runner "
            "evaluates formulas that are one XB_ call (put the call in a cell of its own "
            "and refer to that cell)"
        )
    call = p.call()
    p.ws()
    if p.i != len(p.s):
        raise Unsupported(
            f"the formula continues after the XB_ call with {p.s[p.i:p.i + 30]!r}; the "
            "runner evaluates formulas that are one XB_ call"
        )
    return call
