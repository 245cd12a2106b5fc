"""Fixtures and references shared by several test files.

``einsum_state`` is the amplitude reference that shares no code with the engine: it applies the
circuit's gates one by one, unfused and in order (single-qubit gates included), each with a plain
``numpy.einsum`` on the full state tensor — no gate fusion, no planning, no slicing, no
transpose-and-multiply kernel. The project's own state vector is checked against it, not used in
its place.
"""

import os

import numpy as np
import pytest

# the CLI plans with one worker process per core by default; the networks in tests are small, so the
# suite plans in the calling process (tests of the process pool set it themselves)
os.environ.setdefault("VERAMP_PLAN_PROCESSES", "1")

from contraction.planning.options import PlannerOptions

#: a small planning budget keeps the suite fast; the networks in tests are small
FAST_PLANNER = PlannerOptions(budget_seconds=0.5, max_repeats=8)


@pytest.fixture
def fast_planner() -> PlannerOptions:
    return FAST_PLANNER


@pytest.fixture
def rng() -> np.random.Generator:
    return np.random.default_rng(20261202)


def random_bitstrings(rng: np.random.Generator, n: int, k: int) -> list[str]:
    return ["".join("1" if b else "0" for b in rng.integers(0, 2, n)) for _ in range(k)]


def einsum_state(circuit) -> np.ndarray:
    """C|0...0> as a flat vector (qubit 0 most significant), one ``numpy.einsum`` per gate."""
    n = circuit.num_qubits
    letters = "abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ"
    if n + 10 > len(letters):
        raise ValueError(f"the einsum reference handles up to {len(letters) - 10} qubits")
    psi = np.zeros((2,) * n, dtype=np.complex128)
    psi[(0,) * n] = 1.0
    state = letters[:n]
    for g in circuit.gates:
        k = len(g.qubits)
        outs = letters[n:n + k]
        ins = "".join(state[q] for q in g.qubits)
        result = "".join(outs[g.qubits.index(q)] if q in g.qubits else state[q] for q in range(n))
        psi = np.einsum(f"{outs}{ins},{state}->{result}", g.matrix.reshape((2,) * (2 * k)), psi)
    return psi.reshape(-1) * np.exp(1j * circuit.global_phase)
