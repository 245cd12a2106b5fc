"""Planning: slicing, memory caps, plan reuse and plan-store safety, cost-estimate consistency.

Checks: sliced and unsliced contractions are the same sum (slicing partitions the sum over an
index — Gray & Kourtis, Quantum 5, 410 (2021)); values are compared with the state-vector engine,
itself checked against the einsum reference of ``tests/conftest.py``; FLOPs = 8 x complex multiply-adds (one complex multiply = 4 real multiplies + 2 adds,
one complex add = 2 adds: common practice); bytes = elements x itemsize (numpy dtype sizes).
"""

import dataclasses
import json
import math
import time

import pytest

from contraction.circuits.random_instances import grid_architecture, random_instance
from contraction.errors import Cancelled, MemoryLimitError, PlanError
from contraction.execution.amplitudes import amplitudes
from contraction.execution.executor import contract_scalar
from contraction.execution.statevector import state_vector
from contraction.network.builder import build_structure, tensor_arrays
from contraction.planning.capped_plans import network_plan
from contraction.planning.estimate import estimate, parse_bytes
from contraction.planning.options import PlannerOptions
from contraction.planning.plan import Plan
from contraction.planning.rates import MachineRate
from contraction.planning.search import find_plan
from contraction.planning.store import DirectoryPlanStore, MemoryPlanStore

from .conftest import random_bitstrings

RATE = MachineRate(1e10, 0.5, 1e-8, 2e-5, 2e-8, 1, 0.0)  # fixed rates: estimates are deterministic


@pytest.fixture(scope="module")
def circuit():
    return random_instance(grid_architecture(4, 4, 10), seed=3)


def test_sliced_equals_unsliced_and_state_vector(circuit, rng):
    s = build_structure(circuit)
    unsliced = find_plan(s, PlannerOptions(budget_seconds=0.3, max_repeats=4))
    sliced = find_plan(s, PlannerOptions(budget_seconds=0.3, max_repeats=4, max_elements=2 ** 6))
    assert sliced.nslices > 1 and unsliced.nslices == 1
    assert sliced.width <= 6
    # a sliced plan repeats work, never saves it: its total is at least its own unsliced cost
    assert sliced.madds >= sliced.madds_unsliced and sliced.slicing_overhead >= 1.0
    psi = state_vector(circuit)
    for b in random_bitstrings(rng, 16, 4):
        arrays = tensor_arrays(s, circuit, b)
        a1 = contract_scalar(unsliced.tree(s), arrays)
        a2 = contract_scalar(sliced.tree(s), arrays)
        assert abs(a1 - a2) <= 1e-12 * abs(a1)
        assert abs(a1 - psi[int(b, 2)]) <= 1e-10 * abs(a1)


def test_parallel_slices_match_and_report_progress(circuit):
    s = build_structure(circuit)
    seen = []
    run_seq = amplitudes(circuit, ["0" * 16], engine="single",
                         planner=PlannerOptions(budget_seconds=0.3, max_repeats=4))
    store = MemoryPlanStore()
    run_par = amplitudes(circuit, ["0" * 16], engine="single",
                         planner=PlannerOptions(budget_seconds=0.3, max_repeats=4, max_elements=2 ** 5),
                         workers=2, plan_store=store, progress=seen.append)
    assert run_par.plan.nslices > 1
    assert abs(run_seq.results[0].amplitude - run_par.results[0].amplitude) <= 1e-12 * abs(run_seq.results[0].amplitude)
    # progress counts tasks (runs of slices): every one reported, the last one complete
    assert seen and seen[-1].done == seen[-1].total >= 2 and [p.done for p in seen] == list(range(1, seen[-1].total + 1))
    assert run_par.plan.width <= 5
    assert s.key == run_par.plan.network_key


def test_cancellation_stops_the_contraction(circuit):
    s = build_structure(circuit)
    plan = find_plan(s, PlannerOptions(budget_seconds=0.2, max_repeats=2, max_elements=2 ** 5))
    calls = []

    def cancelled():
        calls.append(1)
        return len(calls) > 2

    with pytest.raises(Cancelled):
        contract_scalar(plan.tree(s), tensor_arrays(s, circuit, "0" * 16), cancelled=cancelled)


