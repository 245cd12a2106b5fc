"""What treating diagonal gates as diagonal tensors saves: plans of the same circuits with the
diagonal representation and with every gate as a full tensor (``diagonal=frozenset()``), same
budget, same search; the baseline is the full-tensor network planned in this run.

Circuits: QFTs (controlled phases are diagonal; Nielsen & Chuang §5.1) and a grid circuit whose
two-qubit gates are CZ with Haar-random single-qubit gates between layers. One amplitude of each is
contracted both ways where it takes under ``--max-contract-seconds`` at the measured rate, and the
two values compared.

    python tests/benchmarks/bench_diagonal.py [--budget 10]
"""

from __future__ import annotations

import argparse
import json
import math
import time

import numpy as np

from contraction.circuits import gates as G
from contraction.circuits.model import Circuit, Gate
from contraction.circuits.random_instances import grid_architecture, haar_unitary
from contraction.circuits.textbook import qft
from contraction.execution.executor import contract_scalar
from contraction.network.builder import build_structure, diagonal_gates, tensor_arrays
from contraction.planning.options import PlannerOptions
from contraction.planning.search import find_plan


def cz_grid(rows: int, cols: int, cycles: int, seed: int = 0) -> Circuit:
    rng = np.random.default_rng(seed)
    arch = grid_architecture(rows, cols, cycles)
    gates = []
    for layer in arch.layers:
        gates += [Gate((q,), haar_unitary(2, rng), "u") for q in range(arch.num_qubits)]
        gates += [Gate(pair, G.CZ, "cz") for pair in layer]
    return Circuit(arch.num_qubits, gates, name=f"cz{rows}x{cols}x{cycles}")


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--budget", type=float, default=10.0)
    ap.add_argument("--max-contract-seconds", type=float, default=60.0)
    args = ap.parse_args()
    rows = []
    for circ in (qft(30), qft(40), cz_grid(5, 6, 12), cz_grid(6, 6, 14)):
        row = {"circuit": circ.name, "qubits": circ.num_qubits, "diagonal_gates": len(diagonal_gates(circ))}
        bits = "01" * (circ.num_qubits // 2) + "0" * (circ.num_qubits % 2)
        values = {}
        for label, diagonal in (("diagonal", None), ("full_tensors", frozenset())):
            s = build_structure(circ, diagonal=diagonal)
            t = time.perf_counter()
            plan = find_plan(s, PlannerOptions(budget_seconds=args.budget, max_elements=2 ** 27, parallel=2))
            row[label] = {"plan_seconds": round(time.perf_counter() - t, 1), "tensors": s.num_tensors,
                          "log10_madds": round(math.log10(max(plan.madds, 1)), 3), "width_log2": plan.width,
                          "slices": plan.nslices}
            if plan.madds < args.max_contract_seconds * 2e9:
                tree = plan.tree(s)
                t = time.perf_counter()
                values[label] = contract_scalar(tree, tensor_arrays(s, circ, bits))
                row[label]["contract_seconds"] = round(time.perf_counter() - t, 2)
        row["ratio_madds_diagonal_over_full"] = float(f"{10 ** (row['diagonal']['log10_madds'] - row['full_tensors']['log10_madds']):.3g}")
        if len(values) == 2:
            a, b = values["diagonal"], values["full_tensors"]
            row["relative_difference"] = abs(a - b) / max(abs(b), 1e-300)
        rows.append(row)
        print(json.dumps(row), flush=True)


if __name__ == "__main__":
    main()
