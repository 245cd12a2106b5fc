"""XEB estimators and diagnostics against published formulas (named below).

Sources: Boixo et al., Nature Physics 14, 595 (2018) — Porter–Thomas law p ~ Beta(1, N−1),
E[p] = 1/N, E[p²] = 2/(N(N+1)), E[N·p·ln(N·p)] = 1 − H_N + ln N, uniform samples E[−ln p] = H_{N−1};
Arute et al., Nature 574, 505 (2019) + supplement — linear XEB, ideal expectation (N−1)/(N+1), the
mixture q = F·p + (1−F)/N with Var[N·p] = 1 + 2F − F², the digital error model.
Haar states are the first column of Haar unitaries (Mezzadri 2007).
"""

import math

import numpy as np
import pytest

from contraction.analysis.xeb import (
    EULER_GAMMA, digital_error_fidelity, estimate_xeb, fit_depth, linear_xeb, log_xeb, mixture_ks, pooled_xeb,
    porter_thomas_ks, sample_mixture)
from contraction.circuits.random_instances import grid_architecture, haar_state, haar_unitary, random_instance
from contraction.execution.statevector import state_vector

N_QUBITS = 6
N = 2 ** N_QUBITS


def harmonic(k: int) -> float:
    return sum(1.0 / j for j in range(1, k + 1))


@pytest.fixture(scope="module")
def haar_states():
    rng = np.random.default_rng(11)
    return np.array([np.abs(haar_unitary(N, rng)[:, 0]) ** 2 for _ in range(3000)])


def test_haar_state_moments(haar_states):
    p = haar_states
    assert abs(p.mean() - 1 / N) < 1e-12                       # normalisation: exactly 1/N
    m2 = (p ** 2).mean()
    sd = (p ** 2).std() / math.sqrt(p.size)
    assert abs(m2 - 2 / (N * (N + 1))) < 5 * sd


def test_ideal_linear_xeb_expectation(haar_states):
    # infinitely many ideal samples: F = N·Σp² − 1, expectation (N−1)/(N+1)
    f = N * (haar_states ** 2).sum(axis=1) - 1
    assert abs(f.mean() - (N - 1) / (N + 1)) < 5 * f.std() / math.sqrt(len(f))
    # the estimator on finite samples from each state agrees on average
    rng = np.random.default_rng(3)
    est = [linear_xeb(p[sample_mixture(p, 1.0, 200, rng)], N_QUBITS) for p in haar_states[:500]]
    assert abs(np.mean(est) - (N - 1) / (N + 1)) < 5 * np.std(est) / math.sqrt(len(est))


def test_log_xeb_expectations(haar_states):
    p = haar_states
    # E_x~uniform[N p ln(N p)] = 1 − H_N + ln N (= 0.414992 at N = 64)
    target = 1 - harmonic(N) + math.log(N)
    assert abs(target - 0.414992) < 1e-6
    v = (N * p * np.log(N * p)).mean(axis=1)
    assert abs(v.mean() - target) < 5 * v.std() / math.sqrt(len(v))
    # ideal samples: log XEB expectation = 1 − H_N + ln N + γ; uniform samples: ln N − H_{N−1} + γ
    ideal = (p * np.log(N * p)).sum(axis=1) + EULER_GAMMA
    assert abs(ideal.mean() - (target + EULER_GAMMA)) < 5 * ideal.std() / math.sqrt(len(ideal))
    uni = np.log(N * p).mean(axis=1) + EULER_GAMMA
    assert abs(uni.mean() - (math.log(N) - harmonic(N - 1) + EULER_GAMMA)) < 5 * uni.std() / math.sqrt(len(uni))
    # and E[−ln p] = H_{N−1} for uniform samples
    assert abs((-np.log(p)).mean() - harmonic(N - 1)) < 5 * (-np.log(p)).std() / math.sqrt(p.size)
    assert log_xeb(p[0], N_QUBITS) == pytest.approx(uni[0])


