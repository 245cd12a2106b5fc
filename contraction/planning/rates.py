"""Machine rates: the figures that turn a plan's operation counts into predicted seconds.

:class:`MachineRate` is plain data (stored as JSON by ``veramp calibrate``, measured by
:mod:`contraction.execution.calibration`); :data:`NOMINAL_RATE` stands in when nothing was measured.
"""

from __future__ import annotations

import json
import os
from dataclasses import MISSING, asdict, dataclass
from pathlib import Path


@dataclass(frozen=True)
class MachineRate:
    """Rates of this machine: complex multiply-adds per second of a dense matrix product, the share
    of it a contraction reaches, seconds per element written and per pairwise step, seconds per
    (amplitude x gate) update of the state-vector engine, and the batched and open-qubit engines'
    measured time over what the model predicts for them."""

    matmul_madds_per_second: float
    efficiency: float
    seconds_per_write: float
    step_overhead_seconds: float
    statevector_seconds_per_update: float
    threads: int
    measured_at: float
    # measured / predicted for the engines whose networks differ from the one-amplitude networks the
    # model is fitted on: a batch index on every projector, open qubits (1.0: the model as it is)
    batch_factor: float = 1.0
    open_factor: float = 1.0
    # what a request costs besides its contractions (engine choice, checks, tensor set-up), measured by
    # the calibration: added once to every option's prediction
    request_overhead_seconds: float = 0.0

    def contraction_seconds(self, madds: float, writes: float, steps: float) -> float:
        """Predicted seconds of a contraction with these multiply-adds, elements written and steps."""
        return (madds / (self.matmul_madds_per_second * self.efficiency) + writes * self.seconds_per_write
                + steps * self.step_overhead_seconds)

    def to_dict(self) -> dict:
        """The rates as a JSON-ready dict."""
        return asdict(self)

    @classmethod
    def from_dict(cls, doc: dict) -> "MachineRate":
        """Rates from :meth:`to_dict` output (a field added since the document was written takes its
        default); raises KeyError/TypeError on a malformed document."""
        fields = cls.__dataclass_fields__
        return cls(**{k: doc[k] for k, f in fields.items() if k in doc or f.default is MISSING})


#: rates used when no calibration is given: typical of the 2-core machines the project is built
#: on (common practice: measured there by ``veramp calibrate``; they only rank the options)
NOMINAL_RATE = MachineRate(1.0e10, 0.5, 7e-9, 5e-5, 1.5e-8, 1, 0.0)


def read_rate(path: str | os.PathLike | None) -> MachineRate | None:
    """The rates stored at ``path``, or None when there is no path, no file or no valid document."""
    if path is None:
        return None
    try:
        return MachineRate.from_dict(json.loads(Path(path).read_text()))
    except (OSError, ValueError, KeyError, TypeError):
        return None
