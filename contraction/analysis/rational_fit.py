"""Recovering p(theta) along a Cayley path from samples, with error bounds that hold.

p(theta) = N(theta) / D(theta) where D(theta) = prod_{k,j}(1 + theta^2 lambda_kj^2) is known exactly
(:meth:`CayleyPath.denominator`) and N is a real polynomial of degree at most 2 sum_k d_k. D spans
tens of orders of magnitude once some lambda are large (eigenphases near pi), which double precision
cannot hold, so everything here runs in ball arithmetic (Arb, through python-flint): every number
carries a guaranteed enclosure, and the working precision is raised until the arithmetic error is
negligible next to the reported bound — the precision follows the measured conditioning.

* Fit: weighted least squares of p itself, in the basis T_j(u(theta)) / D(theta) (Chebyshev
  polynomials T_j on the sample interval, Trefethen, *Approximation Theory and Approximation
  Practice*, SIAM 2013, ch. 3-4), so residuals are in units of p, where the samples' errors live.
* Error bound: the fit is linear in the samples, p~(theta) = sum_i w_i(theta) p_i, so sample errors
  |delta_i| move the value by at most sum_i |w_i(theta)| |delta_i| (the weighted Lebesgue function,
  Trefethen ch. 15). The sample error is bounded from the working precision of the samples (double:
  a rounding bound per gate) or given as a relative noise level. Where the bound exceeds
  ``max_relative_error`` of the value, no value is returned and the reason is.
* Corrupted samples: the Berlekamp–Welch decoder (L. R. Welch & E. R. Berlekamp, US patent
  4,633,470 (1986), from memory; any coding-theory text on Reed–Solomon decoding): an error locator
  E of degree t and N of degree d + t with N(theta_i)/D(theta_i) = p_i E(theta_i) at every node —
  linear, solvable when K >= d + 2t + 1; E vanishes at the corrupted nodes, which are then dropped and
  the fit repeated. Samples whose residual exceeds their bound are reported as corrupted.
"""

from __future__ import annotations

import math
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from contraction.analysis.cayley import path_probabilities
from contraction.errors import VerampError

EPS = np.finfo(float).eps
#: precisions tried, in bits (53 = double); the first whose arithmetic error is negligible wins
PRECISIONS = (128, 256, 512, 1024, 2048, 4096, 8192)
#: size limits of one recovery (its cost grows as nodes x degree^2 at several hundred bits)
MAX_DEGREE = 600
MAX_NODES = 1000
#: arithmetic error allowed, as a share of the reported error bound
ARITHMETIC_SHARE = 1e-6


@contextmanager
def _precision(bits: int):
    from flint import ctx

    old = ctx.prec
    ctx.prec = bits
    try:
        yield
    finally:
        ctx.prec = old


def double_sample_error(p: np.ndarray, gate_dims: int) -> np.ndarray:
    """A bound on the error of probabilities computed in double precision: the amplitude carries at
    most 8·eps per unit of gate dimension applied (a generous version of the standard rounding bound
    for matrix-vector products, Higham, *Accuracy and Stability of Numerical Algorithms*, §3.5), and
    |delta p| <= 2 sqrt(p) delta_A + delta_A^2."""
    da = 8.0 * EPS * max(1, gate_dims)
    return 2.0 * np.sqrt(np.abs(p)) * da + da * da


