"""Cross-entropy benchmarking (XEB): fidelity estimators with honest error bars, Porter–Thomas
diagnostics, depth fits, and samples from the global-depolarising mixture model.

References: S. Boixo et al., Nature Physics 14, 595 (2018) (Porter–Thomas, log XEB);
F. Arute et al., Nature 574, 505 (2019) and its supplement (linear XEB, the digital error model).
N = 2^n; p(x) is the ideal probability of bitstring x.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from typing import Sequence

import numpy as np

from contraction.errors import VerampError

EULER_GAMMA = 0.5772156649015329


@dataclass(frozen=True)
class XebResult:
    """Linear and log XEB of a set of samples, with sample-variance, model and bootstrap errors."""

    samples: int
    num_qubits: int
    linear_xeb: float
    linear_xeb_stderr: float          # from the sample variance of N·p
    linear_xeb_stderr_model: float    # sqrt((1 + 2F - F^2)/k), the mixture model's prediction
    bootstrap_low: float              # 95 % percentile bootstrap interval of the linear XEB
    bootstrap_high: float
    log_xeb: float | None             # None when a sampled bitstring has p = 0
    log_xeb_stderr: float | None

    def to_dict(self) -> dict:
        """The result as a JSON-ready dict."""
        return asdict(self)


def linear_xeb(probabilities: Sequence[float], num_qubits: int) -> float:
    """F = N·mean p(x_i) − 1."""
    p = np.asarray(probabilities, dtype=float)
    return float(2.0 ** num_qubits * p.mean() - 1.0)


def log_xeb(probabilities: Sequence[float], num_qubits: int) -> float:
    """F_log = mean ln(N·p(x_i)) + γ (Boixo et al. 2018)."""
    p = np.asarray(probabilities, dtype=float)
    return float(np.mean(np.log(2.0 ** num_qubits * p)) + EULER_GAMMA)


def estimate_xeb(probabilities: Sequence[float], num_qubits: int, bootstrap: int = 1000,
                 seed: int = 0) -> XebResult:
    """Linear and log XEB of k sampled bitstrings from their ideal probabilities."""
    p = np.asarray(probabilities, dtype=float)
    k = len(p)
    if k == 0:

        raise VerampError("XEB needs at least one sample")
    x = 2.0 ** num_qubits * p
    f = float(x.mean() - 1.0)
    sd = float(x.std(ddof=1)) / math.sqrt(k) if k > 1 else math.nan
    model = math.sqrt(max(0.0, 1 + 2 * f - f * f) / k)
    rng = np.random.default_rng(seed)
    boots = np.array([x[rng.integers(0, k, k)].mean() - 1.0 for _ in range(bootstrap)]) if bootstrap else np.array([f])
    lo, hi = (float(v) for v in np.percentile(boots, [2.5, 97.5]))
    if np.all(p > 0):
        lx = np.log(x)
        flog = float(lx.mean() + EULER_GAMMA)
        flog_sd = float(lx.std(ddof=1)) / math.sqrt(k) if k > 1 else math.nan
    else:
        flog, flog_sd = None, None
    return XebResult(k, num_qubits, f, sd, model, lo, hi, flog, flog_sd)


def pooled_xeb(results: Sequence[XebResult], weights: Sequence[float] | None = None) -> tuple[float, float]:
    """Weighted mean of per-circuit linear XEB and its standard error (default weights: 1/stderr²)."""
    f = np.array([r.linear_xeb for r in results])
    se = np.array([r.linear_xeb_stderr_model for r in results])
    w = np.asarray(weights, dtype=float) if weights is not None else 1.0 / np.maximum(se, 1e-300) ** 2
    w = w / w.sum()
    return float((w * f).sum()), float(math.sqrt((w ** 2 * se ** 2).sum()))


# ------------------------------------------------------------------ Porter–Thomas diagnostics

def porter_thomas_ks(probabilities: Sequence[float], num_qubits: int) -> tuple[float, float]:
    """KS statistic and p-value of p(x) for uniformly drawn x against Beta(1, N−1)."""
    from scipy import stats

    n = 2.0 ** num_qubits
    res = stats.kstest(np.asarray(probabilities, dtype=float), stats.beta(1, n - 1).cdf)
    return float(res.statistic), float(res.pvalue)


def mixture_ks(probabilities: Sequence[float], num_qubits: int, fidelity: float) -> tuple[float, float]:
    """KS test of N·p for device samples against the F-mixture law in the Porter–Thomas limit:
    density (F·x + 1 − F)·e^(−x), CDF 1 − e^(−x)·(1 + F·x) (derived from q = F·p + (1−F)/N)."""
    from scipy import stats

    x = 2.0 ** num_qubits * np.asarray(probabilities, dtype=float)
    res = stats.kstest(x, lambda t: 1.0 - np.exp(-t) * (1.0 + fidelity * t))
    return float(res.statistic), float(res.pvalue)


# ------------------------------------------------------------------ the mixture model

def sample_mixture(probs: np.ndarray, fidelity: float, k: int, rng: np.random.Generator) -> np.ndarray:
    """k basis-state indices from q = F·p + (1 − F)/N (global depolarising model)."""
    n_states = len(probs)
    ideal = rng.random(k) < fidelity
    out = rng.integers(0, n_states, k)
    m = int(ideal.sum())
    if m:
        cdf = np.cumsum(probs)
        out[ideal] = np.minimum(np.searchsorted(cdf, rng.random(m) * cdf[-1]), n_states - 1)
    return out


def digital_error_fidelity(gate_errors: Sequence[float], readout_errors: Sequence[float] = ()) -> float:
    """F ≈ Π(1 − e_gate)·Π(1 − e_readout) (Arute et al. 2019, supplement)."""
    return float(np.prod(1 - np.asarray(gate_errors, float)) * np.prod(1 - np.asarray(readout_errors, float)))


# ------------------------------------------------------------------ depth fits

@dataclass(frozen=True)
class DepthFit:
    """Fit of F(d) = A·(1 − e)^d to fidelities against cycles, with the covariance and a 95 % interval on e."""

    amplitude: float                 # F at zero cycles (state preparation and readout)
    per_cycle_error: float           # e in F(d) = A·(1 − e)^d
    per_cycle_error_ci: tuple[float, float]
    covariance: list[list[float]]

    def predict(self, cycles: float) -> tuple[float, float]:
        """Extrapolated fidelity and its standard error (delta method) at ``cycles``."""
        a, e = self.amplitude, self.per_cycle_error
        f = a * (1 - e) ** cycles
        grad = np.array([(1 - e) ** cycles, -a * cycles * (1 - e) ** (cycles - 1)])
        var = float(grad @ np.array(self.covariance) @ grad)
        return f, math.sqrt(max(var, 0.0))

    def to_dict(self) -> dict:
        """The fit as a JSON-ready dict."""
        return asdict(self)


def fit_depth(cycles: Sequence[float], fidelities: Sequence[float], stderrs: Sequence[float]) -> DepthFit:
    """Weighted non-linear least squares of F(d) = A·(1 − e)^d with a 95 % interval on e."""
    from scipy import optimize, stats

    d = np.asarray(cycles, float)
    f = np.asarray(fidelities, float)
    s = np.asarray(stderrs, float)
    good = f > 0
    slope, icpt = np.polyfit(d[good], np.log(f[good]), 1) if good.sum() >= 2 else (-0.01, 0.0)
    p0 = [math.exp(icpt), min(0.5, max(1e-6, 1 - math.exp(slope)))]
    popt, pcov = optimize.curve_fit(lambda x, a, e: a * (1 - e) ** x, d, f, p0=p0, sigma=s,
                                    absolute_sigma=True, bounds=([0, 0], [2, 1]))
    se = math.sqrt(max(pcov[1, 1], 0.0))
    z = stats.norm.ppf(0.975)
    return DepthFit(float(popt[0]), float(popt[1]), (float(popt[1] - z * se), float(popt[1] + z * se)),
                    pcov.tolist())


@dataclass(frozen=True)
class SizeDepthFit:
    """F(n, d) = (1 − e_r)^n · (1 − e_c)^(n·d): a per-qubit readout/preparation error e_r and a
    per-qubit-per-cycle error e_c — the digital error model with gate errors spread over qubits."""

    readout_error: float
    cycle_error: float               # per qubit per cycle
    covariance: list[list[float]]

    def predict(self, qubits: float, cycles: float) -> tuple[float, float]:
        """(F, standard error) predicted for ``qubits`` and ``cycles``, the error propagated from the fit's covariance."""
        er, ec = self.readout_error, self.cycle_error
        f = (1 - er) ** qubits * (1 - ec) ** (qubits * cycles)
        grad = np.array([-qubits * f / (1 - er), -qubits * cycles * f / (1 - ec)])
        return f, math.sqrt(max(float(grad @ np.array(self.covariance) @ grad), 0.0))

    def to_dict(self) -> dict:
        """The fit as a JSON-ready dict."""
        return asdict(self)


def fit_size_depth(qubits: Sequence[float], cycles: Sequence[float], fidelities: Sequence[float],
                   stderrs: Sequence[float]) -> SizeDepthFit:
    """Weighted least squares of F(n, d) over circuits of several sizes and depths."""
    from scipy import optimize

    n = np.asarray(qubits, float)
    d = np.asarray(cycles, float)
    popt, pcov = optimize.curve_fit(lambda x, er, ec: (1 - er) ** x[0] * (1 - ec) ** (x[0] * x[1]),
                                    np.vstack([n, d]), np.asarray(fidelities, float), p0=[0.01, 0.005],
                                    sigma=np.asarray(stderrs, float), absolute_sigma=True, bounds=([0, 0], [1, 1]))
    return SizeDepthFit(float(popt[0]), float(popt[1]), pcov.tolist())
