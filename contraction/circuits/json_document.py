"""veramp's JSON circuit document: explicit gate matrices as [re, im] pairs.

Example::

    {"format": "veramp.circuit", "version": 1, "num_qubits": 2,
     "gates": [{"qubits": [0], "gate": "h"},
               {"qubits": [0, 1], "matrix": [[[1,0],[0,0],[0,0],[0,0]], ...], "label": "haar"}]}

A gate gives either ``matrix`` (a 2^k x 2^k list of [re, im] pairs, first qubit most significant)
or ``gate`` (+ ``params``) naming a gate of the built-in library. The JSON Schema is
``contraction/schema/circuit.schema.json``; :func:`read_json` checks the same rules itself and
names the gate and field of the first problem.
"""

from __future__ import annotations

import json
import math
from importlib import resources
from typing import Any

import numpy as np

from contraction import defaults
from contraction.circuits import gates as G
from contraction.circuits.model import Circuit, Gate, check_gate
from contraction.errors import CircuitError, ParseError

FORMAT = "veramp.circuit"
VERSION = 1


def schema() -> dict:
    """The published JSON Schema of the circuit document."""
    text = resources.files("contraction").joinpath("schema/circuit.schema.json").read_text()
    return json.loads(text)


def _matrix(value: Any, where: str) -> np.ndarray:
    if not isinstance(value, list) or not value:
        raise CircuitError(f"{where}: 'matrix' must be a non-empty list of rows")
    rows = []
    for r, row in enumerate(value):
        if not isinstance(row, list) or len(row) != len(value):
            raise CircuitError(f"{where}: matrix row {r} must be a list of {len(value)} [re, im] pairs")
        out = []
        for c, entry in enumerate(row):
            if (not isinstance(entry, list) or len(entry) != 2
                    or not all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in entry)):
                raise CircuitError(f"{where}: matrix entry [{r}][{c}] must be a pair [re, im] of numbers")
            if not (math.isfinite(entry[0]) and math.isfinite(entry[1])):
                raise CircuitError(f"{where}: matrix entry [{r}][{c}] is not finite")
            out.append(complex(entry[0], entry[1]))
        rows.append(out)
    return np.array(rows, dtype=np.complex128)


def from_document(doc: Any, max_qubits: int = defaults.MAX_QUBITS) -> Circuit:
    """Build a circuit from a parsed JSON document (raises :class:`CircuitError`)."""
    if not isinstance(doc, dict):
        raise CircuitError("the circuit document must be a JSON object")
    if doc.get("format") != FORMAT:
        raise CircuitError(f"'format' must be {FORMAT!r}")
    if doc.get("version") != VERSION:
        raise CircuitError(f"unsupported document version {doc.get('version')!r} (this reader reads {VERSION})")
    n = doc.get("num_qubits")
    if isinstance(n, bool) or not isinstance(n, int) or n < 1:
        raise CircuitError("'num_qubits' must be a positive whole number")
    if n > max_qubits:
        raise CircuitError(f"'num_qubits' = {n} exceeds the limit of {max_qubits} qubits")
    phase = doc.get("global_phase", 0.0)
    if isinstance(phase, bool) or not isinstance(phase, (int, float)) or not math.isfinite(phase):
        raise CircuitError("'global_phase' must be a finite number")
    raw = doc.get("gates")
    if not isinstance(raw, list):
        raise CircuitError("'gates' must be a list")
    gates = []
    for i, g in enumerate(raw):
        where = f"gate {i}"
        if not isinstance(g, dict):
            raise CircuitError(f"{where}: must be an object")
        unknown = set(g) - {"qubits", "matrix", "gate", "params", "label"}
        if unknown:
            raise CircuitError(f"{where}: unknown field(s) {sorted(unknown)}")
        qubits = g.get("qubits")
        if not isinstance(qubits, list) or not all(isinstance(q, int) and not isinstance(q, bool) for q in qubits):
            raise CircuitError(f"{where}: 'qubits' must be a list of qubit indices")
        label = g.get("label", "")
        if not isinstance(label, str):
            raise CircuitError(f"{where}: 'label' must be a string")
        if ("matrix" in g) == ("gate" in g):
            raise CircuitError(f"{where}: give exactly one of 'matrix' or 'gate'")
        if "matrix" in g:
            gate = Gate(tuple(qubits), _matrix(g["matrix"], where), label)
        else:
            name, params = g["gate"], g.get("params", [])
            spec = G.LIBRARY.get(name) if isinstance(name, str) else None
            if spec is None:
                raise CircuitError(f"{where}: unknown gate {name!r}")
            if (not isinstance(params, list) or len(params) != spec.num_params or not all(
                    isinstance(p, (int, float)) and not isinstance(p, bool) and math.isfinite(p) for p in params)):
                raise CircuitError(f"{where}: gate {name!r} takes {spec.num_params} finite number parameter(s)")
            if len(qubits) != spec.num_qubits:
                raise CircuitError(f"{where}: gate {name!r} acts on {spec.num_qubits} qubit(s), got {len(qubits)}")
            gate = Gate(tuple(qubits), spec.factory(*params), label or name, name, tuple(float(p) for p in params))
        check_gate(gate, n, i)
        gates.append(gate)
    return Circuit(n, gates, float(phase), str(doc.get("name", "")), validate=False)


def read_json(text: str, source: str = "<circuit>", max_qubits: int = defaults.MAX_QUBITS) -> Circuit:
    """A circuit from the text of a JSON document; raises :class:`ParseError` (with line and column for invalid JSON)
    or :class:`CircuitError`."""
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as exc:
        raise ParseError(f"invalid JSON: {exc.msg}", exc.lineno, exc.colno, source) from None
    return from_document(doc, max_qubits)


def _pairs(m: np.ndarray) -> list:
    return [[[float(z.real), float(z.imag)] for z in row] for row in m]


def to_document(circuit: Circuit) -> dict:
    """The JSON document of a circuit (every gate as an explicit matrix, labels kept)."""
    gates = []
    for g in circuit.gates:
        entry: dict[str, Any] = {"qubits": list(g.qubits), "matrix": _pairs(g.matrix)}
        if g.label:
            entry["label"] = g.label
        gates.append(entry)
    doc: dict[str, Any] = {"format": FORMAT, "version": VERSION, "num_qubits": circuit.num_qubits}
    if circuit.name:
        doc["name"] = circuit.name
    if circuit.global_phase:
        doc["global_phase"] = circuit.global_phase
    doc["gates"] = gates
    return doc


def write_json(circuit: Circuit, indent: int | None = None) -> str:
    """The circuit as the text of a JSON document (one line unless ``indent`` is given)."""
    return json.dumps(to_document(circuit), indent=indent)
