"""Every default and limit the engine starts from, in one place.

The service's settings (``service/settings.py``, environment variables ``VERAMP_*``) take their
defaults from here, and the command line takes them from the settings; nothing else repeats these
numbers. Sizes are in bytes, times in seconds, counts in qubits, gates or bitstrings.
"""

from __future__ import annotations

#: peak memory of one run, in bytes: all live tensors (or the state vector) at once
MEMORY_BYTES = 8 * 2 ** 30
#: planning budget of a request, in seconds (shared by every contraction size planned)
PLAN_BUDGET_SECONDS = 5.0
#: largest register a circuit may declare
MAX_QUBITS = 4096
#: largest number of gates a program may expand to (checked before expanding)
MAX_GATES = 200_000
#: largest batch index the network engine puts on the projectors (bitstrings per contraction)
MAX_BATCH = 4096
#: largest state vector the state-vector engine builds (2^32 complex64 = 32 GiB); the cap decides first
STATEVECTOR_MAX_QUBITS = 32
#: from this size on the state-vector engine applies gates in place, a block of elements at a time
STATEVECTOR_IN_PLACE_QUBITS = 25
STATEVECTOR_CHUNK_ELEMENTS = 2 ** 22
#: the automatic engine choice uses the state vector without planning up to this many qubits
STATEVECTOR_AUTO_QUBITS = 22
#: largest number of open qubits of a block of amplitudes
MAX_BLOCK_QUBITS = 20
#: number type of tensors and amplitudes
DTYPE = "complex128"

#: a sliced contraction is split into at most this many tasks per local worker process (a slow
#: worker then holds up the end of a run by a quarter of its share at most; common practice)
TASKS_PER_WORKER = 4
