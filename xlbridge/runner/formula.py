"""The one formula reader of the runner, built on openpyxl's formula tokenizer.

Two uses: reading a formula that is one XB_ call (:func:`parse_xb_formula`), and listing
the references an ordinary formula reads (:func:`reference_texts`, for dependencies only).

An XB_ call reads ``=XB_COEFS(B2:B40, Data!A2:A40, 2, "level=0.9")``.  Arguments may be
references (every form :mod:`xlbridge.book.refs` reads), numbers, text in double quotes,
TRUE/FALSE, error literals such as ``#N/A``, array constants such as ``{1,2;3,4}``, spill
references ``A2#`` (stored as ``_xlfn.ANCHORARRAY(A2)``), an omitted argument, or another
XB_ call.  Anything else (operators, other functions, ``A1+1``, ``"a"&B2``) raises
:class:`Unsupported` naming the part: the runner is not a formula engine and never guesses
a value.  ``_xludf.``, ``_xll.`` and an add-in/workbook prefix (``'x.xlam'!XB_COEFS``) are
accepted before the name, and ``@`` / ``_xlfn.SINGLE(...)`` around the call (implicit
intersection: the top-left value).
"""

from __future__ import annotations

import importlib.util
import re
import sys
from dataclasses import dataclass
from pathlib import Path
from types import ModuleType

from xlbridge.book.refs import Area, NameRef, RefError, TableRef, parse_ref
from xlbridge.book.values import ERROR_TEXTS

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
    "reference_texts",
    "xb_names",
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


# --- tokens ----------------------------------------------------------------------------------


def _openpyxl_tokenizer() -> ModuleType:
    """openpyxl's formula tokenizer module. It imports only ``re``, but importing it
    through its package first imports all of openpyxl (a fifth of a second at start-up, for
    pin and verify that never need the rest); so its file is loaded on its own when it can be
    found, and imported the ordinary way otherwise."""
    name = "openpyxl.formula.tokenizer"
    if name in sys.modules:
        return sys.modules[name]
    spec = importlib.util.find_spec("openpyxl")
    folders = list(spec.submodule_search_locations or []) if spec else []
    path = Path(folders[0]) / "formula" / "tokenizer.py" if folders else None
    if path is not None and path.is_file():
        own = importlib.util.spec_from_file_location("xlbridge_openpyxl_tokenizer", path)
        if own is not None and own.loader is not None:
            module = importlib.util.module_from_spec(own)
            own.loader.exec_module(module)
            return module
    from openpyxl.formula import tokenizer

    return tokenizer


_tok = _openpyxl_tokenizer()
Token = _tok.Token
Tokenizer = _tok.Tokenizer
TokenizerError = _tok.TokenizerError


class _Tokenizer(Tokenizer):
    # Every error value a cell can hold; openpyxl's own list stops at the classic eight.
    # Longest first, so that no error text is cut short by another.
    ERROR_CODES = tuple(sorted(ERROR_TEXTS, key=len, reverse=True))


# The one rewrite before tokenizing: the typed spill form ``A2#`` (which the tokenizer
# rejects) becomes the stored form ``_xlfn.ANCHORARRAY(A2)``. Text in double quotes, quoted
# sheet names and [bracketed] table parts are passed over unchanged; error literals are
# upper-cased (a spreadsheet program accepts them in any case); tabs and carriage returns
# are spaces, as the tokenizer knows only spaces and line feeds.
_REWRITE = re.compile(
    r"""(?P<spill>(?<![\w.$:!'\]])(?:'(?:[^']|'')*'!)?[\w.$:!]+)\#(?=[\s,;)}+\-*/^&=<>%]|$)
      | "(?:[^"]|"")*"
      | '(?:[^']|'')*'
      | \[(?:[^\[\]]|\[[^\[\]]*\])*\]
      | (?P<open>["'])
      | (?P<error>\#[A-Za-z0-9/_]*[!?]?)
      | (?P<space>[\t\r])""",
    re.VERBOSE,
)


