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

Gate definitions and calls are read by :mod:`contraction.circuits.qasm_gate_statements`, blocks, loops
and subroutines by :mod:`contraction.circuits.qasm_flow_statements` (both mixed into the reader).
"""

from __future__ import annotations

import numpy as np

from contraction import defaults
from contraction.circuits import gates as G
from contraction.circuits.model import Circuit
from contraction.circuits.qasm_flow_statements import FlowStatements
from contraction.circuits.qasm_gate_statements import GateDef, GateStatements, Sink
from contraction.circuits.qasm_lexer import CONSTANTS, ExpressionParser, Source, evaluate, tokenize
from contraction.errors import GateLimitError, ParseError, UnsupportedError

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


class QasmReader(GateStatements, FlowStatements, ExpressionParser):
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
        self.defs: dict[str, GateDef] = {}
        self.opaque: set[str] = set()
        self.available: set[str] = set()
        self.consts: dict[str, float] = dict(CONSTANTS)
        self.measured: set[int] = set()
        self.touched: set[int] = set()
        self.sink = Sink([])
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



def read_qasm(text: str, source: str = "<circuit>", max_qubits: int = defaults.MAX_QUBITS,
              max_gates: int = defaults.MAX_GATES) -> Circuit:
    """Parse OpenQASM 2.0 or 3 text into a :class:`Circuit` (raises :class:`ParseError`).

    ``max_gates`` bounds the expanded gate count; it is checked from the gate definitions before
    anything is expanded."""
    return QasmReader(text, source, max_qubits, max_gates).read()
