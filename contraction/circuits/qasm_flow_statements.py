"""Blocks, aliases, loops and subroutines of an OpenQASM 3 program: the part of
:class:`contraction.circuits.qasm_reader.QasmReader` that re-reads token ranges (loop bodies unrolled,
subroutine bodies at every call), the tokens re-read bounded by the gate limit."""

from __future__ import annotations

from contraction.circuits.qasm_lexer import evaluate
from contraction.errors import GateLimitError, UnsupportedError

#: nesting of subroutine calls (each level re-reads a body)
MAX_CALL_DEPTH = 64


class FlowStatements:
    """``{ }`` blocks, ``let`` aliases, ``for`` loops and ``def`` subroutines, mixed into the reader."""

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

