"""Haar-random unitaries by Mezzadri's method and their statistics.

Source: F. Mezzadri, "How to generate random matrices from the classical compact groups",
Notices AMS 54(5), 592 (2007), arXiv:math-ph/0609050. For U Haar on U(d):
E|U_ij|² = 1/d, E|U_ij|⁴ = 2/(d(d+1)), E[U_11] = 0. A QR without the phase fix fails the last
one (E[Re U_11] ≈ −0.29 at d = 4, measured in this project).
Also E|Tr U|² = 1 (Diaconis & Shahshahani 1994, from memory).
"""

import numpy as np

from contraction.circuits.random_instances import haar_unitary

K = 20000
D = 4


def _samples(rng, fix=True):
    out = np.empty((K, D, D), dtype=complex)
    for i in range(K):
        if fix:
            out[i] = haar_unitary(D, rng)
        else:
            z = (rng.standard_normal((D, D)) + 1j * rng.standard_normal((D, D))) / np.sqrt(2)
            out[i] = np.linalg.qr(z)[0]
    return out


def test_haar_moments(rng):
    u = _samples(rng)
    assert np.allclose(u @ u.conj().transpose(0, 2, 1), np.eye(D), atol=1e-12)
    a2 = np.abs(u) ** 2
    # |U_ij|^2 ~ Beta(1, d-1): mean 1/d, variance (d-1)/(d^2 (d+1)); 5-sigma bands on the mean
    sd2 = np.sqrt((D - 1) / (D * D * (D + 1)) / K)
    assert np.all(np.abs(a2.mean(axis=0) - 1 / D) < 5 * sd2)
    m4 = (a2 ** 2).mean(axis=0)
    # E|U|^8 = 6/(d(d+1)(d+2)) from the Beta(1,d-1) law (derived); gives the sd of the |U|^4 mean
    sd4 = np.sqrt((6 / (D * (D + 1) * (D + 2)) - (2 / (D * (D + 1))) ** 2) / K)
    assert np.all(np.abs(m4 - 2 / (D * (D + 1))) < 5 * sd4)
    # E[U_11] = 0: each entry has E|U|^2 = 1/d, so the mean's sd is sqrt(1/(d K))
    assert abs(u[:, 0, 0].mean()) < 5 * np.sqrt(1 / (D * K))
    tr2 = np.abs(np.trace(u, axis1=1, axis2=2)) ** 2
    assert abs(tr2.mean() - 1) < 0.05


def test_qr_without_phase_fix_is_detected(rng):
    # the regression the E[U_11] = 0 check is for: it must fail for an unfixed QR
    u = _samples(rng, fix=False)
    assert u[:, 0, 0].real.mean() < -0.2
