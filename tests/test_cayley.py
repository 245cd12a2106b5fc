"""Cayley path and rational-function recovery.

Sources (../shared/reference/check-values.md, "Cayley transform"):
* f(theta h) = (1 + i theta h)(1 - i theta h)^-1 is unitary for Hermitian h; h = -i(H - 1)(H + 1)^-1
  inverts it for unitary H without eigenvalue -1 (standard linear algebra);
* p(theta) * prod_{k,j}(1 + theta^2 lambda_kj^2) is a polynomial of degree <= 2 sum_k d_k (derived);
* Berlekamp–Welch: K >= d + 2t + 1 samples recover a degree-d polynomial with t corrupted samples
  (L. R. Welch & E. R. Berlekamp, US patent 4,633,470 (1986), from memory; the count is also in
  check-values.md).
"""

from __future__ import annotations

import numpy as np
import pytest

from contraction.cayley import cayley, cayley_path, inverse_cayley, path_probabilities
from contraction.circuit import Circuit, Gate
from contraction.errors import VerampError
from contraction.random_circuits import grid_architecture, haar_unitary, random_instance
from contraction.rational_fit import (berlekamp_welch, fit_polynomial, path_probabilities_mp, recover_path,
                                      recover_path_mp)
from contraction.statevector import state_vector

from .conftest import FAST_PLANNER


def _hermitian(rng, d):
    a = rng.standard_normal((d, d)) + 1j * rng.standard_normal((d, d))
    return (a + a.conj().T) / 2


@pytest.mark.parametrize("d", [2, 4, 8])
def test_cayley_transform_is_unitary(rng, d):
    h = _hermitian(rng, d)
    for theta in (-3.0, -0.2, 0.0, 0.7, 1.0, 25.0):
        u = cayley(h, theta)
        assert np.max(np.abs(u @ u.conj().T - np.eye(d))) < 1e-12


@pytest.mark.parametrize("d", [2, 4])
def test_inverse_transform_recovers_the_unitary(rng, d):
    for _ in range(5):
        big_h = haar_unitary(d, rng)
        h = inverse_cayley(big_h)
        assert np.max(np.abs(h - h.conj().T)) < 1e-12                    # Hermitian
        assert np.max(np.abs(cayley(h, 1.0) - big_h)) < 1e-10            # f(1 * inverse(H)) = H


def test_inverse_transform_refuses_eigenvalue_minus_one():
    with pytest.raises(VerampError, match="-1"):
        inverse_cayley(np.diag([1.0, -1.0]).astype(complex))


@pytest.fixture(scope="module")
def grid():
    return random_instance(grid_architecture(3, 3, 4), seed=8)           # 9 qubits


def test_path_endpoints(grid):
    path = cayley_path(grid, seed=21)
    x = "101100101"
    p, engine = path_probabilities(path, x, [0.0, 1.0])
    # theta = 0: the circuit itself
    assert abs(p[0] - abs(state_vector(grid)[int(x, 2)]) ** 2) < 1e-14
    # theta = 1: the circuit whose gates are C_k H_k, built here from the same seeded draws
    rng = np.random.default_rng(21)
    deformed = grid.with_gates([Gate(g.qubits, g.matrix @ haar_unitary(2 ** len(g.qubits), rng)) for g in grid.gates])
    assert abs(p[1] - abs(state_vector(deformed)[int(x, 2)]) ** 2) < 1e-12
    # the network engine plans once for the whole path and agrees
    thetas = [0.0, 0.3, 1.0]
    pn, engine_n = path_probabilities(path, x, thetas, engine="single", planner=FAST_PLANNER)
    ps, _ = path_probabilities(path, x, thetas)
    assert engine_n == "network" and np.max(np.abs(pn - ps) / ps) < 1e-10


@pytest.fixture(scope="module")
def tiny():
    rng = np.random.default_rng(4)
    c = Circuit(2, [Gate((0, 1), haar_unitary(4, rng)), Gate((1,), haar_unitary(2, rng))])
    return cayley_path(c, seed=9)                                           # sum d_k = 6


def test_degree_bound_holds_and_one_less_fails(tiny):
    d = 2 * tiny.degree_bound                                               # 12
    nodes = np.linspace(0, 1, 41)
    p, _ = path_probabilities(tiny, "10", nodes)
    q = p * tiny.denominator(nodes)
    train, held = nodes[::2], nodes[1::2]
    exact = fit_polynomial(train, q[::2], d)
    short = fit_polynomial(train, q[::2], d - 1)
    err_exact = np.max(np.abs(exact(held) - q[1::2])) / np.max(np.abs(q))
    err_short = np.max(np.abs(short(held) - q[1::2])) / np.max(np.abs(q))
    assert err_exact < 1e-11                                                # fits to round-off
    assert err_short > 1e3 * err_exact                                      # one degree less does not


def test_recovery_at_held_out_points_and_extrapolation_error_is_honest(tiny):
    targets = [0.137, 0.61, 1.0]
    exact, _ = path_probabilities(tiny, "10", targets)
    nodes = np.linspace(0, 1, 40)
    p, _ = path_probabilities(tiny, "10", nodes)
    r = recover_path(tiny, nodes, p, targets)
    assert np.max(np.abs(np.array(r.recovered) - exact)) < 1e-10
    # from [0, 0.5] to theta = 1: extrapolation; the estimate must cover the actual error
    near = np.linspace(0, 0.5, 40)
    pn, _ = path_probabilities(tiny, "10", near)
    r = recover_path(tiny, near, pn, [1.0])
    actual = abs(r.recovered[0] - exact[2])
    assert actual <= r.estimated_error[0]
    assert r.estimated_error[0] > 100 * EPS_REL * exact[2]                  # and it says it is not exact


EPS_REL = np.finfo(float).eps


def test_berlekamp_welch_finds_seeded_corruptions(tiny):
    nodes = np.linspace(0, 1, 45)
    p, _ = path_probabilities(tiny, "10", nodes)
    rng = np.random.default_rng(2026)
    bad = sorted(int(i) for i in rng.choice(len(nodes), 4, replace=False))
    corrupted = p.copy()
    corrupted[bad] *= 1 + rng.uniform(0.2, 1.0, 4)
    r = recover_path(tiny, nodes, corrupted, [0.5, 1.0], errors=4)
    assert r.corrupted == bad
    exact, _ = path_probabilities(tiny, "10", [0.5, 1.0])
    assert np.max(np.abs(np.array(r.recovered) - exact)) < 1e-10
    # fewer corruptions than allowed: the locator's spare roots must not flag good samples
    two = p.copy()
    two[bad[:2]] *= 1.5
    assert recover_path(tiny, nodes, two, [1.0], errors=4).corrupted == bad[:2]
    # too few samples for degree 12 with 4 errors (needs 12 + 8 + 1 = 21)
    with pytest.raises(VerampError, match="at least 21 distinct nodes"):
        berlekamp_welch(nodes[:20], corrupted[:20], 12, 4)


def test_extended_precision_matches_double_and_beats_it(tiny):
    near = [i / 78 for i in range(40)]                                      # [0, 0.5]
    pm = path_probabilities_mp(tiny, "10", near, dps=40)
    pd, _ = path_probabilities(tiny, "10", near)
    assert max(abs(float(a) - b) for a, b in zip(pm, pd)) < 1e-14
    exact, _ = path_probabilities(tiny, "10", [1.0])
    r = recover_path_mp(tiny, near, pm, [1.0], dps=40)
    assert abs(r.recovered[0] - exact[0]) < 1e-14
    assert r.estimated_error[0] < 1e-25