def test_cancelling_a_pool_run_stops_the_tasks_its_workers_hold(circuit):
    """A cancelled run on local worker processes does not leave them contracting the tasks they
    hold (two tasks of 200,000 slices each, tens of seconds): within seconds of the cancel no worker
    process of the run is alive."""
    import multiprocessing as mp
    import time

    from contraction.execution.slices import ProcessRunner, Task

    s = build_structure(circuit)
    contraction = network_plan(s, None, PlannerOptions(budget_seconds=0.2, max_repeats=2))
    arrays = tensor_arrays(s, circuit, "0" * 16)
    tasks = [Task(arrays, [0] * 200_000) for _ in range(2)]
    before = set(mp.active_children())
    t0 = time.perf_counter()
    with pytest.raises(Cancelled):
        ProcessRunner(2).run(contraction, tasks, lambda k, r: None, cancelled=lambda: time.perf_counter() - t0 > 1.0)
    deadline = time.perf_counter() + 5.0
    while set(mp.active_children()) - before and time.perf_counter() < deadline:
        time.sleep(0.1)
    assert not set(mp.active_children()) - before


OWNER_SCRIPT = """
import concurrent.futures as cf, os, sys, time
from contraction.execution.slices import prepare_contraction_process, worker_context

def busy(path):
    with open(path + ".tmp", "w") as fh:
        fh.write(str(os.getpid()))
    os.replace(path + ".tmp", path)
    t = time.time()
    while time.time() - t < 120:          # a long task, computing (not waiting on the pool)
        sum(range(10000))

if __name__ == "__main__":
    pool = cf.ProcessPoolExecutor(1, mp_context=worker_context(), initializer=prepare_contraction_process,
                                  initargs=(os.getpid(),))
    pool.submit(busy, sys.argv[1]).result()
"""


def test_a_worker_ends_when_the_process_it_works_for_is_killed(tmp_path):
    """A contraction worker whose owner is killed outright (SIGKILL: no clean-up of the owner runs)
    ends within seconds instead of computing its task to the end (common practice for worker pools;
    no outside source). The worker is alive while its owner is."""
    import os
    import signal
    import subprocess
    import sys

    from contraction.execution.slices import _gone

    script, pidfile = tmp_path / "owner.py", tmp_path / "worker.pid"
    script.write_text(OWNER_SCRIPT)
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(p for p in sys.path if p)}
    owner = subprocess.Popen([sys.executable, str(script), str(pidfile)], env=env)
    worker = None
    try:
        t0 = time.monotonic()
        while not pidfile.exists() and time.monotonic() - t0 < 60 and owner.poll() is None:
            time.sleep(0.1)
        worker = int(pidfile.read_text())
        time.sleep(1.5)
        assert not _gone(worker)                       # working while its owner lives
        owner.kill()
        owner.wait()
        t0 = time.monotonic()
        while not _gone(worker) and time.monotonic() - t0 < 20:
            time.sleep(0.2)
        assert _gone(worker)
    finally:
        owner.kill()
        if worker is not None and not _gone(worker):
            os.kill(worker, signal.SIGKILL)


def test_memory_cap_is_never_exceeded(circuit):
    s = build_structure(circuit)
    with pytest.raises(MemoryLimitError):
        network_plan(s, None, PlannerOptions(budget_seconds=0.2, max_repeats=2), memory_bytes=64)
    # the inputs alone take ~14 kB; a 24 kB cap forces slicing and is honoured
    plan = network_plan(s, None, PlannerOptions(budget_seconds=0.2, max_repeats=2), memory_bytes=24_000).plan
    assert plan.nslices > 1
    assert plan.peak_bytes("complex128") <= 24_000


def test_a_plan_over_the_cap_is_sliced_further_not_searched_again(circuit, monkeypatch):
    # reference: numpy's state vector of the same circuit. The first search is aimed at half the cap
    # (not a quarter), so its plan peaks over the cap with its copies counted; the retry must slice that
    # plan further (more sliced indices) instead of a second search with no budget left
    import contraction.planning.capped_plans as capped

    s = build_structure(circuit)
    memory = 24_000
    searches = []
    real = capped.find_plan
    monkeypatch.setattr(capped, "intermediate_target", lambda options, cap: cap / 2)
    monkeypatch.setattr(capped, "find_plan", lambda st, o: searches.append(o.max_elements) or real(st, o))
    first = real(s, PlannerOptions(budget_seconds=0.2, max_repeats=2, max_elements=memory / 16 / 2))
    assert first.peak_bytes("complex128") > memory * capped.PLAN_SHARE_OF_CAP   # the case under test
    plan = capped.network_plan(s, None, PlannerOptions(budget_seconds=0.2, max_repeats=2), memory_bytes=memory).plan
    assert len(searches) == 1
    assert plan.options.get("sliced_further") is True
    assert plan.peak_bytes("complex128") <= memory * capped.PLAN_SHARE_OF_CAP
    psi = state_vector(circuit)
    tree = plan.tree(s)
    for k in (0, 5, 1234):
        bits = format(k, "016b")
        assert abs(contract_scalar(tree, tensor_arrays(s, circuit, bits)) - psi[k]) < 1e-12


