"""Batched contractions, open-qubit blocks, marginals and the engine choice.

References outside the batching code: the einsum reference of ``tests/conftest.py`` (one
``np.einsum`` per unfused gate, a different code path from the engine's transpose-and-multiply state
vector), the textbook GHZ state (Nielsen & Chuang 2010, section 1.3.6: (|0...0> + |1...1>)/sqrt 2,
so every k-qubit marginal is 1/2 on 0...0 and 1...1), and normalisation (sum of a marginal = 1 for a
unitary circuit).
"""

from __future__ import annotations

import numpy as np
import pytest

from contraction.circuits.qasm_reader import read_qasm
from contraction.circuits.random_instances import grid_architecture, random_instance
from contraction.execution.amplitudes import amplitudes
from contraction.execution.blocks import block_amplitudes, light_cone, marginal_probabilities
from contraction.execution.statevector import state_vector
from contraction.network.builder import build_structure
from contraction.planning.engine_choice import Option, batch_candidates, choose, chunk_schedule, scheduled
from contraction.planning.options import PlannerOptions
from contraction.planning.store import MemoryPlanStore

from .conftest import FAST_PLANNER, einsum_state, random_bitstrings


@pytest.fixture(scope="module")
def small():
    return random_instance(grid_architecture(3, 4, 8), seed=5)          # 12 qubits, Haar gates


@pytest.fixture(scope="module")
def medium():
    return random_instance(grid_architecture(4, 5, 8), seed=2)          # 20 qubits


def _rel(a, b) -> float:
    return abs(a - b) / abs(b)


def test_reference_matches_engine_state_vector(small):
    assert np.max(np.abs(einsum_state(small) - state_vector(small))) < 1e-12


def test_batched_equals_single_equals_reference_with_duplicates_in_order(small, rng):
    psi = einsum_state(small)
    bits = random_bitstrings(rng, 12, 40)
    bits = bits + bits[:7] + [bits[3]] * 3                  # repeats, in scattered positions
    store = MemoryPlanStore()
    seen: list = []
    batch = amplitudes(small, bits, engine="batch", planner=FAST_PLANNER, plan_store=store, on_results=seen.extend)
    single = amplitudes(small, bits, engine="single", planner=FAST_PLANNER, plan_store=store)
    assert batch.engine == "batch" and batch.batch > 1 and batch.chunks < 40
    assert [r.bitstring for r in batch.results] == bits == [r.bitstring for r in single.results]
    # every distinct bitstring computed exactly once, streamed as chunks finished
    assert sorted(r.bitstring for r in seen) == sorted(set(bits))
    for rb, rs in zip(batch.results, single.results):
        ref = psi[int(rb.bitstring, 2)]
        assert _rel(rb.amplitude, ref) < 1e-10 and _rel(rs.amplitude, ref) < 1e-10
    assert batch.results[3].amplitude == batch.results[-1].amplitude == batch.results[-2].amplitude


def test_batch_structure_key_depends_on_batch_size(small):
    keys = {build_structure(small).key, build_structure(small, batch=8).key, build_structure(small, batch=16).key}
    assert len(keys) == 3
    other = random_instance(grid_architecture(3, 4, 8), seed=99)         # same architecture, other values
    assert build_structure(other, batch=8).key == build_structure(small, batch=8).key


def test_batched_workers_and_complex64(medium, rng):
    psi = state_vector(medium)
    bits = random_bitstrings(rng, 20, 24)
    r = amplitudes(medium, bits, engine="batch", planner=FAST_PLANNER, workers=2)
    assert max(_rel(x.amplitude, psi[int(x.bitstring, 2)]) for x in r.results) < 1e-10
    r64 = amplitudes(medium, bits, engine="batch", dtype="complex64", planner=FAST_PLANNER)
    # complex64: 1e-5 relative to max(|a|, 2^-n/2) (float32 has 24 mantissa bits; common practice)
    floor = 2.0 ** (-20 / 2)
    assert max(abs(x.amplitude - psi[int(x.bitstring, 2)]) / max(abs(psi[int(x.bitstring, 2)]), floor)
               for x in r64.results) < 1e-5


