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

from .errors import ParseError

_TOKEN_RE = re.compile(
    r"""
     (?P<ws>[ \t\r\n\f]+)
    |(?P<comment>//[^\n]*|/\*.*?\*/|\#pragma[^\n]*)
    |(?P<opencomment>/\*)
    |(?P<num>(?:\d[\d_]*\.[\d_]*|\.\d[\d_]*|\d[\d_]*)(?:[eE][+-]?\d+)?(?![A-Za-z_]))
    |(?P<id>[A-Za-z_\u03c0\u03c4\u2107][A-Za-z0-9_]*|\$\d+)
    |(?P<str>"[^"\n]*"|'[^'\n]*')
    |(?P<op>->|\*\*|==|!=|<=|>=|<<|>>|&&|\|\||[-+*/^%(){}\[\];,@:=<>!~&|])
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
        if self._line_starts is None:
            self._line_starts = [0] + [m.end() for m in re.finditer("\n", self.text)]
        line = bisect.bisect_right(self._line_starts, offset)
        return line, offset - self._line_starts[line - 1] + 1

    def error(self, message: str, offset: int, cls=ParseError) -> ParseError:
        line, col = self.where(min(offset, len(self.text)))
        return cls(message, line, col, self.name)


def tokenize(src: Source) -> list[Token]:
    out: list[Token] = []
    append = out.append
    for m in _TOKEN_RE.finditer(src.text):
        kind = m.lastgroup
        if kind == "ws" or kind == "comment":
            continue
        if kind == "bad":
            raise src.error(f"unexpected character {m.group()!r}", m.start())
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


def evaluate(node: tuple, env: dict[str, float], src: Source) -> float:
    tag = node[0]
    if tag == "num":
        return node[1]
    if tag == "var":
        try:
            return env[node[1]]
        except KeyError:
            raise src.error(f"unknown identifier {node[1]!r} in expression", node[2]) from None
    if tag == "neg":
        return -evaluate(node[1], env, src)
    try:
        if tag == "bin":
            value = _binop(node[1], evaluate(node[2], env, src), evaluate(node[3], env, src))
        else:
            value = FUNCTIONS[node[1]](evaluate(node[2], env, src))
    except (ValueError, ZeroDivisionError, OverflowError) as exc:
        raise src.error(f"cannot evaluate expression: {exc}", node[-1]) from None
    if isinstance(value, complex) or not math.isfinite(value):
        raise src.error("expression does not give a finite real number", node[-1])
    return float(value)


class ExpressionParser:
    """Precedence-climbing parser over the shared token list (used by the statement reader)."""

    toks: list[Token]
    i: int
    src: Source

    def expect(self, text: str) -> Token:
        tok = self.toks[self.i]
        if tok[1] != text or tok[0] == "str":
            shown = tok[1] if tok[0] != "eof" else "end of file"
            raise self.src.error(f"expected {text!r}, found {shown!r}", tok[2])
        self.i += 1
        return tok

    def accept(self, text: str) -> bool:
        tok = self.toks[self.i]
        if tok[1] == text and tok[0] != "str":
            self.i += 1
            return True
        return False

    def expression(self) -> tuple:
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

    def _unary(self) -> tuple:
        tok = self.toks[self.i]
        if tok[0] == "op" and tok[1] in ("-", "+"):
            self.i += 1
            inner = self._unary()
            if tok[1] == "+":
                return inner
            return ("num", -inner[1]) if inner[0] == "num" else ("neg", inner)
        return self._power()

    def _power(self) -> tuple:
        base = self._atom()
        tok = self.toks[self.i]
        if tok[0] == "op" and tok[1] in ("^", "**"):
            self.i += 1
            return self._fold(("bin", "^", base, self._unary(), tok[2]))
        return base

    def _atom(self) -> tuple:
        kind, text, pos = self.toks[self.i]
        if kind == "num":
            self.i += 1
            return ("num", float(text.replace("_", "")))
        if kind == "id":
            self.i += 1
            if text in FUNCTIONS and self.toks[self.i][1] == "(":
                self.i += 1
                arg = self.expression()
                self.expect(")")
                return self._fold(("call", text, arg, pos))
            if text in CONSTANTS:
                return ("num", CONSTANTS[text])
            return ("var", text, pos)
        if text == "(" and kind == "op":
            self.i += 1
            node = self.expression()
            self.expect(")")
            return node
        shown = text if kind != "eof" else "end of file"
        raise self.src.error(f"expected an expression, found {shown!r}", pos)

    def _fold(self, node: tuple) -> tuple:
        if node[0] == "bin" and node[2][0] == "num" and node[3][0] == "num":
            return ("num", evaluate(node, {}, self.src))
        if node[0] == "call" and node[2][0] == "num":
            return ("num", evaluate(node, {}, self.src))
        return node
