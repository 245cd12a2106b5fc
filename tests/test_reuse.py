"""Intermediates kept between slices: every slice is still counted once, and the values equal the
plain sliced contraction and the state vector.

References: slicing partitions the sum over the sliced indices (Gray & Kourtis, Quantum 5, 410
(2021)), so any order of visiting slices gives the same total; values against the numpy state
vector and the einsum reference of ``tests/conftest.py``.
"""

import numpy as np
import pytest

from contraction.circuits.random_instances import grid_architecture, random_instance
from contraction.circuits.textbook import qft
from contraction.execution.executor import contract_array
from contraction.execution.reuse import SliceContractor
from contraction.execution.statevector import state_vector
from contraction.network.builder import build_structure, tensor_arrays
from contraction.planning.options import PlannerOptions
from contraction.planning.search import find_plan
from contraction.planning.slice_reuse import reuse_plan

from .conftest import einsum_state, random_bitstrings


def _sliced(structure, cap=2 ** 10):
    plan = find_plan(structure, PlannerOptions(budget_seconds=1.0, max_elements=cap))
    assert plan.nslices > 1
    return plan.tree(structure)


@pytest.mark.parametrize("budget", [0, 2 ** 10, 2 ** 16])
def test_slices_with_kept_intermediates_sum_to_the_amplitude(budget, rng):
    c = random_instance(grid_architecture(4, 5, 10), 1, gates="discrete")
    s = build_structure(c)
    tree = _sliced(s)
    psi = state_vector(c)
    for bits in random_bitstrings(rng, 20, 2):
        arrays = tensor_arrays(s, c, bits)
        plan = reuse_plan(tree, budget)
        sc = SliceContractor(tree, arrays, plan)
        total = sum(complex(sc.contract(i)) for i in range(tree.nslices))
        assert abs(total - psi[int(bits, 2)]) < 1e-12
        # the work model is exact: multiply-adds run = the predicted share of the plain total
        plain = sum(st.madds for st in sc.program.steps) * tree.nslices
        assert sc.madds_done == pytest.approx(plan.work_share * plain, rel=1e-12)
        if budget:
            assert plan.kept and plan.work_share < 0.95        # something is reused on this network
        else:
            assert not plan.kept and plan.work_share == 1.0


def test_batch_and_open_outputs_with_reuse(rng):
    c = random_instance(grid_architecture(4, 5, 10), 2, gates="haar")
    psi = einsum_state(c)
    bits = random_bitstrings(rng, 20, 8)
    for opens in ((), (3, 7)):
        s = build_structure(c, batch=8, open_qubits=opens)
        tree = _sliced(s, 2 ** 12)
        arrays = tensor_arrays(s, c, bits)
        sc = SliceContractor(tree, arrays, reuse_plan(tree, 2 ** 14))
        total = sum(sc.contract(i) for i in range(tree.nslices))
        assert np.allclose(total, contract_array(tree, arrays), atol=1e-14)
        for k, b in enumerate(bits):
            if not opens:
                assert abs(total[k] - psi[int(b, 2)]) < 1e-12
                continue
            for x in (0, 1):
                for y in (0, 1):
                    full = list(b)
                    full[3], full[7] = str(x), str(y)
                    assert abs(total[k, x, y] - psi[int("".join(full), 2)]) < 1e-12


def test_any_split_of_the_slice_range_covers_every_slice_once():
    # tasks get contiguous runs of slice numbers; each run keeps its own intermediates
    # the QFT after a Hadamard layer: its controlled phases then act on superpositions (on |0...0> alone
    # they cost nothing), so the network needs slicing at 2^6
    c = qft(12, hadamards_first=True)
    s = build_structure(c)
    tree = _sliced(s, 2 ** 6)
    arrays = tensor_arrays(s, c, "101100111000")
    whole = contract_array(tree, arrays)
    plan = reuse_plan(tree, 2 ** 12)
    runs = [range(0, 3), range(3, tree.nslices)]
    parts = []
    for r in runs:
        sc = SliceContractor(tree, arrays, plan)
        parts.append(sum(complex(sc.contract(i)) for i in r))
    assert abs(sum(parts) - complex(whole)) < 1e-13
    assert abs(complex(whole) - state_vector(c)[int("101100111000", 2)]) < 1e-12
    # the slice numbering maps one to one onto cotengra's
    sc = SliceContractor(tree, arrays, plan)
    assert sorted(sc.tree_slice(i) for i in range(tree.nslices)) == list(range(tree.nslices))