def test_open_qubit_groups_share_one_contraction(small, rng):
    psi = state_vector(small)
    fixed = random_bitstrings(rng, 12, 3)
    open_q = (1, 6, 10)
    bits = []
    for f in fixed:                                          # 3 groups x 8 values of the open qubits
        for i in range(8):
            b = list(f)
            for j, q in enumerate(open_q):
                b[q] = "01"[(i >> (2 - j)) & 1]
            bits.append("".join(b))
    rng.shuffle(bits)
    r = amplitudes(small, bits, engine="single", open_qubits=open_q, planner=FAST_PLANNER)
    assert r.chunks == 3                                     # one contraction per group, not per bitstring
    assert [x.bitstring for x in r.results] == bits
    assert max(_rel(x.amplitude, psi[int(x.bitstring, 2)]) for x in r.results) < 1e-10


def test_block_order_is_documented_order(small):
    psi = state_vector(small)
    fixed = "101100111010"
    qubits = (7, 2, 11)
    for engine in ("single", "statevector"):
        block = block_amplitudes(small, qubits, fixed, engine=engine, planner=FAST_PLANNER)
        assert block.values.shape == (8,)
        for i, v in enumerate(block.values):
            b = list(fixed)
            for j, q in enumerate(qubits):                   # first listed qubit = most significant bit of i
                b[q] = format(i, "03b")[j]
            assert _rel(v, psi[int("".join(b), 2)]) < 1e-10


@pytest.mark.parametrize("engine", ["statevector", "single"])
def test_marginals_match_state_vector_and_sum_to_one(small, engine):
    p = np.abs(einsum_state(small).reshape((2,) * 12)) ** 2
    qubits = (9, 0, 4)
    m = marginal_probabilities(small, qubits, engine=engine, planner=FAST_PLANNER)
    ref = p.sum(axis=tuple(q for q in range(12) if q not in qubits))     # axes in order 0, 4, 9
    ref = ref.transpose(2, 0, 1).reshape(-1)                              # -> order 9, 0, 4
    assert m.engine == engine
    assert np.max(np.abs(m.values - ref)) < 1e-12
    assert abs(m.values.sum() - 1) < 1e-12
    # summing out the last listed qubit gives the marginal on the first two
    two = marginal_probabilities(small, qubits[:2], engine=engine, planner=FAST_PLANNER)
    assert np.max(np.abs(m.values.reshape(4, 2).sum(axis=1) - two.values)) < 1e-12


def test_ghz_marginals_are_textbook():
    n = 30
    lines = ["OPENQASM 2.0;", 'include "qelib1.inc";', f"qreg q[{n}];", "h q[0];"]
    lines += [f"cx q[{i}],q[{i + 1}];" for i in range(n - 1)]
    ghz = read_qasm("\n".join(lines))
    m = marginal_probabilities(ghz, (3, 17, 29), engine="single", planner=FAST_PLANNER)
    assert np.allclose(m.values, [0.5, 0, 0, 0, 0, 0, 0, 0.5], atol=1e-12)
    # reverse light cone of qubit 3: H, CNOTs 0-1, 1-2, 2-3, and 3-4 (it touches qubit 3; a cone
    # built from the layout cannot tell a control from a target); the 25 later CNOTs are dropped
    assert len(light_cone(ghz, (3,)).gates) == 5


def test_chunk_schedule_follows_the_cost_model():
    # hand-worked: per useful bitstring 64 -> 10/64, 8 -> 2/8, 1 -> 1; then 6 left: 8 -> 2/6 is best
    assert chunk_schedule(70, {1: 1.0, 8: 2.0, 64: 10.0}) == [64, 8]
    assert chunk_schedule(3, {1: 1.0, 8: 20.0}) == [1, 1, 1]
    assert batch_candidates(1) == [] and batch_candidates(1000) == [16, 128, 1024]


