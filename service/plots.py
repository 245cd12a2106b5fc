"""Figures for people: XEB against cycles with the fit, and the N·p histogram against Porter–Thomas.

Rendered with matplotlib's Agg backend to PNG or SVG bytes (no screen needed).
"""

from __future__ import annotations

import io
from typing import Sequence

import numpy as np

FORMATS = {"png": "image/png", "svg": "image/svg+xml"}


def _figure():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt, plt.subplots(figsize=(6.4, 4.2), dpi=120)


def _bytes(plt, fig, fmt: str) -> bytes:
    buf = io.BytesIO()
    fig.tight_layout()
    fig.savefig(buf, format=fmt)
    plt.close(fig)
    return buf.getvalue()


def porter_thomas_plot(probabilities: Sequence[float], num_qubits: int, fidelity: float | None = None,
                       fmt: str = "png", title: str = "") -> bytes:
    """Histogram of N·p of the samples with the Porter–Thomas density e^(−x) (uniform samples) and,
    when ``fidelity`` is given, the mixture density (F·x + 1 − F)·e^(−x) (device samples)."""
    plt, (fig, ax) = _figure()
    x = 2.0 ** num_qubits * np.asarray(probabilities, dtype=float)
    top = max(6.0, float(np.percentile(x, 99.5)) if len(x) else 6.0)
    ax.hist(x, bins=60, range=(0, top), density=True, alpha=0.6, color="#4477aa",
            label=f"samples (k = {len(x)})")
    t = np.linspace(0, top, 400)
    ax.plot(t, np.exp(-t), color="#222222", lw=1.5, label="Porter–Thomas e^(−x)")
    if fidelity is not None:
        ax.plot(t, (fidelity * t + 1 - fidelity) * np.exp(-t), color="#cc6677", lw=1.5, ls="--",
                label=f"mixture, F = {fidelity:.3f}")
    ax.set_xlabel("N·p(x)  (ideal probability × 2^n, dimensionless)")
    ax.set_ylabel("probability density")
    ax.set_title(title or f"{num_qubits} qubits: distribution of N·p")
    ax.legend()
    return _bytes(plt, fig, fmt)


def depth_fit_plot(cycles: Sequence[float], fidelities: Sequence[float], stderrs: Sequence[float], fit,
                   fmt: str = "png", title: str = "") -> bytes:
    """Linear XEB against cycles with 1σ error bars and the fitted A·(1 − e)^d."""
    plt, (fig, ax) = _figure()
    d = np.asarray(cycles, dtype=float)
    ax.errorbar(d, fidelities, yerr=stderrs, fmt="o", color="#4477aa", capsize=3, label="linear XEB ± 1σ")
    t = np.linspace(0, max(d) * 1.1, 200)
    lo, hi = fit.per_cycle_error_ci
    ax.plot(t, fit.amplitude * (1 - fit.per_cycle_error) ** t, color="#cc6677",
            label=f"fit A(1−e)^d: e = {fit.per_cycle_error:.4f} [{lo:.4f}, {hi:.4f}] (95 %)")
    ax.set_yscale("log")
    ax.set_xlabel("cycles d")
    ax.set_ylabel("fidelity estimate (linear XEB)")
    ax.set_title(title or "XEB fidelity against depth")
    ax.legend()
    return _bytes(plt, fig, fmt)


def path_plot(thetas: Sequence[float], probabilities: Sequence[float], bitstring: str, recovery=None,
              fmt: str = "png") -> bytes:
    """p(theta) along the Cayley path; with a recovery, the sample nodes and the recovered values
    with their estimated error bars."""
    plt, (fig, ax) = _figure()
    ax.plot(thetas, probabilities, "-", color="#4477aa", label="p(θ), computed")
    if recovery is not None:
        got = [(t, v, e) for t, v, e in zip(recovery.theta, recovery.recovered, recovery.error_bound) if v is not None]
        if got:
            ts, vs, es = zip(*got)
            ax.errorbar(ts, vs, yerr=es, fmt="o", color="#ee6677", capsize=3,
                        label="recovered from samples (± error bound)")
        for t in [t for t, v in zip(recovery.theta, recovery.recovered) if v is None]:
            ax.axvline(t, color="#ee6677", linestyle=":", linewidth=1)
        if any(v is None for v in recovery.recovered):
            ax.plot([], [], ":", color="#ee6677", label="declined: not determined by the samples")
        lo, hi = min(recovery.nodes), max(recovery.nodes)
        ax.axvspan(lo, hi, color="#bbbbbb", alpha=0.3, label=f"sample interval, {len(recovery.nodes)} nodes")
    ax.set_xlabel("θ (0: the circuit, 1: its Haar deformation)")
    ax.set_ylabel(f"p(θ) = |⟨{bitstring if len(bitstring) <= 12 else bitstring[:10] + '…'}|C(θ)|0⟩|²")
    ax.set_title("Output probability along the Cayley path")
    ax.legend(fontsize=8)
    return _bytes(plt, fig, fmt)


def study_plot(exact: float, cells, target: float, fmt: str = "png") -> bytes:
    """Error bound (and actual error) of p(target) against the sampled interval's length delta, one
    line per noise level; declined cells are drawn at the top edge."""
    plt, (fig, ax) = _figure()
    noises = sorted({c.noise for c in cells})
    for eps in noises:
        row = [c for c in cells if c.noise == eps]
        ds = [c.delta for c in row]
        rel = [(c.error_bound / abs(exact)) if c.recovered is not None and exact else float("nan") for c in row]
        ax.plot(ds, rel, "o-", label=f"bound, noise {eps:g}")
        act = [(c.actual_error / abs(exact)) if c.recovered is not None and exact else float("nan") for c in row]
        ax.plot(ds, act, "x:", color=ax.lines[-1].get_color(), label=f"actual, noise {eps:g}")
    ax.set_yscale("log")
    ax.set_xlabel("δ: samples on [0, δ]")
    ax.set_ylabel(f"relative error of p({target:g})")
    ax.set_title("Extrapolation along the Cayley path (missing points: declined)")
    ax.legend(fontsize=7)
    return _bytes(plt, fig, fmt)
