"""Standard gate matrices and matrix modifiers.

Conventions (stated once, used everywhere):

* A k-qubit gate acting on qubits ``(q_1, ..., q_k)`` has a ``2^k x 2^k`` matrix whose row and
  column index is the bit pattern ``b_1 b_2 ... b_k`` with ``q_1`` the most significant bit. So
  ``cx a, b`` has its control on ``a`` and the matrix ``[[1,0,0,0],[0,1,0,0],[0,0,0,1],[0,0,1,0]]``.
* Global phases follow the OpenQASM 3 specification (Cross et al. 2022, arXiv:2104.14722,
  stdgates.inc): ``U(θ,φ,λ) = [[cos θ/2, -e^{iλ} sin θ/2], [e^{iφ} sin θ/2, e^{i(φ+λ)} cos θ/2]]``.
  The OpenQASM 2.0 paper (arXiv:1707.03429) defines ``U`` as ``Rz(φ)Ry(θ)Rz(λ)``, which differs by
  the global phase ``e^{-i(φ+λ)/2}``; qelib1 gates are read with the OpenQASM 3 matrices, which the
  two standards agree on up to a global phase of the whole circuit. Probabilities are unaffected.
"""

from __future__ import annotations

import cmath
import math
from dataclasses import dataclass
from fractions import Fraction
from typing import Callable, Sequence

import numpy as np

SQ2 = 1.0 / math.sqrt(2.0)


def _m(rows) -> np.ndarray:
    return np.array(rows, dtype=np.complex128)


# ---------------------------------------------------------------- single-qubit gates

def u_gate(theta: float, phi: float, lam: float) -> np.ndarray:
    """OpenQASM 3's U(θ, φ, λ) (no extra global phase)."""
    c, s = math.cos(theta / 2), math.sin(theta / 2)
    return _m([[c, -cmath.exp(1j * lam) * s],
               [cmath.exp(1j * phi) * s, cmath.exp(1j * (phi + lam)) * c]])


def u3_gate(theta: float, phi: float, lam: float) -> np.ndarray:
    """``u3`` of both standards: ``e^{-i(φ+λ)/2} U(θ,φ,λ)`` = Rz(φ)Ry(θ)Rz(λ)."""
    return cmath.exp(-0.5j * (phi + lam)) * u_gate(theta, phi, lam)


def phase_gate(lam: float) -> np.ndarray:
    """diag(1, e^{iλ})."""
    return _m([[1, 0], [0, cmath.exp(1j * lam)]])


def rx(theta: float) -> np.ndarray:
    """exp(−i θ X / 2)."""
    c, s = math.cos(theta / 2), math.sin(theta / 2)
    return _m([[c, -1j * s], [-1j * s, c]])


def ry(theta: float) -> np.ndarray:
    """exp(−i θ Y / 2)."""
    c, s = math.cos(theta / 2), math.sin(theta / 2)
    return _m([[c, -s], [s, c]])


def rz(theta: float) -> np.ndarray:
    """exp(−i θ Z / 2) = diag(e^{−iθ/2}, e^{iθ/2})."""
    return _m([[cmath.exp(-0.5j * theta), 0], [0, cmath.exp(0.5j * theta)]])


I2 = _m([[1, 0], [0, 1]])
X = _m([[0, 1], [1, 0]])
Y = _m([[0, -1j], [1j, 0]])
Z = _m([[1, 0], [0, -1]])
H = _m([[SQ2, SQ2], [SQ2, -SQ2]])
S = _m([[1, 0], [0, 1j]])
SDG = S.conj().T
T = _m([[1, 0], [0, cmath.exp(0.25j * math.pi)]])
TDG = T.conj().T
SX = _m([[0.5 + 0.5j, 0.5 - 0.5j], [0.5 - 0.5j, 0.5 + 0.5j]])
SXDG = SX.conj().T

# square roots used by grid random circuits (Arute et al. 2019): (sqrt G)^2 = -i G
SQRT_X = _m([[SQ2, -1j * SQ2], [-1j * SQ2, SQ2]])
SQRT_Y = _m([[SQ2, -SQ2], [SQ2, SQ2]])
SQRT_W = _m([[SQ2, -cmath.sqrt(1j) * SQ2], [cmath.sqrt(-1j) * SQ2, SQ2]])


# ---------------------------------------------------------------- modifiers