def test_a_stored_plan_over_a_smaller_cap_is_sliced_further_when_the_search_does_no_better(circuit, monkeypatch):
    # reference: numpy's state vector of the same circuit. A plan stored for a larger cap (here: no cap)
    # does not fit the request's; its order and slices are kept and sliced further, and that plan is
    # used when the request's own search finds nothing within the cap, or nothing cheaper
    import contraction.planning.capped_plans as capped

    s = build_structure(circuit)
    stored = find_plan(s, PlannerOptions(budget_seconds=0.5, max_repeats=8))
    store = MemoryPlanStore()
    store.put(stored)
    memory = stored.peak_bytes("complex128") / 8
    assert store.get(s.key, capped.plan_fit_elements(memory)) is None            # the case under test

    def no_plan(*args):
        raise MemoryLimitError("no plan found within the cap (stand-in search)")

    monkeypatch.setattr(capped, "_searched_plan", no_plan)
    c = capped.network_plan(s, store, PlannerOptions(budget_seconds=0.5, max_repeats=2), memory_bytes=memory)
    plan = c.plan
    assert not c.from_store and plan.options["stored_plan_hash"] == stored.plan_hash
    assert plan.options["sliced_further"] is True and plan.options["stored_madds"] == stored.madds
    assert set(stored.sliced) < set(plan.sliced)
    assert plan.peak_bytes("complex128") <= memory * capped.PLAN_SHARE_OF_CAP
    assert "sliced further" in capped.sliced_further_note(plan)
    assert store.get(s.key, capped.plan_fit_elements(memory)) == plan             # kept for the next request
    psi = state_vector(circuit)
    tree = plan.tree(s)
    for k in (0, 7, 4321):
        assert abs(contract_scalar(tree, tensor_arrays(s, circuit, format(k, "016b"))) - psi[k]) < 1e-12

    # a searched plan cheaper than the stored plan sliced further wins over it
    searched = find_plan(s, PlannerOptions(budget_seconds=0.5, max_repeats=2, max_elements=2 ** 8))
    real = capped._stored_sliced_further
    monkeypatch.setattr(capped, "_searched_plan", lambda *args: searched)
    monkeypatch.setattr(capped, "_stored_sliced_further",
                        lambda *a: dataclasses.replace(real(*a), madds=2 * searched.madds))
    store = MemoryPlanStore()
    store.put(stored)
    assert searched.peak_bytes("complex128") <= memory * capped.PLAN_SHARE_OF_CAP
    assert capped.network_plan(s, store, PlannerOptions(budget_seconds=0.5), memory_bytes=memory).plan == searched

def test_plan_store_hits_across_instances_and_bitstrings(tmp_path, rng):
    arch = grid_architecture(3, 4, 8)
    store = DirectoryPlanStore(tmp_path / "plans")
    opts = PlannerOptions(budget_seconds=0.3, max_repeats=4)
    first = amplitudes(random_instance(arch, 1), random_bitstrings(rng, 12, 2), engine="single",
                       planner=opts, plan_store=store)
    assert not first.plan_cached
    for seed in (2, 3):
        c = random_instance(arch, seed)
        run = amplitudes(c, random_bitstrings(rng, 12, 3), engine="single", planner=opts, plan_store=store)
        assert run.plan_cached and run.plan.plan_hash == first.plan.plan_hash
        psi = state_vector(c)
        for r in run.results:
            assert abs(r.amplitude - psi[int(r.bitstring, 2)]) < 1e-12
    # a new store object over the same directory (a restart) still hits
    again = DirectoryPlanStore(tmp_path / "plans")
    assert again.get(first.plan.network_key) is not None


def test_better_plan_replaces_worse_never_reverse(tmp_path, circuit):
    s = build_structure(circuit)
    plan = find_plan(s, PlannerOptions(budget_seconds=0.3, max_repeats=4))
    worse = dataclasses.replace(plan, madds=plan.madds * 2)
    for store in (MemoryPlanStore(), DirectoryPlanStore(tmp_path)):
        assert store.put(worse)
        assert store.put(plan)                  # better replaces worse
        assert not store.put(worse)             # worse never replaces better
        assert store.get(s.key).madds == plan.madds