@dataclass
class Fit:
    """A weighted least-squares fit of p = N / D at one precision (arb balls throughout)."""

    nodes: np.ndarray
    domain: tuple[float, float]
    degree: int
    lam2: np.ndarray
    bits: int
    lam: np.ndarray | None = None       # the eigenvalues themselves: squares taken exactly in arb
    coef: object = None                 # arb_mat (degree+1) x 1
    gram_inv_bt: object = None          # arb_mat (degree+1) x K: maps samples to coefficients

    def row(self, theta: float):
        """[T_j(u(theta)) / D(theta)] for j = 0..degree, as an arb_mat 1 x (degree+1)."""
        from flint import arb, arb_mat

        den = arb(1)
        t2 = arb(theta) * arb(theta)
        # lambda^2 from the eigenvalues is exact in arb; the double lam2 is rounded, which is harmless
        # for double samples but not for samples carrying a hundred digits
        squares = ([arb(float(v)) * arb(float(v)) for v in self.lam] if self.lam is not None
                   else [arb(float(l2)) for l2 in self.lam2])
        for l2 in squares:
            den *= 1 + t2 * l2
        return arb_mat([[t / den for t in _chebyshev(theta, self.domain, self.degree)]])

    def weights_and_value(self, theta: float):
        """(w(theta), p~(theta)) with p~(theta) = sum_i w_i p_i: w as an arb_mat 1 x K, p~ an arb."""
        r = self.row(theta)
        return r * self.gram_inv_bt, (r * self.coef)[0, 0]


def _chebyshev(theta: float, domain: tuple[float, float], degree: int) -> list:
    """T_0..T_degree at theta mapped from ``domain`` to [-1, 1] (three-term recurrence, arb balls)."""
    from flint import arb

    a, b = domain
    u = (2 * arb(theta) - (arb(a) + arb(b))) / (arb(b) - arb(a))
    ts = [arb(1), u]
    while len(ts) < degree + 1:
        ts.append(2 * u * ts[-1] - ts[-2])
    return ts[:degree + 1]


def _fit(nodes: np.ndarray, samples: np.ndarray, degree: int, lam2: np.ndarray, bits: int,
         domain: tuple[float, float], lam: np.ndarray | None = None) -> Fit:
    from flint import arb_mat

    f = Fit(nodes, domain, degree, lam2, bits, lam)
    b = arb_mat([[x for x in f.row(float(t)).entries()] for t in nodes])
    bt = b.transpose()
    try:
        f.gram_inv_bt = (bt * b).solve(bt)
    except ZeroDivisionError:
        raise _Singular() from None
    f.coef = f.gram_inv_bt * arb_mat([[_as_arb(y)] for y in samples])
    return f


class _Singular(Exception):
    """The normal equations could not be solved precisely enough at this precision."""


@dataclass
class PathRecovery:
    """p(theta) recovered from samples: values, error bounds and, where declined, the reason."""

    fitted_degree: int                    # degree of the numerator N fitted: 2 sum_k d_k
    gate_dimension_sum: int               # sum_k d_k of the path's gates
    nodes: list[float]
    corrupted: list[int]
    theta: list[float]
    recovered: list[float | None]
    error_bound: list[float | None]       # |recovered - p(theta)| <= error_bound, given the sample errors
    declined: list[str | None]            # why no value was returned at that theta
    precision_bits: int
    sample_error: str                     # how the samples' error was bounded
    exact: list[float] | None = None
    actual_error: list[float | None] | None = None

    def to_dict(self) -> dict:
        """The recovery as a JSON-ready dict (field names as in the dataclass)."""
        return dict(self.__dict__)


def _sample_bounds(samples: np.ndarray, gate_dims: int, noise: float | None,
                   digits: int | None = None) -> tuple[np.ndarray, str]:
    if noise is not None and not (0 <= noise < 1):
        raise VerampError("the relative sample noise must be in [0, 1)")
    if digits is not None:
        # samples computed with ``digits`` decimal digits: a relative error of 10^-(digits - 3) leaves
        # 1,000 units in the last place for the rounding of the state-vector products
        rounding, how = 10.0 ** -(digits - 3) * np.abs(samples), f"{digits}-digit samples"
    else:
        rounding, how = double_sample_error(samples, gate_dims), "double-precision rounding bound"
    if noise is None:
        return rounding, how
    return noise * np.abs(samples) + rounding, f"relative noise {noise:g}"


