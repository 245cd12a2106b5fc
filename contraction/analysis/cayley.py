"""Circuits along the Cayley path between a circuit C and a random deformation of it.

Cayley transform (standard linear algebra): for Hermitian h and real theta,
f(theta h) = (1 + i theta h)(1 - i theta h)^-1 is unitary; for a unitary H without eigenvalue -1,
h = -i (H - 1)(H + 1)^-1 is Hermitian and f(h) = H.

The path: every gate C_k gets a seeded Haar-random H_k of its dimension d_k and becomes
C_k f(theta h_k) with h_k the inverse transform of H_k. theta = 0 gives C; theta = 1 gives the gates
C_k H_k, which are Haar-distributed (Haar measure is invariant under multiplication by C_k). The
layout never changes, so one contraction plan serves the whole path.

With h_k = V diag(lambda) V^dagger, f(theta h_k) = V diag((1 + i theta lambda)/(1 - i theta lambda)) V^dagger,
so every entry of the circuit is rational in theta with the denominator prod_{k,j}(1 - i theta lambda_kj);
p(theta) = |<x|C(theta)|0>|^2 times prod_{k,j}(1 + theta^2 lambda_kj^2) is a real polynomial of degree at
most 2 sum_k d_k (see :mod:`contraction.analysis.rational_fit`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np

from contraction import defaults
from contraction.circuits.bitstrings import check_bitstrings
from contraction.circuits.model import Circuit, Gate
from contraction.circuits.random_instances import haar_unitary
from contraction.errors import VerampError
from contraction.execution.executor import combine_scaled
from contraction.execution.slices import Task, make_runner
from contraction.execution.statevector import state_vector
from contraction.network.builder import build_structure, resolve_dtype, tensor_arrays
from contraction.planning.capped_plans import network_plan
from contraction.planning.options import PlannerOptions


def cayley(h: np.ndarray, theta: float = 1.0) -> np.ndarray:
    """f(theta h) = (1 + i theta h)(1 - i theta h)^-1."""
    d = h.shape[0]
    one = np.eye(d)
    return np.linalg.solve((one - 1j * theta * h).T, (one + 1j * theta * h).T).T


def inverse_cayley(u: np.ndarray) -> np.ndarray:
    """h = -i (U - 1)(U + 1)^-1, Hermitian for unitary U without eigenvalue -1."""
    d = u.shape[0]
    one = np.eye(d)
    plus = u + one
    if np.linalg.cond(plus) > 1e12:
        raise VerampError("the unitary has an eigenvalue at -1; its Cayley transform does not exist")
    h = -1j * np.linalg.solve(plus.T, (u - one).T).T
    return (h + h.conj().T) / 2          # exact Hermitian part (round-off only)


@dataclass(frozen=True)
class PathGate:
    """One gate on the path: C_k and the eigen-decomposition of h_k (eigenvalues λ_kj, eigenvectors as columns)."""

    gate: Gate
    eigvals: np.ndarray        # lambda_kj of h_k
    eigvecs: np.ndarray        # columns: eigenvectors of h_k

    def at(self, theta: float) -> np.ndarray:
        """The gate's matrix at ``theta``: C_k · f(θ h_k) with f(x) = (1 + i x)/(1 − i x) applied to the eigenvalues."""
        phase = (1 + 1j * theta * self.eigvals) / (1 - 1j * theta * self.eigvals)
        return self.gate.matrix @ ((self.eigvecs * phase) @ self.eigvecs.conj().T)


@dataclass(frozen=True)
class CayleyPath:
    """C(theta) for one circuit and one seed."""

    circuit: Circuit
    gates: tuple[PathGate, ...]
    seed: int

    @property
    def degree_bound(self) -> int:
        """sum_k d_k: bound on the degrees of the amplitude's numerator and denominator."""
        return sum(len(g.eigvals) for g in self.gates)

    def at(self, theta: float) -> Circuit:
        """The circuit at ``theta`` (same layout, every gate moved along its path)."""
        return self.circuit.with_gates([Gate(g.gate.qubits, g.at(theta)) for g in self.gates])

    def denominator(self, theta) -> np.ndarray:
        """prod_{k,j} (1 + theta^2 lambda_kj^2), the known denominator of p(theta) (float or array)."""
        lam2 = np.concatenate([g.eigvals ** 2 for g in self.gates])
        t = np.asarray(theta, dtype=float)
        return np.prod(1 + np.multiply.outer(t ** 2, lam2), axis=-1)

    def log_denominator(self, theta) -> np.ndarray:
        """ln D(θ) = Σ_kj ln(1 + θ² λ_kj²), elementwise over ``theta`` (the exactly known denominator of p(θ))."""
        lam2 = np.concatenate([g.eigvals ** 2 for g in self.gates])
        t = np.asarray(theta, dtype=float)
        return np.sum(np.log1p(np.multiply.outer(t ** 2, lam2)), axis=-1)


def cayley_path(circuit: Circuit, seed: int) -> CayleyPath:
    """The path of ``circuit`` with seeded Haar deformations H_k, one per gate in order."""
    rng = np.random.default_rng(seed)
    out = []
    for g in circuit.gates:
        d = 2 ** len(g.qubits)
        h = inverse_cayley(haar_unitary(d, rng))
        lam, vec = np.linalg.eigh(h)
        out.append(PathGate(g, lam, vec))
    return CayleyPath(circuit, tuple(out), seed)


def path_probabilities(path: CayleyPath, bitstring: str, thetas: Sequence[float], *, dtype: str = "complex128",
                       engine: str = "auto", planner=None, plan_store=None, memory_bytes: float | None = None,
                       workers: int = 1, runner=None) -> tuple[np.ndarray, str]:
    """p(theta) = |<x|C(theta)|0...0>|^2 at each theta, and the engine used.

    ``engine``: auto, statevector or single. Small circuits use the state vector per theta;
    otherwise (``single``) the network is planned once for the
    whole path (the layout does not change) and every theta is one task of the runner, so the
    thetas run side by side on the local worker processes or a Dask cluster."""
    if engine not in ("auto", "statevector", "single"):
        raise VerampError(f"unknown engine {engine!r} for a path; choose auto, statevector or single")
    [bits] = check_bitstrings([bitstring], path.circuit.num_qubits)
    dt = resolve_dtype(dtype)
    n = path.circuit.num_qubits
    if engine == "statevector" or (engine == "auto" and n <= defaults.STATEVECTOR_AUTO_QUBITS):
        idx = int(bits, 2)
        return np.array([abs(state_vector(path.at(float(t)), dtype=dt)[idx]) ** 2 for t in thetas]), "statevector"
    structure = build_structure(path.circuit)
    contraction = network_plan(structure, plan_store, planner or PlannerOptions(),
                                 memory_bytes or defaults.MEMORY_BYTES, dtype)
    runner = runner or make_runner(workers)
    tasks = [Task(tensor_arrays(structure, path.at(float(t)), bits, dt), list(range(contraction.plan.nslices))) for t in thetas]
    out = np.empty(len(tasks))

    def done(k, results):
        out[k] = abs(complex(combine_scaled(results).reshape(()))) ** 2

    runner.run(contraction, tasks, done)
    return out, "single"
