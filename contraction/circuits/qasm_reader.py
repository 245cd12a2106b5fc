"""Read OpenQASM 2.0 and the unitary part of OpenQASM 3 into a :class:`Circuit`.

Supported: ``OPENQASM``, ``include`` of the built-in ``qelib1.inc``/``stdgates.inc`` (never a file
read), ``qreg``/``creg``/``qubit``/``bit`` declarations (sizes are constant expressions), register
broadcast, slices, index sets and negative indices, ``let`` aliases, ``gate`` definitions, ``opaque``
declarations, the modifiers ``ctrl``/``negctrl``/``inv``/``pow``, ``U``, ``CX`` and ``gphase``,
``const`` numeric declarations, ``for`` loops over constant ranges and sets (unrolled), ``box``,
``barrier`` and ``delay`` (ignored), ``measure`` at the end of a qubit's life (ignored) and ``reset``
of a qubit still in |0> (a no-op).

``def`` subroutines that only apply gates are read again at each call with their arguments bound.

Rejected with a message: classical control, ``while``, gates after a measurement, a reset of a used
qubit, subroutines returning values and other constructs with no meaning for a pure amplitude. Work is bounded before
it is done: the expanded gate count is computed from the definitions before expansion, definition
and expression nesting are limited, and dense gate matrices are limited to ``MAX_DENSE_QUBITS``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from contraction import defaults
from contraction.circuits import gates as G
from contraction.circuits.gates import compose
from contraction.circuits.model import Circuit, Gate
from contraction.circuits.qasm_lexer import CONSTANTS, ExpressionParser, Source, evaluate, tokenize
from contraction.errors import GateLimitError, ParseError, UnsupportedError

#: qubits of one dense gate matrix (modified gates, composed definitions): 2^10 x 2^10 entries
MAX_DENSE_QUBITS = 10
#: nesting of subroutine calls (each level re-reads a body)
MAX_CALL_DEPTH = 64
#: nesting of gate definitions (a definition calling one that calls one ...)
MAX_DEFINITION_DEPTH = 200

_UNSUPPORTED = {
    "if": "classical control ('if') has no meaning for a pure amplitude",
    "while": "'while' loops depend on run-time values; only 'for' loops over constant ranges and sets are read",
    "defcal": "calibration blocks ('defcal') have no meaning for an amplitude",
    "cal": "calibration blocks ('cal') have no meaning for an amplitude",
    "extern": "'extern' is not supported",
    "input": "'input' parameters are not supported; substitute values before submitting",
    "output": "'output' declarations are not supported",
    "switch": "classical control ('switch') has no meaning for a pure amplitude",
    "return": "'return' is not supported", "break": "'break' is not supported",
    "continue": "'continue' is not supported", "end": "'end' is not supported",
}
_TYPES = {"int", "uint", "float", "angle", "bool", "complex", "duration", "stretch", "array"}


@dataclass
class _GateDef:
    name: str
    params: list[str]
    qargs: list[str]
    # (mods, name, param exprs, qarg names, offset, callee): callee is the _GateDef the name meant
    # where the definition was read (None: a built-in), so a later definition never changes it
    body: list[tuple]
    offset: int
    emitted: int = 0       # gates one call appends to the circuit once unrolled
    depth: int = 1         # nesting of definitions below and including this one


@dataclass
class _Sink:
    """Where applied gates go: the circuit (top level) or a local list (composing a matrix)."""

    gates: list
    phase: float = 0.0
    top: bool = False


class QasmReader(ExpressionParser):
    """Reads one OpenQASM 2.0 or 3 program into a :class:`Circuit`, within ``max_qubits`` and ``max_gates``."""

    def __init__(self, text: str, source: str = "<circuit>", max_qubits: int = defaults.MAX_QUBITS,
                 max_gates: int = defaults.MAX_GATES):
        self.src = Source(text, source)
        self.toks = tokenize(self.src)
        self.i = 0
        self.depth = 0
        self.max_qubits = max_qubits
        self.max_gates = max_gates
        self._composed: dict[tuple, np.ndarray] = {}
        self.qregs: dict[str, tuple[int, int]] = {}
        self.cregs: dict[str, int] = {}
        self.num_qubits = 0
        self.defs: dict[str, _GateDef] = {}
        self.opaque: set[str] = set()
        self.available: set[str] = set()
        self.consts: dict[str, float] = dict(CONSTANTS)
        self.measured: set[int] = set()
        self.touched: set[int] = set()
        self.sink = _Sink([], top=True)
        self.aliases: dict[str, list[int]] = {}       # 'let' names -> qubits
        self.reread_tokens = 0                        # tokens re-read by loops and subroutine calls
        # name -> (parameters, first token of the body, first token after it)
        self.subroutines: dict[str, tuple[list[tuple[str, str, int]], int, int]] = {}
        self.call_depth = 0

    # ------------------------------------------------------------------ helpers
    def _err(self, message: str, offset: int, cls=ParseError) -> ParseError:
        return self.src.error(message, offset, cls)

    def _ident(self, what: str = "a name") -> tuple[str, int]:
        kind, text, pos = self.toks[self.i]
        if kind != "id":
            shown = text if kind != "eof" else "end of file"
            raise self._err(f"expected {what}, found {shown!r}", pos)
        self.i += 1
        return text, pos

    def _int(self, what: str) -> int:
        """A whole-number expression of constants (sizes, indices, loop bounds)."""
        pos = self.toks[self.i][2]
        value = evaluate(self.expression(), self.consts, self.src)
        if not float(value).is_integer():
            raise self._err(f"expected {what} (a whole number), found {value:g}", pos)
        if abs(value) > 2 ** 53:
            raise self._err(f"{what} {value:g} is out of range", pos)
        return int(value)

    # ------------------------------------------------------------------ entry point
    def read(self) -> Circuit:
        """The circuit of the whole program; raises :class:`ParseError`, :class:`UnsupportedError` or
        :class:`GateLimitError` with line and column."""
        toks = self.toks
        if toks[0][0] == "eof":
            raise self._err("the circuit text is empty", 0)
        first = True
        while toks[self.i][0] != "eof":
            self._statement(first)
            first = False
        if self.num_qubits == 0:
            raise self._err("the program declares no qubits", toks[-1][2])
        return Circuit(self.num_qubits, self.sink.gates, self.sink.phase, self.src.name, validate=False)

    def _statement(self, first: bool) -> None:
        kind, word, pos = self.toks[self.i]
        if kind != "id":
            if word == "{" or word == "}":
                raise self._err(f"unexpected {word!r}", pos)
            if word == "@":
                raise self._err("annotations ('@...') are not supported", pos, UnsupportedError)
            raise self._err(f"expected a statement, found {word!r}", pos)
        if word == "OPENQASM":
            if not first:
                raise self._err("'OPENQASM' must be the first statement", pos)
            self.i += 1
            kind, text, vpos = self.toks[self.i]
            if kind != "num" or text.split(".")[0] not in ("2", "3"):
                raise self._err(f"unsupported OpenQASM version {text!r} (2.x and 3.x are read)", vpos)
            self.i += 1
            self.expect(";")
        elif word == "include":
            self.i += 1
            kind, text, spos = self.toks[self.i]
            if kind != "str":
                raise self._err("expected a quoted file name after 'include'", spos)
            name = text[1:-1]
            if name not in G.INCLUDE_FILES:
                raise self._err(f"include {text} is not allowed: only the built-in 'qelib1.inc' and "
                                f"'stdgates.inc' resolve, and no file is ever read", spos)
            self.available |= G.INCLUDE_FILES[name]
            self.i += 1
            self.expect(";")
        elif word in ("qreg", "creg"):
            self.i += 1
            name, npos = self._ident("a register name")
            self.expect("[")
            size = self._int("a register size")
            self.expect("]")
            self.expect(";")
            self._declare(word == "qreg", name, size, npos)
        elif word in ("qubit", "bit"):
            self.i += 1
            size = 1
            if self.accept("["):
                size = self._int("a register size")
                self.expect("]")
            name, npos = self._ident("a register name")
            if self.toks[self.i][1] == "=":
                raise self._err("initialised bit registers are not supported", self.toks[self.i][2],
                                UnsupportedError)
            self.expect(";")
            self._declare(word == "qubit", name, size, npos)
        elif word == "gate":
            self.i += 1
            self._gate_definition()
        elif word == "opaque":
            self.i += 1
            name, _ = self._ident("a gate name")
            while not self.accept(";"):
                if self.toks[self.i][0] == "eof":
                    raise self._err("expected ';'", self.toks[self.i][2])
                self.i += 1
            self.opaque.add(name)
        elif word in ("barrier", "delay"):
            # no effect on an ideal amplitude; OpenQASM 3 allows a duration and no operands
            self.i += 1
            if word == "delay" or self.toks[self.i][1] == "[":
                self._duration_argument(word)
            if self.toks[self.i][1] != ";":
                self._arguments()
            self.expect(";")
        elif word == "box":
            self.i += 1
            if self.toks[self.i][1] == "[":
                self._duration_argument(word)
            self._block()
        elif word == "let":
            self.i += 1
            self._let()
        elif word == "for":
            self.i += 1
            self._for_loop(pos)
        elif word == "def":
            self.i += 1
            self._subroutine_definition()
        elif word in self.subroutines and self.toks[self.i + 1][1] == "(":
            self._subroutine_call(word, pos)
        elif word == "measure":
            self.i += 1
            qubits = self._arguments()
            if self.accept("->"):
                self._classical_target(pos)
            self.expect(";")
            self._mark_measured(qubits)
        elif word == "reset":
            self.i += 1
            for group in self._arguments():
                for q in group:
                    if q in self.touched or q in self.measured:
                        raise self._err("reset of a qubit that is no longer in |0> has no meaning for a "
                                        "pure amplitude", pos, UnsupportedError)
            self.expect(";")
        elif word == "const":
            self.i += 1
            self._const_declaration()
        elif word in _UNSUPPORTED:
            raise self._err(_UNSUPPORTED[word], pos, UnsupportedError)
        elif word in _TYPES:
            raise self._err(f"classical variables ('{word}') are not supported; use 'const'", pos,
                            UnsupportedError)
        elif word in self.cregs and self.toks[self.i + 1][1] in ("=", "["):
            # OpenQASM 3 'c = measure q;' or 'c[0] = measure q[0];'
            self.i += 1
            if self.accept("["):
                self.expression()
                self.expect("]")
            self.expect("=")
            if self.toks[self.i][1] != "measure":
                raise self._err("classical assignments are not supported", self.toks[self.i][2],
                                UnsupportedError)
            self.i += 1
            qubits = self._arguments()
            self.expect(";")
            self._mark_measured(qubits)
        else:
            self._gate_call()

    def _declare(self, quantum: bool, name: str, size: int, pos: int) -> None:
        if name in self.qregs or name in self.cregs or name in self.consts:
            raise self._err(f"{name!r} is already declared", pos)
        if size < 1:
            raise self._err(f"register {name!r} must have at least one element", pos)
        if quantum:
            if self.num_qubits + size > self.max_qubits:
                raise self._err(f"register {name!r} of {size} qubits exceeds the limit of "
                                f"{self.max_qubits} qubits in total", pos)
            self.qregs[name] = (self.num_qubits, size)
            self.num_qubits += size
        else:
            self.cregs[name] = size

    def _const_declaration(self) -> None:
        ty, tpos = self._ident("a type")
        if ty not in ("int", "uint", "float", "angle"):
            raise self._err(f"constants of type {ty!r} are not supported", tpos, UnsupportedError)
        if self.accept("["):
            self.expression()
            self.expect("]")
        name, npos = self._ident("a constant name")
        self.expect("=")
        value = evaluate(self.expression(), self.consts, self.src)
        self.expect(";")
        if name in self.consts or name in self.qregs:
            raise self._err(f"{name!r} is already declared", npos)
        self.consts[name] = value

    def _classical_target(self, pos: int) -> None:
        name, npos = self._ident("a classical register")
        if name not in self.cregs:
            raise self._err(f"unknown classical register {name!r}", npos)
        if self.accept("["):
            idx = self._int("a bit index")
            if idx >= self.cregs[name]:
                raise self._err(f"bit index {idx} is out of range for {name}[{self.cregs[name]}]", npos)
            self.expect("]")

    def _mark_measured(self, groups: list[list[int]]) -> None:
        for group in groups:
            self.measured.update(group)

    # ------------------------------------------------------------------ qubit arguments
    def _arguments(self) -> list[list[int]]:
        """A comma-separated list of qubit operands, each a list of qubit indices."""
        out = [self._operand()]
        while self.accept(","):
            out.append(self._operand())
        return out

    def _operand(self) -> list[int]:
        """One qubit operand: a register, an alias, or either indexed by ``[i]`` (negative from the
        end), a range ``[a:b]``/``[a:step:b]`` (end included) or a set ``[{i, j}]``."""
        name, pos = self._ident("a qubit operand")
        if name.startswith("$"):
            raise self._err("physical qubits ('$n') are not supported; declare a register", pos,
                            UnsupportedError)
        if name in self.aliases:
            qubits = self.aliases[name]
        elif name in self.qregs:
            offset, size = self.qregs[name]
            qubits = list(range(offset, offset + size))
        elif name in self.cregs:
            raise self._err(f"{name!r} is a classical register, not qubits", pos)
        else:
            raise self._err(f"unknown quantum register {name!r}", pos)
        while self.accept("["):
            qubits = self._select(name, qubits)
            self.expect("]")
        return qubits

    def _select(self, name: str, qubits: list[int]) -> list[int]:
        size = len(qubits)

        def index() -> int:
            ipos = self.toks[self.i][2]
            i = self._int("a qubit index")
            j = i + size if i < 0 else i
            if not 0 <= j < size:
                raise self._err(f"qubit index {i} is out of range for {name}[{size}]", ipos)
            return j

        if self.accept("{"):
            picked = [index()]
            while self.accept(","):
                picked.append(index())
            self.expect("}")
        else:
            first = index()
            if not self.accept(":"):
                return [qubits[first]]
            parts = [first, index()]
            if self.accept(":"):
                parts.append(index())
            start, step, stop = (parts[0], 1, parts[1]) if len(parts) == 2 else parts
            if step == 0:
                raise self._err("a range step of 0", self.toks[self.i][2])
            picked = list(range(start, stop + (1 if step > 0 else -1), step))   # the end is included
        if len(set(picked)) != len(picked):
            raise self._err(f"index set repeats a qubit of {name}", self.toks[self.i][2])
        return [qubits[j] for j in picked]

    def _duration_argument(self, word: str) -> None:
        self.expect("[")
        kind, text, pos = self.toks[self.i]
        if kind not in ("duration", "id", "num"):
            raise self._err(f"'{word}' expects a duration in brackets, found {text!r}", pos)
        self.i += 1
        self.expect("]")

    def _block(self) -> None:
        """``{ statements }`` read in the current scope."""
        open_pos = self.toks[self.i][2]
        self.expect("{")
        while not self.accept("}"):
            if self.toks[self.i][0] == "eof":
                raise self._err("missing '}' for this block", open_pos)
            self._statement(False)

    def _let(self) -> None:
        name, npos = self._ident("an alias name")
        if name in self.qregs or name in self.cregs or name in self.consts or name in self.aliases:
            raise self._err(f"{name!r} is already declared", npos)
        self.expect("=")
        qubits = self._operand()
        while self.accept("++"):
            qubits = qubits + self._operand()
        if len(set(qubits)) != len(qubits):
            raise self._err(f"alias {name!r} names a qubit twice", npos)
        self.expect(";")
        self.aliases[name] = qubits

    def _for_loop(self, pos: int) -> None:
        """``for [type] i in [a:b] / [a:step:b] / {v, ...} { body }``: the body is read once per
        value with ``i`` bound as a constant (the loop is unrolled)."""
        if self.toks[min(self.i + 1, len(self.toks) - 1)][1] != "in":   # an optional type before the variable
            ty, tpos = self._ident("a loop variable type")
            if ty not in ("int", "uint", "float", "angle"):
                raise self._err(f"loop variables of type {ty!r} are not supported", tpos, UnsupportedError)
            if self.accept("["):
                self._int("a type width")
                self.expect("]")
        var, vpos = self._ident("a loop variable")
        self.expect("in")
        if self.accept("{"):
            values = [evaluate(self.expression(), self.consts, self.src)]
            while self.accept(","):
                values.append(evaluate(self.expression(), self.consts, self.src))
            self.expect("}")
        else:
            self.expect("[")
            parts = [self._int("a range bound")]
            while self.accept(":"):
                parts.append(self._int("a range bound"))
            self.expect("]")
            if len(parts) not in (2, 3):
                raise self._err("a loop range is [start:stop] or [start:step:stop]", vpos)
            start, step, stop = (parts[0], 1, parts[1]) if len(parts) == 2 else parts
            if step == 0:
                raise self._err("a loop range with step 0", vpos)
            values = range(start, stop + (1 if step > 0 else -1), step)
        if self.toks[self.i][1] != "{":
            raise self._err("a loop body in braces is expected", self.toks[self.i][2])
        body = self.i
        self._count_reread(len(values) * (self._matching_brace(body) - body), pos)
        saved = self.consts.get(var)
        shadow = var in self.consts
        end = None
        for v in values:
            self.consts[var] = v
            self.i = body
            self._block()
            end = self.i
        if end is None:                                  # no iteration: skip the body unread
            self.i = self._matching_brace(body)
        if shadow:
            self.consts[var] = saved
        else:
            self.consts.pop(var, None)

    def _subroutine_definition(self) -> None:
        """``def name(qubit a, qubit[2] b, float t) { gates }``: a subroutine that only applies gates
        (no return value); its body is read again at every call with the arguments bound."""
        name, npos = self._ident("a subroutine name")
        if name in self.subroutines or name in self.defs or name in self.qregs:
            raise self._err(f"{name!r} is already declared", npos)
        params: list[tuple[str, str, int]] = []
        self.expect("(")
        while not self.accept(")"):
            if params:
                self.expect(",")
            ty, tpos = self._ident("a parameter type")
            size = 1
            if ty == "qubit":
                if self.accept("["):
                    size = self._int("a register size")
                    self.expect("]")
            elif ty in ("int", "uint", "float", "angle"):
                if self.accept("["):
                    self._int("a type width")
                    self.expect("]")
            else:
                raise self._err(f"subroutine parameters of type {ty!r} are not supported (qubit, int, uint, "
                                f"float and angle are)", tpos, UnsupportedError)
            pname, _ = self._ident("a parameter name")
            params.append((ty, pname, size))
        if self.toks[self.i][1] == "->":
            raise self._err("subroutines that return a value are not supported; only gate-applying ones are",
                            self.toks[self.i][2], UnsupportedError)
        if self.toks[self.i][1] != "{":
            raise self._err("a subroutine body in braces is expected", self.toks[self.i][2])
        body = self.i
        self.i = self._matching_brace(body)
        self.subroutines[name] = (params, body, self.i)

    def _subroutine_call(self, name: str, pos: int) -> None:
        params, body, end = self.subroutines[name]
        self.i += 1
        self.expect("(")
        args: list = []
        for n, (ty, pname, size) in enumerate(params):
            if n:
                self.expect(",")
            if ty == "qubit":
                qubits = self._operand()
                if len(qubits) != size:
                    raise self._err(f"{name}: parameter {pname!r} takes {size} qubit(s), got {len(qubits)}", pos)
                args.append(qubits)
            else:
                args.append(evaluate(self.expression(), self.consts, self.src))
        self.expect(")")
        self.expect(";")
        self.call_depth += 1
        if self.call_depth > MAX_CALL_DEPTH:
            raise self._err(f"subroutine calls nested more than {MAX_CALL_DEPTH} deep", pos)
        self._count_reread(end - body, pos)        # calls count like loop iterations (bounded work)
        saved = (dict(self.aliases), dict(self.consts), self.i)
        for (ty, pname, _size), value in zip(params, args):
            if ty == "qubit":
                self.aliases[pname] = value
            else:
                self.consts[pname] = value
        self.i = body
        self._block()
        self.aliases, self.consts, self.i = saved[0], saved[1], saved[2]
        self.call_depth -= 1

    def _count_reread(self, tokens: int, pos: int) -> None:
        """Bound the work of re-reading bodies: the tokens that loop iterations and subroutine calls
        re-read, at most one per allowed gate (re-reading runs at about 7 µs
        per token, so the default 200,000 bounds it to about 1.5 s; a loop-written circuit of 53 qubits
        and 20 cycles re-reads some 30,000 tokens)."""
        self.reread_tokens += tokens
        limit = self.max_gates
        if self.reread_tokens > limit:
            raise self._err(f"loops and subroutine calls re-read {self.reread_tokens:,} tokens, over the limit of "
                            f"{limit:,} (one per allowed gate)", pos, GateLimitError)

    def _matching_brace(self, at: int) -> int:
        depth = 0
        for j in range(at, len(self.toks)):
            t = self.toks[j]
            if t[0] == "op" and t[1] == "{":
                depth += 1
            elif t[0] == "op" and t[1] == "}":
                depth -= 1
                if depth == 0:
                    return j + 1
        raise self._err("missing '}' for this block", self.toks[at][2])

    # ------------------------------------------------------------------ gate definitions
    def _gate_definition(self) -> None:
        name, npos = self._ident("a gate name")
        params: list[str] = []
        if self.accept("("):
            if not self.accept(")"):
                params.append(self._ident("a parameter name")[0])
                while self.accept(","):
                    params.append(self._ident("a parameter name")[0])
                self.expect(")")
        qargs = [self._ident("a qubit argument")[0]]
        while self.accept(","):
            qargs.append(self._ident("a qubit argument")[0])
        if len(set(qargs)) != len(qargs):
            raise self._err(f"gate {name!r} repeats a qubit argument", npos)
        self.expect("{")
        body = []
        while not self.accept("}"):
            kind, word, pos = self.toks[self.i]
            if kind == "eof":
                raise self._err(f"gate {name!r}: missing '}}'", npos)
            if word == "barrier":
                self.i += 1
                self._ident("a qubit argument")
                while self.accept(","):
                    self._ident("a qubit argument")
                self.expect(";")
                continue
            mods, gname, gpos, exprs = self._call_head()
            args: list[str] = []
            if self.toks[self.i][1] != ";":
                args.append(self._ident("a qubit argument")[0])
                while self.accept(","):
                    args.append(self._ident("a qubit argument")[0])
            self.expect(";")
            for a in args:
                if a not in qargs:
                    raise self._err(f"gate {name!r}: {a!r} is not one of its qubit arguments", gpos)
            self._check_arity(gname, len(exprs), len(args), mods, gpos, local=set(params))
            body.append((mods, gname, exprs, args, gpos, self.defs.get(gname)))
        d = _GateDef(name, params, qargs, body, npos)
        expanded, depth = 0, 1
        for _m, _n, _e, _a, bpos, callee in body:
            if callee is not None:
                depth = max(depth, callee.depth + 1)
                expanded += 1 if _m else callee.emitted
            else:
                expanded += 1
        if depth > MAX_DEFINITION_DEPTH:
            raise self._err(f"gate {name!r}: definitions nested {depth} deep exceed the limit of "
                            f"{MAX_DEFINITION_DEPTH}", npos)
        d.depth, d.emitted = depth, expanded
        self.defs[name] = d
        self.available.discard(name)  # a user definition shadows a library gate of the same name

    # ------------------------------------------------------------------ gate calls
    def _call_head(self):
        """Modifiers, gate name and parameter expressions of a gate call."""
        mods = []
        while True:
            kind, word, pos = self.toks[self.i]
            if kind == "id" and word in ("ctrl", "negctrl", "inv", "pow") and self.toks[self.i + 1][1] in ("@", "("):
                self.i += 1
                arg = None
                if self.accept("("):
                    arg = self.expression()
                    self.expect(")")
                elif word == "pow":
                    raise self._err("'pow' needs an exponent: pow(k) @", pos)
                self.expect("@")
                mods.append((word, arg, pos))
            else:
                break
        gname, gpos = self._ident("a gate name")
        exprs = []
        if self.accept("("):
            if not self.accept(")"):
                exprs.append(self.expression())
                while self.accept(","):
                    exprs.append(self.expression())
                self.expect(")")
        return mods, gname, gpos, exprs

    def _signature(self, name: str, pos: int) -> tuple[int, int]:
        """(number of parameters, number of qubits) of a known gate."""
        if name in self.defs:
            d = self.defs[name]
            return len(d.params), len(d.qargs)
        if name == "U":
            return 3, 1
        if name == "CX":
            return 0, 2
        if name == "gphase":
            return 1, 0
        if name in self.opaque:
            raise self._err(f"gate {name!r} is opaque: it has no matrix", pos, UnsupportedError)
        if name in self.available:
            if name in G.BODY_DEFINED:
                return 0, len(G.BODY_DEFINED[name][0].split(","))
            spec = G.LIBRARY[name]
            return spec.num_params, spec.num_qubits
        if name in G.LIBRARY or name in G.BODY_DEFINED:
            raise self._err(f"gate {name!r} is not defined; add 'include \"qelib1.inc\";' (OpenQASM 2) or "
                            f"'include \"stdgates.inc\";' (OpenQASM 3)", pos)
        if name in self.qregs or name in self.cregs:
            raise self._err(f"{name!r} is a register, not a gate", pos)
        raise self._err(f"unknown gate {name!r}", pos)

    def _check_arity(self, name, nparams, nqubits, mods, pos, local=frozenset()) -> None:
        want_p, want_q = self._signature(name, pos)
        extra = 0
        for word, arg, mpos in mods:
            if word in ("ctrl", "negctrl"):
                if arg is None:
                    extra += 1
                elif arg[0] == "num" and float(arg[1]).is_integer() and 1 <= arg[1] <= MAX_DENSE_QUBITS:
                    extra += int(arg[1])
                elif arg[0] == "num" and float(arg[1]).is_integer() and arg[1] > MAX_DENSE_QUBITS:
                    raise self._err(f"'{word}({arg[1]:.0f})': at most {MAX_DENSE_QUBITS} qubits per gate matrix",
                                    mpos, UnsupportedError)
                else:
                    raise self._err(f"'{word}' needs a positive whole number of controls", mpos)
        if nparams != want_p:
            raise self._err(f"gate {name!r} takes {want_p} parameter(s), got {nparams}", pos)
        if nqubits != want_q + extra:
            raise self._err(f"gate {name!r} acts on {want_q + extra} qubit(s), got {nqubits}", pos)
        if mods and want_q + extra > MAX_DENSE_QUBITS:
            raise self._err(f"a modified gate on {want_q + extra} qubits is over the limit of {MAX_DENSE_QUBITS} "
                            f"qubits for one gate matrix (2^{MAX_DENSE_QUBITS} x 2^{MAX_DENSE_QUBITS} entries)", pos,
                            UnsupportedError)

    def _gate_call(self) -> None:
        mods, name, pos, exprs = self._call_head()
        groups = self._arguments() if self.toks[self.i][1] != ";" else []
        self.expect(";")
        self._check_arity(name, len(exprs), len(groups), mods, pos)
        params = [evaluate(e, self.consts, self.src) for e in exprs]
        mods = [(w, None if a is None else evaluate(a, self.consts, self.src), p) for w, a, p in mods]
        sizes = {len(g) for g in groups if len(g) > 1}
        if len(sizes) > 1:
            raise self._err(f"registers of different sizes {sorted(sizes)} in one broadcast", pos)
        reps = sizes.pop() if sizes else 1
        d = self.defs.get(name)
        adds = reps * (d.emitted if d is not None and not mods else 1)
        if len(self.sink.gates) + adds > self.max_gates:
            raise self._err(f"this statement expands to {adds:,} gates; with the {len(self.sink.gates):,} before it "
                            f"the program exceeds the limit of {self.max_gates:,} gates", pos, GateLimitError)
        for r in range(reps):
            qubits = tuple(g[r] if len(g) > 1 else g[0] for g in groups)
            if len(set(qubits)) != len(qubits):
                raise self._err(f"gate {name!r} is given the same qubit twice", pos)
            for q in qubits:
                if q in self.measured:
                    raise self._err(f"gate {name!r} acts on a qubit after it was measured; amplitudes need "
                                    f"measurements at the end", pos, UnsupportedError)
            self.touched.update(qubits)
            self._apply(name, params, qubits, mods, pos, self.sink, self.defs.get(name))

    def _apply(self, name, params, qubits, mods, pos, sink: _Sink, d: _GateDef | None) -> None:
        """Append gate ``name`` (the user definition ``d``, or a built-in when None) to ``sink``."""
        if mods:
            m = self._matrix(name, params, pos, d)
            for word, arg, mpos in reversed(mods):
                if word == "inv":
                    m = G.inverse(m)
                elif word == "pow":
                    try:
                        m = G.power(m, arg)
                    except ValueError as exc:
                        raise self._err(str(exc), mpos, UnsupportedError) from None
                else:
                    n = 1 if arg is None else int(arg)
                    m = G.controlled(m, n, (2 ** n - 1) if word == "ctrl" else 0)
            if m.shape[0] == 1:
                sink.phase += float(np.angle(m[0, 0]))
            else:
                sink.gates.append(Gate(qubits, m, name))
            return
        if d is not None:
            env = dict(self.consts)
            env.update(zip(d.params, params))
            for bmods, bname, bexprs, bargs, bpos, callee in d.body:
                bq = tuple(qubits[d.qargs.index(a)] for a in bargs)
                bp = [evaluate(e, env, self.src) for e in bexprs]
                bm = [(w, None if a is None else evaluate(a, env, self.src), p) for w, a, p in bmods]
                self._apply(bname, bp, bq, bm, bpos, sink, callee)
            return
        if name == "gphase":
            sink.phase += params[0]
            return
        sink.gates.append(Gate(qubits, self._matrix(name, params, pos, None), name, name, tuple(params)))

    def _matrix(self, name, params, pos, d: _GateDef | None) -> np.ndarray:
        """The matrix of a gate (the user definition ``d``, or the built-in ``name``) on its own qubits."""
        if d is not None:
            key = (id(d), tuple(params))
            if key not in self._composed:
                if len(d.qargs) > MAX_DENSE_QUBITS:
                    raise self._err(f"gate {name!r} acts on {len(d.qargs)} qubits: over the limit of "
                                    f"{MAX_DENSE_QUBITS} qubits for one gate matrix", pos, UnsupportedError)
                if d.emitted > self.max_gates:
                    raise self._err(f"gate {name!r} expands to {d.emitted:,} gates, over the limit of "
                                    f"{self.max_gates:,}", pos, GateLimitError)
                local = _Sink([])
                self._apply(name, params, tuple(range(len(d.qargs))), [], pos, local, d)   # on local qubits
                self._composed[key] = compose(len(d.qargs), local.gates, local.phase)
            return self._composed[key]
        if name == "U":
            return G.u_gate(*params)
        if name == "CX":
            return G.CX
        if name == "gphase":
            return np.array([[np.exp(1j * params[0])]])
        if name in G.BODY_DEFINED:
            return _body_matrix(name)
        return G.LIBRARY[name].factory(*params)


_BODY_CACHE: dict[str, np.ndarray] = {}


def _body_matrix(name: str) -> np.ndarray:
    if name not in _BODY_CACHE:
        args, body = G.BODY_DEFINED[name]
        text = f'OPENQASM 2.0; include "qelib1.inc"; qreg q[{len(args.split(","))}]; ' \
               f"gate {name}_ {args} {{ {body} }} {name}_ " + ",".join(
                   f"q[{i}]" for i in range(len(args.split(",")))) + ";"
        circ = QasmReader(text, f"<{name}>").read()
        m = compose(circ.num_qubits, circ.gates, circ.global_phase)
        m.setflags(write=False)
        _BODY_CACHE[name] = m
    return _BODY_CACHE[name]


def read_qasm(text: str, source: str = "<circuit>", max_qubits: int = defaults.MAX_QUBITS,
              max_gates: int = defaults.MAX_GATES) -> Circuit:
    """Parse OpenQASM 2.0 or 3 text into a :class:`Circuit` (raises :class:`ParseError`).

    ``max_gates`` bounds the expanded gate count; it is checked from the gate definitions before
    anything is expanded."""
    return QasmReader(text, source, max_qubits, max_gates).read()
