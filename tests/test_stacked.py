"""The stacked engine: many bitstrings through one single-amplitude tree, every intermediate stacked over
the distinct restrictions of the bitstrings to the qubits whose projectors it holds.

References outside the stacked code: the einsum reference of ``tests/conftest.py`` (one ``np.einsum``
per unfused gate), the closed form of a product state of ry rotations (Nielsen & Chuang 2010, eq. 4.5:
ry(θ)|0> = cos(θ/2)|0> + sin(θ/2)|1>; a pair of equal CNOTs is the identity), and counting
definitions (a batch of one repeated bitstring costs what one bitstring costs; a batch never costs more
than its bitstrings one by one).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from contraction.circuits.bitstrings import bit_table
from contraction.circuits.qasm_reader import read_qasm
from contraction.circuits.random_instances import grid_architecture, random_instance
from contraction.execution.amplitudes import amplitudes
from contraction.execution.arena import plan_arena
from contraction.execution.pairwise import program_for
from contraction.execution.stacked import (batch_inputs, contract_stacked, row_maps, stacked_madds,
                                           stacked_program)
from contraction.network.builder import build_structure
from contraction.planning.engine_choice import STACKED_MARGIN, STACKED_MIN_SECONDS, choose
from contraction.planning.options import PlannerOptions
from contraction.planning.search import find_plan
from contraction.planning.stacked_cost import projected_qubits, stacked_cost
from contraction.planning.store import MemoryPlanStore

from .conftest import FAST_PLANNER, einsum_state, random_bitstrings


@pytest.fixture(scope="module")
def small():
    return random_instance(grid_architecture(3, 4, 8), seed=5)          # 12 qubits, Haar gates


def _worst(results, psi, floor: float = 0.0) -> float:
    return max(abs(r.amplitude - psi[int(r.bitstring, 2)]) / max(abs(psi[int(r.bitstring, 2)]), floor)
               for r in results)


@pytest.mark.parametrize("cap", [None, 2 ** 5])
def test_stacked_contraction_matches_reference_sliced_or_not(small, rng, cap):
    psi = einsum_state(small)
    s = build_structure(small)
    tree = find_plan(s, PlannerOptions(budget_seconds=0.5, max_repeats=8, max_elements=cap)).tree(s)
    assert (tree.nslices > 1) == (cap is not None)
    bits = random_bitstrings(rng, 12, 29)
    table = bit_table(bits)
    maps = row_maps(program_for(tree), projected_qubits(s), table)
    m, e = contract_stacked(tree, batch_inputs(s, small, table, np.complex128), maps, range(tree.nslices))
    got = np.asarray(m) * 10.0 ** e
    ref = np.array([psi[int(b, 2)] for b in bits])
    assert np.max(np.abs(got - ref) / np.abs(ref)) < 1e-10


def test_stacked_engine_in_order_with_duplicates_workers_and_complex64(small, rng):
    psi = einsum_state(small)
    bits = random_bitstrings(rng, 12, 40)
    bits = bits + bits[:5] + [bits[2]] * 3
    seen: list = []
    run = amplitudes(small, bits, engine="stacked", planner=FAST_PLANNER, on_results=seen.extend)
    assert run.engine == "stacked" and run.batch > 1
    assert [r.bitstring for r in run.results] == bits
    assert sorted(r.bitstring for r in seen) == sorted(set(bits))        # each distinct one computed once
    assert _worst(run.results, psi) < 1e-10
    two = amplitudes(small, bits, engine="stacked", planner=FAST_PLANNER, workers=2)
    assert two.engine == "stacked" and _worst(two.results, psi) < 1e-10
    r64 = amplitudes(small, bits, engine="stacked", dtype="complex64", planner=FAST_PLANNER)
    # complex64: 1e-5 relative to max(|a|, 2^-n/2) (float32 has 24 mantissa bits; common practice)
    assert _worst(r64.results, psi, floor=2.0 ** (-12 / 2)) < 1e-5


def test_rows_below_the_plain_floor_are_contracted_again_on_their_own(fast_planner):
    # ry(3.0) on 40 qubits, CNOT pairs between neighbours (identity): <x|psi> = cos(1.5)^zeros sin(1.5)^ones.
    # All zeros is 9.7e-47, below float32's range; with many ones the amplitude is ordinary.
    n, theta = 40, 3.0
    text = f'OPENQASM 2.0; include "qelib1.inc"; qreg q[{n}]; ry({theta}) q;' + \
        "".join(f"cx q[{i}],q[{i + 1}]; cx q[{i}],q[{i + 1}];" for i in range(n - 1))
    c = read_qasm(text)
    bits = ["0" * n, "1" * n, "1" * 30 + "0" * 10, "01" * 20]
    for dtype, tol in (("complex128", 1e-12), ("complex64", 1e-4)):
        run = amplitudes(c, bits, engine="stacked", dtype=dtype, planner=fast_planner)
        assert run.engine == "stacked"
        for r in run.results:
            ones = r.bitstring.count("1")
            expect = math.cos(theta / 2) ** (n - ones) * math.sin(theta / 2) ** ones
            assert r.amplitude != 0 and abs(r.amplitude.real - expect) / expect < tol


def test_cost_model_counts_what_the_executor_runs(small, rng):
    s = build_structure(small)
    tree = find_plan(s, PlannerOptions(budget_seconds=0.5, max_repeats=8, max_elements=2 ** 5)).tree(s)
    projected = projected_qubits(s)
    single = float(sum(tree.get_flops(p) for p, _, _ in tree.traverse())) * tree.nslices
    for count in (1, 7, 64):
        table = bit_table(random_bitstrings(rng, 12, count))
        cost = stacked_cost(tree, projected, table)
        maps = row_maps(program_for(tree), projected, table)
        assert cost.madds == pytest.approx(stacked_madds(program_for(tree), maps) * tree.nslices)
        # never more than the bitstrings one by one, never less than one of them
        assert single <= cost.madds <= len(set(map(bytes, table))) * single
        # the bound for any bitstrings holds for these, and what the executor holds at one step stays within it
        bound = stacked_cost(tree, projected, None, count)
        assert cost.peak_elements <= bound.peak_elements
        arena = plan_arena(stacked_program(program_for(tree), maps), set(), 16, min_bytes=0)
        assert arena.live_peak_bytes / 16 <= cost.peak_elements
    same = stacked_cost(tree, projected, bit_table(["010101010101"] * 9))
    assert same.madds == pytest.approx(single)                   # one bitstring repeated costs one


def test_automatic_choice_weighs_stacked_chunks_by_what_the_bitstrings_share(rng):
    # 36 qubits: no state vector under the cap
    c = random_instance(grid_architecture(6, 6, 4), seed=3)
    store = MemoryPlanStore()
    opts = PlannerOptions(budget_seconds=1.0, max_repeats=16)
    base = random_bitstrings(rng, 36, 1)[0]
    near = [base[:28] + format(k, "08b") for k in range(256)]        # agreeing on 28 qubits
    far = random_bitstrings(rng, 36, 256)
    single = choose(c, 256, engine="single", store=store, planner=opts, memory_bytes=2 ** 30).chosen
    for bits, most in ((near, 0.5), (far, 1.0)):
        stacked = choose(c, 256, engine="stacked", store=store, planner=opts, memory_bytes=2 ** 30,
                         bitstrings=bits).chosen
        # never more multiply-adds than one by one; bitstrings sharing 28 of 36 qubits share most of them
        assert stacked.engine == "stacked" and stacked.madds <= most * single.madds
        auto = choose(c, 256, engine="auto", store=store, planner=opts, memory_bytes=2 ** 30, bitstrings=bits)
        assert auto.chosen is min(auto.options, key=lambda o: o.seconds)
        offered = any(o.engine == "stacked" for o in auto.options)
        others = min(o.seconds for o in auto.options if o.engine in ("single", "batch"))
        assert offered == (others >= STACKED_MIN_SECONDS and stacked.seconds <= STACKED_MARGIN * single.seconds)
        assert offered or "stacked chunks" in auto.reason
    run = amplitudes(c, near[:64], engine="stacked", planner=opts, plan_store=store)
    assert run.engine == "stacked"
    # the same amplitudes one by one (a different code path: one contraction per bitstring)
    single = amplitudes(c, near[:64], engine="single", planner=opts, plan_store=store)
    assert max(abs(a.amplitude - b.amplitude) / abs(b.amplitude) for a, b in zip(run.results, single.results)) < 1e-10


def test_stacked_engine_refuses_open_qubits(small):
    from contraction.errors import VerampError

    with pytest.raises(VerampError, match="open qubits"):
        amplitudes(small, ["0" * 12, "1" * 12], engine="stacked", open_qubits=(0,), planner=FAST_PLANNER)
