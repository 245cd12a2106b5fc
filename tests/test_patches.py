"""Patch circuits: with no gate across the cut the state is a product state, so the probability of
x is the product of the parts' probabilities (standard linear algebra: |ψ_A ⊗ ψ_B|² factorises;
the elided-circuit method of Arute et al. 2019, supplement). Reference: the numpy state vector."""

import numpy as np
import pytest

from contraction.analysis.patches import patch_probabilities
from contraction.circuits.patches import crossing, elide, split
from contraction.circuits.random_instances import grid_architecture, random_instance
from contraction.errors import VerampError
from contraction.execution.statevector import state_vector

from .conftest import random_bitstrings


def test_patch_probabilities_equal_full_circuit_when_nothing_crosses(rng):
    c = random_instance(grid_architecture(3, 4, 8), 2, "discrete")
    left = [r * 4 + col for r in range(3) for col in range(2)]      # columns 0-1 of the 3x4 grid
    assert crossing(c, left)                                        # the full circuit does cross
    with pytest.raises(VerampError, match="cross the cut"):
        split(c, left)
    e = elide(c, left)                                              # all crossing gates removed
    assert not crossing(e, left)
    assert len(e.gates) == len(c.gates) - len(crossing(c, left))
    bits = random_bitstrings(rng, 12, 20)
    p_full = np.abs(state_vector(e)) ** 2
    p_patch = patch_probabilities(e, left, bits)
    for b, p in zip(bits, p_patch):
        assert abs(p - p_full[int(b, 2)]) <= 1e-12 * max(p, 1e-30) + 1e-18


def test_partial_elision_is_seeded():
    c = random_instance(grid_architecture(3, 4, 8), 2)
    left = [0, 1, 4, 5, 8, 9]
    n = len(crossing(c, left))
    half = elide(c, left, share=0.5, seed=3)
    assert len(crossing(half, left)) == n - round(0.5 * n)
    assert [g.qubits for g in elide(c, left, 0.5, 3).gates] == [g.qubits for g in half.gates]


def test_per_coupler_two_qubit_gates():
    # fSim(θ, φ) per coupler (Arute et al. 2019 calibrate each coupler): the gate given for (0, 1) is used
    import math

    from contraction.circuits import gates as G

    arch = grid_architecture(2, 2, 4)
    special = G.fsim(math.pi / 2 - 0.1, math.pi / 6 + 0.05)
    c = random_instance(arch, 1, "discrete", two_qubit={(0, 1): special})
    used = [g.matrix for g in c.gates if g.qubits == (0, 1)]
    others = [g.matrix for g in c.gates if g.arity == 2 and g.qubits != (0, 1)]
    assert used and all(np.array_equal(m, special) for m in used)
    assert others and all(np.allclose(m, G.fsim(math.pi / 2, math.pi / 6)) for m in others)