def test_tampered_plans_are_detected_and_replanned(tmp_path, circuit):
    s = build_structure(circuit)
    store = DirectoryPlanStore(tmp_path)
    opts = PlannerOptions(budget_seconds=0.3, max_repeats=4)
    plan = network_plan(s, store, opts).plan
    path = tmp_path / f"{s.key}.json"
    doc = json.loads(path.read_text())
    (slot,) = doc
    # 1. edited without fixing the checksum: dropped on load
    doc[slot]["ssa_path"][0] = [0, 0]
    path.write_text(json.dumps(doc))
    assert store.get(s.key) is None
    # 2. edited with a recomputed checksum but an invalid path: rejected by validation, re-planned
    bad = Plan.from_dict(plan.to_dict())
    bad = dataclasses.replace(bad, ssa_path=((0, 1),) + bad.ssa_path[1:-1])
    path.write_text(json.dumps({slot: bad.to_dict()}))
    assert store.get(s.key) is not None
    with pytest.raises(PlanError):
        bad.tree(s)
    again = network_plan(s, store, opts)
    tree2 = again.tree
    assert not again.from_store
    ref = state_vector(circuit)[0]
    assert abs(contract_scalar(tree2, tensor_arrays(s, circuit, "0" * 16)) - ref) < 1e-12
    # 3. garbage file
    path.write_text("not json")
    assert store.get(s.key) is None


def test_plan_json_round_trip(circuit):
    s = build_structure(circuit)
    plan = find_plan(s, PlannerOptions(budget_seconds=0.2, max_repeats=2))
    back = Plan.from_json(plan.to_json())
    assert back == plan
    assert back.tree(s).contraction_cost() == plan.madds
    other = build_structure(random_instance(grid_architecture(4, 4, 11), 1))
    with pytest.raises(PlanError, match="another network"):
        back.tree(other)


@pytest.mark.parametrize("dtype,itemsize", [("complex128", 16), ("complex64", 8)])
def test_estimate_fields_are_consistent(circuit, dtype, itemsize):
    store = MemoryPlanStore()
    est = estimate(circuit, 10, dtype=dtype, engine="single", rate=RATE, plan_store=store,
                   planner=PlannerOptions(budget_seconds=0.2, max_repeats=2))
    plan = store.get(build_structure(circuit).key)
    assert est.flops == 8 * est.madds
    assert est.madds == 10 * est.madds_per_bitstring == 10 * plan.madds
    assert est.peak_bytes == int(plan.peak_elements * itemsize)
    assert est.slices == plan.nslices and est.engine == "single"
    assert est.predicted_seconds > 0
    sv = estimate(circuit, 10, dtype=dtype, engine="statevector", rate=RATE)
    assert sv.engine == "statevector" and sv.flops == 8 * sv.madds
    assert sv.peak_bytes == 3 * 2 ** 16 * itemsize


def test_parse_bytes():
    assert parse_bytes("8GiB") == 8 * 2 ** 30
    assert parse_bytes("512MB") == 512 * 10 ** 6
    assert parse_bytes("1000") == 1000
    with pytest.raises(Exception, match="memory size"):
        parse_bytes("lots")


def test_a_request_builds_the_contraction_tree_once(monkeypatch, fast_planner):
    """The tree is built (and validated against the network) once per contraction size, by the plan
    lookup; the runner uses that tree, it does not rebuild it from the plan. The amplitude is checked
    against the state vector (common practice: the two engines must agree)."""
    circuit = random_instance(grid_architecture(3, 3, 6), seed=4)
    store = MemoryPlanStore()
    amplitudes(circuit, ["0" * 9], engine="single", planner=fast_planner, plan_store=store)
    built = []
    real = Plan.tree

    def counting(self, structure):
        built.append(structure.key)
        return real(self, structure)

    monkeypatch.setattr(Plan, "tree", counting)
    run = amplitudes(circuit, ["101010101", "000000000"], engine="single", planner=fast_planner, plan_store=store)
    assert run.plan_cached and len(built) == 1
    ref = state_vector(circuit)
    assert abs(run.results[0].amplitude - ref[int("101010101", 2)]) < 1e-12


@pytest.mark.parametrize("parallel", [False, 2])
def test_search_progress_is_reported_while_a_plan_is_searched(parallel):
    # Reports come at the start, about once a second, and at the end; the last one carries the
    # returned plan's cost; trial counts never go down (what a progress display needs: common practice).
    from contraction.planning.progress import observe_searches

    s = build_structure(random_instance(grid_architecture(4, 5, 12), 1, gates="discrete"))
    seen = []
    with observe_searches(seen.append):
        plan = find_plan(s, PlannerOptions(budget_seconds=3.0, parallel=parallel))
    assert seen[0].trials == 0 and seen[0].best_madds is None and seen[0].seconds == 0.0
    assert len(seen) >= 3                                   # start, at least one while searching, end
    assert [p.trials for p in seen] == sorted(p.trials for p in seen)
    assert seen[-1].trials == plan.options["trials"] >= 1
    assert seen[-1].best_madds == plan.madds
    assert all(p.budget_seconds == 3.0 for p in seen)
    # outside the context nothing is reported
    count = len(seen)
    find_plan(s, PlannerOptions(budget_seconds=0.5, max_elements=2 ** 22))
    assert len(seen) == count


