"""Gate definitions and gate calls of an OpenQASM program: the part of
:class:`contraction.circuits.qasm_reader.QasmReader` that reads ``gate`` definitions (their expanded size
and nesting counted when they are read, before anything is expanded) and applies gate calls with their
modifiers, composing dense matrices within ``MAX_DENSE_QUBITS``."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from contraction.circuits import gates as G
from contraction.circuits.gates import compose
from contraction.circuits.model import Gate
from contraction.circuits.qasm_lexer import evaluate
from contraction.errors import GateLimitError, UnsupportedError

#: qubits of one dense gate matrix (modified gates, composed definitions): 2^10 x 2^10 entries
MAX_DENSE_QUBITS = 10
#: nesting of gate definitions (a definition calling one that calls one ...)
MAX_DEFINITION_DEPTH = 200


@dataclass
class GateDef:
    """A ``gate`` definition as read: parameters, qubit arguments and body, with its expanded size."""

    name: str
    params: list[str]
    qargs: list[str]
    # (mods, name, param exprs, qarg names, offset, callee): callee is the GateDef the name meant
    # where the definition was read (None: a built-in), so a later definition never changes it
    body: list[tuple]
    offset: int
    emitted: int = 0       # gates one call appends to the circuit once unrolled
    depth: int = 1         # nesting of definitions below and including this one


@dataclass
class Sink:
    """Where applied gates go: the circuit (top level) or a local list (composing a matrix)."""

    gates: list
    phase: float = 0.0


class GateStatements:
    """``gate`` definitions and gate calls, mixed into the reader (which holds the tokens, registers,
    definitions and the sink gates go to)."""

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
        d = GateDef(name, params, qargs, body, npos)
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

    def _apply(self, name, params, qubits, mods, pos, sink: Sink, d: GateDef | None) -> None:
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

    def _matrix(self, name, params, pos, d: GateDef | None) -> np.ndarray:
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
                local = Sink([])
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
            return _body_matrix(name, type(self))
        return G.LIBRARY[name].factory(*params)


_BODY_CACHE: dict[str, np.ndarray] = {}


def _body_matrix(name: str, reader) -> np.ndarray:
    """The matrix of a library gate defined by an OpenQASM body, read once by ``reader`` (the reader class
    this is mixed into: importing it here would close an import circle)."""
    if name not in _BODY_CACHE:
        args, body = G.BODY_DEFINED[name]
        text = f'OPENQASM 2.0; include "qelib1.inc"; qreg q[{len(args.split(","))}]; ' \
               f"gate {name}_ {args} {{ {body} }} {name}_ " + ",".join(
                   f"q[{i}]" for i in range(len(args.split(",")))) + ";"
        circ = reader(text, f"<{name}>").read()
        m = compose(circ.num_qubits, circ.gates, circ.global_phase)
        m.setflags(write=False)
        _BODY_CACHE[name] = m
    return _BODY_CACHE[name]
