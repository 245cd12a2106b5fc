"""Recovering p(theta) along a Cayley path from samples.

p(theta) is rational in theta with a known denominator (:meth:`CayleyPath.denominator`), so
q(theta) = p(theta) * prod_{k,j}(1 + theta^2 lambda_kj^2) is a real polynomial of degree at most
2 sum_k d_k. We recover q from samples:

* least squares in the Chebyshev basis on the sample interval (well conditioned for interpolation);
* Berlekamp–Welch for up to t corrupted samples: find E (degree t, leading coefficient 1) and N
  (degree d + t) with N(theta_i) = q_i E(theta_i) at every node — a linear system, solvable when
  K >= d + 2t + 1 — then q = N / E; samples where q disagrees are the corrupted ones, and q is
  refitted without them;
* an honest error estimate at any theta: a least-squares fit is linear in the samples,
  q(theta) = sum_i w_i(theta) q_i, so a sample error of size delta moves the value by at most
  sum_i |w_i(theta)| * delta (the Lebesgue function of the fit). We take delta from the fit's
  residuals and the working precision; far outside the sample interval sum |w_i| explodes, and the
  estimate says so.

Extended precision (mpmath) is available for small cases: the samples are computed with an mpmath
state vector and the fit solved in mpmath.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Sequence

import numpy as np

from .errors import VerampError

EPS = np.finfo(float).eps


def _to_unit(x, domain: tuple[float, float]):
    a, b = domain
    return (2 * np.asarray(x, dtype=float) - (a + b)) / (b - a)


def chebyshev_basis(x, degree: int, domain: tuple[float, float]) -> np.ndarray:
    return np.polynomial.chebyshev.chebvander(_to_unit(x, domain), degree)


@dataclass
class PolyFit:
    """A polynomial as Chebyshev coefficients on ``domain``, with the data it was fitted to."""

    coef: np.ndarray
    domain: tuple[float, float]
    nodes: np.ndarray
    scale: float                      # weighted samples were divided by this before fitting
    residual: float                   # max weight * |fit - sample| at the nodes
    noise: float                      # error of a weighted sample assumed for the estimate
    weights: np.ndarray | None = None

    @property
    def degree(self) -> int:
        return len(self.coef) - 1

    def __call__(self, x) -> np.ndarray:
        return self.scale * np.polynomial.chebyshev.chebval(_to_unit(x, self.domain), self.coef)

    def lebesgue(self, x) -> np.ndarray:
        """sum_i |w_i(x)|: how much a unit error in every weighted sample can move the value at x."""
        a = chebyshev_basis(self.nodes, self.degree, self.domain)
        if self.weights is not None:
            a = a * self.weights[:, None]
        w = chebyshev_basis(np.atleast_1d(x), self.degree, self.domain) @ np.linalg.pinv(a)
        return np.abs(w).sum(axis=1)

    def error_bound(self, x) -> np.ndarray:
        return self.lebesgue(x) * self.noise


def fit_polynomial(x: Sequence[float], y: Sequence[float], degree: int,
                   domain: tuple[float, float] | None = None, noise: float | None = None,
                   weights: Sequence[float] | None = None) -> PolyFit:
    """(Weighted) least squares in the Chebyshev basis (needs len(x) >= degree + 1). With weights,
    residuals and the noise are measured on weight * sample."""
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    if len(np.unique(x)) < degree + 1:
        raise VerampError(f"{len(np.unique(x))} distinct nodes cannot determine a polynomial of degree {degree}")
    domain = domain or (float(x.min()), float(x.max()))
    w = np.ones_like(y) if weights is None else np.asarray(weights, dtype=float)
    scale = float(np.max(np.abs(w * y))) or 1.0
    a = chebyshev_basis(x, degree, domain) * w[:, None]
    coef, *_ = np.linalg.lstsq(a, w * y / scale, rcond=None)
    coef = coef * scale
    residual = float(np.max(np.abs(a @ coef - w * y)))
    if noise is None:
        # round-off of the samples themselves, and what the fit could not explain
        noise = max(residual, 64 * EPS * scale)
    return PolyFit(coef, domain, x, 1.0, residual, noise, None if weights is None else w)


@dataclass
class WelchResult:
    fit: PolyFit
    corrupted: list[int] = field(default_factory=list)     # indices of samples judged corrupted


def berlekamp_welch(x: Sequence[float], y: Sequence[float], degree: int, errors: int,
                    tolerance: float = 1e-6, weights: Sequence[float] | None = None) -> WelchResult:
    """Recover a degree-``degree`` polynomial from samples of which at most ``errors`` are wrong.

    Samples whose weighted value differs from the recovered polynomial by more than ``tolerance``
    times the largest weighted sample are reported as corrupted (common practice: a relative
    threshold well above the round-off of double precision); the polynomial is then refitted on
    the others. Weights put the samples on a common scale (for p(theta): 1 / denominator)."""
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    w = np.ones_like(y) if weights is None else np.asarray(weights, dtype=float)
    k, t, d = len(np.unique(x)), int(errors), int(degree)
    if not (np.all(np.isfinite(y)) and np.all(np.isfinite(w))):
        raise VerampError("the samples or their weights are not finite (theta too large for double precision?)")
    if k < d + 2 * t + 1:
        raise VerampError(f"recovery needs at least {d + 2 * t + 1} distinct nodes for degree {d} with "
                          f"{t} errors; got {k}")
    if t == 0:
        return WelchResult(fit_polynomial(x, y, d, weights=weights))
    domain = (float(x.min()), float(x.max()))
    scale = float(np.max(np.abs(w * y))) or 1.0
    # the locator system N(x_i) = y_i E(x_i), unweighted, columns equilibrated (measured: weighting
    # the rows by 1/denominator made it rank-deficient when the denominator spans 1e9)
    top = float(np.max(np.abs(y))) or 1.0
    tn = chebyshev_basis(x, d + t, domain)              # N: d + t + 1 unknowns
    te = chebyshev_basis(x, t, domain)                  # E: T_t coefficient fixed to 1, t unknowns
    system = np.hstack([tn, -(y / top)[:, None] * te[:, :t]])
    rhs = y / top * te[:, t]
    norms = np.linalg.norm(system, axis=0)
    norms[norms == 0] = 1.0
    sol, *_ = np.linalg.lstsq(system / norms, rhs, rcond=None)
    sol = sol / norms
    e_coef = np.concatenate([sol[d + t + 1:], [1.0]])
    # the error locator E vanishes at the corrupted nodes: take the node nearest to each real root
    roots = np.polynomial.chebyshev.chebroots(e_coef)
    u = _to_unit(x, domain)
    suspects = sorted({int(np.argmin(np.abs(u - r.real))) for r in roots
                       if abs(r.imag) < 1e-3 and -1.05 <= r.real <= 1.05})
    fit = fit_polynomial(np.delete(x, suspects), np.delete(y, suspects), d, domain, weights=np.delete(w, suspects))
    # a root that fell on a good sample (fewer errors than t): that sample agrees with the fit
    resid = np.abs(fit(x) - y) * w / scale
    bad = [i for i in suspects if resid[i] > tolerance]
    keep = np.setdiff1d(np.arange(k), bad)
    if np.max(resid[keep]) > tolerance or len(keep) < d + 1:
        raise VerampError(f"more than {t} samples disagree with every degree-{d} polynomial; "
                          "raise the error count or the number of samples")
    return WelchResult(fit_polynomial(x[keep], y[keep], d, domain, weights=w[keep]), bad)


@dataclass
class PathRecovery:
    """p(theta) recovered from samples: values and error estimates at the requested points."""

    degree: int
    nodes: list[float]
    corrupted: list[int]
    theta: list[float]
    recovered: list[float]
    estimated_error: list[float]
    exact: list[float] | None = None
    actual_error: list[float] | None = None
    precision: str = "double"

    def to_dict(self) -> dict:
        return dict(self.__dict__)


def recover_path(path, nodes: Sequence[float], samples: Sequence[float], targets: Sequence[float], *,
                 degree: int | None = None, errors: int = 0, tolerance: float = 1e-6) -> PathRecovery:
    """Recover p at ``targets`` from p sampled at ``nodes`` (double precision)."""
    nodes = np.asarray(nodes, dtype=float)
    d = 2 * path.degree_bound if degree is None else int(degree)
    den_nodes = path.denominator(nodes)
    q = np.asarray(samples, dtype=float) * den_nodes
    # weights 1/denominator: residuals and noise in units of p, where the samples' errors live
    res = berlekamp_welch(nodes, q, d, errors, tolerance, weights=1.0 / den_nodes)
    t = np.asarray(targets, dtype=float)
    den = path.denominator(t)
    rec = res.fit(t) / den
    err = res.fit.error_bound(t) / den
    return PathRecovery(d, nodes.tolist(), res.corrupted, t.tolist(), rec.tolist(), err.tolist())


def path_probabilities_mp(path, bitstring: str, thetas: Sequence, dps: int = 50) -> list:
    """p(theta) with an mpmath state vector at ``dps`` decimal digits (small circuits only)."""
    import mpmath as mp

    n = path.circuit.num_qubits
    if n > 8:
        raise VerampError(f"extended precision is offered up to 8 qubits; this circuit has {n}")
    out = []
    with mp.workdps(dps):
        for th in thetas:
            th = mp.mpf(th)
            psi = [mp.mpc(0)] * (2 ** n)
            psi[0] = mp.mpc(1)
            for g in path.gates:
                lam = [mp.mpf(float(v)) for v in g.eigvals]
                vec = mp.matrix([[mp.mpc(complex(z)) for z in row] for row in g.eigvecs])
                ph = [(1 + 1j * th * v) / (1 - 1j * th * v) for v in lam]
                d = len(lam)
                f = mp.matrix(d, d)
                for r in range(d):
                    for c in range(d):
                        f[r, c] = mp.fsum(vec[r, j] * ph[j] * mp.conj(vec[c, j]) for j in range(d))
                cm = mp.matrix([[mp.mpc(complex(z)) for z in row] for row in g.gate.matrix])
                psi = _apply_mp(psi, cm * f, g.gate.qubits, n)
            a = psi[int(bitstring, 2)]
            out.append(abs(a) ** 2)
    return out


def _apply_mp(psi: list, m, qubits: tuple[int, ...], n: int) -> list:
    k = len(qubits)
    out = list(psi)
    shifts = [n - 1 - q for q in qubits]
    mask = sum(1 << s for s in shifts)
    for base in range(2 ** n):
        if base & mask:
            continue
        idx = []
        for r in range(2 ** k):
            i = base
            for j, s in enumerate(shifts):
                if (r >> (k - 1 - j)) & 1:
                    i |= 1 << s
            idx.append(i)
        vals = [psi[i] for i in idx]
        for r, i in enumerate(idx):
            out[i] = sum(m[r, c] * vals[c] for c in range(2 ** k))
    return out


def recover_path_mp(path, nodes: Sequence, samples: Sequence, targets: Sequence, *, degree: int | None = None,
                    dps: int = 50) -> PathRecovery:
    """The least-squares recovery in mpmath (Chebyshev basis, QR), for small cases."""
    import mpmath as mp

    d = 2 * path.degree_bound if degree is None else int(degree)
    with mp.workdps(dps):
        lam2 = [mp.mpf(float(v)) ** 2 for g in path.gates for v in g.eigvals]

        def den(t):
            return mp.fprod(1 + mp.mpf(t) ** 2 * l2 for l2 in lam2)

        a_, b_ = mp.mpf(min(nodes)), mp.mpf(max(nodes))

        def row(t):
            u = (2 * mp.mpf(t) - (a_ + b_)) / (b_ - a_)
            return [mp.chebyt(j, u) for j in range(d + 1)]

        a = mp.matrix([row(t) for t in nodes])
        q = mp.matrix([mp.mpf(s) * den(t) for s, t in zip(samples, nodes)])
        coef, _res = mp.qr_solve(a, q)
        rec = [mp.fsum(c * r for c, r in zip(coef, row(t))) / den(t) for t in targets]
        # round-off of the working precision amplified by the fit (same rule as in double precision)
        pinv = mp.inverse(a.T * a) * a.T
        err = []
        for t in targets:
            w = mp.matrix([row(t)]) * pinv
            err.append(float(mp.fsum(abs(w[0, i]) for i in range(w.cols)) * max(abs(v) for v in q)
                             * mp.mpf(10) ** (-dps + 2) / den(t)))
        return PathRecovery(d, [float(t) for t in nodes], [], [float(t) for t in targets], [float(v) for v in rec],
                            err, precision=f"mpmath {dps} digits")
