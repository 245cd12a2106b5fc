"""Cayley path and rational-function recovery.

Sources:
* f(theta h) = (1 + i theta h)(1 - i theta h)^-1 is unitary for Hermitian h; h = -i(H - 1)(H + 1)^-1
  inverts it for unitary H without eigenvalue -1 (standard linear algebra);
* p(theta) * prod_{k,j}(1 + theta^2 lambda_kj^2) is a polynomial of degree <= 2 sum_k d_k (derived);
* Berlekamp–Welch: K >= d + 2t + 1 samples recover a degree-d polynomial with t corrupted samples
  (L. R. Welch & E. R. Berlekamp, US patent 4,633,470 (1986), from memory);
* Chebyshev points and Lebesgue functions: L. N. Trefethen, Approximation Theory and Approximation
  Practice (SIAM 2013), ch. 2 and 15; the error bounds are checked against p computed directly.
"""

from __future__ import annotations

import numpy as np
import pytest

from contraction.analysis.cayley import cayley, cayley_path, inverse_cayley, path_probabilities
from contraction.analysis.rational_fit import path_probabilities_mp, recover, recover_path, sample_digits_needed
from contraction.circuits.model import Circuit, Gate
from contraction.circuits.random_instances import grid_architecture, haar_unitary, random_instance
from contraction.errors import VerampError
from contraction.execution.statevector import state_vector

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
    assert engine_n == "single" and np.max(np.abs(pn - ps) / ps) < 1e-10


@pytest.fixture(scope="module")
def tiny():
    rng = np.random.default_rng(4)
    c = Circuit(2, [Gate((0, 1), haar_unitary(4, rng)), Gate((1,), haar_unitary(2, rng))])
    return cayley_path(c, seed=9)                                           # sum d_k = 6


