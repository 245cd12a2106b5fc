"""Is the automatic engine choice the fastest? Every case runs with ``engine="auto"`` and with
each engine forced (state vector where it fits the cap, one contraction per bitstring, batched,
stacked),
all in this run and with the same plan store (every contraction size a forced engine uses is
planned before its timing, so planning is not what is compared; ``auto`` then finds those plans). Reports per case the time of every engine, the engine auto
chose and ``auto / fastest`` (goal: at most 1.25 on every case). Runs shorter than ``--short``
seconds are repeated (``--repeats``), auto and the forced engines in alternating rounds, and their
median reported. A forced engine predicted over ``--max-forced``
seconds and over ``SKIP_FACTOR`` times the fastest prediction is not run (the row says so), except
the single and stacked engines: predicted over ``--max-forced`` seconds they run on a share of the
bitstrings (a multiple of the workers, times the chunk size for stacked chunks) and have their time
scaled to all of them (linear in the count: one contraction per bitstring or per chunk, in one pool);
the row names the share. Any other network engine predicted over ``--max-forced`` seconds (the batch
engine, or one bitstring) runs until a share of its tasks (runs of slices) has finished and is then
cancelled, its time scaled to all tasks (``<engine>_timed_on_tasks``). Such a share-timed run stands
for auto when auto picked that engine with the same chunks (``--reuse-forced``; the row says so).
Before the first case a small request starts the worker processes' server, so the first engine timed
does not pay it. A forced
engine that would run the very same contractions as the single engine (same chunks and plans: the batch
or stacked engine for one bitstring) is not run; it gets the single engine's time, and the row says so.

Cases: grid circuits (Haar two-qubit gates) of 20-53 qubits with 1 to 10,000 bitstrings, a 25-qubit
swap test, a 24-qubit QFT (diagonal controlled phases) and a 30-qubit quantum-volume circuit.

    python tests/benchmarks/bench_engine_choice.py [--budget 5] [--cases all|quick|large|N,M,...] [--reuse-forced] [--repeats 5]
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import time

import numpy as np

from contraction.circuits import gates as G
from contraction.circuits.model import Circuit, Gate
from contraction.circuits.random_instances import grid_architecture, random_instance
from contraction.circuits.textbook import qft, quantum_volume
from contraction.errors import Cancelled, MemoryLimitError
from contraction.execution.amplitudes import amplitudes
from contraction.execution.calibration import load_or_measure
from contraction.execution.slices import ProcessRunner
from contraction.planning.engine_choice import choose
from contraction.planning.options import PlannerOptions
from contraction.planning.store import MemoryPlanStore


def swap_test(n_half: int = 12) -> Circuit:
    rng = np.random.default_rng(1)
    n = 2 * n_half + 1
    gates = [Gate((q,), G.rx(float(rng.uniform(0, 3))), "rx") for q in range(1, n)] + [Gate((0,), G.H, "h")]
    gates += [Gate((0, 1 + i, 1 + n_half + i), G.controlled(G.SWAP), "cswap") for i in range(n_half)]
    return Circuit(n, gates + [Gate((0,), G.H, "h")], name=f"swaptest{n}")


#: a forced engine predicted over --max-forced seconds and this many times the fastest engine's
#: prediction is not run (a forced batch with a 5 s plan of 10^15 multiply-adds would run for hours);
#: the single-amplitude engine is then timed on a share of the bitstrings instead
SKIP_FACTOR = 4


#: runs shorter than --short repeat until they add up to this many seconds (see :func:`timed`)
SHORT_TOTAL_S = 4.0


def cases(which: str):
    grid = lambda r, c, m, s=1: random_instance(grid_architecture(r, c, m), seed=s)  # noqa: E731
    out = [("grid20x10", grid(4, 5, 10), 1), ("grid20x10", grid(4, 5, 10), 1000),
           ("grid24x12", grid(4, 6, 12), 64), ("swap25", swap_test(12), 1), ("qft24", qft(24), 16),
           ("qv30x8", quantum_volume(30, 8, seed=2), 1), ("grid30x12", grid(5, 6, 12), 256),
           ("grid36x8", grid(6, 6, 8), 64), ("grid40x8", grid(5, 8, 8), 2000),
           ("grid20x10", grid(4, 5, 10), 10000),
           ("grid53x8", random_instance(grid_architecture(6, 9, 8, removed=frozenset({53})), seed=1), 16)]
    if which == "quick":
        return out[:4]
    if which == "large":
        return out[6:9] + out[10:]
    if which == "all":
        return out
    try:                                            # case numbers (0-based) in the list above
        return [out[int(k)] for k in which.split(",")]
    except (ValueError, IndexError):
        raise SystemExit(f"--cases: all, quick, large or case numbers 0-{len(out) - 1} separated by commas, "
                         f"not {which!r}") from None


def timed(runs: dict, repeats: int, short_s: float) -> dict:
    """name -> (median seconds, last result, every run's seconds) of each ``runs[name]()``: each runs once;
    those whose first run took under ``short_s`` then run again, ``repeats`` times in all, and short
    runs until they add up to ``SHORT_TOTAL_S`` seconds (at most 200; medians of five 2 ms runs differed
    by 1.6x, and a 0.3 s request on a fresh pool of two took 0.27-0.28 s in most runs and 0.5-0.8 s in
    one run of three or four, whichever engine or order). Repeats go in rounds, one run of each in turn,
    so the machine's slower and faster spells fall on all of them alike (run one after the other, two
    engines doing the very same 0.3 s contraction differed by 1.8x)."""
    out, times = {}, {}
    for name, run in runs.items():
        t = time.perf_counter()
        out[name] = run()
        times[name] = [time.perf_counter() - t]

    def more(ts):
        return ts[0] < short_s and (len(ts) < repeats or (sum(ts) < SHORT_TOTAL_S and len(ts) < 200))

    while any(more(times[name]) for name in runs):
        for name, run in runs.items():
            if more(times[name]):
                t = time.perf_counter()
                out[name] = run()
                times[name].append(time.perf_counter() - t)
    return {name: (float(np.median(times[name])), out[name], times[name]) for name in runs}


def task_share_seconds(circ, bits, engine: str, fraction: float, workers: int, common: dict):
    """(seconds scaled to every task, None, [seconds], tasks timed, tasks) of ``engine`` on all of ``bits``,
    timed until a multiple of ``workers`` tasks covering about ``fraction`` of them has finished, then
    cancelled: the tasks of a request (runs of slices of its chunks) do equal work, so its time is
    linear in them. The cancel terminates the workers (``ProcessRunner``); the next run starts a second
    later."""
    state = {"t": None, "k": None, "total": None}
    t0 = time.perf_counter()

    def progress(p):
        if state["k"] is None:
            state["total"] = p.total
            state["k"] = min(p.total, max(workers, math.ceil(p.total * fraction / workers) * workers))
        if p.done >= state["k"] and state["t"] is None:
            state["t"] = time.perf_counter() - t0

    try:
        amplitudes(circ, bits, engine=engine, progress=progress, cancelled=lambda: state["t"] is not None, **common)
    except Cancelled:
        pass
    t, k, total = state["t"] or time.perf_counter() - t0, state["k"] or 1, state["total"] or 1
    time.sleep(1.0)
    seconds = t * total / k
    return seconds, None, [seconds], k, total


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--budget", type=float, default=5.0)
    ap.add_argument("--cases", default="all")
    ap.add_argument("--memory-gib", type=float, default=8.0)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--reuse-forced", action="store_true",
                    help="when auto picks exactly what a forced run of --short seconds or more did, report that "
                         "run's time instead of running it again (for the long cases; the row says so)")
    ap.add_argument("--repeats", type=int, default=5,
                    help="runs of each engine (median) when one run takes under --short seconds")
    ap.add_argument("--short", type=float, default=5.0)
    ap.add_argument("--max-forced", type=float, default=120.0,
                    help="forced engines predicted longer than this and SKIP_FACTOR times the fastest "
                         "prediction are not run (single amplitudes: run on a share of the bitstrings, "
                         "their time scaled to all)")
    args = ap.parse_args()
    rate = load_or_measure(None)
    cap = args.memory_gib * 2 ** 30
    warm = random_instance(grid_architecture(3, 4, 4), seed=1)        # starts the workers' server
    amplitudes(warm, ["0" * 12], engine="single", memory_bytes=cap, rate=rate, workers=args.workers,
               runner=ProcessRunner(args.workers))
    rows = []
    for name, circ, count in cases(args.cases):
        rng = np.random.default_rng(7)
        bits = list(dict.fromkeys("".join(map(str, rng.integers(0, 2, circ.num_qubits))) for _ in range(count)))
        store = MemoryPlanStore()
        opts = PlannerOptions(budget_seconds=args.budget)
        common = dict(planner=opts, plan_store=store, memory_bytes=cap, rate=rate, workers=args.workers)
        times, values, row = {}, {}, {"case": name, "qubits": circ.num_qubits, "bitstrings": len(bits)}
        predicted, chunk = {}, {}
        for engine in ("single", "batch", "stacked", "statevector"):    # plan every contraction size each engine uses
            try:
                forced = choose(circ, len(bits), engine=engine, dtype="complex128", rate=rate, store=store,
                                planner=opts, memory_bytes=cap, workers=args.workers)
                predicted[engine], chunk[engine] = forced.chosen.seconds, forced.chosen.batch
            except MemoryLimitError as exc:
                row[f"{engine}_refused"] = str(exc)[:120]
        print(json.dumps({"case": name, "bitstrings": len(bits), "predicted_s": predicted}), file=sys.stderr, flush=True)
        parts, share = {}, {}
        for engine in predicted:
            part = bits
            # one contraction per bitstring, or per chunk of a fixed size: time linear in the bitstrings
            linear = engine in ("single", "stacked")
            step = args.workers * (chunk[engine] if engine == "stacked" else 1)
            if linear and predicted[engine] > args.max_forced and len(bits) > 2 * step:
                k = math.ceil(len(bits) * args.max_forced / predicted[engine] / step) * step
                part = bits[:max(2 * step, k)]
                row[f"{engine}_timed_on"] = len(part)
            elif predicted[engine] > args.max_forced and predicted[engine] > SKIP_FACTOR * min(predicted.values()):
                row[f"{engine}_not_run"] = (f"predicted {predicted[engine]:.4g} s, over {args.max_forced:g} s "
                                            f"and {SKIP_FACTOR}x the fastest prediction")
                continue
            elif predicted[engine] > args.max_forced and engine != "statevector":
                share[engine] = args.max_forced / predicted[engine]      # timed on a share of its tasks
            parts[engine] = part
        forced_schedule, work = {}, {}
        for engine in parts:
            if engine != "statevector":
                forced = choose(circ, len(bits), engine=engine, dtype="complex128", rate=rate, store=store,
                                planner=opts, memory_bytes=cap, workers=args.workers)
                forced_schedule[engine] = forced.chosen.schedule
                work[engine] = (forced.engine, tuple(forced.chosen.schedule),
                                tuple(sorted((b, o.plan.madds, o.plan.nslices) for b, o in forced.chosen.parts.items()
                                             if o.plan is not None)))
                # the plans behind each forced engine (they vary between runs with short budgets)
                row[f"{engine}_plans"] = {b: {"slices": o.plan.nslices, "log10_madds": round(math.log10(o.plan.madds), 2),
                                              "predicted_s": round(o.seconds, 3)}
                                          for b, o in forced.chosen.parts.items() if o.plan is not None}
        # a forced engine that would run the very same contractions as the single engine (same engine
        # chosen, chunks and plans: the batch or stacked engine for one bitstring) is not run again: it
        # differs only by the machine's noise (22.8 s against 27.7 s for one 30-qubit amplitude in one
        # run) and doubled the long cases
        twins = [e for e in work if e != "single" and "single" in work and "single_timed_on" not in row
                 and f"{e}_timed_on" not in row and work[e] == work["single"]]
        ran = [e for e in parts if e not in twins]
        # every engine once; those under --short seconds then run in rounds (that lone first run not
        # counted), auto in the same rounds, unless it picked exactly what a forced run of --short
        # seconds or more did (--reuse-forced)
        firsts = timed({e: (lambda e=e: amplitudes(circ, parts[e], engine=e, **common)) for e in ran
                        if e not in share}, 1, 0.0)
        for e in [e for e in share if e in ran]:
            firsts[e] = task_share_seconds(circ, bits, e, share[e], args.workers, common)
            row[f"{e}_timed_on_tasks"] = "%d of %d" % firsts[e][3:5]
        quick = {e: (lambda e=e: amplitudes(circ, parts[e], engine=e, **common)) for e in ran
                 if firsts[e][0] < args.short and e not in share}      # a share of the tasks is timed once
        same = []
        if args.reuse_forced:                      # what auto would pick, and whether a forced run did just that
            picked = choose(circ, len(bits), engine="auto", dtype="complex128", rate=rate, store=store,
                            planner=opts, memory_bytes=cap, workers=args.workers)
            # a forced run on a share of the bitstrings stands for auto when auto picked that engine with the
            # same chunk size (its time is linear in the bitstrings; the row says so)
            same = [e for e in ran if e == picked.engine and (e == "statevector" or
                                                                   forced_schedule.get(e) == picked.chosen.schedule
                                                                   or (f"{e}_timed_on" in row
                                                                       and picked.chosen.batch == chunk.get(e)))
                    and firsts[e][0] >= args.short]   # short runs: auto is timed
            if picked.engine in share and picked.engine not in same:
                # auto picked an engine timed on a share of its tasks, with other chunks or plans: auto runs
                # in full (not bounded by --max-forced)
                print(json.dumps({"case": name, "note": f"auto picked {picked.engine} with chunks "
                                  f"{picked.chosen.schedule[:4]}..., run in full"}), file=sys.stderr, flush=True)
        if not same:
            quick["auto"] = lambda: amplitudes(circ, bits, engine="auto", **common)
        rounds = {**firsts, **timed(quick, args.repeats, args.short)}
        for engine in ran:
            seconds, run = rounds[engine][:2]
            times[engine] = seconds * len(bits) / len(parts[engine])
            if run is not None:                       # not a share of the tasks
                values[engine] = np.array([r.amplitude for r in run.results])
        for twin in twins:
            times[twin] = times["single"]
            row["same_contraction"] = f"{'/'.join(twins)} not run: the same chunks and plans as single"
        if same:
            # auto picked exactly what a forced run did (same engine, same chunks, same stored plans):
            # that run's time stands for it, marked as such
            auto_s, auto_engine, auto_batch, reason = times[same[0]], picked.engine, picked.chosen.batch, picked.reason
            on = row.get(f"{same[0]}_timed_on", row.get(f"{same[0]}_timed_on_tasks"))
            row["auto_time_from_forced_run"] = same[0] + (f" (timed on {on}, scaled)" if on else "")
        else:
            auto_s, auto, _ = rounds["auto"]
            auto_engine, auto_batch, reason = auto.engine, auto.batch, auto.reason
        fastest = min(times, key=times.get)
        # every bitstring's amplitude (a share-timed run has a prefix; a run on a share of its tasks has none)
        ref = max(values.values(), key=len) if values else np.zeros(0)

        def agrees(v):
            head = ref[:len(v)]
            return np.max(np.abs(v - head)) <= 1e-10 * np.max(np.abs(head))
        row.update({f"{e}_s": float(f"{s:.4g}") for e, s in times.items()})
        row.update(auto_engine=auto_engine, auto_batch=auto_batch, auto_s=float(f"{auto_s:.4g}"), fastest=fastest,
                   ratio_auto_over_fastest=round(auto_s / times[fastest], 3), reason=reason,
                   engines_agree=bool(all(agrees(v) for v in values.values())) if len(values) > 1 else None)
        rows.append(row)
        print(json.dumps(row), flush=True)
    ratios = [r["ratio_auto_over_fastest"] for r in rows]
    print(json.dumps({"summary": True, "cases": len(rows), "max_ratio": max(ratios),
                      "within_1_25": sum(r <= 1.25 for r in ratios), "goal": 1.25}))


if __name__ == "__main__":
    main()