def test_predicted_wall_time_shares_tasks_among_workers():
    # the project's own scheduling model (no outside source), hand-worked: ten one-bitstring
    # contractions of 2 s each on two worker processes take 10 s; one unsliced 16-bitstring
    # contraction of 8 s runs on one worker, so two workers do not halve it
    single = Option("single", 2.0, 1.0, 1)
    assert scheduled("single", 10, {1: single}, workers=2).seconds == 10.0
    assert scheduled("single", 10, {1: single}, workers=1).seconds == 20.0
    batch = Option("batch", 8.0, 1.0, 16)
    assert scheduled("batch", 16, {16: batch}, workers=2).seconds == 8.0
    assert scheduled("batch", 32, {16: batch}, workers=2).seconds == 8.0
    assert scheduled("batch", 48, {16: batch}, workers=2).seconds == 12.0


def test_the_state_vector_is_taken_within_its_margin_of_the_fastest_network():
    # the rule itself (no outside source: a design choice, its measured reason beside STATEVECTOR_MARGIN):
    # the lowest prediction wins unless the state vector is within the margin of it
    from contraction.planning.engine_choice import STATEVECTOR_MARGIN, pick_fastest

    sv, batch, single = Option("statevector", 0.90, 1.0), Option("batch", 0.82, 1.0, 4096), Option("single", 30.0, 1.0)
    best, note = pick_fastest([single, batch, sv])
    assert best is sv and "within" in note
    far = Option("statevector", 0.82 * STATEVECTOR_MARGIN * 1.01, 1.0)
    assert pick_fastest([single, batch, far]) == (batch, "")
    assert pick_fastest([single, batch]) == (batch, "")
    assert pick_fastest([Option("statevector", 0.5, 1.0), batch])[1] == ""     # fastest anyway: no note


def test_engine_choice_reasons(medium, small):
    store = MemoryPlanStore()
    c = choose(small, 50, memory_bytes=8 * 2 ** 30)
    assert c.engine == "statevector" and "qubits <=" in c.reason
    # a memory cap below the 20-qubit state vector (3 x 2^20 x 16 bytes) forces the network engines
    c = choose(medium, 64, memory_bytes=2 ** 24, planner=FAST_PLANNER, store=store)
    assert c.engine in ("batch", "single") and "over the cap" in c.reason
    assert set(c.predictions()) >= {"single"} and c.chosen.seconds == min(c.predictions().values())
    with pytest.raises(Exception, match="memory cap"):
        choose(medium, 4, engine="statevector", memory_bytes=2 ** 24)


def test_in_place_state_vector_update_matches_copying_update(small):
    from contraction.circuits.gates import apply_gate
    from contraction.execution.statevector import apply_gate_in_place
    from contraction.network.builder import fused_gates

    ref = np.zeros((2,) * 12, dtype=np.complex128)
    ref[(0,) * 12] = 1
    chunked = ref.copy()
    for g in fused_gates(small):
        ref = apply_gate(ref, g.matrix, g.qubits)
        apply_gate_in_place(chunked, g.matrix, g.qubits, chunk=2 ** 5)   # 128 blocks per gate
    assert np.max(np.abs(chunked - ref)) < 1e-14
    assert np.max(np.abs(chunked.reshape(-1) - einsum_state(small))) < 1e-12


def test_slicing_never_cuts_an_output_index(small, rng):
    """Slices are summed, so a sliced batch index would add different bitstrings' amplitudes; a
    tight memory target must slice inner indices only (and the result stays exact)."""
    from contraction.planning.options import PlannerOptions
    from contraction.planning.search import find_plan

    s = build_structure(small, batch=8, open_qubits=(4,))
    plan = find_plan(s, PlannerOptions(budget_seconds=0.3, max_repeats=4, max_elements=2 ** 6))
    labels = s.labels
    assert plan.nslices > 1 and not {labels[c] for c in plan.sliced} & set(s.output)
    psi = state_vector(small)
    bits = random_bitstrings(rng, 12, 8)
    from contraction.execution.executor import contract_array
    from contraction.network.builder import tensor_arrays

    out = contract_array(plan.tree(s), tensor_arrays(s, small, bits))
    for i, b in enumerate(bits):
        for v in (0, 1):
            x = b[:4] + str(v) + b[5:]
            assert _rel(out[i, v], psi[int(x, 2)]) < 1e-10


