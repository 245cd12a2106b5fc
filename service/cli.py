"""The ``veramp`` command line.

Bad input prints one line ``veramp: error: ...`` on stderr and exits with status 2; nothing the
user types produces a traceback.
"""

from __future__ import annotations

import argparse
import csv
import io
import json
import sys
from pathlib import Path

from contraction.errors import VerampError

BITSTRING_HELP = "bitstrings are written qubit 0 first: '0110' means q0=0, q1=1, q2=1, q3=0"


class UsageError(VerampError):
    kind = "usage"


def _read_text(path: str) -> str:
    if path == "-":
        return sys.stdin.read()
    p = Path(path)
    try:
        return p.read_text()
    except FileNotFoundError:
        raise UsageError(f"no such file: {path}") from None
    except IsADirectoryError:
        raise UsageError(f"{path} is a directory, not a file") from None
    except UnicodeDecodeError:
        raise UsageError(f"{path} is not a text file") from None
    except OSError as exc:
        raise UsageError(f"cannot read {path}: {exc.strerror}") from None


def load_circuit_file(path: str):
    from contraction.loader import load_circuit

    return load_circuit(_read_text(path), source=path)


def _bitstrings(args) -> list[str]:
    from contraction.bitstrings import read_bitstrings

    out = list(args.bitstring or [])
    if args.bitstrings:
        out += read_bitstrings(_read_text(args.bitstrings))
    if not out:
        raise UsageError("give bitstrings with --bitstring B (repeatable) or --bitstrings FILE")
    return out


def _fmt_complex(z: complex) -> str:
    return f"{z.real:+.16e}{z.imag:+.16e}j"


def cmd_amplitudes(args) -> int:
    from contraction.amplitudes import amplitudes
    from contraction.planner import PlannerOptions

    circuit = load_circuit_file(args.circuit)
    run = amplitudes(circuit, _bitstrings(args), dtype=args.dtype, engine=args.engine,
                     planner=PlannerOptions(budget_seconds=args.budget))
    if args.format == "json":
        doc = {
            "circuit": {"num_qubits": circuit.num_qubits, "gates": len(circuit.gates),
                        "content_hash": circuit.content_hash, "structure_hash": circuit.structure_hash},
            "engine": run.engine, "engine_reason": run.reason, "dtype": run.dtype,
            "wall_seconds": round(run.wall_seconds, 6),
            "results": [{"bitstring": r.bitstring, "amplitude": [r.amplitude.real, r.amplitude.imag],
                         "probability": r.probability} for r in run.results],
        }
        if run.plan is not None:
            doc["plan"] = {"madds": run.plan.madds, "width": run.plan.width, "slices": run.plan.nslices}
        print(json.dumps(doc))
    elif args.format == "csv":
        buf = io.StringIO()
        w = csv.writer(buf, lineterminator="\n")
        w.writerow(["bitstring", "amplitude_re", "amplitude_im", "probability"])
        for r in run.results:
            w.writerow([r.bitstring, repr(r.amplitude.real), repr(r.amplitude.imag), repr(r.probability)])
        sys.stdout.write(buf.getvalue())
    else:
        width = max(9, circuit.num_qubits)
        print(f"{'bitstring':<{width}}  {'amplitude':>48}  {'probability':>24}")
        for r in run.results:
            print(f"{r.bitstring:<{width}}  {_fmt_complex(r.amplitude):>48}  {r.probability:>24.16e}")
        print(f"# {len(run.results)} amplitude(s), engine {run.engine} ({run.reason}), {run.dtype}, "
              f"{run.wall_seconds:.3f} s", file=sys.stderr)
    return 0


def cmd_convert(args) -> int:
    from contraction.circuit_json import write_json
    from contraction.qasm_writer import write_qasm3

    circuit = load_circuit_file(args.circuit)
    text = write_json(circuit, indent=None) + "\n" if args.to == "json" else write_qasm3(circuit)
    _write_out(args.output, text)
    return 0


def cmd_generate(args) -> int:
    from contraction.circuit_json import write_json
    from contraction.qasm_writer import write_qasm3
    from contraction.random_circuits import grid_architecture, random_instance

    try:
        rows, cols = (int(x) for x in args.grid.lower().split("x"))
    except ValueError:
        raise UsageError(f"--grid takes ROWSxCOLS, e.g. 5x6; got {args.grid!r}") from None
    removed = frozenset(args.remove or [])
    arch = grid_architecture(rows, cols, args.cycles, args.pattern, removed)
    circuit = random_instance(arch, args.seed, args.gates)
    text = write_json(circuit) + "\n" if args.format == "json" else write_qasm3(circuit)
    _write_out(args.output, text)
    return 0


def _write_out(path: str | None, text: str) -> None:
    if path in (None, "-"):
        sys.stdout.write(text)
    else:
        try:
            Path(path).write_text(text)
        except OSError as exc:
            raise UsageError(f"cannot write {path}: {exc.strerror}") from None


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # one line, exit 2, as for every other bad input
        self.exit(2, f"veramp: error: {message}\n")


def build_parser() -> argparse.ArgumentParser:
    p = _Parser(prog="veramp", description="Exact amplitudes and XEB fidelities for random circuits.")
    sub = p.add_subparsers(dest="command", required=True, parser_class=_Parser)

    a = sub.add_parser("amplitudes", help="exact amplitudes <x|C|0...0>",
                       description="Exact amplitudes <x|C|0...0> for the given bitstrings. " + BITSTRING_HELP,
                       epilog=BITSTRING_HELP)
    a.add_argument("circuit", help="OpenQASM 2/3 or veramp JSON file ('-' for stdin)")
    a.add_argument("--bitstring", "-b", action="append", metavar="B", help="a bitstring (repeatable)")
    a.add_argument("--bitstrings", metavar="FILE", help="file with one bitstring per line")
    a.add_argument("--dtype", choices=["complex128", "complex64"], default="complex128")
    a.add_argument("--engine", choices=["auto", "network", "statevector"], default="auto")
    a.add_argument("--format", choices=["table", "json", "csv"], default="table")
    a.add_argument("--budget", type=float, default=2.0, metavar="SECONDS",
                   help="time budget for finding a contraction order (default 2)")
    a.set_defaults(func=cmd_amplitudes)

    c = sub.add_parser("convert", help="write a circuit as JSON or OpenQASM 3")
    c.add_argument("circuit")
    c.add_argument("--to", choices=["json", "qasm3"], required=True)
    c.add_argument("--output", "-o", metavar="FILE")
    c.set_defaults(func=cmd_convert)

    g = sub.add_parser("generate", help="a seeded random circuit on a grid architecture")
    g.add_argument("--grid", required=True, metavar="ROWSxCOLS")
    g.add_argument("--cycles", type=int, required=True)
    g.add_argument("--gates", choices=["haar", "discrete"], default="haar")
    g.add_argument("--pattern", default="ABCDCDAB", help="order of the four grid matchings")
    g.add_argument("--remove", type=int, action="append", metavar="SITE",
                   help="grid site (row*cols+col) without a qubit (repeatable)")
    g.add_argument("--seed", type=int, default=0)
    g.add_argument("--format", choices=["qasm", "json"], default="qasm")
    g.add_argument("--output", "-o", metavar="FILE")
    g.set_defaults(func=cmd_generate)
    return p


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return args.func(args)
    except VerampError as exc:
        print(f"veramp: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("veramp: interrupted", file=sys.stderr)
        return 130
    except MemoryError:
        print("veramp: error: out of memory; lower the problem size or use the network engine",
              file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())
