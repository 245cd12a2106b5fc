"""A corpus of bad inputs: each gives a typed error whose message names the problem.

The expected wording is our own; the rules behind the cases come from the OpenQASM 2.0 paper
(arXiv:1707.03429) and the OpenQASM 3 specification (arXiv:2104.14722) — e.g. a gate's arity and
parameter count, register bounds, `include` semantics.
"""

import json

import numpy as np
import pytest

from contraction.circuits.json_document import read_json
from contraction.circuits.loader import load_circuit
from contraction.circuits.model import Circuit, Gate
from contraction.errors import BitstringError, CircuitError, ParseError, UnsupportedError, VerampError
from contraction.execution.amplitudes import amplitudes

H2 = 'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[3];\n'
H3 = 'OPENQASM 3.0;\ninclude "stdgates.inc";\nqubit[3] q;\n'

# (id, text, error class, words the message must contain, line or None)
QASM_CASES = [
    ("empty", "", ParseError, "empty", 1),
    ("only-comment", "// nothing\n", ParseError, "empty", None),
    ("missing-semicolon", H2 + "h q[0]\ncx q[0],q[1];", ParseError, "expected ';'", 5),
    ("unknown-gate", H2 + "foo q[0];", ParseError, "unknown gate 'foo'", 4),
    ("wrong-arity", H2 + "cx q[0];", ParseError, "acts on 2 qubit", 4),
    ("wrong-param-count", H2 + "rx q[0];", ParseError, "takes 1 parameter", 4),
    ("too-many-params", H2 + "h(0.1) q[0];", ParseError, "takes 0 parameter", 4),
    ("index-out-of-range", H2 + "h q[3];", ParseError, "out of range", 4),
    ("repeated-qubit", H2 + "cx q[1],q[1];", ParseError, "same qubit twice", 4),
    ("unknown-register", H2 + "h r[0];", ParseError, "unknown quantum register 'r'", 4),
    ("classical-as-qubit", H2 + "creg c[2];\nh c[0];", ParseError, "classical register", 5),
    ("include-file-path", 'OPENQASM 2.0;\ninclude "/etc/passwd";\nqreg q[1];', ParseError, "not allowed", 2),
    ("include-relative", 'OPENQASM 2.0;\ninclude "mygates.inc";\nqreg q[1];', ParseError, "no file is ever read", 2),
    ("huge-register", "OPENQASM 2.0;\nqreg q[100000000];", ParseError, "exceeds the limit", 2),
    ("zero-register", "OPENQASM 2.0;\nqreg q[0];", ParseError, "at least one", 2),
    ("bad-version", "OPENQASM 4.0;\nqreg q[1];", ParseError, "unsupported OpenQASM version", 1),
    ("version-not-first", "qreg q[1];\nOPENQASM 2.0;", ParseError, "first statement", 2),
    ("bad-character", H2 + "h q[0]; ?", ParseError, "unexpected character", 4),
    ("unterminated-comment", H2 + "/* open", ParseError, "unterminated", 4),
    ("bad-expression", H2 + "rx(pi*) q[0];", ParseError, "expected an expression", 4),
    ("unknown-identifier", H2 + "rx(alpha) q[0];", ParseError, "unknown identifier 'alpha'", 4),
    ("division-by-zero", H2 + "rx(1/0) q[0];", ParseError, "cannot evaluate", 4),
    ("sqrt-negative", H2 + "rx(sqrt(-1)) q[0];", ParseError, "cannot evaluate", 4),
    ("if-statement", H2 + "creg c[1];\nif(c==1) x q[0];", UnsupportedError, "classical control", 5),
    ("gate-after-measure", H2 + "creg c[3];\nmeasure q[0] -> c[0];\nh q[0];", UnsupportedError,
     "after it was measured", 6),
    ("reset-used-qubit", H2 + "h q[0];\nreset q[0];", UnsupportedError, "no longer in |0>", 5),
    ("while-loop", H3 + "bit c;\nwhile (c) { h q[0]; }", UnsupportedError, "'while' loops", 5),
    # hostile programs: each is refused before any expansion or deep recursion (common practice:
    # bounded work per request; the limits are ours and named in the message)
    ("expansion-2^40", H2 + "".join(f"gate g{k} a {{ {f'g{k - 1} a; ' * 16 if k else 'h a;'} }}\n" for k in range(11))
     + "g10 q[0];", ParseError, "exceeds the limit of", 15),
    ("deep-parentheses", H2 + "rx(" + "(" * 1000 + "1" + ")" * 1000 + ") q[0];", ParseError, "nested more than", 4),
    ("huge-literal", H2 + "rx(1e400) q[0];", ParseError, "out of range", 4),
    ("huge-hex-literal", H2 + "rx(0x" + "f" * 300 + ") q[0];", ParseError, "out of range", 4),
    ("huge-product", H2 + "rx(1e300*1e300) q[0];", ParseError, "finite", 4),
    ("ctrl-20", H3 + "ctrl(20) @ x q[0], q[1];", UnsupportedError, "at most 10 qubits", 4),
    ("pow-huge-irrational", H3 + "pow(1e12) @ rx(0.3) q[0];", UnsupportedError, "not a rational multiple", 4),
    ("pow-infinite", H3 + "pow(1e400) @ h q[0];", ParseError, "out of range", 4),
    ("imaginary-literal", H3 + "rx(1im) q[0];", ParseError, "imaginary literals", 4),
    ("loop-too-long", H3 + "for int i in [0:100000000000] { h q[0]; }", ParseError, "re-read", 4),
    ("subroutine-blowup", H3 + "def f0(qubit a) { }\n" + "".join(f"def f{k}(qubit a) {{ f{k - 1}(a); f{k - 1}(a); }}\n"
                                                                 for k in range(1, 40)) + "f39(q[0]);", ParseError,
     "re-read", None),
    ("subroutine-recursion", H3 + "def f(qubit a) { f(a); }\nf(q[0]);", ParseError, "nested more than", 4),
    ("subroutine-returning", H3 + "def f(qubit a) -> bit { h a; }", UnsupportedError, "return a value", 4),
    ("deep-definitions", H2 + "gate d0 a { h a; }\n" + "".join(f"gate d{k} a {{ d{k - 1} a; }}\n"
                                                               for k in range(1, 260)), ParseError, "nested", 204),
    ("classical-variable", H3 + "float x = 1.0;", UnsupportedError, "classical variables", 4),
    ("opaque-gate-use", H2 + "opaque magic a;\nmagic q[0];", UnsupportedError, "opaque", 5),
    ("broadcast-mismatch", 'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg a[2];\nqreg b[3];\ncx a,b;',
     ParseError, "different sizes", 5),
    ("gate-body-bad-arg", H2 + "gate g a { h b; }", ParseError, "not one of its qubit arguments", 4),
    ("gate-body-unclosed", H2 + "gate g a { h a;", ParseError, "missing '}'", 4),
    ("missing-include", "OPENQASM 2.0;\nqreg q[1];\nh q[0];", ParseError, "include", 3),
    ("pow-without-exponent", H3 + "pow @ x q[0];", ParseError, "exponent", 4),
    ("redeclared-register", "OPENQASM 2.0;\nqreg q[1];\nqreg q[2];", ParseError, "already declared", 3),
    ("physical-qubit", 'OPENQASM 3.0;\ninclude "stdgates.inc";\nqubit[1] q;\nh $0;', UnsupportedError,
     "physical qubits", 4),
]


