"""OpenQASM semantics checked against the standards' own definitions, and hostile programs.

Sources named beside each check:
* OpenQASM 3: Cross et al., "OpenQASM 3: A broader and deeper quantum assembly language",
  ACM Trans. Quantum Comput. 3, 12 (2022), arXiv:2104.14722 — §"Gates" (U, gphase, modifiers ctrl/
  negctrl/inv/pow with pow's principal branch) and the standard library stdgates.inc printed there.
  The stdgates.inc bodies below are transcribed from memory of that file.
* OpenQASM 2.0: Cross, Bishop, Smolin & Gambetta, arXiv:1707.03429, Appendix (qelib1.inc), where
  U(θ,φ,λ) = Rz(φ)Ry(θ)Rz(λ) and cu3 has the body written out in ``PAPER_CU3`` below.
"""

import cmath
import math

import numpy as np
import pytest

from contraction.circuits import gates as G
from contraction.circuits.gates import compose
from contraction.circuits.loader import load_circuit
from contraction.errors import ParseError, UnsupportedError
from contraction.execution.statevector import state_vector

OQ3 = 'OPENQASM 3.0;\ninclude "stdgates.inc";\n'
OQ2 = 'OPENQASM 2.0;\ninclude "qelib1.inc";\n'


def probs(text: str) -> np.ndarray:
    return np.abs(state_vector(load_circuit(text))) ** 2


def matrix(text: str) -> np.ndarray:
    c = load_circuit(text)
    return compose(c.num_qubits, c.gates, c.global_phase)


# ------------------------------------------------------------------ u3 under control

THETA, PHI, LAM = 0.7, 0.4, 1.1


def test_controlled_u3_carries_the_standard_library_phase():
    """stdgates.inc: u3(θ,φ,λ) = gphase(-(φ+λ)/2) U(θ,φ,λ); under ctrl @ that phase acts on the
    control. Hand calculation: H on the control, controlled u3, H again gives
    amplitude(00) = (1 + e^{-i(φ+λ)/2} cos(θ/2)) / 2."""
    p = probs(OQ3 + f"qubit[2] q;\nh q[0];\nctrl @ u3({THETA},{PHI},{LAM}) q[0],q[1];\nh q[0];")
    expect = abs((1 + cmath.exp(-0.5j * (PHI + LAM)) * math.cos(THETA / 2)) / 2) ** 2
    assert p[0] == pytest.approx(expect, abs=1e-14)
    assert expect == pytest.approx(0.81427, abs=5e-6)        # the value quoted in the issue, by hand


def test_oq2_cu3_keeps_the_phase_free_controlled_u():
    """The widely used later qelib1.inc adds u1((λ+φ)/2) on the control, i.e. the controlled
    phase-free U: amplitude(00) = (1 + cos(θ/2)) / 2 (the README's conventions say so)."""
    p = probs(OQ2 + f"qreg q[2];\nh q[0];\ncu3({THETA},{PHI},{LAM}) q[0],q[1];\nh q[0];")
    assert p[0] == pytest.approx(((1 + math.cos(THETA / 2)) / 2) ** 2, abs=1e-14)


PAPER_CU3 = """gate cu3(theta,phi,lambda) c, t
{
  u1((lambda-phi)/2) t;
  cx c,t;
  u3(-theta/2,0,-(phi+lambda)/2) t;
  cx c,t;
  u3(theta/2,phi,0) t;
}
"""


def test_program_defining_cu3_gets_exactly_its_own_definition():
    """arXiv:1707.03429's qelib1.inc body of cu3 (no phase on the control) implements the
    controlled Rz(φ)Ry(θ)Rz(λ): amplitude(00) = (1 + e^{-i(φ+λ)/2} cos(θ/2)) / 2."""
    p = probs(OQ2 + PAPER_CU3 + f"qreg q[2];\nh q[0];\ncu3({THETA},{PHI},{LAM}) q[0],q[1];\nh q[0];")
    expect = abs((1 + cmath.exp(-0.5j * (PHI + LAM)) * math.cos(THETA / 2)) / 2) ** 2
    assert p[0] == pytest.approx(expect, abs=1e-14)


def test_a_definition_named_like_a_builtin_calls_the_builtin_it_saw():
    """A body refers to the gate its name meant where the body was written (OpenQASM 3 §gates:
    a gate must be defined before use), so `gate h a { h a; }` is the library H, not a loop."""
    p = probs(OQ2 + "gate h a { h a; h a; h a; }\nqreg q[1];\nh q[0];")
    assert p == pytest.approx([0.5, 0.5], abs=1e-15)


