"""Planning stays within its time budget and says when a cap cannot be met.

The circuits are generated from their textbook definitions (see contraction/textbook_circuits.py for
the sources). The time bound itself (budget + 10 %) is measured by tests/benchmarks/bench_scale53.py,
not asserted here: tests never pass or fail on wall-clock time.
"""


import pytest

from contraction.circuits.textbook import qft, quantum_volume, ripple_carry_adder
from contraction.errors import MemoryLimitError
from contraction.execution.amplitudes import amplitudes
from contraction.execution.statevector import state_vector
from contraction.network.builder import build_structure
from contraction.network.simplify import simplify_structure
from contraction.planning.estimate import estimate
from contraction.planning.options import PlannerOptions
from contraction.planning.rates import NOMINAL_RATE
from contraction.planning.search import find_plan


@pytest.mark.slow
def test_estimate_of_a_wide_circuit_returns_within_its_budget():
    """A wide network (40-qubit QFT after a Hadamard layer, all-to-all controlled phases on
    superpositions) answers with an estimate or an honest "does not fit" naming its figures — it does
    not search on past its budget."""
    try:
        est = estimate(qft(40, hadamards_first=True), 1, engine="single", rate=NOMINAL_RATE,
                       planner=PlannerOptions(budget_seconds=4.0, parallel=2))
        assert est.madds > 0
    except MemoryLimitError as exc:                     # an honest "does not fit", with numbers
        assert "elements" in str(exc)


def test_simplification_keeps_amplitudes_exact():
    """The structure-only steps are the first steps of the path: amplitudes of a ripple-carry adder
    (Cuccaro et al. 2004: a = 1…1, b = 0101… gives b + a) and a quantum-volume circuit equal the
    state vector's."""
    add = ripple_carry_adder(4)
    psi = state_vector(add)
    top = format(int(abs(psi).argmax()), "09b")
    run = amplitudes(add, [top], engine="single", planner=PlannerOptions(budget_seconds=0.5))
    assert abs(run.results[0].amplitude - psi[int(top, 2)]) < 1e-12
    qv = quantum_volume(10, 6, seed=3)
    psi = state_vector(qv)
    bits = ["0110100101", "1111100000"]
    run = amplitudes(qv, bits, engine="single", planner=PlannerOptions(budget_seconds=0.5))
    for r in run.results:
        assert abs(r.amplitude - psi[int(r.bitstring, 2)]) < 1e-12


def test_simplified_network_is_smaller_and_its_path_is_complete():
    """A contraction tree of N tensors has N - 1 pairwise contractions (a binary tree with N leaves,
    common practice): the fixed steps and the searched ones together are exactly that many."""
    s = build_structure(quantum_volume(12, 8, seed=1))
    red = simplify_structure(s)
    assert red.num_tensors < s.num_tensors
    plan = find_plan(s, PlannerOptions(budget_seconds=0.5))
    assert len(plan.ssa_path) == s.num_tensors - 1            # one path over the whole network
    assert plan.options["tensors_after_simplify"] == red.num_tensors


def test_local_workers_share_the_memory_cap():
    """Two local processes contract slices side by side, each holding its own intermediates: each
    contraction is planned within half the cap, so the run stays within it (common practice)."""
    from contraction.circuits.random_instances import grid_architecture, random_instance

    c = random_instance(grid_architecture(4, 5, 8), 3)
    bits = ["0" * 20]
    opts = PlannerOptions(budget_seconds=0.5)
    one = amplitudes(c, bits, engine="single", planner=opts, workers=1)
    cap = one.plan.peak_bytes("complex128")                 # what one unsliced contraction needs
    two = amplitudes(c, bits, engine="single", planner=opts, workers=2, memory_bytes=cap)
    assert 2 * two.plan.peak_bytes("complex128") <= cap
    assert abs(two.results[0].amplitude - state_vector(c)[0]) < 1e-12


@pytest.fixture
def search_deadline(monkeypatch) -> dict:
    """The hyper-optimized search replaced by a stand-in that records the seconds it was given
    (``["seconds"]``) and finds nothing, so the greedy tree is kept (and not refined: these tests are
    about the search's share of the time, and a refinement would use the rest of a 100 s budget)."""
    import time

    from contraction.planning import search

    seen: dict = {}

    def fake_search(inputs, output, sizes, options, methods, deadline, target, width_log2, grace=1.0, t0=0.0):
        seen["seconds"] = deadline - time.perf_counter()
        return None, 0, []

    monkeypatch.setattr(search, "_search", fake_search)
    monkeypatch.setattr(search, "_refined", lambda tree, *args: tree)
    return seen


