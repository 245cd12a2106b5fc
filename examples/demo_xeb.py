"""Demo (invented scenario): Kestrel Ridge Quantum Lab checks its 24-qubit Wren-24 chip.

Random circuits on a 4x6 grid at 4..16 cycles; "device" samples are drawn from the mixture
q = F·p + (1 − F)/N with F = A·(1 − e)^cycles for a chosen per-cycle error e; veramp computes
the ideal probabilities, estimates linear XEB per depth, fits the decay and reports whether the
fit recovers e. Run:  python examples/demo_xeb.py [--error 0.05] [--samples 20000]
"""

import argparse
import json

import numpy as np

from contraction.circuits.random_instances import grid_architecture, random_instance
from contraction.execution.statevector import state_vector
from contraction.analysis.xeb import estimate_xeb, fit_depth, sample_mixture


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--error", type=float, default=0.05, help="injected per-cycle error")
    ap.add_argument("--spam", type=float, default=0.9, help="fidelity at zero cycles")
    ap.add_argument("--samples", type=int, default=20000)
    ap.add_argument("--seed", type=int, default=24)
    ap.add_argument("--plot", help="write the XEB-against-cycles figure (.png or .svg)")
    args = ap.parse_args()
    rng = np.random.default_rng(args.seed)
    cycles = [4, 6, 8, 10, 12, 14, 16]
    rows, f_hat, se = [], [], []
    for d in cycles:
        c = random_instance(grid_architecture(4, 6, d, "ABCDCDAB"), seed=1000 + d, gates="discrete")
        p = np.abs(state_vector(c)) ** 2
        f_true = args.spam * (1 - args.error) ** d
        idx = sample_mixture(p, f_true, args.samples, rng)
        res = estimate_xeb(p[idx], c.num_qubits, bootstrap=200)
        # shallow circuits are not yet Porter-Thomas: divide by the ideal value N·Σp² − 1 (the
        # linear XEB of perfect samples), known here because the whole distribution is at hand
        ideal = 2 ** c.num_qubits * float((p ** 2).sum()) - 1
        rows.append({"cycles": d, "injected_fidelity": round(f_true, 5), "ideal_linear_xeb": round(ideal, 4),
                     "linear_xeb": round(res.linear_xeb, 5), "normalised": round(res.linear_xeb / ideal, 5),
                     "stderr": round(res.linear_xeb_stderr / ideal, 5)})
        f_hat.append(res.linear_xeb / ideal)
        se.append(res.linear_xeb_stderr / ideal)
    fit = fit_depth(cycles, f_hat, se)
    lo, hi = fit.per_cycle_error_ci
    f20, s20 = fit.predict(20)
    if args.plot:
        from service.plots import depth_fit_plot

        fmt = "svg" if args.plot.endswith(".svg") else "png"
        with open(args.plot, "wb") as fh:
            fh.write(depth_fit_plot(cycles, f_hat, se, fit, fmt, "Wren-24 (invented chip): XEB against depth"))
    print(json.dumps({"chip": "Wren-24 (invented)", "per_depth": rows,
                      "fit": {"per_cycle_error": round(fit.per_cycle_error, 5), "ci95": [round(lo, 5), round(hi, 5)],
                              "injected": args.error, "recovered": lo <= args.error <= hi,
                              "extrapolated_F_at_20_cycles": [round(f20, 5), round(s20, 5)]}}, indent=1))


if __name__ == "__main__":
    main()
