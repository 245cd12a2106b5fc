"""Parse-time benchmark: a 10,000-gate OpenQASM 2.0 file and its OpenQASM 3 export.

Prints one JSON object. Baseline measured in the same run: reading the same text with
``json.loads`` of an equivalent JSON document (a lower bound for any text reader in Python).
"""

import json
import random

from contraction.circuits.json_document import write_json
from contraction.circuits.qasm_reader import read_qasm
from contraction.execution.calibration import _median_time


def make_file(num_gates: int, n: int = 50, seed: int = 1) -> str:
    rnd = random.Random(seed)
    lines = ["OPENQASM 2.0;", 'include "qelib1.inc";', f"qreg q[{n}];", f"creg c[{n}];"]
    for _ in range(num_gates):
        r = rnd.random()
        a, b = rnd.sample(range(n), 2)
        if r < 0.35:
            lines.append(f"cx q[{a}],q[{b}];")
        elif r < 0.7:
            lines.append(f"u3({rnd.random():.6f},{rnd.random():.6f},pi/{rnd.randint(1, 8)}) q[{a}];")
        elif r < 0.85:
            lines.append(f"rzz(0.3*pi) q[{a}],q[{b}];")
        else:
            lines.append(f"h q[{a}];")
    lines.append("measure q -> c;")
    return "\n".join(lines) + "\n"


def timed(fn, repeats=7):
    return _median_time(fn, repeats)


def main():
    text = make_file(10_000)
    circuit = read_qasm(text)
    doc = write_json(circuit)
    t_qasm = timed(lambda: read_qasm(text))
    t_json = timed(lambda: json.loads(doc))
    print(json.dumps({
        "benchmark": "parse",
        "gates": len(circuit.gates),
        "statements": text.count(";"),
        "qasm_parse_seconds_median": round(t_qasm, 4),
        "baseline_json_loads_seconds_median": round(t_json, 4),
        "ratio_qasm_over_json_loads": round(t_qasm / t_json, 2),
    }))


if __name__ == "__main__":
    main()