def controlled(matrix: np.ndarray, n_controls: int = 1, ctrl_state: int | None = None) -> np.ndarray:
    """The gate with ``n_controls`` control qubits placed first (most significant).

    ``ctrl_state`` is the control pattern that activates the gate (default: all ones); a
    negative control is a 0 in that pattern.
    """
    d = matrix.shape[0]
    nc = 2 ** n_controls
    if ctrl_state is None:
        ctrl_state = nc - 1
    out = np.eye(nc * d, dtype=np.complex128)
    lo = ctrl_state * d
    out[lo:lo + d, lo:lo + d] = matrix
    return out


def inverse(matrix: np.ndarray) -> np.ndarray:
    """The inverse of a unitary matrix (its conjugate transpose)."""
    return matrix.conj().T


#: exponents up to this size are applied by repeated multiplication (error ~ k·eps)
_SMALL_POWER = 64
#: an eigenphase this close to p·π/q (q <= _MAX_DENOMINATOR) is taken to be exactly that
_SNAP = 1e-12
_MAX_DENOMINATOR = 64
#: largest phase error accepted in a power of a gate whose eigenphases are not rational multiples of π
_POWER_PHASE_TOLERANCE = 1e-9
_EIGENPHASE_ERROR = 1e-15


def _snapped(phase: float) -> Fraction | None:
    """``phase/π`` as an exact fraction p/q (q <= 64) when it is within 1e-12 of one, else None."""
    x = phase / math.pi
    f = Fraction(x).limit_denominator(_MAX_DENOMINATOR)
    return f if abs(float(f) - x) <= _SNAP else None


def power(matrix: np.ndarray, exponent: float) -> np.ndarray:
    """``matrix**exponent`` for a unitary, as OpenQASM 3's ``pow(k) @`` (principal branch of each
    eigenphase, phases in (-π, π]).

    Small integer exponents are repeated products. Otherwise the matrix is diagonalised (complex
    Schur form, exact for normal matrices) and each eigenphase φ becomes k·φ: phases within 1e-12 of
    a rational multiple p/q·π (q <= 64) are taken as exactly that and k·p/q is reduced modulo 2 in
    exact integer arithmetic, so ``pow(1e308) @ h`` is exactly the identity. Other phases are
    multiplied in floating point; when the error that carries (k·1e-15) would exceed 1e-9, a
    :class:`ValueError` is raised instead of returning an inaccurate matrix."""
    exponent = float(exponent)
    if not math.isfinite(exponent):
        raise ValueError(f"the exponent {exponent} is not a finite number")
    if exponent.is_integer() and abs(exponent) <= _SMALL_POWER:
        k = int(exponent)
        base = matrix if k >= 0 else matrix.conj().T
        return np.linalg.matrix_power(base, abs(k))
    from scipy.linalg import schur

    t, z = schur(np.asarray(matrix, dtype=np.complex128), output="complex")
    k = Fraction(exponent)          # exact value of the double (an integer for every |x| >= 2^52)
    phases = []
    for lam in np.diag(t):
        phi = float(np.angle(lam))
        frac = _snapped(phi)
        if frac is not None:
            if frac == -1:
                frac = Fraction(1)          # principal branch: the phase of -1 is +π
            scaled = frac * k               # exact; reduce modulo 2 (in units of π)
            phases.append(float(scaled - 2 * math.floor(scaled / 2)) * math.pi)
            continue
        if abs(exponent) * _EIGENPHASE_ERROR * max(1.0, abs(phi)) > _POWER_PHASE_TOLERANCE:
            raise ValueError(f"pow({exponent:g}) of a gate with eigenphase {phi:.17g} (not a rational multiple of "
                             f"pi): the result's phases would carry errors above {_POWER_PHASE_TOLERANCE:g}")
        phases.append(math.remainder(phi * exponent, 2 * math.pi))
    return (z * np.exp(1j * np.array(phases))[None, :]) @ z.conj().T


def kron(*ms: np.ndarray) -> np.ndarray:
    """Kronecker product of the matrices, the first one on the most significant qubits."""
    out = ms[0]
    for m in ms[1:]:
        out = np.kron(out, m)
    return out


def _exp_pauli2(theta: float, p: np.ndarray) -> np.ndarray:
    # exp(-i theta/2 P) for P with P^2 = 1
    return math.cos(theta / 2) * np.eye(p.shape[0], dtype=np.complex128) - 1j * math.sin(theta / 2) * p


