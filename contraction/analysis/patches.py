"""Probabilities of a circuit cut in two patches with no gate crossing the cut: the state is a
product state across the cut, so p(x) = p_A(x_A)·p_B(x_B)."""

from __future__ import annotations

from typing import Iterable, Sequence

from contraction.circuits.model import Circuit
from contraction.circuits.patches import split
from contraction.execution.amplitudes import amplitudes


def patch_probabilities(circuit: Circuit, part: Iterable[int], bitstrings: Sequence[str], **opts) -> list[float]:
    """p(x) = p_A(x_A)·p_B(x_B) for a circuit that factorises across the cut."""
    ca, cb, a, b = split(circuit, part)
    xa = ["".join(x[q] for q in a) for x in bitstrings]
    xb = ["".join(x[q] for q in b) for x in bitstrings]
    pa = [r.probability for r in amplitudes(ca, xa, **opts).results]
    pb = [r.probability for r in amplitudes(cb, xb, **opts).results]
    return [u * v for u, v in zip(pa, pb)]
