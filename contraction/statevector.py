"""Dense state-vector simulation in numpy: the fast path for small circuits and the test oracle.

The state of n qubits is a tensor of shape ``(2,)*n`` whose axis q is qubit q, so the flat index
of a basis state is its bitstring read with qubit 0 as the most significant bit.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np

from .circuit import Circuit, Gate

#: largest state vector the engine builds by default (2^28 complex128 = 4 GiB)
MAX_QUBITS = 28


def apply_gate(psi: np.ndarray, matrix: np.ndarray, qubits: Sequence[int]) -> np.ndarray:
    """Apply a gate to the leading qubit axes of ``psi`` (trailing axes are a batch)."""
    k = len(qubits)
    if k == 1:
        q = qubits[0]
        shape = psi.shape
        lead = 1
        for s in shape[:q]:
            lead *= s
        view = psi.reshape(lead, 2, -1)
        out = np.matmul(matrix.astype(psi.dtype, copy=False), view)
        return out.reshape(shape)
    g = matrix.astype(psi.dtype, copy=False).reshape((2,) * (2 * k))
    out = np.tensordot(g, psi, axes=(list(range(k, 2 * k)), list(qubits)))
    return np.ascontiguousarray(np.moveaxis(out, list(range(k)), list(qubits)))


def apply_gates(psi: np.ndarray, gates: Sequence[Gate]) -> np.ndarray:
    for g in gates:
        psi = apply_gate(psi, g.matrix, g.qubits)
    return psi


def state_vector(circuit: Circuit, dtype=np.complex128, max_qubits: int = MAX_QUBITS) -> np.ndarray:
    """The flat state C|0...0> (length 2^n)."""
    from .errors import PlanError

    n = circuit.num_qubits
    if n > max_qubits:
        raise PlanError(f"a state vector of {n} qubits needs {2 ** n * np.dtype(dtype).itemsize} bytes; "
                        f"the state-vector engine is limited to {max_qubits} qubits")
    psi = np.zeros((2,) * n, dtype=dtype)
    psi[(0,) * n] = 1.0
    psi = apply_gates(psi, circuit.gates)
    if circuit.global_phase:
        psi *= np.exp(1j * circuit.global_phase).astype(dtype)
    return psi.reshape(-1)


def compose(num_qubits: int, gates: Sequence[Gate], global_phase: float = 0.0) -> np.ndarray:
    """The 2^k x 2^k matrix of a gate sequence on local qubits 0..k-1 (first gate applied first)."""
    d = 2 ** num_qubits
    m = np.eye(d, dtype=np.complex128).reshape((2,) * num_qubits + (d,))
    m = apply_gates(m, gates).reshape(d, d)
    if global_phase:
        m = m * np.exp(1j * global_phase)
    return m