# ---------------------------------------------------------------- two- and more-qubit gates

CX = controlled(X)
CY = controlled(Y)
CZ = controlled(Z)
CH = controlled(H)
SWAP = _m([[1, 0, 0, 0], [0, 0, 1, 0], [0, 1, 0, 0], [0, 0, 0, 1]])
ISWAP = _m([[1, 0, 0, 0], [0, 0, 1j, 0], [0, 1j, 0, 0], [0, 0, 0, 1]])
DCX = CX @ _m([[1, 0, 0, 0], [0, 0, 0, 1], [0, 0, 1, 0], [0, 1, 0, 0]])  # cx a,b; cx b,a
ECR = SQ2 * _m([[0, 1, 0, 1j], [1, 0, -1j, 0], [0, 1j, 0, 1], [-1j, 0, 1, 0]])
CCX = controlled(X, 2)
CSWAP = controlled(SWAP)
XX, YY, ZZ, ZX = kron(X, X), kron(Y, Y), kron(Z, Z), kron(Z, X)


def fsim(theta: float, phi: float) -> np.ndarray:
    """fSim(θ, φ) (Arute et al. 2019)."""
    c, s = math.cos(theta), math.sin(theta)
    return _m([[1, 0, 0, 0], [0, c, -1j * s, 0], [0, -1j * s, c, 0], [0, 0, 0, cmath.exp(-1j * phi)]])


@dataclass(frozen=True)
class GateSpec:
    """A named gate of a standard library: arity, parameter count and matrix factory."""

    name: str
    num_qubits: int
    num_params: int
    factory: Callable[..., np.ndarray]


def _const(m: np.ndarray) -> Callable[[], np.ndarray]:
    m.setflags(write=False)
    return lambda: m


def _spec(name, nq, npar, f):
    return GateSpec(name, nq, npar, f)


_COMMON = [
    _spec("id", 1, 0, _const(I2)),
    _spec("x", 1, 0, _const(X)), _spec("y", 1, 0, _const(Y)), _spec("z", 1, 0, _const(Z)),
    _spec("h", 1, 0, _const(H)), _spec("s", 1, 0, _const(S)), _spec("sdg", 1, 0, _const(SDG)),
    _spec("t", 1, 0, _const(T)), _spec("tdg", 1, 0, _const(TDG)),
    _spec("sx", 1, 0, _const(SX)), _spec("sxdg", 1, 0, _const(SXDG)),
    _spec("rx", 1, 1, rx), _spec("ry", 1, 1, ry), _spec("rz", 1, 1, rz),
    _spec("p", 1, 1, phase_gate), _spec("u1", 1, 1, phase_gate), _spec("phase", 1, 1, phase_gate),
    # OpenQASM 3 stdgates.inc: u2(φ,λ) = gphase(-(φ+λ)/2) U(π/2,φ,λ), u3(θ,φ,λ) = gphase(-(φ+λ)/2)
    # U(θ,φ,λ); in OpenQASM 2 (arXiv:1707.03429) U itself is Rz(φ)Ry(θ)Rz(λ), the same matrix
    _spec("u2", 1, 2, lambda phi, lam: u3_gate(math.pi / 2, phi, lam)),
    _spec("u3", 1, 3, u3_gate), _spec("u", 1, 3, u3_gate),
    _spec("cx", 2, 0, _const(CX)), _spec("CX", 2, 0, _const(CX)),
    _spec("cy", 2, 0, _const(CY)), _spec("cz", 2, 0, _const(CZ)), _spec("ch", 2, 0, _const(CH)),
    _spec("swap", 2, 0, _const(SWAP)),
    _spec("cp", 2, 1, lambda lam: controlled(phase_gate(lam))),
    _spec("cu1", 2, 1, lambda lam: controlled(phase_gate(lam))),
    _spec("cphase", 2, 1, lambda lam: controlled(phase_gate(lam))),
    _spec("crx", 2, 1, lambda t: controlled(rx(t))),
    _spec("cry", 2, 1, lambda t: controlled(ry(t))),
    _spec("crz", 2, 1, lambda t: controlled(rz(t))),
    _spec("cu3", 2, 3, lambda t, p, l: controlled(u_gate(t, p, l))),
    _spec("cu", 2, 4, lambda t, p, l, g: controlled(cmath.exp(1j * g) * u_gate(t, p, l))),
    _spec("ccx", 3, 0, _const(CCX)), _spec("cswap", 3, 0, _const(CSWAP)),
]

