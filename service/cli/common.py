"""What every command shares: reading files and bitstrings, settings, the plan store, output."""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

from contraction.circuits.bitstrings import read_bitstrings
from contraction.circuits.loader import load_circuit
from contraction.errors import VerampError
from contraction.planning.estimate import parse_bytes
from contraction.planning.rates import read_rate
from contraction.planning.store import DirectoryPlanStore

from ..settings import Settings



class UsageError(VerampError):
    """A command line that cannot be carried out (missing file, bad option value)."""

    kind = "usage"


def read_text(path: str) -> str:
    """The text of ``path`` ('-' for stdin); raises :class:`UsageError` naming the problem."""
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
    """Read a circuit file within the configured limits (VERAMP_MAX_QUBITS, VERAMP_MAX_GATES)."""
    s = current_settings()
    return load_circuit(read_text(path), source=path, max_qubits=s.max_qubits, max_gates=s.max_gates)


def bitstrings_from_args(args) -> list[str]:
    """The bitstrings of ``--bitstring B`` (repeatable) and ``--bitstrings FILE``, in order."""
    out = list(args.bitstring or [])
    if args.bitstrings:
        out += read_bitstrings(read_text(args.bitstrings))
    if not out:
        raise UsageError("give bitstrings with --bitstring B (repeatable) or --bitstrings FILE")
    return out


def fmt_complex(z: complex) -> str:
    """A complex number in full double precision, e.g. ``+7.0710678118654757e-01+0.0000000000000000e+00j``."""
    return f"{z.real:+.16e}{z.imag:+.16e}j"


def current_settings() -> Settings:
    """The settings from the environment (``VERAMP_*``), read afresh for each command."""
    return Settings()


def memory_cap(args, settings) -> int:
    """Bytes of ``--memory`` when given, else the configured cap."""
    return parse_bytes(args.memory) if getattr(args, "memory", None) else settings.memory_bytes


def local_workers(settings) -> int:
    """Processes of this machine that contract side by side in a command's run, sharing its memory
    cap: the configured workers, or 1 when a Dask cluster runs the slices (its workers do not share
    this machine's cap)."""
    return 1 if settings.dask_scheduler else max(1, settings.workers)


def plan_store(settings) -> DirectoryPlanStore:
    """The plan directory of the settings; raises :class:`UsageError` when it cannot be used."""
    try:
        return DirectoryPlanStore(settings.plan_dir)
    except OSError as exc:
        raise UsageError(f"cannot use the plan directory {settings.plan_dir}: {exc.strerror}") from None


#: seconds between two progress lines when stderr is not a terminal (a log file or a pipe)
LOG_EVERY_SECONDS = 30.0


def search_line(trials: int, best_madds: float | None, seconds: float, budget_seconds: float) -> str:
    """The progress text of a plan search: trials, the best cost so far, seconds of the budget."""
    best = "-" if best_madds is None else f"{best_madds:.3g}"
    return f"planning: {trials} trials, best {best} multiply-adds, {seconds:.0f}/{budget_seconds:.0f} s"


#: a stage (a plan search, or the tasks) shorter than this leaves no line on a terminal
KEEP_AFTER_SECONDS = 1.0


class ProgressBar:
    """Progress on stderr of tasks (``__call__``) and of plan searches (:meth:`search`), stage by stage.
    On a terminal one line redrawn in place, kept when the stage took a second or more (erased
    otherwise); elsewhere (a log file, a pipe) a plain line each ``every`` seconds of a stage and its
    last line when an earlier one was written: a long run is followed in its log, a short one writes
    nothing."""

    def __init__(self, terminal: bool, every: float = LOG_EVERY_SECONDS, stream=None):
        self.terminal, self.every = terminal, every
        self.stream = stream
        self._began: float | None = None       # when the current stage began
        self._since = 0.0                      # when its last line was written (or it began)
        self._written = False                  # a line of the current stage was written (log mode)
        self._width = 0                        # characters of the line on the terminal

    def __call__(self, p) -> None:
        self._show(self.line(p), p.done >= p.total)

    def search(self, p) -> None:
        """An observer for :func:`contraction.planning.progress.observe_searches`."""
        self._show(search_line(p.trials, p.best_madds, p.seconds, p.budget_seconds), p.final)

    def _show(self, text: str, last: bool) -> None:
        out = self.stream or sys.stderr
        now = time.monotonic()
        if self._began is None:
            self._began = self._since = now
        if self.terminal:
            keep = now - self._began >= KEEP_AFTER_SECONDS
            shown = text if not last or keep else ""
            out.write("\r" + shown.ljust(self._width) + ("\n" if last and keep else "\r" if last else " "))
            self._width = 0 if last else len(text)
        elif now - self._since >= self.every or (last and self._written):
            out.write(text + "\n")
            self._since, self._written = now, True
        if last:
            self._began, self._written = None, False
        out.flush()

    @staticmethod
    def line(p) -> str:
        """The bar's text: the plan search's trials and best cost while planning, else tasks done and ETA."""
        search = getattr(p, "planning", None)
        if getattr(p, "phase", None) == "planning" and search:
            return search_line(search["trials"], search.get("best_madds"), search["seconds"],
                               search["budget_seconds"])
        width = 30
        filled = int(width * p.done / max(1, p.total))
        eta = "?" if p.eta_seconds is None else f"{p.eta_seconds:.0f}s"
        return f"[{'#' * filled}{'.' * (width - filled)}] {p.done}/{p.total} tasks, ETA {eta}"


def stored_rate(settings):
    """The stored calibration, or None (nominal rates) — never a silent calibration run."""
    return read_rate(settings.calibration_path)


def qubit_list(text: str, n: int) -> tuple[int, ...]:
    """'0,3,5' or '0-3,7' -> qubit numbers, checked against the circuit."""
    out: list[int] = []
    try:
        for part in text.split(","):
            if "-" in part:
                a, b = part.split("-", 1)
                out.extend(range(int(a), int(b) + 1))
            else:
                out.append(int(part))
    except ValueError:
        raise VerampError(f"cannot read qubits from {text!r} (e.g. 0,3,5 or 0-3)") from None
    bad = [q for q in out if not 0 <= q < n]
    if bad or len(set(out)) != len(out) or not out:
        raise VerampError(f"qubits {text!r} must be distinct numbers in 0..{n - 1}")
    return tuple(out)


def theta_list(text: str) -> list[float]:
    """'0:1:21' (21 points from 0 to 1) or '0.1,0.5,1' -> values."""
    try:
        if ":" in text:
            a, b, k = text.split(":")
            if int(k) < 1 or int(k) > 100_000:
                raise ValueError
            return [float(v) for v in np.linspace(float(a), float(b), int(k))]
        return [float(v) for v in text.split(",")]
    except ValueError:
        raise VerampError(f"cannot read theta values from {text!r} (e.g. 0:1:21 or 0.1,0.5,1)") from None


def write_out(path: str | None, text: str) -> None:
    """Write ``text`` to ``path`` (stdout for None or '-')."""
    if path in (None, "-"):
        sys.stdout.write(text)
    else:
        try:
            Path(path).write_text(text)
        except OSError as exc:
            raise UsageError(f"cannot write {path}: {exc.strerror}") from None