def test_unreachable_memory_target_is_an_error_not_a_hang(small):
    from contraction.errors import MemoryLimitError
    from contraction.planning.options import PlannerOptions

    # the output alone holds 8 x 2 = 16 elements, so a target of 8 cannot be met without slicing it
    from contraction.planning.search import find_plan

    # the output alone holds 8 x 2 = 16 elements, so a target of 8 cannot be met without slicing it
    s = build_structure(small, batch=8, open_qubits=(4,))
    with pytest.raises(MemoryLimitError, match="fits the cap|not feasible"):
        find_plan(s, PlannerOptions(budget_seconds=0.2, max_repeats=2, max_elements=2 ** 3))


def test_auto_choice_does_not_charge_a_cheap_network_the_planning_budget():
    """A 25-qubit swap test (Buhrman, Cleve, Watrous & de Wolf, PRL 87, 167902 (2001)): rx rotations
    on two 12-qubit registers, then H, 12 controlled swaps, H on the ancilla. Its network plans in
    milliseconds, so the automatic choice must not pick the 2^25-element state vector because a
    search *could* use the whole budget. Closed form: with |a>, |b> the product states, the amplitude
    of |0>|0…0>|0…0> is ½(a₀b₀ + b₀a₀) = ∏ cos(θ_i/2) and that of |1>|0…0>|0…0> is ½(a₀b₀ − b₀a₀) = 0."""
    from contraction.circuits import gates as G
    from contraction.circuits.model import Circuit, Gate

    rng = np.random.default_rng(1)
    thetas = rng.uniform(0, 1.5, 24)
    gates = [Gate((q + 1,), G.rx(float(t)), "rx") for q, t in enumerate(thetas)] + [Gate((0,), G.H, "h")]
    gates += [Gate((0, 1 + i, 13 + i), G.controlled(G.SWAP), "cswap") for i in range(12)] + [Gate((0,), G.H, "h")]
    circuit = Circuit(25, gates)
    run = amplitudes(circuit, ["0" * 25, "1" + "0" * 24], planner=PlannerOptions(budget_seconds=5.0),
                     plan_store=MemoryPlanStore())
    assert run.engine in ("single", "batch"), run.reason          # a network engine, not the state vector
    assert abs(run.results[0].amplitude - np.prod(np.cos(thetas / 2))) < 1e-13
    assert abs(run.results[1].amplitude) < 1e-15


def test_a_batch_size_order_serves_another_batch_size(small, rng):
    """One batch size's contraction order, sliced anew for another batch size, gives that batch's
    amplitudes. Reference: the numpy state vector (a general-purpose reference library)."""
    from contraction.execution.executor import contract_array
    from contraction.network.builder import tensor_arrays
    from contraction.planning.plan import retarget_plan
    from contraction.planning.search import find_plan

    donor = find_plan(build_structure(small, batch=4), PlannerOptions(budget_seconds=0.3, max_repeats=4))
    s = build_structure(small, batch=32)
    plan = retarget_plan(donor, s, 2 ** 7, 5.0)
    assert plan is not None and plan.network_key == s.key and plan.nslices > 1 and plan.peak_elements > 0
    assert plan.width <= 7 and plan.options["order_of"] == donor.network_key
    psi = state_vector(small)
    bits = random_bitstrings(rng, 12, 32)
    out = contract_array(plan.tree(s), tensor_arrays(s, small, bits))
    for i, b in enumerate(bits):
        assert _rel(out[i], psi[int(b, 2)]) < 1e-10
    # an order of another network does not serve: refused, not misapplied
    assert retarget_plan(donor, build_structure(random_instance(grid_architecture(3, 4, 6), seed=5), batch=32),
                         2 ** 7, 1.0) is None


