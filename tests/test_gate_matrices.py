"""Gate matrices against the published standards.

Sources:
* OpenQASM 2.0 — A. Cross, L. Bishop, J. Smolin, J. Gambetta, arXiv:1707.03429 (2017): the
  primitive U(θ,φ,λ) = Rz(φ)Ry(θ)Rz(λ) and CX, and the qelib1.inc gate bodies (its appendix).
  The bodies below are written from that file; a gate defined by a body is fixed only up to a
  global phase, so those checks compare up to one.
* OpenQASM 3 — Cross et al., ACM TQC 3(3) 12 (2022), arXiv:2104.14722: the explicit matrix of U and
  the stdgates.inc definitions (e.g. p, cu with its γ), compared exactly.
* Arute et al., Nature 574, 505 (2019): √X, √Y, √W with (√G)² = −i·G; fSim(θ, φ).
"""

import cmath
import math

import numpy as np
import pytest

from contraction.circuits import gates as G
from contraction.circuits.gates import compose
from contraction.circuits.qasm_reader import read_qasm

# qelib1.inc bodies in terms of the primitives U and CX (arXiv:1707.03429, appendix)
QELIB1_BODIES = {
    "u3(theta,phi,lambda) q": "U(theta,phi,lambda) q;",
    "u1(lambda) q": "U(0,0,lambda) q;",
    "cu1(lambda) a,b": "U(0,0,lambda/2) a; CX a,b; U(0,0,-lambda/2) b; CX a,b; U(0,0,lambda/2) b;",
    "crz(lambda) a,b": "U(0,0,lambda/2) b; CX a,b; U(0,0,-lambda/2) b; CX a,b;",
    "cu3(theta,phi,lambda) c,t": "U(0,0,(lambda+phi)/2) c; U(0,0,(lambda-phi)/2) t; CX c,t;"
                                 " U(-theta/2,0,-(phi+lambda)/2) t; CX c,t; U(theta/2,phi,0) t;",
    "rzz(theta) a,b": "CX a,b; U(0,0,theta) b; CX a,b;",
    # h = U(pi/2,0,pi), t = U(0,0,pi/4), tdg = U(0,0,-pi/4)
    "ccx a,b,c": "U(pi/2,0,pi) c; CX b,c; U(0,0,-pi/4) c; CX a,c; U(0,0,pi/4) c; CX b,c;"
                 " U(0,0,-pi/4) c; CX a,c; U(0,0,pi/4) b; U(0,0,pi/4) c; U(pi/2,0,pi) c; CX a,b;"
                 " U(0,0,pi/4) a; U(0,0,-pi/4) b; CX a,b;",
    "swap a,b": "CX a,b; CX b,a; CX a,b;",
    "cswap a,b,c": "CX c,b; {ccx} CX c,b;",  # cx c,b; ccx a,b,c; cx c,b;
    "crx(lambda) a,b": "U(0,0,pi/2) b; CX a,b; U(-lambda/2,0,0) b; CX a,b; U(lambda/2,-pi/2,0) b;",
    "cry(lambda) a,b": "U(lambda/2,0,0) b; CX a,b; U(-lambda/2,0,0) b; CX a,b;",
    # h b; sdg b; cx a,b; h b; t b; cx a,b; t b; h b; s b; x b; s a;
    "ch a,b": "U(pi/2,0,pi) b; U(0,0,-pi/2) b; CX a,b; U(pi/2,0,pi) b; U(0,0,pi/4) b; CX a,b;"
              " U(0,0,pi/4) b; U(pi/2,0,pi) b; U(0,0,pi/2) b; U(pi,0,pi) b; U(0,0,pi/2) a;",
}
QELIB1_BODIES["cswap a,b,c"] = QELIB1_BODIES["cswap a,b,c"].format(ccx=QELIB1_BODIES["ccx a,b,c"])


def _equal_up_to_phase(a: np.ndarray, b: np.ndarray, atol=1e-12) -> bool:
    k = np.argmax(np.abs(b))
    ph = a.flat[k] / b.flat[k]
    return abs(abs(ph) - 1) < atol and np.allclose(a, ph * b, atol=atol)


def _body_matrix(header: str, body: str, params: list[float]) -> np.ndarray:
    name, rest = header.split("(", 1) if "(" in header.split()[0] else (header.split()[0], None)
    qargs = header.split()[-1].split(",")
    call_params = f"({','.join(repr(float(p)) for p in params)})" if params else ""
    text = (f"OPENQASM 2.0; qreg q[{len(qargs)}]; gate ref_{header} {{ {body} }} "
            f"ref_{name.split('(')[0]}{call_params} " + ",".join(f"q[{i}]" for i in range(len(qargs))) + ";")
    c = read_qasm(text)
    return compose(c.num_qubits, c.gates, c.global_phase)


