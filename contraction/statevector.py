"""Dense state-vector simulation in numpy: the fast path for small circuits and the test oracle.

The state of n qubits is a tensor of shape ``(2,)*n`` whose axis q is qubit q, so the flat index
of a basis state is its bitstring read with qubit 0 as the most significant bit.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np

from .circuit import Circuit, Gate

#: largest state vector the engine builds (2^32 complex64 = 32 GiB); the memory cap decides first
MAX_QUBITS = 32
#: from this size on, gates are applied in place chunk by chunk (peak: the state plus a few chunks)
IN_PLACE_QUBITS = 25
CHUNK_ELEMENTS = 2 ** 22


def peak_elements(n: int) -> float:
    """Peak elements alive while the engine applies a gate to an n-qubit state."""
    return 3.0 * 2 ** n if n < IN_PLACE_QUBITS else 2 ** n + 3.0 * CHUNK_ELEMENTS


def apply_gate(psi: np.ndarray, matrix: np.ndarray, qubits: Sequence[int]) -> np.ndarray:
    """Apply a gate to the leading qubit axes of ``psi`` (trailing axes are a batch).

    The gate's axes are moved to the front, one matrix product is taken, and the axes are moved
    back: two copies and one BLAS call, the fastest of the variants measured on these machines.
    """
    k = len(qubits)
    perm = list(qubits) + [a for a in range(psi.ndim) if a not in qubits]
    v = psi.transpose(perm).reshape(2 ** k, -1)
    out = (matrix.astype(psi.dtype, copy=False) @ v).reshape([psi.shape[a] for a in perm])
    return np.ascontiguousarray(out.transpose(np.argsort(perm)))


def apply_gate_in_place(psi: np.ndarray, matrix: np.ndarray, qubits: Sequence[int],
                        chunk: int = CHUNK_ELEMENTS) -> None:
    """Apply a gate to ``psi`` in place, a block of about ``chunk`` elements at a time: the loop
    runs over the leading axes the gate does not touch, so every block holds whole gate orbits."""
    import itertools

    n = psi.ndim
    free = [a for a in range(n) if a not in qubits]
    m = 0
    while m < len(free) and 2 ** (n - m) > chunk:
        m += 1
    loop = free[:m]
    rest = [a for a in range(n) if a not in loop]
    pos = [rest.index(q) for q in qubits]
    for values in itertools.product((0, 1), repeat=m):
        index = [slice(None)] * n
        for a, v in zip(loop, values):
            index[a] = v
        block = psi[tuple(index)]
        block[...] = apply_gate(block, matrix, pos)


def apply_gates(psi: np.ndarray, gates: Sequence[Gate]) -> np.ndarray:
    if psi.ndim >= IN_PLACE_QUBITS:
        for g in gates:
            apply_gate_in_place(psi, g.matrix, g.qubits)
        return psi
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
    from .network import fused_gates

    psi = np.zeros((2,) * n, dtype=dtype)
    psi[(0,) * n] = 1.0
    psi = apply_gates(psi, fused_gates(circuit))
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