def test_engine_choice_tries_each_batch_orders_on_the_others(medium):
    """With several batch sizes planned, each one's order is tried on the others and every batch
    size ends with a plan no costlier than what the others' orders gave it within the cap; with
    every plan stored, nothing is tried again (the project's own promise; the values such plans give
    are checked in the test above)."""
    from contraction.planning import engine_choice

    cap_bytes = 2 ** 26
    tried = []
    real = engine_choice.retarget_plan

    def spy(plan, structure, *args, **kw):
        got = real(plan, structure, *args, **kw)
        ok = got is not None and got.peak_elements <= cap_bytes / 16
        tried.append((plan.network_key, structure.key, got.madds if ok else None))
        return got

    store = MemoryPlanStore()
    engine_choice.retarget_plan = spy
    try:
        c = choose(medium, 100, engine="batch", memory_bytes=cap_bytes, store=store,
                   planner=PlannerOptions(budget_seconds=3.0, max_repeats=4))
        first = len(tried)
        # the same request again: every plan comes from the store, nothing is retried
        choose(medium, 100, engine="batch", memory_bytes=cap_bytes, store=store,
               planner=PlannerOptions(budget_seconds=3.0, max_repeats=4))
    finally:
        engine_choice.retarget_plan = real
    assert len(tried) == first
    sizes = sorted(b for b in c.planned if b > 1)
    assert len(sizes) > 1 and first == len(sizes) * (len(sizes) - 1)
    assert all(a != b for a, b, _ in tried)
    for b in sizes:
        offered = [m for _, key, m in tried if key == c.planned[b].contraction.structure.key and m is not None]
        assert all(c.planned[b].plan.madds <= m for m in offered)


def test_engine_choice_shares_the_planning_budget_by_deadline(medium, monkeypatch):
    """The planning budget is for the whole request (the project's promise: planning returns within
    its budget): each contraction size gets an equal part of what is left when its turn comes, so
    time one size leaves unused goes to the next, an overrun shortens the next, and trying orders
    between batch sizes gets what remains. Checked on a scripted clock, not on wall time."""
    from contraction.errors import MemoryLimitError, NoStoredPlan
    from contraction.planning import engine_choice

    clock = {"now": 100.0}
    took = iter([0.0, 6.0, 1.0, 0.5])         # seconds each size's planning takes on the scripted clock
    granted, shared = [], []

    class FakeTime:
        @staticmethod
        def perf_counter():
            return clock["now"]

    def fake_option(circuit, b, dtype, rate, store, planner, *args):
        granted.append((b, planner.budget_seconds))
        clock["now"] += next(took)
        raise NoStoredPlan(f"size {b}")

    def fake_share(*args):
        shared.append(args[-1])

    monkeypatch.setattr(engine_choice, "time", FakeTime)
    monkeypatch.setattr(engine_choice, "network_option", fake_option)
    monkeypatch.setattr(engine_choice, "_share_batch_orders", fake_share)
    with pytest.raises(MemoryLimitError):   # nothing planned in this script, no state vector in 1 MiB
        choose(medium, 100, engine="auto", memory_bytes=2 ** 20, store=MemoryPlanStore(),
               planner=PlannerOptions(budget_seconds=20.0))
    sizes = [b for b, _ in granted]
    assert sizes == [1] + batch_candidates(100)          # four sizes: 1, 2, 16, 128
    reserve = 20.0 * engine_choice.SHARE_ORDERS_FRACTION   # 4 s for trying orders between sizes
    budgets = [g for _, g in granted]
    assert budgets[0] == pytest.approx((20.0 - reserve) / 4)      # 4 s each to start with
    assert budgets[1] == pytest.approx((20.0 - reserve) / 3)      # the first took nothing: 16/3 s
    assert budgets[2] == pytest.approx((20.0 - reserve - 6.0) / 2)  # the second overran its 5.33 s
    assert budgets[3] == pytest.approx(20.0 - reserve - 7.0)
    assert shared == [pytest.approx(20.0 - 7.5)]         # what is left of the whole budget