def test_a_search_takes_only_the_time_its_greedy_tree_is_worth(search_deadline):
    """A network whose greedy tree fits the memory target is searched for at most its multiply-adds over
    SEARCH_PAYBACK_MADDS_PER_SECOND seconds, however large the budget (a 20-qubit batch of 4 spent 4.1 s
    planning a 0.02 s contraction under a 5 s budget); one that must be sliced gets the budget."""
    from contraction.circuits.random_instances import grid_architecture, random_instance
    from contraction.planning import options, search

    circ = random_instance(grid_architecture(4, 5, 10), 1, gates="discrete")
    s = build_structure(circ, batch=4)
    seen = search_deadline
    tree = options.quick_tree(s)
    worth = options.search_seconds_worth(tree, None)
    assert 0 < worth < 100                               # greedy cost above the floor, far below the budget
    # a plan that will run once per bitstring of a large request is worth as many times the search
    assert options.search_seconds_worth(tree, None, runs=2000) == pytest.approx(2000 * worth)
    search.find_plan(s, PlannerOptions(budget_seconds=1000.0, simplify=True))
    assert "seconds" in seen and seen["seconds"] <= 0.9 * 2 * worth + 0.5   # find_plan's greedy has more repeats
    assert options.planning_seconds(s, PlannerOptions(budget_seconds=1000.0)) < 2 * worth + 1.0
    # a target the greedy tree does not fit: the search is worth the whole budget
    assert options.search_seconds_worth(tree, tree.max_size() / 4) == float("inf")
    seen.clear()
    search.find_plan(s, PlannerOptions(budget_seconds=20.0, max_elements=tree.max_size() / 4))
    assert seen["seconds"] > 0.9 * search.SEARCH_SHARE * 20.0 - 1.0


def test_a_plan_searched_ahead_of_time_uses_the_whole_budget(search_deadline):
    """``veramp plan`` (``whole_budget``) searches for the budget it was given, however cheap the greedy
    tree, above the floor below which no search pays; so does a plan a request will run a million times."""
    from contraction.circuits.random_instances import grid_architecture, random_instance
    from contraction.planning import options, search

    s = build_structure(random_instance(grid_architecture(4, 5, 10), 1, gates="discrete"), batch=4)
    seen = search_deadline
    search.find_plan(s, PlannerOptions(budget_seconds=100.0, whole_budget=True))
    assert seen["seconds"] > 0.9 * search.SEARCH_SHARE * 100.0 - 1.0
    assert options.planning_seconds(s, PlannerOptions(budget_seconds=100.0, whole_budget=True)) == 100.0
    seen.clear()
    search.find_plan(s, PlannerOptions(budget_seconds=100.0, expected_runs=10 ** 6))
    assert seen["seconds"] > 0.9 * search.SEARCH_SHARE * 100.0 - 1.0


def test_a_pool_gives_way_to_one_worker_with_the_whole_cap_when_that_is_predicted_faster(monkeypatch):
    # the project's own rule (no outside source): a pool splits the memory cap, so a stored plan that
    # fits the whole cap but not a share would be sliced further at any cost; the choice compares the
    # pool with one worker holding the whole cap, from stored plans only, and takes the faster
    from dataclasses import replace

    from contraction.circuits.random_instances import grid_architecture, random_instance
    from contraction.execution import amplitudes as amp
    from contraction.planning.engine_choice import choose
    from contraction.planning.store import MemoryPlanStore

    c = random_instance(grid_architecture(4, 5, 10), 1, gates="haar")
    plan = find_plan(build_structure(c), PlannerOptions(budget_seconds=1.0, seed=0))
    store = MemoryPlanStore()
    store.put(plan)
    cap = plan.peak_bytes("complex128") * 1.1
    kw = dict(engine="single", dtype="complex128", rate=None, memory_bytes=cap, open_qubits=(), bitstrings=None)
    alone = choose(c, 1, store=store, search=False, workers=1, **kw)
    assert alone.chosen.plan.nslices == plan.nslices               # the stored plan, as it is
    slow_pool = replace(alone, chosen=replace(alone.chosen, seconds=alone.chosen.seconds * 1e6))
    fast_pool = replace(alone, chosen=replace(alone.chosen, seconds=alone.chosen.seconds / 2))
    picked = amp._one_worker(c, slow_pool, store=store, **kw)
    assert picked is not None and picked.chosen.seconds == alone.chosen.seconds
    assert amp._one_worker(c, fast_pool, store=store, **kw) is None
    assert amp._one_worker(c, slow_pool, store=None, **kw) is None      # nothing stored to compare with
    # through amplitudes(): a pool whose choice is predicted slower runs on one worker, with the values
    # of the numpy state vector (the reference)
    psi = state_vector(c)
    seen = []
    original = amp.choose

    def pooled_is_slow(*a, **k):
        ch = original(*a, **k)
        if k.get("workers", 1) > 1:
            return replace(ch, chosen=replace(ch.chosen, seconds=ch.chosen.seconds * 1e6))
        return ch

    monkeypatch.setattr(amp, "choose", pooled_is_slow)
    run = amplitudes(c, ["0" * 20, "1" * 20], dtype="complex128", engine="single", plan_store=store,
                     memory_bytes=cap, workers=2, planner=PlannerOptions(budget_seconds=0.5, seed=0),
                     on_choice=seen.append)
    assert "one worker with the whole memory cap" in run.reason and seen[0].reason == run.reason
    for r in run.results:
        assert abs(r.amplitude - psi[int(r.bitstring, 2)]) < 1e-10
