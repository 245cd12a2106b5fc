"""Running a plan: contract the network's arrays slice by slice.

complex64 slices are contracted with cotengra's exponent stripping, so intermediates are rescaled
as they go and an amplitude far below float32's smallest normal number (1.2e-38) never underflows.
complex128 slices are contracted plainly (stripping cost 1.7-2.4x on a 30-qubit contraction, and
float64 reaches 1e-308); a slice that comes out exactly zero is contracted again with stripping, so
an underflow is never mistaken for a zero. Slices are summed as (mantissa, base-10 exponent) pairs.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass
from typing import Callable, Sequence

import numpy as np

from contraction.errors import Cancelled


@dataclass(frozen=True)
class Progress:
    """Tasks done out of total, and seconds elapsed."""

    done: int
    total: int
    elapsed: float

    @property
    def eta_seconds(self) -> float | None:
        """Seconds left at the rate so far; None before the first task is done."""
        if self.done == 0:
            return None
        return self.elapsed / self.done * (self.total - self.done)


ProgressCallback = Callable[[Progress], None]
CancelCheck = Callable[[], bool]


def sum_scaled(parts: Sequence[tuple]) -> tuple[np.ndarray, float]:
    """Sum values (scalars or arrays of one shape) given as (mantissa, base-10 exponent) pairs into one
    such pair, without overflow or underflow (a worker reduces its slices with it before sending)."""
    nonzero = [(np.asarray(m, dtype=np.complex128), e) for m, e in parts if np.any(np.asarray(m) != 0)]
    if not nonzero:
        return (np.zeros_like(np.asarray(parts[0][0], dtype=np.complex128)) if parts else np.zeros(())), 0.0
    top = max(e for _, e in nonzero)
    return sum(m * 10.0 ** (e - top) for m, e in nonzero), top


def combine_scaled(parts: Sequence[tuple]) -> np.ndarray:
    """The sum of (mantissa, base-10 exponent) pairs as a plain array (0-d for scalars)."""
    total, top = sum_scaled(parts)
    return total * 10.0 ** top


def contract_slice_scaled(tree, arrays, i: int) -> tuple[np.ndarray, float]:
    """One slice of a contraction as (mantissa, base-10 exponent); the mantissa has the shape of
    the output (0-d for an amplitude)."""
    if arrays[0].dtype == np.complex128:
        value = np.asarray(tree.contract_slice(arrays, i))
        if np.any(value != 0):
            return value, 0.0
    m, e = tree.contract_slice(arrays, i, strip_exponent=True, check_zero=True)
    e = float(np.asarray(e).reshape(()))
    m = np.asarray(m)
    if not math.isfinite(e):
        return np.zeros_like(m), 0.0
    return m, e


def contract_scalar(tree, arrays: Sequence[np.ndarray], slices: Sequence[int] | None = None,
                    progress: ProgressCallback | None = None,
                    cancelled: CancelCheck | None = None) -> complex:
    """Contract a scalar network over ``slices`` (default: all) of ``tree``."""
    return complex(contract_array(tree, arrays, slices, progress, cancelled).reshape(()))


def contract_array(tree, arrays: Sequence[np.ndarray], slices: Sequence[int] | None = None,
                   progress: ProgressCallback | None = None,
                   cancelled: CancelCheck | None = None) -> np.ndarray:
    """Contract a network over ``slices`` (default: all) of ``tree``; complex128 output."""
    todo = list(range(tree.nslices)) if slices is None else list(slices)
    parts = []
    t0 = time.perf_counter()
    for n, i in enumerate(todo, 1):
        if cancelled is not None and cancelled():
            raise Cancelled(f"cancelled after {n - 1} of {len(todo)} slices")
        parts.append(contract_slice_scaled(tree, arrays, i))
        if progress is not None:
            progress(Progress(n, len(todo), time.perf_counter() - t0))
    return combine_scaled(parts)