def _as_arb(value):
    """A sample as an arb ball at the current precision: floats exactly, mpmath numbers (extended
    precision samples) through their full decimal expansion."""
    from flint import arb

    if isinstance(value, (float, int, np.floating, np.integer)):
        return arb(float(value))
    import mpmath as mp

    # every digit the number carries (its mantissa's bits), not the global mpmath precision
    digits = int(value._mpf_[3] * 0.30103) + 5      # value._mpf_: (sign, mantissa, exponent, bits)
    return arb(mp.nstr(value, digits, strip_zeros=False))


def recover(nodes: Sequence[float], samples: Sequence, lam2: Sequence[float], targets: Sequence[float], *,
            degree: int, gate_dims: int, errors: int = 0, noise: float | None = None,
            max_relative_error: float = 0.1, sample_digits: int | None = None,
            lam: Sequence[float] | None = None) -> PathRecovery:
    """Recover p at ``targets`` from samples ``p(nodes)`` of p = N / D, N of degree ``degree`` and
    D = prod(1 + theta^2 lam2). ``errors``: samples that may be corrupted (Berlekamp–Welch);
    ``noise``: relative noise of the samples (default: they are exact up to double rounding);
    ``sample_digits``: the samples are mpmath numbers computed with that many decimal digits (see
    :func:`path_probabilities_mp`), used at their full precision and bounded accordingly; ``lam``:
    the eigenvalues whose squares ``lam2`` are (squared exactly in the fit when given)."""
    x = np.asarray(nodes, dtype=float)
    exact_samples = list(samples)
    y = np.asarray([float(v) for v in exact_samples], dtype=float)
    lam2 = np.asarray(lam2, dtype=float)
    lam = None if lam is None else np.asarray(lam, dtype=float)
    if x.shape != y.shape or x.ndim != 1:
        raise VerampError("nodes and samples must be two lists of the same length")
    if not (np.all(np.isfinite(x)) and np.all(np.isfinite(y)) and np.all(np.isfinite(lam2))):
        raise VerampError("nodes and samples must be finite numbers")
    k, t, d = len(np.unique(x)), int(errors), int(degree)
    if k != len(x):
        raise VerampError("the nodes must be distinct")
    if t < 0:
        raise VerampError("the number of corrupted samples cannot be negative")
    if d > MAX_DEGREE or k > MAX_NODES:
        raise VerampError(f"recovery is offered up to numerator degree {MAX_DEGREE} and {MAX_NODES} nodes "
                          f"(asked: degree {d}, {k} nodes); the ball-arithmetic fit grows as nodes x degree^2")
    if k < d + 2 * t + 1:
        raise VerampError(f"recovery needs at least {d + 2 * t + 1} distinct nodes for degree {d} with "
                          f"{t} corrupted samples; got {k}")
    domain = (float(x.min()), float(x.max()))
    delta, how = _sample_bounds(y, gate_dims, noise, sample_digits)
    targets = [float(v) for v in targets]
    # start where the denominator's dynamic range says double-and-then-some is needed (log2 of its
    # span plus 100 bits of headroom); more bits follow when the balls say so
    span = max(np.sum(np.log2(1 + np.multiply.outer(np.array([*x, *targets]) ** 2, lam2)), axis=-1), default=0.0)
    for bits in (b for b in PRECISIONS if b >= min(PRECISIONS[-1], 2 * span + 100) or b == PRECISIONS[-1]):
        with _precision(bits):
            try:
                ys = [_as_arb(v) for v in exact_samples]
                bad = _locate(x, ys, d, t, lam2, bits, domain, lam) if t else []
                keep = np.setdiff1d(np.arange(k), bad)
                fit = _fit(x[keep], [ys[i] for i in keep], d, lam2, bits, domain, lam)
                corrupted, unseen = _check_residuals(fit, x, ys, delta, keep, t)
                if corrupted != sorted(bad):
                    keep = np.setdiff1d(np.arange(k), corrupted)
                    if len(keep) < d + 1:
                        raise VerampError(f"more than {t} samples disagree with every degree-{d} numerator")
                    fit = _fit(x[keep], [ys[i] for i in keep], d, lam2, bits, domain, lam)
                    corrupted2, unseen = _check_residuals(fit, x, ys, delta, keep, t)
                    if corrupted2 != corrupted:
                        raise VerampError("the corrupted samples cannot be told apart from the good ones; add "
                                          "nodes or lower --errors")
                # with t corrupted samples allowed, up to t - (found) may still hide among the kept
                hidden = max(0, t - len(corrupted))
                values, bounds, reasons, fine = [], [], [], True
                for th in targets:
                    w, v = fit.weights_and_value(th)
                    absw = np.array([abs(float(w[0, i].mid())) for i in range(len(keep))])
                    amp = float(absw @ delta[keep])
                    if hidden:
                        # the worst of the undetectable corruptions the decoder could have missed
                        amp += float(np.sum(np.sort(absw * unseen)[-hidden:]))
                    arith = float(v.rad())
                    if arith > ARITHMETIC_SHARE * max(amp, EPS * abs(float(v.mid())), 1e-300):
                        fine = False                # not yet precise enough: try more bits
                        break
                    # the weights are exact to far below their size at this precision; a 1 % margin
                    # covers their own rounding; the value is returned as a double (half an ulp more)
                    val = float(v.mid())
                    bound = 1.01 * amp + arith + EPS * abs(val)
                    if not math.isfinite(bound) or bound > max_relative_error * abs(val):
                        values.append(None)
                        bounds.append(bound if math.isfinite(bound) else None)
                        reasons.append(f"error bound {bound:.3g} exceeds {max_relative_error:g} x |value| (value "
                                       f"{val:.3g}): the samples do not determine p here")
                    else:
                        values.append(val)
                        bounds.append(bound)
                        reasons.append(None)
                if not fine:
                    continue
            except _Singular:
                continue
        return PathRecovery(d, d // 2, x.tolist(), [int(i) for i in corrupted], targets, values, bounds, reasons,
                            bits, how)
    raise VerampError(f"the fit is too ill-conditioned even at {PRECISIONS[-1]} bits; use nodes spread over "
                      "the interval of interest")