@pytest.mark.parametrize("case", QASM_CASES, ids=[c[0] for c in QASM_CASES])
def test_bad_qasm(case):
    _id, text, cls, words, line = case
    with pytest.raises(cls) as exc:
        load_circuit(text, source="bad.qasm")
    msg = str(exc.value)
    assert words in msg
    assert msg.startswith("bad.qasm:")
    if line is not None:
        assert exc.value.line == line
        assert exc.value.column >= 1


def _doc(**over):
    doc = {"format": "veramp.circuit", "version": 1, "num_qubits": 2,
           "gates": [{"qubits": [0], "gate": "h"}]}
    doc.update(over)
    return json.dumps(doc)


JSON_CASES = [
    ("not-json", "{not json", ParseError, "invalid JSON"),
    ("wrong-format", _doc(format="other"), CircuitError, "'format'"),
    ("wrong-version", _doc(version=9), CircuitError, "version"),
    ("zero-qubits", _doc(num_qubits=0), CircuitError, "positive"),
    ("too-many-qubits", _doc(num_qubits=10 ** 6), CircuitError, "exceeds the limit"),
    ("non-unitary", _doc(gates=[{"qubits": [0], "matrix": [[[1, 0], [1, 0]], [[0, 0], [1, 0]]]}]),
     CircuitError, "not unitary"),
    ("nan", _doc(gates=[{"qubits": [0], "matrix": [[[float("nan"), 0], [0, 0]], [[0, 0], [1, 0]]]}]),
     CircuitError, "not finite"),
    ("wrong-shape", _doc(gates=[{"qubits": [0, 1], "matrix": [[[1, 0], [0, 0]], [[0, 0], [1, 0]]]}]),
     CircuitError, "4x4"),
    ("repeated-qubit", _doc(gates=[{"qubits": [1, 1], "gate": "cx"}]), CircuitError, "repeated qubit"),
    ("qubit-out-of-range", _doc(gates=[{"qubits": [5], "gate": "x"}]), CircuitError, "out of range"),
    ("unknown-gate", _doc(gates=[{"qubits": [0], "gate": "nope"}]), CircuitError, "unknown gate"),
    ("matrix-and-gate", _doc(gates=[{"qubits": [0], "gate": "x", "matrix": [[[0, 0]]]}]),
     CircuitError, "exactly one"),
    ("bad-entry", _doc(gates=[{"qubits": [0], "matrix": [[1, 0], [0, 1]]}]), CircuitError, "[re, im]"),
]


@pytest.mark.parametrize("case", JSON_CASES, ids=[c[0] for c in JSON_CASES])
def test_bad_json(case):
    _id, text, cls, words = case
    with pytest.raises(cls) as exc:
        read_json(text)
    assert words in str(exc.value)


def test_bad_model_gates():
    with pytest.raises(CircuitError, match="not unitary"):
        Circuit(1, [Gate((0,), np.array([[2, 0], [0, 1]], dtype=complex))])
    with pytest.raises(CircuitError, match="positive"):
        Circuit(0, [])


@pytest.mark.parametrize("bits,words", [("01", "has 2 characters"), ("0120", "contains '2'"),
                                        ("01a0", "contains 'a'"), ("", "has 0 characters")])
def test_bad_bitstrings(bits, words):
    c = load_circuit(H2.replace("qreg q[3]", "qreg q[4]"))
    with pytest.raises(BitstringError, match=words):
        amplitudes(c, [bits])


def test_every_error_is_a_veramp_error():
    for cls in (ParseError, UnsupportedError, CircuitError, BitstringError):
        assert issubclass(cls, VerampError)
