"""The tensor-network engine against the state-vector engine on random grid circuits, and the
Porter–Thomas statistics of the resulting output distribution.

Porter–Thomas: S. Boixo et al., Nature Physics 14, 595 (2018), arXiv:1608.00263 — for a deep
random circuit, N·p over uniformly drawn bitstrings is ~Exp(1): E[N·p] = 1, E[(N·p)²] = 2,
E[(N·p)⁴] = 24 (so Var[(N·p)²] = 20), in the large-N limit.
"""

import numpy as np
import pytest

from contraction.circuits.random_instances import grid_architecture, random_instance
from contraction.execution.amplitudes import amplitudes
from contraction.execution.statevector import state_vector
from contraction.network.builder import build_structure
from contraction.planning.store import MemoryPlanStore

from .conftest import random_bitstrings


def _rel_err(a, b, floor=0.0):
    """Max relative error; ``floor`` bounds the denominator from below (see the complex64 check)."""
    a, b = np.asarray(a), np.asarray(b)
    return float(np.max(np.abs(a - b) / np.maximum(np.abs(b), floor)))


@pytest.mark.parametrize("rows,cols,cycles,gates", [(3, 4, 8, "haar"), (4, 5, 8, "haar"),
                                                    (4, 5, 10, "discrete")])
def test_network_equals_statevector(rows, cols, cycles, gates, rng, fast_planner):
    c = random_instance(grid_architecture(rows, cols, cycles), seed=rows * 100 + cycles, gates=gates)
    n = c.num_qubits
    bits = random_bitstrings(rng, n, 12)
    psi = state_vector(c)
    ref = [psi[int(b, 2)] for b in bits]
    cache = MemoryPlanStore()
    r128 = amplitudes(c, bits, engine="single", planner=fast_planner, plan_store=cache)
    assert _rel_err([r.amplitude for r in r128.results], ref) < 1e-10
    r64 = amplitudes(c, bits, engine="single", dtype="complex64", planner=fast_planner, plan_store=cache)
    assert r64.plan_cached                       # same layout, same plan for every dtype and bitstring
    # complex64: float32 rounding (eps 6e-8) accumulates over hundreds of sums; an amplitude far
    # below the typical size 2^(-n/2) loses relative precision to cancellation, so the error is
    # measured relative to max(|a|, 2^(-n/2)) (common practice for sampled-probability checks)
    floor = 2.0 ** (-n / 2)
    assert _rel_err([r.amplitude for r in r64.results], ref, floor) < 1e-5
    sv64 = amplitudes(c, bits, engine="statevector", dtype="complex64")
    assert _rel_err([r.amplitude for r in sv64.results], ref, floor) < 1e-5


def test_structure_independent_of_values_and_bitstring():
    arch = grid_architecture(3, 3, 6)
    a, b = random_instance(arch, 1), random_instance(arch, 2)
    assert a.circuit_id != b.circuit_id
    assert a.architecture_id == b.architecture_id
    assert build_structure(a).key == build_structure(b).key
    other = random_instance(grid_architecture(3, 3, 7), 1)
    assert other.architecture_id != a.architecture_id
    assert build_structure(other).key != build_structure(a).key


def test_porter_thomas_moments_from_network(rng, fast_planner):
    c = random_instance(grid_architecture(3, 4, 16), seed=7)
    n, N = c.num_qubits, 2 ** 12
    k = 400
    bits = random_bitstrings(rng, n, k)
    run = amplitudes(c, bits, engine="single", planner=fast_planner)
    x = N * np.array([r.probability for r in run.results])
    # sample means with 5-sigma bands: sd(N p) = 1, sd((N p)^2) = sqrt(20)
    assert abs(x.mean() - 1) < 5 / np.sqrt(k)
    assert abs((x ** 2).mean() - 2) < 5 * np.sqrt(20 / k)
    # the whole distribution (state vector): E[sum p^2] = 2/(N+1) for Haar states (Boixo et al. 2018)
    p = np.abs(state_vector(c)) ** 2
    assert abs(p.sum() - 1) < 1e-12
    assert abs(N * (p ** 2).sum() - 2 * N / (N + 1)) < 0.1