def _check_residuals(fit: Fit, x, y, delta, keep, t: int) -> tuple[list[int], np.ndarray]:
    """Samples whose residual exceeds what their error bound allows (at most ``t`` may), and for
    each kept sample the largest error it could carry unnoticed: a sample with error e leaves the
    residual (1 - h) e, h its leverage (the fit's weight on itself), so the check at threshold c
    lets through up to c / (1 - h)."""
    out = []
    deltas = np.asarray(delta)[keep]
    position = {int(j): n for n, j in enumerate(keep)}
    unseen = np.zeros(len(keep))
    for i in range(len(x)):
        w, v = fit.weights_and_value(float(x[i]))
        spread = sum(abs(float(w[0, j].mid())) * float(dj) for j, dj in enumerate(deltas))
        if float(v.rad()) > ARITHMETIC_SHARE * (spread + delta[i]):
            raise _Singular()                # not precise enough yet: the caller tries more bits
        resid = abs(float((v - y[i]).mid()))          # in ball arithmetic: samples may carry many digits
        threshold = 4 * (spread + delta[i]) + 1e-300
        if resid > threshold:
            out.append(i)
        elif i in position:
            h = float(w[0, position[i]].mid())
            unseen[position[i]] = threshold / (1 - h) if 1 - h > 1e-12 else math.inf
    if len(out) > t:
        raise VerampError(f"{len(out)} samples disagree with the fitted p(theta) beyond their error bounds "
                          f"(allowed corrupted: {t}); raise --errors, or give the samples' noise")
    return sorted(out), unseen