# later additions to qelib1 that real files use; also accepted after stdgates.inc
_EXTRAS = [
    _spec("u0", 1, 1, lambda _gamma: I2.copy()),
    _spec("csx", 2, 0, _const(controlled(SX))),
    _spec("rxx", 2, 1, lambda t: _exp_pauli2(t, XX)),
    _spec("ryy", 2, 1, lambda t: _exp_pauli2(t, YY)),
    _spec("rzz", 2, 1, lambda t: _exp_pauli2(t, ZZ)),
    _spec("rzx", 2, 1, lambda t: _exp_pauli2(t, ZX)),
    _spec("iswap", 2, 0, _const(ISWAP)), _spec("dcx", 2, 0, _const(DCX)), _spec("ecr", 2, 0, _const(ECR)),
    _spec("fsim", 2, 2, fsim),
    _spec("c3x", 4, 0, _const(controlled(X, 3))),
    _spec("c4x", 5, 0, _const(controlled(X, 4))),
    _spec("c3sqrtx", 4, 0, _const(controlled(SX, 3))),
]

#: gate names defined by a body in the standard library files; matrices are computed from these
#: bodies (OpenQASM 2.0 qelib1.inc, arXiv:1707.03429 and its later revisions).
BODY_DEFINED = {
    "rccx": ("a,b,c", "u2(0,pi) c; u1(pi/4) c; cx b,c; u1(-pi/4) c; cx a,c; u1(pi/4) c;"
                      " cx b,c; u1(-pi/4) c; u2(0,pi) c;"),
    "rc3x": ("a,b,c,d", "u2(0,pi) d; u1(pi/4) d; cx c,d; u1(-pi/4) d; u2(0,pi) d; cx a,d;"
                        " u1(pi/4) d; cx b,d; u1(-pi/4) d; cx a,d; u1(pi/4) d; cx b,d;"
                        " u1(-pi/4) d; u2(0,pi) d; u1(pi/4) d; cx c,d; u1(-pi/4) d; u2(0,pi) d;"),
}

LIBRARY: dict[str, GateSpec] = {g.name: g for g in _COMMON + _EXTRAS}

#: names provided by each include file that veramp resolves internally (never read from disk)
INCLUDE_FILES = {
    "qelib1.inc": frozenset(LIBRARY) - {"CX"} | frozenset(BODY_DEFINED),
    "stdgates.inc": frozenset(LIBRARY) | frozenset(BODY_DEFINED),
}


def is_unitary(m: np.ndarray, atol: float = 1e-9) -> bool:
    """Whether m m† equals the identity within ``atol`` (absolute, per entry)."""
    d = m.shape[0]
    return bool(np.allclose(m @ m.conj().T, np.eye(d), atol=atol, rtol=0.0))


def apply_gate(psi: np.ndarray, matrix: np.ndarray, qubits) -> np.ndarray:
    """Apply a gate to the leading qubit axes of ``psi`` (trailing axes are a batch).

    The gate's axes are moved to the front, one matrix product is taken, and the axes are moved
    back: two copies and one BLAS call, the fastest of the variants measured on these machines.
    """
    k = len(qubits)
    perm = list(qubits) + [a for a in range(psi.ndim) if a not in qubits]
    v = psi.transpose(perm).reshape(2 ** k, -1)
    out = (matrix.astype(psi.dtype, copy=False) @ v).reshape([psi.shape[a] for a in perm])
    return np.ascontiguousarray(out.transpose(np.argsort(perm)))


def compose(num_qubits: int, gates: Sequence, global_phase: float = 0.0) -> np.ndarray:
    """The 2^k x 2^k matrix of a gate sequence on local qubits 0..k-1 (first gate applied first)."""
    d = 2 ** num_qubits
    m = np.eye(d, dtype=np.complex128).reshape((2,) * num_qubits + (d,))
    for g in gates:
        m = apply_gate(m, g.matrix, g.qubits)
    m = m.reshape(d, d)
    if global_phase:
        m = m * np.exp(1j * global_phase)
    return m