def test_a_failing_observer_does_not_stop_the_search():
    # a display that breaks must not cost the plan (common practice for callbacks; no outside source)
    from contraction.planning.progress import observe_searches

    def broken(_):
        raise RuntimeError("display gone")

    s = build_structure(random_instance(grid_architecture(4, 4, 8), 1, gates="discrete"))
    with observe_searches(broken):
        plan = find_plan(s, PlannerOptions(budget_seconds=0.5))
    assert plan.madds > 0


@pytest.mark.skipif(not __import__("contraction.planning.search", fromlist=["x"]).kahypar_available(),
                    reason="partition trees need kahypar")
def test_trials_are_sliced_when_partition_trees_come_within_reach_of_the_target(monkeypatch):
    """The greedy tree can be far wider than the search's trees (53 qubits, 14 cycles: 2^44 against
    2^36 for partition trees); scoring trials unsliced there left plans 2.5-4.6x costlier after slicing.
    When the greedy width is over 2^12 above the target, a few partition trees decide whether trials
    are sliced to the target. Checked on a 5x6 grid, 14 cycles, against cotengra's own greedy tree (a
    general-purpose reference library): the probe is never wider than it, and the search gets in-trial
    slicing exactly when the probed width is within 2^12 of the target."""
    from contraction.network.simplify import simplify_structure
    from contraction.planning import options, search

    structure = build_structure(random_instance(grid_architecture(5, 6, 14), 1, gates="discrete"))
    red = simplify_structure(structure)
    greedy = options.quick_tree(structure)
    probed = search._probe_width(red.inputs, red.output, red.size_dict, time.perf_counter() + 10.0)
    assert math.isfinite(probed) and probed <= math.log2(greedy.max_size())

    seen = []
    real = search._keeping_optimizer

    def spy(**kw):
        seen.append(kw["slicing_reconf_opts"])
        return real(**{**kw, "max_repeats": 2})

    monkeypatch.setattr(search, "_keeping_optimizer", spy)
    monkeypatch.setattr(search, "PROBE_MIN_SECONDS", 0.0)            # the 2 s search below is probed too
    target = 2 ** 10
    far = math.log2(target) + search.IN_TRIAL_SLICING_LOG2 + 5          # the greedy width handed in
    opts = PlannerOptions(budget_seconds=5.0, minimize="flops")
    for probe, sliced in ((math.log2(target) + 4, True), (far, False)):
        monkeypatch.setattr(search, "_probe_width", lambda *a, w=probe: w)
        search._search(red.inputs, red.output, red.size_dict, opts, ["greedy", "kahypar"],
                       time.perf_counter() + 2.0, target, far)
        assert (seen[-1] is not None) == sliced
        if sliced:
            assert seen[-1]["target_size"] == target


def test_a_plan_needing_astronomically_many_slices_is_refused_as_not_feasible():
    # A quantum-volume circuit (Cross et al., Phys. Rev. A 100, 032328 (2019)) of 100 qubits and 50
    # layers of random pairings: the trees found in 2 s here hold 2^110 elements and the state-vector
    # order 2^100, far above the 2^77 from which 2^28 is reachable in 2^48 slices. The answer is an
    # honest refusal with the numbers, not a plan of 2^80 slices.
    # (A 40-qubit QFT served here first; better trees than the greedy one make it feasible, and a CI run
    # found one.)
    from contraction.circuits.textbook import quantum_volume

    s = build_structure(quantum_volume(100, 50, seed=3))
    with pytest.raises(MemoryLimitError, match="not feasible"):
        find_plan(s, PlannerOptions(budget_seconds=2.0, max_elements=2 ** 28, parallel=2))