def _locate(x, y, d: int, t: int, lam2, bits: int, domain, lam=None) -> list[int]:
    """Berlekamp–Welch: the nodes nearest to the real roots of the error locator E."""
    from flint import arb_mat

    f = Fit(x, domain, d + t, lam2, bits, lam)
    a, b = domain
    rows, rhs = [], []
    for ti, yi in zip(x, y):
        r = f.row(float(ti)).entries()                        # T_j / D, j <= d + t
        ts = _chebyshev(float(ti), domain, t)                 # T_j, j <= t
        rows.append(list(r) + [-yi * ts[j] for j in range(t)])
        rhs.append([yi * ts[t]])
    m = arb_mat(rows)
    mt = m.transpose()
    try:
        sol = (mt * m).solve(mt * arb_mat(rhs))
    except ZeroDivisionError:
        raise _Singular() from None
    e = [float(sol[d + t + 1 + j, 0].mid()) for j in range(t)] + [1.0]
    roots = np.polynomial.chebyshev.chebroots(e)
    u = (2 * x - (a + b)) / (b - a)
    return sorted({int(np.argmin(np.abs(u - r.real))) for r in roots
                   if abs(r.imag) < 1e-3 and -1.05 <= r.real <= 1.05})


def recover_path(path, nodes: Sequence[float], samples: Sequence, targets: Sequence[float], *,
                 errors: int = 0, noise: float | None = None, max_relative_error: float = 0.1,
                 sample_digits: int | None = None) -> PathRecovery:
    """Recover p at ``targets`` from p sampled at ``nodes`` along ``path`` (see :func:`recover`)."""
    lam = np.concatenate([g.eigvals for g in path.gates])
    return recover(nodes, samples, lam ** 2, targets, degree=2 * path.degree_bound, gate_dims=path.degree_bound,
                   errors=errors, noise=noise, max_relative_error=max_relative_error, sample_digits=sample_digits,
                   lam=lam)


def sample_digits_needed(path, thetas: Sequence[float]) -> int:
    """Decimal digits extended-precision samples need on ``thetas``: the denominator's dynamic range
    there (the fit loses that many digits of the samples near its top) plus 25 for the value itself."""
    ln_d = path.log_denominator(np.asarray(list(thetas), dtype=float))
    return int(math.ceil((float(np.max(ln_d)) - float(np.min(ln_d))) / math.log(10))) + 25


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




@dataclass
class StudyCell:
    """One (delta, noise) cell of an extrapolation study: p(target) from samples on [0, delta]."""

    delta: float
    noise: float
    recovered: float | None
    error_bound: float | None
    actual_error: float | None
    declined: str | None


def extrapolation_study(path, bitstring: str, deltas: Sequence[float], noises: Sequence[float], *,
                        target: float = 1.0, nodes: int | None = None, seed: int = 0,
                        max_relative_error: float = 1.0) -> tuple[float, list[StudyCell]]:
    """How well p(target) is determined by samples on [0, delta] carrying relative noise eps.

    For each delta, p is computed directly at Chebyshev nodes on [0, delta] (degree + 1 + 16 of them
    unless ``nodes`` is given); for each eps the samples get seeded uniform relative noise of that
    size and p(target) is recovered with the noise-aware bound. Returns (p(target) computed directly,
    cells): each cell has the recovered value and its bound, or the reason it was declined, and the
    actual error against the direct value."""

    d = 2 * path.degree_bound
    k = nodes or d + 17
    exact = float(path_probabilities(path, bitstring, [target])[0][0])
    rng = np.random.default_rng(seed)
    cells = []
    for delta in deltas:
        if not 0 < delta:
            raise VerampError("each delta must be positive")
        x = delta * (1 - np.cos(np.pi * (np.arange(k) + 0.5) / k)) / 2     # Chebyshev points on [0, delta]
        p, _ = path_probabilities(path, bitstring, x)
        for eps in noises:
            noisy = p * (1 + eps * rng.uniform(-1, 1, len(p)))
            r = recover_path(path, x, noisy, [target], noise=eps, max_relative_error=max_relative_error)
            v = r.recovered[0]
            cells.append(StudyCell(float(delta), float(eps), v, r.error_bound[0],
                                   None if v is None else abs(v - exact), r.declined[0]))
    return exact, cells