# ------------------------------------------------------------------ stdgates.inc bodies

# (gate call, body written with U, gphase and modifiers as in stdgates.inc, qubits)
STDGATES = [
    ("x", "U(pi, 0, pi) a;", 1),
    ("y", "U(pi, pi/2, pi/2) a;", 1),
    ("z", "ctrl @ gphase(pi) a;", 1),
    ("h", "U(pi/2, 0, pi) a;", 1),
    ("s", "pow(1/2) @ z a;", 1),
    ("sdg", "inv @ pow(1/2) @ z a;", 1),
    ("t", "pow(1/2) @ s a;", 1),
    ("tdg", "inv @ pow(1/2) @ s a;", 1),
    ("sx", "pow(1/2) @ x a;", 1),
    ("rx(0.37)", "U(0.37, -pi/2, pi/2) a;", 1),
    ("ry(0.37)", "U(0.37, 0, 0) a;", 1),
    ("rz(0.37)", "gphase(-0.37/2); U(0, 0, 0.37) a;", 1),
    ("p(0.37)", "ctrl @ gphase(0.37) a;", 1),
    ("u1(0.37)", "U(0, 0, 0.37) a;", 1),
    ("u2(0.3, 0.5)", "gphase(-(0.3+0.5)/2); U(pi/2, 0.3, 0.5) a;", 1),
    ("u3(0.2, 0.3, 0.5)", "gphase(-(0.3+0.5)/2); U(0.2, 0.3, 0.5) a;", 1),
    ("cx", "ctrl @ x a, b;", 2),
    ("cy", "ctrl @ y a, b;", 2),
    ("cz", "ctrl @ z a, b;", 2),
    ("ch", "ctrl @ h a, b;", 2),
    ("cp(0.37)", "ctrl @ p(0.37) a, b;", 2),
    ("crx(0.37)", "ctrl @ rx(0.37) a, b;", 2),
    ("cry(0.37)", "ctrl @ ry(0.37) a, b;", 2),
    ("crz(0.37)", "ctrl @ rz(0.37) a, b;", 2),
    ("swap", "cx a, b; cx b, a; cx a, b;", 2),
    ("cu(0.2, 0.3, 0.5, 0.7)", "p(0.7) a; ctrl @ U(0.2, 0.3, 0.5) a, b;", 2),
    ("ccx", "ctrl @ ctrl @ x a, b, c;", 3),
    ("cswap", "ctrl @ swap a, b, c;", 3),
]


@pytest.mark.parametrize("call, body, k", STDGATES, ids=[g[0] for g in STDGATES])
def test_library_gate_equals_its_stdgates_body_under_control(call, body, k):
    """Controlled, so a global phase of the gate would show as a relative phase."""
    args = ", ".join("abc"[:k])
    qs = ", ".join(f"q[{i}]" for i in range(k + 1))
    mine = matrix(OQ3 + f"gate mine {args} {{ {body} }}\nqubit[{k + 1}] q;\nctrl @ mine {qs};")
    lib = matrix(OQ3 + f"qubit[{k + 1}] q;\nctrl @ {call} {qs};")
    assert np.allclose(mine, lib, atol=1e-13, rtol=0)


def test_hand_computed_matrices():
    """A few by hand: S = diag(1, i), T = diag(1, e^{iπ/4}), √X = ((1+i)/2, (1-i)/2; (1-i)/2, (1+i)/2)."""
    assert np.allclose(matrix(OQ3 + "qubit q;\ns q;"), np.diag([1, 1j]), atol=1e-15)
    assert np.allclose(matrix(OQ3 + "qubit q;\nt q;"), np.diag([1, cmath.exp(0.25j * math.pi)]), atol=1e-15)
    half = np.array([[1 + 1j, 1 - 1j], [1 - 1j, 1 + 1j]]) / 2
    assert np.allclose(matrix(OQ3 + "qubit q;\nsx q;"), half, atol=1e-15)


# ------------------------------------------------------------------ pow

@pytest.mark.parametrize("k", ["1e308", "1e9", "2", "1000000", "-4e15"])
def test_even_powers_of_h_are_the_identity(k):
    """H² = 1 (Nielsen & Chuang 2010, §1.3.1), so H^k = 1 for every even k; every double ≥ 2^53 is even."""
    assert probs(OQ3 + f"qubit q;\npow({k}) @ h q;")[0] == pytest.approx(1.0, abs=1e-14)