@pytest.mark.parametrize("header", sorted(QELIB1_BODIES))
def test_qelib1_gate_equals_paper_body(header, rng):
    name = header.split("(")[0].split()[0]
    spec = G.LIBRARY[name]
    for _ in range(3):
        params = list(rng.uniform(-math.pi, math.pi, spec.num_params))
        assert _equal_up_to_phase(spec.factory(*params), _body_matrix(header, QELIB1_BODIES[header], params))


def test_u_matrix_oq3_and_oq2_definition(rng):
    # OpenQASM 3 spec: U = [[cos, -e^{iλ} sin], [e^{iφ} sin, e^{i(φ+λ)} cos]]; OpenQASM 2 paper:
    # U = Rz(φ) Ry(θ) Rz(λ), the same up to the global phase e^{-i(φ+λ)/2}.
    for _ in range(5):
        t, p, l = rng.uniform(-math.pi, math.pi, 3)
        c, s = math.cos(t / 2), math.sin(t / 2)
        expect = np.array([[c, -cmath.exp(1j * l) * s], [cmath.exp(1j * p) * s, cmath.exp(1j * (p + l)) * c]])
        assert np.allclose(G.u_gate(t, p, l), expect, atol=1e-15)
        assert np.allclose(G.rz(p) @ G.ry(t) @ G.rz(l), cmath.exp(-0.5j * (p + l)) * expect, atol=1e-14)


def test_stdgates_exact_matrices():
    # OpenQASM 3 stdgates.inc (arXiv:2104.14722): exact matrices including phases
    lam = 0.37
    assert np.allclose(G.LIBRARY["p"].factory(lam), np.diag([1, cmath.exp(1j * lam)]))
    assert np.allclose(G.LIBRARY["cp"].factory(lam), np.diag([1, 1, 1, cmath.exp(1j * lam)]))
    assert np.allclose(G.LIBRARY["rz"].factory(lam), np.diag([cmath.exp(-0.5j * lam), cmath.exp(0.5j * lam)]))
    assert np.allclose(G.LIBRARY["sx"].factory() @ G.LIBRARY["sx"].factory(), G.X)
    assert np.allclose(G.LIBRARY["s"].factory(), np.diag([1, 1j]))
    assert np.allclose(G.LIBRARY["t"].factory(), np.diag([1, cmath.exp(0.25j * math.pi)]))
    cu = G.LIBRARY["cu"].factory(0.3, 0.4, 0.5, 0.6)
    assert np.allclose(cu[2:, 2:], cmath.exp(0.6j) * G.u_gate(0.3, 0.4, 0.5))
    assert np.allclose(cu[:2, :2], np.eye(2))
    # cx: control is the first argument, which is the most significant bit
    assert np.allclose(G.LIBRARY["cx"].factory(), [[1, 0, 0, 0], [0, 1, 0, 0], [0, 0, 0, 1], [0, 0, 1, 0]])


def test_rzz_is_exp_zz():
    # rzz(θ) = exp(-iθ/2 Z⊗Z) (qelib1.inc body up to phase, checked above; exact form here)
    th = 0.81
    expect = np.diag(np.exp(-0.5j * th * np.array([1, -1, -1, 1])))
    assert np.allclose(G.LIBRARY["rzz"].factory(th), expect)


@pytest.mark.parametrize("root,gate", [(G.SQRT_X, G.X), (G.SQRT_Y, G.Y),
                                       (G.SQRT_W, (G.X + G.Y) / math.sqrt(2))])
def test_sqrt_gates_square_to_minus_i_g(root, gate):
    # Arute et al. 2019: (√G)² = −i·G for G ∈ {X, Y, W}, W = (X+Y)/√2
    assert np.allclose(root @ root, -1j * gate, atol=1e-15)


def test_fsim_definition():
    # Arute et al., Nature 574, 505 (2019), supplement: fSim(θ,φ) acts on |01>,|10> as a rotation, |11> gets e^{-iφ}
    f = G.fsim(math.pi / 2, math.pi / 6)
    assert np.allclose(f[1:3, 1:3], [[0, -1j], [-1j, 0]])
    assert np.isclose(f[3, 3], cmath.exp(-1j * math.pi / 6))
    assert G.is_unitary(f)


def test_all_library_gates_unitary(rng):
    for spec in G.LIBRARY.values():
        m = spec.factory(*rng.uniform(-3, 3, spec.num_params))
        assert m.shape == (2 ** spec.num_qubits,) * 2, spec.name
        assert G.is_unitary(m), spec.name
