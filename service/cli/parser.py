"""The ``veramp`` argument parser: every command's options, each command's function named
``"module:function"`` and imported only when that command runs (``veramp --help`` stays fast)."""

from __future__ import annotations

import argparse

from contraction import defaults

#: how bitstrings are read everywhere (help texts)
BITSTRING_HELP = "bitstrings are written qubit 0 first: '0110' means q0=0, q1=1, q2=1, q3=0"



def _server_workers(text: str) -> int:
    """1 to 64 (argparse type)."""
    try:
        n = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a whole number: {text!r}") from None
    if not 1 <= n <= 64:
        raise argparse.ArgumentTypeError("between 1 and 64")
    return n

def _circuit(p: argparse.ArgumentParser) -> None:
    p.add_argument("circuit", help="OpenQASM 2/3 or veramp JSON file ('-' for stdin)")


def _memory(p: argparse.ArgumentParser) -> None:
    p.add_argument("--memory", metavar="SIZE", help="peak memory cap, e.g. 8GiB (default VERAMP_MEMORY_BYTES, "
                                                    f"{defaults.MEMORY_BYTES / 2 ** 30:g}GiB)")


def _dtype(p: argparse.ArgumentParser) -> None:
    p.add_argument("--dtype", choices=["complex128", "complex64"], default=defaults.DTYPE)


class _Parser(argparse.ArgumentParser):
    """Usage errors as one line on stderr and exit status 2, like every other bad input."""

    def error(self, message):  # one line, exit 2, as for every other bad input
        self.exit(2, f"veramp: error: {message}\n")


