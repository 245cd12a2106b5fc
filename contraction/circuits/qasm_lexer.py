"""Tokens and parameter expressions of OpenQASM 2.0 / 3 text.

The lexer turns the whole text into a list of ``(kind, text, offset)`` tuples with one regular
expression; line and column are computed only when an error needs them. Parameter expressions
become small tuple trees that are constant-folded where possible and evaluated against an
environment of bound gate parameters.
"""

from __future__ import annotations

import bisect
import math
import re
from typing import Callable

from contraction.errors import ParseError

_TOKEN_RE = re.compile(
    r"""
     (?P<ws>[ \t\r\n\f]+)
    |(?P<comment>//[^\n]*|/\*.*?\*/|\#pragma[^\n]*)
    |(?P<opencomment>/\*)
    |(?P<duration>(?:\d[\d_]*\.[\d_]*|\.\d[\d_]*|\d[\d_]*)(?:[eE][+-]?\d+)?(?:ns|us|\u00b5s|ms|s|dt)(?!\w))
    |(?P<num>0[xX][0-9a-fA-F_]+(?!\w)|0[oO][0-7_]+(?!\w)|0[bB][01_]+(?!\w)
        |(?:\d[\d_]*\.[\d_]*|\.\d[\d_]*|\d[\d_]*)(?:[eE][+-]?\d+)?(?!\w))
    |(?P<badnum>\d\w*)
    |(?P<id>[^\W\d]\w*|\$\d+)
    |(?P<str>"[^"\n]*"|'[^'\n]*')
    |(?P<op>->|\+\+|\*\*|==|!=|<=|>=|<<|>>|&&|\|\||[-+*/^%(){}\[\];,@:=<>!~&|])
    |(?P<bad>.)
    """,
    re.X | re.S,
)

Token = tuple  # (kind, text, offset)

CONSTANTS = {
    "pi": math.pi, "\u03c0": math.pi,
    "tau": 2 * math.pi, "\u03c4": 2 * math.pi,
    "euler": math.e, "\u2107": math.e,
}


FUNCTIONS: dict[str, Callable[[float], float]] = {
    "sin": math.sin, "cos": math.cos, "tan": math.tan,
    "exp": math.exp, "ln": math.log, "log": math.log, "sqrt": math.sqrt,
    "asin": math.asin, "acos": math.acos, "atan": math.atan,
    "arcsin": math.asin, "arccos": math.acos, "arctan": math.atan,
    "abs": abs,
}


class Source:
    """The text being read, with lazy offset -> (line, column) conversion."""

    def __init__(self, text: str, name: str = "<circuit>"):
        self.text = text
        self.name = name
        self._line_starts: list[int] | None = None

    def where(self, offset: int) -> tuple[int, int]:
        """(line, column), both 1-based, of a character offset."""
        if self._line_starts is None:
            self._line_starts = [0] + [m.end() for m in re.finditer("\n", self.text)]
        line = bisect.bisect_right(self._line_starts, offset)
        return line, offset - self._line_starts[line - 1] + 1

    def error(self, message: str, offset: int, cls=ParseError) -> ParseError:
        """An error of class ``cls`` located at ``offset`` in this source."""
        line, col = self.where(min(offset, len(self.text)))
        return cls(message, line, col, self.name)


def tokenize(src: Source) -> list[Token]:
    """The tokens of the source, ending with an ``eof`` token; raises :class:`ParseError` at the first character no
    token starts with."""
    out: list[Token] = []
    append = out.append
    for m in _TOKEN_RE.finditer(src.text):
        kind = m.lastgroup
        if kind == "ws" or kind == "comment":
            continue
        if kind == "bad":
            raise src.error(f"unexpected character {m.group()!r}", m.start())
        if kind == "badnum":
            text = m.group()
            what = ("imaginary literals are not supported (amplitudes take real gate parameters)"
                    if text.endswith("im") else f"{text!r} is not a number this reader understands (decimal, 0x, "
                                                "0o or 0b integers, floats, or a duration such as 100ns)")
            raise src.error(what, m.start())
        if kind == "opencomment":
            raise src.error("unterminated /* comment", m.start())
        append((kind, m.group(), m.start()))
    append(("eof", "", len(src.text)))
    return out


# --------------------------------------------------------------------------- expressions
# Trees: ("num", value) | ("var", name, offset) | ("neg", a) | ("bin", op, a, b, offset)
#        | ("call", fname, a, offset)

def _binop(op: str, a: float, b: float) -> float:
    if op == "+":
        return a + b
    if op == "-":
        return a - b
    if op == "*":
        return a * b
    if op == "/":
        return a / b
    if op == "%":
        return math.fmod(a, b)
    return math.pow(a, b)  # ^ and **


#: nesting of parentheses, unary signs, powers and function calls in one expression
MAX_EXPRESSION_DEPTH = 100


def _apply_node(node: tuple, args: list[float], src: Source) -> float:
    tag = node[0]
    if tag == "neg":
        return -args[0]
    try:
        if tag == "bin":
            value = _binop(node[1], args[0], args[1])
        else:
            value = FUNCTIONS[node[1]](args[0])
    except (ValueError, ZeroDivisionError, OverflowError) as exc:
        raise src.error(f"cannot evaluate expression: {exc}", node[-1]) from None
    if isinstance(value, complex) or not math.isfinite(value):
        raise src.error("expression does not give a finite real number", node[-1])
    return float(value)


