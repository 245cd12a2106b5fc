"""Running a plan: contract the network's arrays slice by slice.

Slices are contracted plainly first: cotengra's exponent stripping (every intermediate rescaled
as it goes) cost 1.7-2.4x on a 30-qubit contraction in complex128 and 1.5-1.7x on a 53-qubit slice in
complex64. A slice is contracted again with stripping when its plain value could have lost digits to
underflow or overflow: complex128 when any output element is exactly zero or not finite (float64
reaches 1e-308), complex64 when any is below :data:`COMPLEX64_PLAIN_FLOOR` in magnitude or not finite
— far above float32's smallest normal number (1.2e-38), so contributions flushed to zero along the
way would have to be amplified 10^18-fold by the rest of a network of unit-bounded gate entries to
matter. An amplitude far below float32's range therefore still comes out right (stripped), and an
underflow is never mistaken for a zero. Slices are summed as (mantissa, base-10 exponent) pairs.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass
from typing import Callable, Sequence

import numpy as np

from contraction.errors import Cancelled
from contraction.execution.reuse import SliceContractor


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


#: a complex64 slice whose plain value has an element below this magnitude is contracted again with
#: exponent stripping (see the module notes; 18 orders of magnitude above float32's smallest normal)
COMPLEX64_PLAIN_FLOOR = 1e-20


def contract_slice_scaled(tree, arrays, i: int, contractor: SliceContractor | None = None) -> tuple[np.ndarray, float]:
    """One slice of a contraction as (mantissa, base-10 exponent); the mantissa has the shape of
    the output (0-d for an amplitude). ``contractor``: one made for these arrays (it keeps
    intermediates between the slices of a run); slice numbers are then its own."""
    contractor = contractor or SliceContractor(tree, arrays)
    value = contractor.contract(i)
    floor = COMPLEX64_PLAIN_FLOOR if value.dtype == np.complex64 else 0.0
    magnitude = np.abs(value)
    if np.all(np.isfinite(magnitude)) and np.all(magnitude > floor):
        return value, 0.0
    m, e = tree.contract_slice(arrays, contractor.tree_slice(i), strip_exponent=True, check_zero=True)
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
    contractor = SliceContractor(tree, arrays)
    for n, i in enumerate(todo, 1):
        if cancelled is not None and cancelled():
            raise Cancelled(f"cancelled after {n - 1} of {len(todo)} slices")
        parts.append(contract_slice_scaled(tree, arrays, i, contractor))
        if progress is not None:
            progress(Progress(n, len(todo), time.perf_counter() - t0))
    return combine_scaled(parts)