def build_parser() -> argparse.ArgumentParser:
    """The parser of every ``veramp`` command; ``args.func`` names the function that runs it."""
    p = _Parser(prog="veramp", description="Exact amplitudes and XEB fidelities for random circuits.")
    sub = p.add_subparsers(dest="command", required=True, parser_class=_Parser)

    a = sub.add_parser("amplitudes", help="exact amplitudes <x|C|0...0>",
                       description="Exact amplitudes <x|C|0...0> for the given bitstrings. " + BITSTRING_HELP,
                       epilog=BITSTRING_HELP)
    _circuit(a)
    a.add_argument("--bitstring", "-b", action="append", metavar="B", help="a bitstring (repeatable)")
    a.add_argument("--bitstrings", metavar="FILE", help="file with one bitstring per line")
    _dtype(a)
    a.add_argument("--engine", choices=["auto", "statevector", "batch", "single", "stacked"], default="auto")
    a.add_argument("--format", choices=["table", "json", "csv"], default="table")
    a.add_argument("--budget", type=float, metavar="SECONDS",
                   help="time budget for finding a contraction order (default: VERAMP_PLAN_BUDGET_SECONDS, "
                        f"{defaults.PLAN_BUDGET_SECONDS:g})")
    _memory(a)
    a.add_argument("--open", metavar="QUBITS",
                   help="leave these qubits open (e.g. 0-3): bitstrings that agree on all other qubits "
                        "share one contraction")
    a.set_defaults(func="compute:cmd_amplitudes")

    bl = sub.add_parser("block", help="all 2^k amplitudes on k qubits, the other qubits fixed",
                        description="All 2^k amplitudes on the given qubits with the others fixed, from one "
                                    "contraction. Row i: the qubits' values are the binary digits of i, the first "
                                    "listed qubit first.")
    _circuit(bl)
    bl.add_argument("--qubits", required=True, metavar="QUBITS", help="open qubits, e.g. 0-3 or 5,2,7")
    bl.add_argument("--fixed", metavar="BITS", help="n-bit string for the other qubits (default all 0)")
    bl.add_argument("--engine", choices=["auto", "statevector", "batch", "single"], default="auto")
    bl.add_argument("--format", choices=["csv", "json"], default="csv")
    _memory(bl)
    bl.set_defaults(func="compute:cmd_block")

    mg = sub.add_parser("marginal", help="marginal probabilities on k qubits",
                        description="P(y) on the given qubits, summed over all other qubits. Row i: the "
                                    "qubits' values are the binary digits of i, the first listed qubit first.")
    _circuit(mg)
    mg.add_argument("--qubits", required=True, metavar="QUBITS", help="measured qubits, e.g. 0-3 or 5,2,7")
    mg.add_argument("--engine", choices=["auto", "statevector", "single"], default="auto")
    mg.add_argument("--format", choices=["csv", "json"], default="csv")
    _memory(mg)
    mg.set_defaults(func="compute:cmd_marginal")

    pa = sub.add_parser("path", help="p(theta) along the Cayley path from the circuit to a Haar deformation",
                        description="Every gate C_k becomes C_k f(theta h_k), f the Cayley transform and h_k the "
                                    "inverse transform of a seeded Haar-random H_k: theta=0 is the circuit, theta=1 "
                                    "the circuit with gates C_k H_k. Optionally recover p from samples at other "
                                    "nodes (weighted least squares of N/D in ball arithmetic with error bounds; Berlekamp–Welch with "
                                    "--errors).")
    _circuit(pa)
    pa.add_argument("--bitstring", "-b", required=True, metavar="B")
    pa.add_argument("--seed", type=int, default=0, help="seed of the Haar deformations")
    pa.add_argument("--thetas", default="0:1:21", help="'a:b:k' (k points) or a list (default 0:1:21)")
    pa.add_argument("--fit-nodes", metavar="THETAS", help="sample p here and recover it at --targets")
    pa.add_argument("--targets", default="1", metavar="THETAS", help="where to evaluate the recovery (default 1)")
    pa.add_argument("--errors", type=int, default=0, help="samples that may be corrupted (Berlekamp–Welch)")
    pa.add_argument("--noise", type=float, metavar="EPS",
                    help="relative noise of the samples, for the error bounds (default: double rounding only)")
    pa.add_argument("--max-relative-error", type=float, default=0.1, metavar="R",
                    help="decline targets whose error bound exceeds this share of the value (default 0.1)")
    pa.add_argument("--precision", choices=["double", "mp"], default="double",
                    help="mp: compute the samples with an mpmath state vector (up to 8 qubits) at the precision "
                         "the recovery needs, and use them at full precision; the fit always runs in ball "
                         "arithmetic at the precision it needs")
    pa.add_argument("--dps", type=int, help="decimal digits for --precision mp (default: what the known "
                                            "denominator's range over the nodes and targets requires, plus 25)")
    pa.add_argument("--plot", metavar="FILE", help="write the figure (PNG or SVG)")
    pa.add_argument("--format", choices=["table", "json"], default="table")
    _memory(pa)
    pa.set_defaults(func="analysis:cmd_path")

    ps = sub.add_parser("path-study", help="how well p(1) is determined by noisy samples on [0, delta]",
                        description="For each delta and noise level: sample p at Chebyshev nodes on [0, delta], "
                                    "add seeded relative noise, recover p at the target with its error bound "
                                    "(or decline), and compare with p computed directly.")
    _circuit(ps)
    ps.add_argument("--bitstring", "-b", required=True, metavar="B")
    ps.add_argument("--seed", type=int, default=0, help="seed of the Haar deformations and of the noise")
    ps.add_argument("--deltas", default="0.25,0.5,0.75,1", metavar="LIST", help="interval lengths (default 0.25,0.5,0.75,1)")
    ps.add_argument("--noise", default="1e-12,1e-9,1e-6,1e-3", metavar="LIST", help="relative noise levels")
    ps.add_argument("--target", type=float, default=1.0, help="theta to recover (default 1)")
    ps.add_argument("--format", choices=["table", "json"], default="table")
    ps.add_argument("--plot", metavar="FILE", help="write the figure (.png or .svg)")
    ps.set_defaults(func="analysis:cmd_path_study")

    e = sub.add_parser("estimate", help="cost of a run, before computing it")
    _circuit(e)
    e.add_argument("--count", type=int, default=1, metavar="K", help="number of distinct amplitudes wanted")
    _dtype(e)
    e.add_argument("--engine", choices=["auto", "statevector", "batch", "single", "stacked"], default="auto")
    _memory(e)
    e.add_argument("--budget", type=float, metavar="SECONDS", help="planning budget")
    e.add_argument("--format", choices=["table", "json"], default="table")
    e.set_defaults(func="compute:cmd_estimate")

    pl = sub.add_parser("plan", help="search a contraction plan ahead of time and store it (for one local "
                                     "worker's share of the memory cap, as the amplitudes run it)")
    _circuit(pl)
    pl.add_argument("--budget", type=float, default=60.0, metavar="SECONDS",
                    help="seconds the search may take, all of them used (default 60)")
    _memory(pl)
    _dtype(pl)
    pl.set_defaults(func="compute:cmd_plan")

    x = sub.add_parser("xeb", help="linear and log XEB fidelity of device samples")
    _circuit(x)
    x.add_argument("--samples", required=True, metavar="FILE", help="sampled bitstrings, one per line")
    x.add_argument("--bootstrap", type=int, default=1000, help="bootstrap resamples (default 1000)")
    x.add_argument("--seed", type=int, default=0)
    x.add_argument("--format", choices=["table", "json"], default="table")
    x.add_argument("--plot", metavar="FILE", help="write the N·p histogram against Porter–Thomas (.png or .svg)")
    x.set_defaults(func="analysis:cmd_xeb")

    sb = sub.add_parser("submit", help="send a circuit and bitstrings to a running service and follow the job")
    _circuit(sb)
    sb.add_argument("--bitstrings", required=True, metavar="FILE")
    sb.add_argument("--url", default="http://127.0.0.1:8350")
    sb.add_argument("--token", help="bearer token (or VERAMP_TOKEN)")
    sb.add_argument("--retries", type=int, default=5, help="retries with exponential backoff (default 5)")
    _dtype(sb)
    sb.add_argument("--format", choices=["json", "csv"], default="csv")
    sb.set_defaults(func="remote:cmd_submit")

    ft = sub.add_parser("fit", help="fit XEB against cycles: F(d) = A(1-e)^d with a 95%% interval on e")
    ft.add_argument("table", help="rows 'cycles, fidelity, stderr' (CSV or whitespace)")
    ft.add_argument("--extrapolate", type=float, action="append", metavar="CYCLES")
    ft.add_argument("--plot", metavar="FILE", help="write the figure (.png or .svg)")
    ft.set_defaults(func="analysis:cmd_fit")

    sv = sub.add_parser("serve", help="run the REST service (SQLite and a local worker pool by default)")
    sv.add_argument("--host", help="listen address (VERAMP_HOST, default 127.0.0.1)")
    sv.add_argument("--port", type=int, help="port (VERAMP_PORT, default 8350)")
    sv.add_argument("--data-dir", metavar="DIR", help="database, plans and calibration (VERAMP_DATA_DIR)")
    sv.add_argument("--require-tokens", action="store_true",
                    help="refuse to serve on a non-loopback address without bearer tokens")
    sv.add_argument("--server-workers", type=_server_workers, default=None,
                    help="processes answering requests (default VERAMP_SERVER_WORKERS or 1); each has its own "
                         "pool of VERAMP_WORKERS contraction processes")
    sv.set_defaults(func="server:cmd_serve")

    hc = sub.add_parser("health", help="exit 0 when the local service answers its health route (container checks)")
    hc.add_argument("--url", help="service URL (default http://127.0.0.1:VERAMP_PORT)")
    hc.add_argument("--timeout", type=float, default=3.0)
    hc.set_defaults(func="remote:cmd_health")

    cal = sub.add_parser("calibrate", help="re-measure this machine's rates used for time predictions")
    cal.set_defaults(func="compute:cmd_calibrate")

    c = sub.add_parser("convert", help="write a circuit as JSON or OpenQASM 3")
    _circuit(c)
    c.add_argument("--to", choices=["json", "qasm3"], required=True)
    c.add_argument("--output", "-o", metavar="FILE")
    c.set_defaults(func="circuits:cmd_convert")

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
    g.set_defaults(func="circuits:cmd_generate")
    return p