def _rewrite(m: re.Match[str]) -> str:
    if m.group("spill") is not None:
        return f"_xlfn.ANCHORARRAY({m.group('spill')})"
    if m.group("open") is not None:
        what = "text argument" if m.group("open") == '"' else "quoted sheet name"
        raise Unsupported(f"a {what} has no closing {m.group('open')}")
    if m.group("error") is not None:
        err = m.group("error").upper()
        if err not in ERROR_TEXTS:
            rest = m.string[m.start():m.start() + 10]
            raise Unsupported(f"unknown error literal at {rest!r}")
        return err
    if m.group("space") is not None:
        return " "
    return m.group(0)


def _tokens(formula: str) -> list[Token]:
    """Tokens of a formula text (with or without its leading ``=``); raises Unsupported."""
    text = formula.strip()
    text = text[1:] if text.startswith("=") else text
    if ("#" in text or "\t" in text or "\r" in text
            or text.count('"') % 2 or text.count("'") % 2):  # else nothing to rewrite
        text = _REWRITE.sub(_rewrite, text)
    try:
        return _Tokenizer("=" + text).items
    except TokenizerError as exc:
        raise Unsupported(f"the formula cannot be read ({_short(str(exc), 120)})") from None
    except IndexError:  # a closing bracket with nothing open
        raise Unsupported("the formula cannot be read: a ) or } has no opening bracket"
                          ) from None


def _short(text: str, n: int) -> str:
    return text if len(text) <= n else text[: n - 3] + "..."


_FUNC_NAME = re.compile(
    r"""(?P<prefix>(?:'(?:[^']|'')+'|[A-Za-z0-9_.\[\]]+)!|_xludf\.|_xll\.)?"""
    r"""(?P<name>[A-Za-z_][A-Za-z0-9_.]*)""",
    re.IGNORECASE,
)


def _func_name(tok: Token) -> tuple[str, bool]:
    """(name without prefixes, wrapped in ``@``) of a function-open token."""
    text = tok.value[:-1].strip()
    at = text.startswith("@")
    m = _FUNC_NAME.fullmatch(text[1:] if at else text)
    return (m.group("name") if m else text), at


def _is_open(tok: Token) -> bool:
    return tok.type == Token.FUNC and tok.subtype == Token.OPEN


def _is_xb(tok: Token) -> bool:
    return _is_open(tok) and _func_name(tok)[0].upper().startswith("XB_")


def xb_names(formula: str) -> list[str]:
    """Names of the XB_ functions a formula calls, in order; raises :class:`Unsupported`
    when the text cannot be read."""
    return [_func_name(t)[0].upper() for t in _tokens(formula) if _is_xb(t)]


def calls_xb(formula: str) -> bool:
    """True when the formula text calls an XB_ function anywhere (outside strings)."""
    if "xb_" not in formula.lower():  # most formulas: no need to tokenize
        return False
    try:
        return bool(xb_names(formula))
    except Unsupported:
        return True  # it names XB_ and cannot be read: parse_xb_formula will say why


def reference_texts(formula: str) -> list[str]:
    """Texts in a formula that may be references (to find dependencies, not to compute
    anything); empty when the formula cannot be read."""
    try:
        tokens = _tokens(formula)
    except Unsupported:
        return []
    return [t.value.lstrip("@") for t in tokens
            if t.type == Token.OPERAND and t.subtype == Token.RANGE]


# --- the XB_ call -----------------------------------------------------------------------------

_SCI_HEAD = re.compile(r"(\d+\.?\d*|\.\d+)[eE]$")
_NUMBER = re.compile(r"(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$")
_EXPRESSION = ("the runner reads arguments that are a reference, a number, text, TRUE/FALSE "
               "or another XB_ call, not expressions (put the expression in a cell of its "
               "own and refer to it)")