def test_mixture_estimate_and_error_bar():
    rng = np.random.default_rng(5)
    n = 12
    p = np.abs(haar_state(2 ** n, rng)) ** 2
    fid, k = 0.3, 20000
    res = estimate_xeb(p[sample_mixture(p, fid, k, rng)], n, bootstrap=300)
    expect = fid * (2 ** n - 1) / (2 ** n + 1)                     # exact finite-N expectation
    assert abs(res.linear_xeb - expect) < 4 * res.linear_xeb_stderr_model
    # the model error bar is the spread of the estimate over repeated experiments: Var[N·p] = 1 + 2F − F²
    # for the mixture (Arute et al. 2019, supplement), checked here by repeating the experiment 300 times
    other = np.random.default_rng(6)
    reps = [linear_xeb(p[sample_mixture(p, fid, 2000, other)], n) for _ in range(300)]
    assert np.std(reps) == pytest.approx(math.sqrt((1 + 2 * fid - fid ** 2) / 2000), rel=0.15)
    small = estimate_xeb(p[sample_mixture(p, fid, 2000, other)], n, bootstrap=0)
    assert small.linear_xeb_stderr_model == pytest.approx(np.std(reps), rel=0.2)
    assert res.linear_xeb_stderr == pytest.approx(res.linear_xeb_stderr_model, rel=0.1)
    assert res.bootstrap_low < res.linear_xeb < res.bootstrap_high
    assert (res.bootstrap_high - res.bootstrap_low) == pytest.approx(2 * 1.96 * res.linear_xeb_stderr, rel=0.2)
    # device samples follow the F-mixture law, not the uniform one
    x = p[sample_mixture(p, fid, k, rng)]
    assert mixture_ks(x, n, fid)[1] > 1e-3
    assert mixture_ks(x, n, 0.0)[1] < 1e-6


def test_pooled_xeb_weights():
    rng = np.random.default_rng(9)
    res = []
    for k in (1000, 4000):
        p = np.abs(haar_unitary(256, rng)[:, 0]) ** 2
        res.append(estimate_xeb(p[sample_mixture(p, 0.5, k, rng)], 8, bootstrap=0))
    f, se = pooled_xeb(res)
    w = np.array([1 / r.linear_xeb_stderr_model ** 2 for r in res])
    assert f == pytest.approx((w * [r.linear_xeb for r in res]).sum() / w.sum())
    assert se < min(r.linear_xeb_stderr_model for r in res)


def test_porter_thomas_of_a_random_circuit():
    deep = random_instance(grid_architecture(3, 4, 12), 1)
    shallow = random_instance(grid_architecture(3, 4, 1), 1)
    rng = np.random.default_rng(2)
    idx = rng.integers(0, 2 ** 12, 3000)
    p_deep = (np.abs(state_vector(deep)) ** 2)[idx]
    p_shallow = (np.abs(state_vector(shallow)) ** 2)[idx]
    assert porter_thomas_ks(p_deep, 12)[1] > 1e-3
    assert porter_thomas_ks(p_shallow, 12)[1] < 1e-6


def test_digital_error_model():
    assert digital_error_fidelity([0.01] * 10, [0.02] * 3) == pytest.approx(0.99 ** 10 * 0.98 ** 3)


def test_depth_fit_recovers_injected_error_in_95pct_of_trials():
    # seeded trials; each point's noise is the mixture model's σ = sqrt((1 + 2F − F²)/k)
    rng = np.random.default_rng(2026)
    cycles = np.arange(4, 17, 2)
    a_true, e_true, k = 0.95, 0.06, 5000
    covered = 0
    trials = 100
    for _ in range(trials):
        f_true = a_true * (1 - e_true) ** cycles
        sd = np.sqrt((1 + 2 * f_true - f_true ** 2) / k)
        fit = fit_depth(cycles, f_true + rng.standard_normal(len(cycles)) * sd, sd)
        lo, hi = fit.per_cycle_error_ci
        covered += lo <= e_true <= hi
    assert covered >= 90
    f20, se20 = fit.predict(20)
    assert se20 > 0 and abs(f20 - a_true * (1 - e_true) ** 20) < 5 * se20


def test_size_depth_fit_recovers_injected_errors():
    # the digital error model with per-qubit errors (Arute et al. 2019, supplement): seeded data with
    # the mixture model's σ; the fit recovers both errors within 3 standard errors
    from contraction.analysis.xeb import fit_size_depth

    rng = np.random.default_rng(7)
    er, ec, k = 0.02, 0.004, 20000
    n = np.repeat([12, 16, 20, 24], 5)
    d = np.tile([4, 8, 12, 16, 20], 4)
    f = (1 - er) ** n * (1 - ec) ** (n * d)
    sd = np.sqrt((1 + 2 * f - f ** 2) / k)
    fit = fit_size_depth(n, d, f + rng.standard_normal(len(f)) * sd, sd)
    se = np.sqrt(np.diag(fit.covariance))
    assert abs(fit.readout_error - er) < 3 * se[0]
    assert abs(fit.cycle_error - ec) < 3 * se[1]
    f53, s53 = fit.predict(53, 20)
    assert abs(f53 - (1 - er) ** 53 * (1 - ec) ** (53 * 20)) < 5 * s53
