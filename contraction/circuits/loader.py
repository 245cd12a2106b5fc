"""Load a circuit from text in either accepted format (OpenQASM 2/3 or the JSON document)."""

from __future__ import annotations

from contraction import defaults
from contraction.circuits.json_document import read_json
from contraction.circuits.model import Circuit
from contraction.circuits.qasm_reader import read_qasm


def detect_format(text: str) -> str:
    """``"json"`` when the text is a JSON object, else ``"qasm"``."""
    return "json" if text.lstrip().startswith("{") else "qasm"


def load_circuit(text: str, source: str = "<circuit>", fmt: str = "auto",
                 max_qubits: int = defaults.MAX_QUBITS, max_gates: int = defaults.MAX_GATES) -> Circuit:
    """Read ``text`` as OpenQASM or a JSON document; OpenQASM programs whose expansion would exceed
    ``max_gates`` gates are refused before anything is expanded."""
    if fmt == "auto":
        fmt = detect_format(text)
    if fmt == "json":
        return read_json(text, source, max_qubits)
    return read_qasm(text, source, max_qubits, max_gates)
