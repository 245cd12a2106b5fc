"""Architectures (which qubit pairs get a gate in which layer) and seeded random instances.

* :func:`haar_unitary`: Haar-random unitaries by Mezzadri's method (QR of a complex Ginibre
  matrix with the phases of R's diagonal divided out), Notices AMS 54, 592 (2007).
* :class:`Architecture`: qubits, couplers and an ordered list of layers (each a matching).
  :func:`grid_architecture` builds rectangular grids (optionally with qubits removed) whose
  couplers fall in four matchings A, B, C, D applied in a named order such as ``ABCDCDAB``.
* :func:`random_instance`: Haar two-qubit gates, or single-qubit gates drawn from
  {√X, √Y, √W} (never the same twice in a row on a qubit) around a fixed two-qubit gate.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from contraction.circuits import gates as G
from contraction.circuits.model import Circuit, Gate
from contraction.errors import VerampError


def haar_unitary(d: int, rng: np.random.Generator) -> np.ndarray:
    """A d×d unitary drawn from the Haar measure (QR of a complex Gaussian matrix with the phases of R's diagonal
    divided out, after Mezzadri 2007)."""
    z = (rng.standard_normal((d, d)) + 1j * rng.standard_normal((d, d))) / math.sqrt(2.0)
    q, r = np.linalg.qr(z)
    diag = np.diagonal(r)
    return q * (diag / np.abs(diag))[None, :]


def haar_state(d: int, rng: np.random.Generator) -> np.ndarray:
    """A Haar-random state: a normalised complex Gaussian vector (same law as a Haar unitary's column)."""
    z = rng.standard_normal(d) + 1j * rng.standard_normal(d)
    return z / np.linalg.norm(z)


@dataclass(frozen=True)
class Architecture:
    """Which qubit pairs get a two-qubit gate in which layer; gate values are drawn per instance."""

    num_qubits: int
    layers: tuple[tuple[tuple[int, int], ...], ...]   # each layer: disjoint qubit pairs
    name: str = ""

    def __post_init__(self):
        for li, layer in enumerate(self.layers):
            seen: set[int] = set()
            for a, b in layer:
                if a == b or not (0 <= a < self.num_qubits and 0 <= b < self.num_qubits):
                    raise VerampError(f"layer {li}: invalid coupler ({a}, {b})")
                if a in seen or b in seen:
                    raise VerampError(f"layer {li}: qubit used twice in one layer")
                seen.update((a, b))


def grid_matchings(rows: int, cols: int, removed: frozenset[int] = frozenset()):
    """Qubit numbering of a grid with some sites removed and its four matchings A-D."""
    index = {}
    for r in range(rows):
        for c in range(cols):
            site = r * cols + c
            if site not in removed:
                index[(r, c)] = len(index)
    match = {"A": [], "B": [], "C": [], "D": []}
    for (r, c), q in index.items():
        right, down = index.get((r, c + 1)), index.get((r + 1, c))
        if right is not None:
            match["A" if (r + c) % 2 == 0 else "B"].append((q, right))
        if down is not None:
            match["C" if (r + c) % 2 == 0 else "D"].append((q, down))
    return len(index), {k: tuple(v) for k, v in match.items()}


def grid_architecture(rows: int, cols: int, cycles: int, pattern: str = "ABCDCDAB",
                      removed: frozenset[int] = frozenset()) -> Architecture:
    """Qubits on a rows × cols grid (minus ``removed`` sites), ``cycles`` layers of nearest-neighbour pairs from the
    matchings A–D in ``pattern`` order; raises :class:`VerampError` on bad sizes or patterns."""
    if rows < 1 or cols < 1 or cycles < 0:
        raise VerampError("a grid needs positive rows and columns and a non-negative cycle count")
    if not pattern or set(pattern) - set("ABCD"):
        raise VerampError(f"pattern {pattern!r} must be made of the letters A, B, C, D")
    n, match = grid_matchings(rows, cols, frozenset(removed))
    layers = tuple(match[pattern[c % len(pattern)]] for c in range(cycles))
    return Architecture(n, layers, f"grid{rows}x{cols}-{pattern}-{cycles}")


SQRT_GATES = {"sqrt_x": G.SQRT_X, "sqrt_y": G.SQRT_Y, "sqrt_w": G.SQRT_W}


def random_instance(arch: Architecture, seed: int, gates: str = "haar",
                    two_qubit: "np.ndarray | dict | None" = None) -> Circuit:
    """A seeded random circuit on ``arch``.

    ``gates="haar"``: every coupler of every layer gets an independent Haar-random 4x4 unitary.
    ``gates="discrete"``: a single-qubit layer from {√X, √Y, √W} before every two-qubit layer
    and one at the end, then ``two_qubit`` on each coupler: one matrix for all (default
    fSim(π/2, π/6)), or a dict {(a, b): matrix} with a gate per coupler (e.g. calibrated fSim angles).
    """
    rng = np.random.default_rng(seed)
    out: list[Gate] = []
    n = arch.num_qubits
    if gates == "haar":
        for layer in arch.layers:
            for a, b in layer:
                out.append(Gate((a, b), haar_unitary(4, rng), "haar"))
    elif gates == "discrete":
        default = G.fsim(math.pi / 2, math.pi / 6)
        per_coupler = two_qubit if isinstance(two_qubit, dict) else {}
        two = default if two_qubit is None or isinstance(two_qubit, dict) else np.asarray(two_qubit)
        names = list(SQRT_GATES)
        last = [-1] * n

        def single_layer():
            for q in range(n):
                choices = [k for k in range(3) if k != last[q]]
                k = choices[int(rng.integers(len(choices)))]
                last[q] = k
                out.append(Gate((q,), SQRT_GATES[names[k]], names[k]))

        for layer in arch.layers:
            single_layer()
            for a, b in layer:
                out.append(Gate((a, b), per_coupler.get((a, b), two), "fsim"))
        single_layer()
    else:
        raise VerampError(f"unknown gate set {gates!r}; choose haar or discrete")
    return Circuit(n, out, name=f"{arch.name}-{gates}-s{seed}")