def test_the_best_tree_sliced_anew_is_kept_only_when_cheaper_and_gives_the_same_amplitude(rng):
    """The final stage of a search slices the best tree again from scratch (larger reconfigured
    subtrees) and keeps whichever of the two is cheaper within the target; the kept tree's
    contraction is checked against the state vector (slices partition the sum over an index: Gray &
    Kourtis, Quantum 5, 410 (2021))."""
    import cotengra as ctg

    from contraction.planning import slicing

    circ = random_instance(grid_architecture(4, 5, 10), seed=4)
    s = build_structure(circ)
    target = 2 ** 8
    greedy = ctg.array_contract_tree(s.inputs, s.output, s.size_dict,
                                     optimize=ctg.RandomGreedyOptimizer(max_repeats=8, seed=1))
    # a poorly sliced tree: the first indices that get it under the target, no reconfiguration
    poor = greedy.copy()
    for ix in sorted(set().union(*map(set, s.inputs)) - set(s.output)):
        if poor.max_size() <= target:
            break
        poor.remove_ind_(ix)
    assert poor.max_size() <= target and poor.nslices > 1
    notes: dict = {}
    kept = slicing.resliced(poor, target, "flops", float("inf"), float("inf"), notes, "resliced")
    assert kept.max_size() <= target
    assert kept.contraction_cost() <= poor.contraction_cost()
    r = notes["resliced"]
    assert r["madds_before"] == pytest.approx(poor.contraction_cost())
    assert r["madds_resliced"] is not None and min(r["madds_resliced"], r["madds_before"]) == \
        pytest.approx(kept.contraction_cost())
    # slicing indices in name order is far from the best (measured: 10^30.9 multiply-adds over 2^90
    # slices, against 10^7.0 over 512 slices for the fresh slicing): the fresh one is kept
    assert kept is not poor
    # the fused stage: the fresh slicing is fused before it is compared, and its cost before fusion kept
    from contraction.planning.fusion import fuse_absorptions

    kept_fused = slicing.resliced(fuse_absorptions(poor), target, "flops", float("inf"), float("inf"), notes,
                                  "resliced_fused", fuse=True)
    rf = notes["resliced_fused"]
    assert rf["kept"] and rf["madds_resliced"] == pytest.approx(kept_fused.contraction_cost())
    assert rf["madds_resliced_before_fusion"] <= rf["madds_resliced"]   # fusion trades multiply-adds for passes
    psi = state_vector(circ)
    for b in random_bitstrings(rng, circ.num_qubits, 2):
        for tree in (kept, kept_fused):
            got = contract_scalar(tree, tensor_arrays(s, circ, b))
            assert abs(got - psi[int(b, 2)]) <= 1e-10 * abs(got)


def test_the_search_keeps_its_best_scored_trees_and_the_cheapest_resliced_one_wins(rng, monkeypatch):
    """The hyper search keeps the trees of its best-scored trials besides its best (cheapest first);
    at the end each is sliced anew and the cheapest within the target is kept. The plan's contraction
    is checked against the state vector (slices partition the sum over an index: Gray & Kourtis,
    Quantum 5, 410 (2021))."""
    from contraction.planning import search, slicing

    circ = random_instance(grid_architecture(3, 5, 8), seed=4)
    s = build_structure(circ)
    opt = search._keeping_optimizer(methods=["greedy"], minimize="flops", max_repeats=24, parallel=False,
                                    progbar=False)
    best = opt.search(s.inputs, s.output, s.size_dict)
    scores = [score for score, _, _ in opt.kept]
    assert 1 < len(opt.kept) <= search.KEPT_CANDIDATES and scores == sorted(scores)
    assert scores[0] == opt.best["score"] and any(tree is best for _, _, tree in opt.kept)

    target = 2 ** 6
    trees = [tree for _, _, tree in opt.kept]
    sliced_first = slicing.slice_to_target(trees[-1], target, "flops")         # the worst kept, sliced
    notes: dict = {}
    chosen = slicing.best_resliced(sliced_first, trees, target, "flops", float("inf"), float("inf"), notes)
    costs = notes["candidates"]["madds_resliced"]
    assert len(costs) == len(trees) and chosen.max_size() <= target
    assert chosen.contraction_cost() == min([sliced_first.contraction_cost()] + [c for c in costs if c])
    # inside the planner (the search stood in by one that returns at once, leaving the final stages
    # what they need of a budget far larger than that): the candidates are found on the simplified network, mapped back to the whole one and
    # sliced anew; none cheaper than the plan is left out
    def quick_search(inputs, output, sizes, options, methods, deadline, target, width_log2, grace=1.0, t0=0.0):
        o = search._keeping_optimizer(methods=["greedy"], minimize="flops", max_repeats=24, parallel=False,
                                      progbar=False)
        found = o.search(inputs, output, sizes)
        return found, len(o.scores), search.kept_besides(o, found)

    monkeypatch.setattr(search, "_search", quick_search)
    monkeypatch.setattr(slicing, "REFINE_SUBTREE_SIZES", (6,))         # the refinement after them: brief
    plan = find_plan(s, PlannerOptions(budget_seconds=30.0, max_elements=target, minimize="flops", fuse=False))
    cands = plan.options["candidates"]["madds_resliced"]
    assert len(cands) >= 1 and plan.madds <= min(c for c in cands if c) * (1 + 1e-9)
    # then the kept tree is refined (never made dearer) and that is the plan (no fusion asked for)
    refined = plan.options["refined"]
    assert refined["madds_refined"] <= refined["madds_before"] and plan.madds == refined["madds_refined"]
    psi = state_vector(circ)
    for b in random_bitstrings(rng, circ.num_qubits, 2):
        for tree in (chosen, plan.tree(s)):
            got = contract_scalar(tree, tensor_arrays(s, circ, b))
            assert abs(got - psi[int(b, 2)]) <= 1e-10 * abs(got)