def test_odd_huge_power_and_period_of_t():
    """T has order 8 (T = diag(1, e^{iπ/4})): T^(8m+3) = T³ exactly, under control too."""
    a = matrix(OQ3 + "qubit[2] q;\nctrl @ pow(8000000003) @ t q[0], q[1];")
    b = matrix(OQ3 + "qubit[2] q;\nctrl @ pow(3) @ t q[0], q[1];")
    assert np.allclose(a, b, atol=1e-14, rtol=0)


def test_fractional_power_is_the_principal_branch():
    """OpenQASM 3 §modifiers: pow(r) uses the principal branch; X's eigenvalue -1 = e^{iπ} goes to
    e^{iπ/2} = i, so pow(1/2) @ x is √X as in stdgates (sx); pow(0.5) @ rz(θ) = rz(θ/2)."""
    assert np.allclose(matrix(OQ3 + "qubit q;\npow(0.5) @ x q;"), G.SX, atol=1e-14)
    assert np.allclose(matrix(OQ3 + "qubit q;\npow(0.5) @ rz(0.8) q;"), G.rz(0.4), atol=1e-14)


# ------------------------------------------------------------------ OpenQASM 3 programs

LOOPED = OQ3 + """const int n = 0x4;
qubit[n] q;
qubit[2] r;
bit[n] c;
let both = q[0:1] ++ r;
for uint i in [0:n-1] { h q[i]; }
for int i in {0, 2} { rz(0.1 * i) q[i]; }
for int i in [3:-1:2] { t q[i]; }
box[100ns] { cx q[-1], r[0]; }
delay[20ns] q[1];
barrier;
barrier q[{0, 2}];
cz both[0], both[3];
gate rot(θ, φ) a { rz(θ) a; ry(φ) a; }
def turn(qubit a, float t) { rot(t, 0.2) a; }
turn(q[0b1], 0.3);
def pair(qubit[2] p) { cx p[0], p[1]; }
pair(q[{0o2, 3}]);
c = measure q;
"""

UNROLLED = OQ3 + """qubit[4] q;
qubit[2] r;
h q[0]; h q[1]; h q[2]; h q[3];
rz(0.0) q[0]; rz(0.2) q[2];
t q[3]; t q[2];
cx q[3], r[0];
cz q[0], r[1];
rz(0.3) q[1]; ry(0.2) q[1];
cx q[2], q[3];
"""


def test_oq3_constructs_equal_the_unrolled_program():
    """for loops over ranges (end included, OpenQASM 3 §loops) and sets, const sizes, hex/binary/
    octal literals, let with ++, register slices, index sets, negative indices, box, delay and
    barrier with durations, Unicode identifiers, def subroutines that apply gates: the same state as
    the program written out."""
    a = state_vector(load_circuit(LOOPED))
    b = state_vector(load_circuit(UNROLLED))
    assert np.allclose(a, b, atol=1e-14, rtol=0)


def test_long_sign_runs_and_sums_do_not_recurse():
    text = OQ2 + "qreg q[1];\nrx(" + "-" * 5000 + "0.5) q[0];\n"      # an even number of signs
    assert np.allclose(matrix(text), G.rx(0.5), atol=1e-15)
    body = "+".join(["t"] + ["0.001"] * 3000)                        # a long chain with a variable
    text = OQ2 + f"gate g(t) a {{ rx({body}) a; }}\nqreg q[1];\ng(0.5) q[0];\n"
    assert np.allclose(matrix(text), G.rx(0.5 + 3.0), atol=1e-12)


@pytest.mark.parametrize("text, cls, words", [
    (OQ3 + "qubit q;\nctrl(11) @ x q, q;", UnsupportedError, "at most 10 qubits"),
    (OQ3 + "qubit[2] q;\nbit c;\nc = measure q[0];\nif (c) x q[1];", UnsupportedError, "classical control"),
    (OQ3 + "qubit q;\nreset q;\nh q;\nreset q;", UnsupportedError, "no longer in |0>"),
    (OQ3 + "qubit[2] q;\nh q[0:1:5];", ParseError, "out of range"),
    (OQ3 + "qubit[3] q;\ncx q[{0, 0}];", ParseError, "repeats"),
])
def test_refusals_name_the_construct(text, cls, words):
    with pytest.raises(cls) as exc:
        load_circuit(text, source="p.qasm")
    assert words in str(exc.value) and exc.value.line is not None
