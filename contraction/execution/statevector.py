"""Dense state-vector simulation in numpy: the fast path for small circuits.

It applies the same fused gates as the network builder (:func:`contraction.network.builder.fused_gates`),
so the tests compare both against plain ``numpy.einsum`` over the unfused gate list as well.

The state of n qubits is a tensor of shape ``(2,)*n`` whose axis q is qubit q, so the flat index
of a basis state is its bitstring read with qubit 0 as the most significant bit.
"""

from __future__ import annotations

import itertools
from typing import Sequence

import numpy as np

from contraction import defaults
from contraction.circuits.gates import apply_gate
from contraction.circuits.model import Circuit, Gate
from contraction.errors import PlanError
from contraction.network.builder import fused_gates


def apply_gate_in_place(psi: np.ndarray, matrix: np.ndarray, qubits: Sequence[int],
                        chunk: int = defaults.STATEVECTOR_CHUNK_ELEMENTS) -> None:
    """Apply a gate to ``psi`` in place, a block of about ``chunk`` elements at a time: the loop
    runs over the leading axes the gate does not touch, so every block holds whole gate orbits."""

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
    """Apply the gates in order to ``psi`` (of shape (2,)*n); in place from ``defaults.STATEVECTOR_IN_PLACE_QUBITS``
    qubits on. Returns the state."""
    if psi.ndim >= defaults.STATEVECTOR_IN_PLACE_QUBITS:
        for g in gates:
            apply_gate_in_place(psi, g.matrix, g.qubits)
        return psi
    for g in gates:
        psi = apply_gate(psi, g.matrix, g.qubits)
    return psi


def state_vector(circuit: Circuit, dtype=np.complex128, max_qubits: int = defaults.STATEVECTOR_MAX_QUBITS) -> np.ndarray:
    """The flat state C|0...0> (length 2^n)."""
    n = circuit.num_qubits
    if n > max_qubits:
        raise PlanError(f"a state vector of {n} qubits needs {2 ** n * np.dtype(dtype).itemsize} bytes; "
                        f"the state-vector engine is limited to {max_qubits} qubits")

    psi = np.zeros((2,) * n, dtype=dtype)
    psi[(0,) * n] = 1.0
    psi = apply_gates(psi, fused_gates(circuit))
    if circuit.global_phase:
        psi *= np.exp(1j * circuit.global_phase).astype(dtype)
    return psi.reshape(-1)