class _Parser:
    """Recursive descent over the tokens of one formula (white space skipped)."""

    def __init__(self, tokens: list[Token]) -> None:
        self.toks = tokens
        self.k = 0

    def _skip(self, k: int) -> int:
        while k < len(self.toks) and self.toks[k].type == Token.WSPACE:
            k += 1
        return k

    def peek(self, ahead: int = 0) -> Token | None:
        k = self._skip(self.k)
        for _ in range(ahead):
            k = self._skip(k + 1)
        return self.toks[k] if k < len(self.toks) else None

    def take(self, n: int = 1) -> Token:
        for _ in range(n):
            self.k = self._skip(self.k)
            tok = self.toks[self.k]
            self.k += 1
        return tok

    def rest(self) -> str:
        return "".join(t.value for t in self.toks[self._skip(self.k):]).strip()

    def call(self) -> Call:
        """``[@][prefix]XB_NAME( args )`` at the current token."""
        tok = self.peek()
        if tok is None or not _is_open(tok):
            raise Unsupported(f"expected an XB_ function call at {self.rest()[:20]!r}")
        shown, single = _func_name(self.take())
        name = shown.upper()
        if name == "_XLFN.SINGLE":
            inner = self.call()
            if not self._closes():
                raise Unsupported("_xlfn.SINGLE( ) must hold one XB_ call")
            return Call(inner.name, inner.args, True)
        if not name.startswith("XB_"):
            raise Unsupported(
                f"the formula uses {shown}(); the runner evaluates only "
                "XB_ calls with references, numbers, text and TRUE/FALSE as arguments"
            )
        args: list[Arg] = []
        if self._closes():
            return Call(name, (), single)
        while True:
            start = self._skip(self.k)
            args.append(self.arg(name))
            nxt = self.peek()
            if nxt is None:
                raise Unsupported(f"{name}( is not closed with )")
            if nxt.type == Token.SEP and nxt.subtype == Token.ARG:
                self.take()
                continue
            if self._closes():
                return Call(name, tuple(args), single)
            raise Unsupported(f"the argument {self._arg_text(start)!r} is an expression; "
                              + _EXPRESSION)

    def _closes(self) -> bool:
        tok = self.peek()
        if tok is not None and tok.type == Token.FUNC and tok.subtype == Token.CLOSE:
            self.take()
            return True
        return False

    def _arg_text(self, start: int) -> str:
        """The argument from ``start`` up to the next , or ) of its call."""
        depth, parts = 0, []
        for t in self.toks[start:]:
            if depth == 0 and (t.type == Token.SEP and t.subtype == Token.ARG or
                               t.subtype == Token.CLOSE and t.type == Token.FUNC):
                break
            depth += (t.subtype == Token.OPEN) - (t.subtype == Token.CLOSE)
            parts.append(t.value)
        return _short("".join(parts).strip(), 40)

    def arg(self, name: str) -> Arg:
        tok = self.peek()
        if tok is None:
            raise Unsupported(f"{name}( is not closed with )")
        if tok.type == Token.SEP and tok.subtype == Token.ARG or (
                tok.type == Token.FUNC and tok.subtype == Token.CLOSE):
            return Missing()
        if tok.type == Token.ARRAY and tok.subtype == Token.OPEN:
            return self.array()
        if _is_open(tok):
            shown, at = _func_name(tok)
            fname = shown.upper()
            if fname == "_XLFN.ANCHORARRAY":
                self.take()
                ref = self.peek()
                if ref is None or ref.type != Token.OPERAND or ref.subtype != Token.RANGE:
                    raise Unsupported("_xlfn.ANCHORARRAY( ) must hold one cell reference")
                self.take()
                if not self._closes():
                    raise Unsupported("_xlfn.ANCHORARRAY( ) must hold one cell reference")
                return _spill(ref.value)
            if at or fname.startswith("XB_") or fname == "_XLFN.SINGLE":
                return self.call()
            raise Unsupported(
                f"an argument calls {shown}(); the runner evaluates XB_ calls whose "
                "arguments are references, numbers, text or TRUE/FALSE"
            )
        value = self.scalar()
        if value is not None:
            return Literal(value)
        tok = self.peek()
        if tok is None or tok.type != Token.OPERAND:
            raise Unsupported(f"the argument {self.rest()[:30]!r} is an expression; "
                              + _EXPRESSION)
        text = self.take().value
        try:
            return Ref(text, parse_ref(text))
        except RefError as exc:
            raise Unsupported(
                f"argument {text!r} is not a reference, number, text or TRUE/FALSE ({exc})"
            ) from None

    def scalar(self) -> float | str | bool | None:
        """A number (with sign, exponent, %), text, TRUE/FALSE or error literal; None
        (nothing taken) when the next token is none of these."""
        tok = self.peek()
        if tok is None:
            return None
        if tok.type == Token.OPERAND and tok.subtype == Token.TEXT:
            self.take()
            return tok.value[1:-1].replace('""', '"')
        if tok.type == Token.OPERAND and tok.subtype == Token.ERROR:
            self.take()
            return tok.value
        if tok.type == Token.OPERAND and tok.value.upper() in ("TRUE", "FALSE"):
            self.take()
            return tok.value.upper() == "TRUE"
        sign, k = 1.0, 0
        if tok.type == Token.OP_PRE and tok.value in "+-":
            sign, k = (-1.0 if tok.value == "-" else 1.0), 1
        num = self.peek(k)
        if num is None or num.type != Token.OPERAND:
            return None
        text = num.value
        # 0.5e-3 and 12e+4: the tokenizer keeps the exponent's sign only after one digit
        op, digits = self.peek(k + 1), self.peek(k + 2)
        if (_SCI_HEAD.match(text) and op is not None and op.type == Token.OP_IN
                and op.value in "+-" and digits is not None and digits.value.isdigit()):
            text, k = text + op.value + digits.value, k + 2
        if not _NUMBER.match(text):
            return None
        self.take(k + 1)
        value = sign * float(text)
        pct = self.peek()
        if pct is not None and pct.type == Token.OP_POST:
            self.take()
            value /= 100.0
        return value

    def array(self) -> ArrayConst:
        self.take()
        rows: list[list[float | str | bool]] = [[]]
        while True:
            value = self.scalar()
            if value is None:
                tok = self.peek()
                if tok is None:
                    raise Unsupported("an array constant { } is not closed")
                raise Unsupported(f"array constant element {tok.value!r} is not a number "
                                  "or text")
            rows[-1].append(value)
            tok = self.peek()
            if tok is None:
                raise Unsupported("an array constant { } is not closed")
            self.take()
            if tok.type == Token.SEP and tok.subtype == Token.ROW:
                rows.append([])
            elif tok.type == Token.ARRAY and tok.subtype == Token.CLOSE:
                break
            elif not (tok.type == Token.SEP and tok.subtype == Token.ARG):
                raise Unsupported(f"array constant element {tok.value!r} is not a number "
                                  "or text")
        if len({len(r) for r in rows}) != 1:
            raise Unsupported("the rows of an array constant { } have different lengths")
        return ArrayConst(tuple(tuple(r) for r in rows))