def test_forest_refinement_lowers_a_sliced_trees_cost_and_keeps_its_slices(rng, monkeypatch):
    """Rounds of forested subtree reconfiguration (Gray & Kourtis, Quantum 5, 410 (2021), sec. on
    subtree reconfiguration) on a sliced tree: the multiply-adds go down, the memory target stays, no
    index is sliced that was not, the amplitudes still equal the state vector's; with no time left
    nothing runs. Sliced more than needed, the slices the target does not need are restored."""
    import cotengra as ctg

    from contraction.planning import slicing

    monkeypatch.setattr(slicing, "REFINE_SUBTREE_SIZES", (6, 8))      # small subtrees: a quick test

    circ = random_instance(grid_architecture(4, 5, 10), seed=2)
    s = build_structure(circ)
    # a poor start: one plain greedy tree, sliced without any reconfiguration
    tree = ctg.array_contract_tree(s.inputs, s.output, s.size_dict, optimize="greedy")
    target = 2 ** 8
    start = tree.slice(target_size=target, allow_outer=False)
    notes: dict = {}
    better = slicing.refined(start, target, "flops", float("inf"), False, notes, seed=1)
    assert better.contraction_cost() < start.contraction_cost()
    assert better.max_size() <= target and set(better.sliced_inds) <= set(start.sliced_inds)
    assert notes["refined"]["madds_refined"] == better.contraction_cost() and notes["refined"]["rounds"] >= 2
    psi = state_vector(circ)
    for b in random_bitstrings(rng, circ.num_qubits, 2):
        got = contract_scalar(better, tensor_arrays(s, circ, b))
        assert abs(got - psi[int(b, 2)]) <= 1e-10 * abs(psi[int(b, 2)])
    untouched: dict = {}
    assert slicing.refined(start, target, "flops", 0.0, False, untouched) is start and untouched == {}
    # sliced to a quarter of the target, then the slices the target does not need restored
    over = better.slice(target_size=target // 4, allow_outer=False)
    back = slicing.restored(over, target)
    assert over.nslices > better.nslices and back.nslices < over.nslices
    assert back.max_size() <= target and back.contraction_cost() < over.contraction_cost()
    got = contract_scalar(back, tensor_arrays(s, circ, "0" * circ.num_qubits))
    assert abs(got - psi[0]) <= 1e-10 * abs(psi[0])


def test_predictions_carry_the_requests_fixed_cost():
    """A calibrated request overhead is added once to every option's prediction (the calibration
    measured it and dropped it); the choice itself does not change, and a calibration document written
    before the field existed still reads (the field takes its default)."""
    from contraction.planning.engine_choice import choose

    circ = random_instance(grid_architecture(3, 4, 8), 1, gates="discrete")
    kw = dict(memory_bytes=2 ** 30, store=MemoryPlanStore(), planner=PlannerOptions(budget_seconds=1.0))
    for engine in ("single", "statevector"):
        plain = choose(circ, 4, engine=engine, rate=RATE, **kw)
        loaded = choose(circ, 4, engine=engine, rate=dataclasses.replace(RATE, request_overhead_seconds=0.25), **kw)
        assert loaded.engine == plain.engine
        assert loaded.chosen.seconds == pytest.approx(plain.chosen.seconds + 0.25)
        assert all(o.seconds >= 0.25 for o in loaded.options)
    doc = RATE.to_dict()
    del doc["request_overhead_seconds"]
    assert MachineRate.from_dict(doc).request_overhead_seconds == 0.0
    del doc["threads"]                                   # a field without a default is still required
    with pytest.raises(KeyError):
        MachineRate.from_dict(doc)


def test_work_too_small_for_a_pool_runs_in_the_calling_process(monkeypatch):
    """With two local workers asked for, a request predicted to take less than a worker pool's start
    runs in the calling process (one amplitude: 0.02-0.07 s there, 0.18-0.24 s through a pool); one
    predicted longer goes to the pool. The amplitude is the state vector's either way (the state vector
    is checked against textbook values in tests/test_textbook_circuits.py)."""
    from contraction.execution import slices

    circ = random_instance(grid_architecture(3, 4, 8), 1, gates="discrete")
    want = complex(state_vector(circ)[0])
    used = []

    def fake_pool_run(self, contraction, tasks, done, cancelled=None):
        used.append(self.workers)
        slices.InlineRunner().run(contraction, tasks, done, cancelled)

    monkeypatch.setattr(slices.ProcessRunner, "run", fake_pool_run)
    kw = dict(engine="single", workers=2, plan_store=MemoryPlanStore(), planner=PlannerOptions(budget_seconds=1.0))
    run = amplitudes(circ, ["0" * 12], rate=RATE, **kw)
    assert used == [] and run.results[0].amplitude == pytest.approx(want, abs=1e-12)
    slow = dataclasses.replace(RATE, matmul_madds_per_second=1e3)      # predicted far above a pool's start
    run = amplitudes(circ, ["0" * 12], rate=slow, **kw)
    assert used == [2] and run.results[0].amplitude == pytest.approx(want, abs=1e-12)


def test_a_plan_used_again_reuses_its_checked_tree():
    """Request after request with one stored plan builds and checks its tree once; a plan whose cost was
    altered is still checked against its own tree and refused, even after the true one was kept; the
    kept tree still gives the state vector's amplitude (checked in tests/test_textbook_circuits.py)."""
    circ = random_instance(grid_architecture(3, 4, 8), 1, gates="discrete")
    s = build_structure(circ)
    plan = find_plan(s, PlannerOptions(budget_seconds=0.5))
    assert plan.tree(s) is plan.tree(s)
    assert Plan.from_json(plan.to_json()).tree(s) is plan.tree(s)    # same content, same tree
    with pytest.raises(PlanError):
        dataclasses.replace(plan, madds=plan.madds * 1.5).tree(s)
    value = contract_scalar(plan.tree(s), tensor_arrays(s, circ, "0" * 12))
    assert value == pytest.approx(complex(state_vector(circ)[0]), abs=1e-12)


def test_a_stored_plan_whose_real_peak_exceeds_the_cap_is_not_used():
    """A plan recorded with a peak below what the executor holds (as plans stored before copies were
    counted are) is checked again when read from the store: over the cap it is not used."""
    from contraction.errors import NoStoredPlan
    from contraction.planning.capped_plans import PLAN_SHARE_OF_CAP
    from contraction.planning.plan import executor_peak_elements

    s = build_structure(random_instance(grid_architecture(4, 5, 10), 1, gates="discrete"))
    plan = find_plan(s, PlannerOptions(budget_seconds=1.0, max_elements=2 ** 10, parallel=False))
    real = executor_peak_elements(plan.tree(s))
    store = MemoryPlanStore()
    store.put(dataclasses.replace(plan, peak_elements=1.0))
    under = real * 16 / PLAN_SHARE_OF_CAP            # the cap (complex128 bytes) the real peak just fits
    assert network_plan(s, store, None, memory_bytes=1.01 * under).from_store
    with pytest.raises(NoStoredPlan):
        network_plan(s, store, None, memory_bytes=0.99 * under)


def test_worker_processes_start_with_the_contraction_modules_loaded():
    """The forkserver that starts contraction workers loads the engine's modules once (so a request on a
    fresh pool does not import them in every worker): a worker of that context has them in Python's
    module table before it imports anything for its task (the task is the built-in ``eval``, whose
    unpickling imports nothing)."""
    import concurrent.futures as cf

    from contraction.execution import slices

    ctx = slices.worker_context()
    assert ctx.get_start_method() == "forkserver"
    names = list(slices.WORKER_PRELOAD)
    with cf.ProcessPoolExecutor(1, mp_context=ctx) as pool:
        loaded = pool.submit(eval, f"[m in __import__('sys').modules for m in {names!r}]").result(timeout=120)
    assert loaded == [True] * len(names)


def test_the_default_objective_counts_multiply_adds_alone_when_the_plan_must_be_sliced():
    """"auto" searches a network that must be sliced to its target for multiply-adds alone ("flops"),
    others for multiply-adds and memory writes ("combo"); an explicit objective is kept. The plan
    records the objective used; the sliced plan's amplitude is checked against the einsum reference
    (numpy, gate by gate: shares no code with the engine)."""
    from .conftest import einsum_state

    c = random_instance(grid_architecture(4, 4, 8), 3)
    s = build_structure(c)
    unsliced = find_plan(s, PlannerOptions(budget_seconds=0.5))
    assert unsliced.options["minimize"] == "combo" and unsliced.nslices == 1
    target = 2 ** (unsliced.width - 3)
    sliced = find_plan(s, PlannerOptions(budget_seconds=0.5, max_elements=target))
    assert sliced.options["minimize"] == "flops" and sliced.nslices > 1 and sliced.width <= unsliced.width - 3
    kept = find_plan(s, PlannerOptions(budget_seconds=0.5, max_elements=target, minimize="combo"))
    assert kept.options["minimize"] == "combo"
    bits = "0110100111010010"
    value = contract_scalar(sliced.tree(s), tensor_arrays(s, c, bits))
    assert abs(value - einsum_state(c)[int(bits, 2)]) < 1e-12
