"""The arena that holds a slice's large arrays: contractions with every array placed in it give the
state vector's amplitudes, no two arrays alive at the same step share a byte, and what a slice returns
is not overwritten by the next one.

References: amplitudes against the numpy state vector (Nielsen & Chuang, Quantum Computation and
Quantum Information, 2010, §4.2: gates applied as matrices to the state); slicing sums slices exactly
(Gray & Kourtis, Quantum 5, 410 (2021)). The placement rule itself is the project's promise, checked
here by brute force over every pair of arrays.
"""

import gc

import numpy as np
import pytest

from contraction.circuits.random_instances import grid_architecture, random_instance
from contraction.execution.arena import _lifetimes, plan_arena
from contraction.execution.pairwise import program_for
from contraction.execution.reuse import SliceContractor
from contraction.execution.statevector import state_vector
from contraction.network.builder import build_structure, tensor_arrays
from contraction.planning.options import PlannerOptions
from contraction.planning.search import find_plan
from contraction.planning.slice_reuse import reuse_plan

from .conftest import random_bitstrings


def _tree(circuit, cap, **kw):
    s = build_structure(circuit, **kw)
    plan = find_plan(s, PlannerOptions(budget_seconds=1.0, max_elements=cap))
    assert plan.nslices > 1
    return s, plan.tree(s)


@pytest.mark.parametrize("keep", [0, 2 ** 14])
def test_every_array_in_the_arena_gives_the_state_vector_amplitudes(keep, rng):
    c = random_instance(grid_architecture(4, 5, 10), 4, gates="haar")
    s, tree = _tree(c, 2 ** 10)
    psi = state_vector(c)
    for bits in random_bitstrings(rng, 20, 3):
        sc = SliceContractor(tree, tensor_arrays(s, c, bits), reuse_plan(tree, keep), arena_min_bytes=0)
        assert sc.arena.plan.offsets                    # the arrays are in the arena indeed
        values = [complex(sc.contract(i)) for i in range(tree.nslices)]
        assert abs(sum(values) - psi[int(bits, 2)]) < 1e-12
        again = [complex(sc.contract(i)) for i in range(tree.nslices)]   # same places, same values
        assert again == values


def test_no_two_arrays_alive_at_one_step_overlap():
    c = random_instance(grid_architecture(5, 5, 12), 1, gates="discrete")
    s, tree = _tree(c, 2 ** 12)
    prog = program_for(tree)
    kept = set(list(range(len(prog.steps)))[::7])
    for itemsize in (8, 16):
        plan = plan_arena(prog, kept, itemsize, min_bytes=0)
        items = _lifetimes(prog, kept, itemsize, 0)
        assert len(plan.offsets) == len(items) > 0
        spans = [(s0, e0, plan.offsets[key], plan.offsets[key] + nb) for s0, e0, nb, key in items]
        for i, (s1, e1, lo1, hi1) in enumerate(spans):
            assert hi1 <= plan.nbytes
            for s2, e2, lo2, hi2 in spans[i + 1:]:
                if s1 <= e2 and s2 <= e1:                # alive together: disjoint bytes
                    assert hi1 <= lo2 or hi2 <= lo1
        assert plan.live_peak_bytes <= plan.nbytes


def test_a_returned_slice_is_the_callers_own(rng):
    c = random_instance(grid_architecture(4, 5, 10), 2, gates="haar")
    s, tree = _tree(c, 2 ** 10, open_qubits=(3, 7, 11))
    sc = SliceContractor(tree, tensor_arrays(s, c, "0" * 20), arena_min_bytes=0)
    first = sc.contract(0)
    kept = first.copy()
    sc.contract(1)
    assert np.array_equal(first, kept)
    assert not sc.arena.holds(first)


def test_a_kept_mapping_serves_one_arena_at_a_time(monkeypatch):
    from contraction.execution import arena as arena_module

    monkeypatch.setattr(arena_module, "_keep_idle", True)
    monkeypatch.setattr(arena_module, "_idle", [])
    plan = arena_module.ArenaPlan({(0, "out"): 0}, 8192, 8192)
    a, b = arena_module.Arena(plan), arena_module.Arena(plan)
    assert not np.may_share_memory(a._bytes, b._bytes)             # both alive: two mappings
    address = a._bytes.ctypes.data
    del a
    gc.collect()
    c = arena_module.Arena(plan)                                      # a's mapping, now free, is reused
    assert c._bytes.ctypes.data == address
    assert not np.may_share_memory(c._bytes, b._bytes)
    d = arena_module.Arena(plan)                                      # nothing idle: a new one
    assert not np.may_share_memory(d._bytes, c._bytes) and not np.may_share_memory(d._bytes, b._bytes)


@pytest.mark.parametrize("rows,cols,cycles,cap", [(4, 5, 10, 2 ** 8), (5, 5, 12, 2 ** 12), (4, 6, 10, None)])
def test_a_plans_peak_covers_what_the_executor_holds(rows, cols, cycles, cap):
    """The peak a plan records (and the memory cap is checked against) counts what the executor holds
    at once — inputs, live intermediates, a step's output and its rearranged copies — so it is never
    below the arena's busiest step nor below cotengra's own peak of the live intermediates."""
    from contraction.planning.plan import executor_peak_elements, plan_from_tree

    circuit = random_instance(grid_architecture(rows, cols, cycles), 3, gates="discrete")
    s = build_structure(circuit)
    tree = find_plan(s, PlannerOptions(budget_seconds=1.0, max_elements=cap, parallel=False)).tree(s)
    peak = executor_peak_elements(tree)
    assert plan_from_tree(tree, s, {}).peak_elements == peak
    arena = plan_arena(program_for(tree), set(), 16, min_bytes=0)
    assert peak * 16 >= arena.live_peak_bytes and peak >= tree.peak_size()