def test_degree_holds_and_one_less_fails(tiny):
    """p = N / D with deg N <= 2 sum d_k (derived in contraction/cayley.py): a fit of that degree
    reproduces held-out values to round-off; one degree less cannot."""
    d = 2 * tiny.degree_bound                                               # 12
    nodes = np.linspace(0, 1, 41)
    p, _ = path_probabilities(tiny, "10", nodes)
    lam2 = np.concatenate([g.eigvals ** 2 for g in tiny.gates])
    train, held = nodes[::2], nodes[1::2]
    exact = recover(train, p[::2], lam2, held, degree=d, gate_dims=d // 2)
    for v, e, w in zip(exact.recovered, exact.error_bound, p[1::2]):
        assert abs(v - w) <= e and abs(v - w) < 1e-10
    with pytest.raises(VerampError, match="disagree"):
        recover(train, p[::2], lam2, held, degree=d - 1, gate_dims=d // 2)


def layered(n: int, layers: int, seed: int) -> Circuit:
    """Haar single-qubit gates on every qubit, then Haar two-qubit gates on alternating pairs."""
    rng = np.random.default_rng(seed)
    gates = []
    for layer in range(layers):
        gates += [Gate((q,), haar_unitary(2, rng)) for q in range(n)]
        gates += [Gate((i, (i + 1) % n), haar_unitary(4, rng)) for i in range(layer % 2, n, 2)]
    return Circuit(n, gates)


def chebyshev_nodes(k: int, a: float = 0.0, b: float = 1.0) -> np.ndarray:
    """Chebyshev points of the first kind mapped to [a, b] (Trefethen, ATAP, ch. 2)."""
    return a + (b - a) * (1 - np.cos(np.pi * (np.arange(k) + 0.5) / k)) / 2


@pytest.fixture(scope="module")
def deg64():
    path = cayley_path(layered(4, 2, 7), seed=0)
    assert 2 * path.degree_bound == 64                                      # 2 x (8 + 8) x 2 layers
    return path


TARGETS = [1.0, 0.25, 0.613]


def test_degree_64_recovery_is_accurate_and_its_bounds_hold(deg64):
    """Every target: |recovered - p computed directly| <= reported bound, and within 1e-8 relative.
    Uniform nodes include theta = 1 itself; Chebyshev nodes do not."""
    exact, _ = path_probabilities(deg64, "0000", TARGETS)
    for nodes in (np.linspace(0, 1, 94), chebyshev_nodes(100)):
        p, _ = path_probabilities(deg64, "0000", nodes)
        r = recover_path(deg64, nodes, p, TARGETS)
        assert r.fitted_degree == 64 and r.gate_dimension_sum == 32
        for v, e, x in zip(r.recovered, r.error_bound, exact):
            assert v is not None and abs(v - x) <= e and abs(v - x) <= 1e-8 * x


def test_degree_64_three_corrupted_samples_are_found(deg64):
    nodes = chebyshev_nodes(100)
    p, _ = path_probabilities(deg64, "0000", nodes)
    bad = [3, 40, 77]
    p[bad] *= 1.5
    r = recover_path(deg64, nodes, p, TARGETS, errors=3)
    exact, _ = path_probabilities(deg64, "0000", TARGETS)
    assert r.corrupted == bad
    for v, e, x in zip(r.recovered, r.error_bound, exact):
        assert v is not None and abs(v - x) <= e and abs(v - x) <= 1e-8 * x


def test_extrapolation_declines_or_holds(deg64, tiny):
    """From [0, 0.5] to theta = 1: either a value within its bound or no value, never a confident
    wrong number."""
    for path, bits in ((deg64, "0000"), (tiny, "10")):
        near = chebyshev_nodes(2 * path.degree_bound + 30, 0.0, 0.5)
        p, _ = path_probabilities(path, bits, near)
        exact, _ = path_probabilities(path, bits, [0.6, 1.0])
        r = recover_path(path, near, p, [0.6, 1.0])
        for v, e, x, why in zip(r.recovered, r.error_bound, exact, r.declined):
            assert (v is None and why) or abs(v - x) <= e


def test_noisy_samples_get_bounds_that_cover_the_noise(deg64):
    """Relative noise 1e-6 on every sample: the bound at each target covers the actual error, and it
    grows from inside the sampled interval to outside it."""
    nodes = chebyshev_nodes(100, 0.0, 0.8)
    p, _ = path_probabilities(deg64, "0000", nodes)
    rng = np.random.default_rng(5)
    noisy = p * (1 + 1e-6 * rng.uniform(-1, 1, len(p)))
    targets = [0.4, 0.8, 0.9]
    exact, _ = path_probabilities(deg64, "0000", targets)
    r = recover_path(deg64, nodes, noisy, targets, noise=1e-6, max_relative_error=1.0)
    for v, e, x in zip(r.recovered, r.error_bound, exact):
        assert v is None or abs(v - x) <= e
    assert r.error_bound[0] < r.error_bound[2]


def test_too_few_nodes_for_the_errors_is_refused(tiny):
    nodes = np.linspace(0, 1, 20)
    p, _ = path_probabilities(tiny, "10", nodes)
    with pytest.raises(VerampError, match="at least 21 distinct nodes"):
        recover_path(tiny, nodes, p, [1.0], errors=4)


@pytest.mark.slow
def test_degree_144_recovery_holds(rng):
    """6 qubits, 3 layers (numerator degree 144), Chebyshev nodes on [0, 1]."""
    path = cayley_path(layered(6, 3, 7), seed=0)
    nodes = chebyshev_nodes(170)
    p, _ = path_probabilities(path, "000000", nodes)
    exact, _ = path_probabilities(path, "000000", TARGETS)
    r = recover_path(path, nodes, p, TARGETS)
    for v, e, x in zip(r.recovered, r.error_bound, exact):
        assert v is not None and abs(v - x) <= e and abs(v - x) <= 1e-8 * x


def test_extended_precision_samples_match_double(tiny):
    near = [i / 78 for i in range(40)]                                      # [0, 0.5]
    pm = path_probabilities_mp(tiny, "10", near, dps=40)
    pd, _ = path_probabilities(tiny, "10", near)
    assert max(abs(float(a) - b) for a, b in zip(pm, pd)) < 1e-14


def test_extrapolation_study_is_honest_in_every_cell(tiny, tmp_path):
    """The study table: every (delta, noise) cell either declines or holds within its bound, and for
    a fixed noise the bound does not shrink as the sampled interval [0, delta] gets shorter (the
    Lebesgue function of extrapolation grows with the distance, Trefethen ATAP ch. 15)."""
    from contraction.analysis.rational_fit import extrapolation_study
    from service.plots import study_plot

    exact, cells = extrapolation_study(tiny, "10", [0.3, 0.6, 1.0], [1e-12, 1e-6], max_relative_error=1.0)
    assert len(cells) == 6
    for c in cells:
        assert (c.recovered is None and c.declined) or c.actual_error <= c.error_bound
    for eps in (1e-12, 1e-6):
        bounds = [c.error_bound for c in cells if c.noise == eps]          # delta = 0.3, 0.6, 1.0
        assert all(b is not None for b in bounds) and bounds[0] >= bounds[1] >= bounds[2]
    assert study_plot(exact, cells, 1.0)[:8] == b"\x89PNG\r\n\x1a\n"


@pytest.mark.slow
def test_8_qubit_4_layer_path_recovers_with_extended_precision_samples():
    """8 qubits, 4 layers: numerator degree 256, the known denominator spans ~10^100 on [0, 1], so
    double-precision samples cannot determine p(0.25) (they are declined, never wrong). Samples
    computed with the digits that range requires (mpmath state vector) recover p(1) and p(0.25)
    within 1e-8 of p computed directly at that precision, inside the reported bounds, also with
    three corrupted samples among them."""
    path = cayley_path(layered(8, 4, 7), seed=0)
    assert 2 * path.degree_bound == 256
    nodes = chebyshev_nodes(270)
    targets = [1.0, 0.25]
    digits = sample_digits_needed(path, list(nodes) + targets)
    samples = path_probabilities_mp(path, "00000000", nodes, digits)
    exact = [float(v) for v in path_probabilities_mp(path, "00000000", targets, digits)]
    r = recover_path(path, nodes, samples, targets, sample_digits=digits)
    for v, e, x in zip(r.recovered, r.error_bound, exact):
        assert v is not None and abs(v - x) <= e and abs(v - x) <= 1e-8 * x
    # Berlekamp–Welch at degree 256: three samples off by half their value are found and dropped
    bad = [5, 130, 251]
    corrupted = [v * 1.5 if i in bad else v for i, v in enumerate(samples)]
    r = recover_path(path, nodes, corrupted, targets, sample_digits=digits, errors=3)
    assert r.corrupted == bad
    for v, e, x in zip(r.recovered, r.error_bound, exact):
        assert v is not None and abs(v - x) <= e and abs(v - x) <= 1e-8 * x