def evaluate(node: tuple, env: dict[str, float], src: Source) -> float:
    """The value of an expression tree; iterative, so a long chain ``a+1+1+...`` cannot exhaust
    Python's recursion limit."""
    # post-order walk with an explicit stack: (node, children done?)
    stack: list[tuple[tuple, bool]] = [(node, False)]
    values: list[float] = []
    while stack:
        n, done = stack.pop()
        tag = n[0]
        if tag == "num":
            values.append(n[1])
        elif tag == "var":
            try:
                values.append(env[n[1]])
            except KeyError:
                raise src.error(f"unknown identifier {n[1]!r} in expression", n[2]) from None
        elif not done:
            stack.append((n, True))
            children = (n[2], n[3]) if tag == "bin" else (n[1],) if tag == "neg" else (n[2],)
            for c in reversed(children):
                stack.append((c, False))
        else:
            k = 2 if tag == "bin" else 1
            args = values[-k:]
            del values[-k:]
            values.append(_apply_node(n, args, src))
    return values[0]


def number_value(text: str, pos: int, src: Source) -> float:
    """A numeric literal as a finite double (decimal, or 0x/0o/0b integers); out of range is an error."""
    clean = text.replace("_", "")
    low = clean.lower()
    try:
        value = float(int(clean, 0)) if low.startswith(("0x", "0o", "0b")) else float(clean)
    except OverflowError:                 # an integer literal past the largest double
        value = math.inf
    if not math.isfinite(value):
        raise src.error(f"the number {text} is out of range (larger than a double, 1.8e308)", pos)
    return value


class ExpressionParser:
    """Precedence-climbing parser over the shared token list (used by the statement reader)."""

    toks: list[Token]
    i: int
    src: Source

    def expect(self, text: str) -> Token:
        """Consume the token ``text`` or raise a :class:`ParseError` naming what was found instead."""
        tok = self.toks[self.i]
        if tok[1] != text or tok[0] == "str":
            shown = tok[1] if tok[0] != "eof" else "end of file"
            raise self.src.error(f"expected {text!r}, found {shown!r}", tok[2])
        self.i += 1
        return tok

    def accept(self, text: str) -> bool:
        """Consume the token ``text`` when it is next; whether it was."""
        tok = self.toks[self.i]
        if tok[1] == text and tok[0] != "str":
            self.i += 1
            return True
        return False

    def expression(self) -> tuple:
        """Parse a parameter expression (sums of terms) into a tree for :func:`evaluate`."""
        node = self._term()
        while self.toks[self.i][1] in ("+", "-") and self.toks[self.i][0] == "op":
            op, pos = self.toks[self.i][1], self.toks[self.i][2]
            self.i += 1
            node = self._fold(("bin", op, node, self._term(), pos))
        return node

    def _term(self) -> tuple:
        node = self._unary()
        while self.toks[self.i][1] in ("*", "/", "%") and self.toks[self.i][0] == "op":
            op, pos = self.toks[self.i][1], self.toks[self.i][2]
            self.i += 1
            node = self._fold(("bin", op, node, self._unary(), pos))
        return node

    def _nest(self, pos: int) -> None:
        self.depth = getattr(self, "depth", 0) + 1
        if self.depth > MAX_EXPRESSION_DEPTH:
            raise self.src.error(f"expression nested more than {MAX_EXPRESSION_DEPTH} deep (parentheses, signs, "
                                 f"powers or function calls)", pos)

    def _unary(self) -> tuple:
        tok = self.toks[self.i]
        if tok[0] == "op" and tok[1] in ("-", "+"):
            # a run of signs is read without recursion: only its parity matters
            negative = False
            while self.toks[self.i][0] == "op" and self.toks[self.i][1] in ("-", "+"):
                negative ^= self.toks[self.i][1] == "-"
                self.i += 1
            inner = self._unary()
            if not negative:
                return inner
            return ("num", -inner[1]) if inner[0] == "num" else ("neg", inner)
        return self._power()

    def _power(self) -> tuple:
        base = self._atom()
        tok = self.toks[self.i]
        if tok[0] == "op" and tok[1] in ("^", "**"):
            self.i += 1
            self._nest(tok[2])
            node = self._fold(("bin", "^", base, self._unary(), tok[2]))
            self.depth -= 1
            return node
        return base

    def _atom(self) -> tuple:
        kind, text, pos = self.toks[self.i]
        if kind == "num":
            self.i += 1
            return ("num", number_value(text, pos, self.src))
        if kind == "id":
            self.i += 1
            if text in FUNCTIONS and self.toks[self.i][1] == "(":
                self.i += 1
                self._nest(pos)
                arg = self.expression()
                self.expect(")")
                self.depth -= 1
                return self._fold(("call", text, arg, pos))
            if text in CONSTANTS:
                return ("num", CONSTANTS[text])
            return ("var", text, pos)
        if text == "(" and kind == "op":
            self.i += 1
            self._nest(pos)
            node = self.expression()
            self.expect(")")
            self.depth -= 1
            return node
        shown = text if kind != "eof" else "end of file"
        raise self.src.error(f"expected an expression, found {shown!r}", pos)

    def _fold(self, node: tuple) -> tuple:
        if node[0] == "bin" and node[2][0] == "num" and node[3][0] == "num":
            return ("num", evaluate(node, {}, self.src))
        if node[0] == "call" and node[2][0] == "num":
            return ("num", evaluate(node, {}, self.src))
        return node
