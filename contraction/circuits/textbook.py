"""Circuit families from their textbook definitions, for benchmarks and tests of scale.

* :func:`quantum_volume`: Cross, Bishop, Sheldon, Nation & Gambetta, "Validating quantum computers
  using randomized model circuits", Phys. Rev. A 100, 032328 (2019): ``depth`` layers, each a
  uniformly random permutation of the qubits followed by a Haar-random SU(4) on consecutive pairs.
* :func:`qft`: the quantum Fourier transform of Nielsen & Chuang (2010), §5.1, Fig. 5.1: on each qubit
  H then controlled R_k = diag(1, e^{2πi/2^k}) from every later qubit, then the qubit-order reversal
  by swaps.
* :func:`ripple_carry_adder`: Cuccaro, Draper, Kutin & Moulton, "A new quantum ripple-carry addition
  circuit", arXiv:quant-ph/0410184 (2004): MAJ and UMA blocks of CNOT and Toffoli gates computing
  b <- a + b on n-bit registers with one carry-in ancilla (2n + 1 qubits, no carry-out).
"""

from __future__ import annotations

import math

import numpy as np

from contraction.circuits import gates as G
from contraction.circuits.model import Circuit, Gate
from contraction.circuits.random_instances import haar_unitary


def quantum_volume(num_qubits: int, depth: int, seed: int = 0) -> Circuit:
    """A quantum-volume circuit: ``depth`` layers, each a seeded random permutation of the qubits paired off with a
    Haar-random SU(4) gate on each pair (Cross et al. 2019)."""
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(depth):
        perm = rng.permutation(num_qubits)
        for k in range(num_qubits // 2):
            a, b = int(perm[2 * k]), int(perm[2 * k + 1])
            u = haar_unitary(4, rng)
            u = u / np.linalg.det(u) ** 0.25            # SU(4)
            out.append(Gate((a, b), u, "su4"))
    return Circuit(num_qubits, out, name=f"qv{num_qubits}x{depth}-s{seed}")


def qft(num_qubits: int, hadamards_first: bool = False) -> Circuit:
    """The quantum Fourier transform on ``num_qubits`` qubits: Hadamards and controlled phases 2π/2^k, then the swaps
    that reverse the qubit order (Nielsen & Chuang §5.1). On |0...0> its controlled phases act while their
    controls are still in |0> and the network builder drops them; ``hadamards_first`` puts a Hadamard on
    every qubit before it (the transform of the uniform superposition), where every phase counts."""
    out = [Gate((j,), G.H, "h") for j in range(num_qubits)] if hadamards_first else []
    for j in range(num_qubits):
        out.append(Gate((j,), G.H, "h"))
        for k, c in enumerate(range(j + 1, num_qubits), start=2):
            out.append(Gate((c, j), G.controlled(G.phase_gate(2 * math.pi / 2 ** k)), "cp"))
    for j in range(num_qubits // 2):
        out.append(Gate((j, num_qubits - 1 - j), G.SWAP, "swap"))
    return Circuit(num_qubits, out, name=f"qft{num_qubits}" + ("h" if hadamards_first else ""))


def ripple_carry_adder(bits: int) -> Circuit:
    """Qubit 0 is the carry-in ancilla c; then b_i, a_i interleaved (b_0, a_0, b_1, a_1, ...)."""
    c = 0

    def b(i):
        return 1 + 2 * i

    def a(i):
        return 2 + 2 * i

    out = []

    def cx(x, y):
        out.append(Gate((x, y), G.CX, "cx"))

    def ccx(x, y, z):
        out.append(Gate((x, y, z), G.CCX, "ccx"))

    def maj(x, y, z):           # MAJ(c, b, a) of the paper
        cx(z, y)
        cx(z, x)
        ccx(x, y, z)

    def uma(x, y, z):           # UMA(c, b, a), the 2-CNOT version
        ccx(x, y, z)
        cx(z, x)
        cx(x, y)

    # inputs: put a = 1...1 and b = 0101... so the adder has something to add
    for i in range(bits):
        out.append(Gate((a(i),), G.X, "x"))
        if i % 2:
            out.append(Gate((b(i),), G.X, "x"))
    maj(c, b(0), a(0))
    for i in range(1, bits):
        maj(a(i - 1), b(i), a(i))
    for i in reversed(range(1, bits)):
        uma(a(i - 1), b(i), a(i))
    uma(c, b(0), a(0))
    return Circuit(2 * bits + 1, out, name=f"adder{bits}")
