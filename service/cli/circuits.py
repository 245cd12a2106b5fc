"""Commands that write circuits: ``convert``, ``generate``."""

from __future__ import annotations

from contraction.circuits.json_document import write_json
from contraction.circuits.qasm_writer import write_qasm3
from contraction.circuits.random_instances import grid_architecture, random_instance

from .common import UsageError, load_circuit_file, write_out


def cmd_convert(args) -> int:
    """``veramp convert``: write a circuit as a JSON document or OpenQASM 3."""
    circuit = load_circuit_file(args.circuit)
    text = write_json(circuit, indent=None) + "\n" if args.to == "json" else write_qasm3(circuit)
    write_out(args.output, text)
    return 0


def cmd_generate(args) -> int:
    """``veramp generate``: a seeded random circuit on a grid architecture."""
    try:
        rows, cols = (int(x) for x in args.grid.lower().split("x"))
    except ValueError:
        raise UsageError(f"--grid takes ROWSxCOLS, e.g. 5x6; got {args.grid!r}") from None
    removed = frozenset(args.remove or [])
    arch = grid_architecture(rows, cols, args.cycles, args.pattern, removed)
    circuit = random_instance(arch, args.seed, args.gates)
    text = write_json(circuit) + "\n" if args.format == "json" else write_qasm3(circuit)
    write_out(args.output, text)
    return 0