def _spill(text: str) -> Spill:
    try:
        target = parse_ref(text)
    except RefError as exc:
        raise Unsupported(f"{text}# is not a spill reference ({exc})") from None
    if not (isinstance(target, Area) and target.n_rows == 1 and target.n_cols == 1):
        raise Unsupported(f"{text}# must name one cell, the top-left cell of a result")
    return Spill(Ref(text, target))


def parse_xb_formula(formula: str) -> Call:
    """Parse ``=XB_NAME(args)``; raises :class:`Unsupported` with a message for anything
    the runner cannot evaluate exactly."""
    p = _Parser(_tokens(formula))
    head = p.peek()
    direct = head is not None and _is_open(head) and (
        _is_xb(head) or _func_name(head)[1] or _func_name(head)[0].upper() == "_XLFN.SINGLE")
    if not direct and any(_is_xb(t) for t in p.toks):
        raise Unsupported(
            "the formula uses an XB_ function inside a larger expression; the runner "
            "evaluates formulas that are one XB_ call (put the call in a cell of its own "
            "and refer to that cell)"
        )
    call = p.call()
    if p.peek() is not None:
        raise Unsupported(
            f"the formula continues after the XB_ call with {p.rest()[:30]!r}; the "
            "runner evaluates formulas that are one XB_ call"
        )
    return call
