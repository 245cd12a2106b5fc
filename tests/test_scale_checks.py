"""Checks of the network engine at 30–40 qubits that do not trust the engine itself.

* A patch circuit (every gate across a cut removed) is a product state of its two halves, so its
  amplitude is the product of the halves' amplitudes (tensor-product rule, Nielsen & Chuang 2010,
  §2.1.7). The halves are computed with ``numpy.einsum`` over the unfused gate list — a reference
  that shares no code with the engine's fusion, planning or slicing.
* Two different plans of one network (unsliced and sliced to a small cap) are two different
  summation orders of the same finite sum: they must agree to round-off (1e-10 relative in
  complex128, 1e-5 in complex64; common practice for these precisions).
"""

import pytest

from contraction.circuits.patches import elide, split
from contraction.circuits.random_instances import grid_architecture, random_instance
from contraction.execution.amplitudes import amplitudes
from contraction.execution.executor import contract_scalar
from contraction.network.builder import build_structure, tensor_arrays
from contraction.planning.options import PlannerOptions
from contraction.planning.search import find_plan

from .conftest import einsum_state


def einsum_amplitude(circuit, bits: str) -> complex:
    """<bits|C|0…0> from the einsum reference."""
    return complex(einsum_state(circuit)[int(bits, 2)])


@pytest.mark.slow
def test_36_qubit_patch_circuit_equals_product_of_halves(rng):
    arch = grid_architecture(6, 6, 10)
    full = random_instance(arch, seed=11, gates="discrete")
    left = [r * 6 + c for r in range(6) for c in range(3)]            # columns 0-2 | 3-5
    patch = elide(full, left)
    a, b, qa, qb = split(patch, left)
    for _ in range(2):
        bits = "".join(rng.choice(["0", "1"], size=36))
        run = amplitudes(patch, [bits], engine="single", planner=PlannerOptions(budget_seconds=2.0))
        want = einsum_amplitude(a, "".join(bits[q] for q in qa)) * einsum_amplitude(b, "".join(bits[q] for q in qb))
        got = run.results[0].amplitude
        assert abs(got - want) <= 1e-10 * abs(want)


@pytest.mark.slow
# complex64: float32 (unit roundoff u = 6e-8) through ~300 pairwise steps whose sums cancel (a random
# circuit's amplitude is far smaller than the sum of its terms' magnitudes): the forward error of a
# sum of n terms is bounded by n·u·Σ|terms| (Higham, Accuracy and Stability of Numerical Algorithms,
# 2nd ed., §3.1), so no fixed relative tolerance is guaranteed; two plans differed by 1.2e-5 relative
# in one run and by less in many others. 5e-5 still catches a wrong slice (errors of order 1).
@pytest.mark.parametrize("dtype, tol", [("complex128", 1e-10), ("complex64", 5e-5)])
def test_two_plans_with_different_slicings_agree_at_30_qubits(dtype, tol):
    circ = random_instance(grid_architecture(5, 6, 10), seed=5, gates="discrete")
    s = build_structure(circ)
    bits = "01" * 15
    arrays = tensor_arrays(s, circ, bits, dtype=dtype)
    plain = find_plan(s, PlannerOptions(budget_seconds=2.0))
    tree = plain.tree(s)
    # the same tree sliced until its largest intermediate is 16x smaller: at least 16 slices summed
    sliced = tree.slice(target_size=tree.max_size() / 16, allow_outer=False)
    assert sliced.nslices >= 16 and set(sliced.sliced_inds) != set(tree.sliced_inds)
    x = contract_scalar(tree, arrays)
    y = contract_scalar(sliced, arrays)
    assert abs(x - y) <= tol * abs(x)
