"""Bitstrings: validation and reading.

A bitstring is written qubit 0 first: ``"0110"`` means qubit 0 = 0, qubit 1 = 1, qubit 2 = 1,
qubit 3 = 0. Read as a binary number it is the index of the basis state in the state vector.
"""

from __future__ import annotations

from typing import Iterable

import numpy as np

from contraction.errors import BitstringError

_ALLOWED = frozenset("01")


def check_bitstrings(bitstrings: Iterable[str], num_qubits: int) -> list[str]:
    """Return the bitstrings as a list, or raise :class:`BitstringError` naming the first bad one."""
    out = []
    for i, b in enumerate(bitstrings):
        if not isinstance(b, str):
            raise BitstringError(f"bitstring {i}: expected a string of 0s and 1s, got {type(b).__name__}")
        if len(b) != num_qubits:
            raise BitstringError(f"bitstring {i} ({_short(b)!r}) has {len(b)} characters; "
                                 f"the circuit has {num_qubits} qubits")
        if not _ALLOWED.issuperset(b):
            bad = sorted(set(b) - _ALLOWED)[0]
            raise BitstringError(f"bitstring {i} ({_short(b)!r}) contains {bad!r}; only '0' and '1' are allowed")
        out.append(b)
    return out


def read_bitstrings(text: str) -> list[str]:
    """Bitstrings from text: one per line; blank lines and lines starting with '#' are skipped."""
    out = []
    for line in text.splitlines():
        s = line.strip()
        if s and not s.startswith("#"):
            out.append(s)
    return out


def _short(b: str) -> str:
    return b if len(b) <= 24 else b[:21] + "..."


def bit_table(bitstrings: Iterable[str]) -> np.ndarray:
    """Bitstrings (qubit 0 first, already checked) as a (count, qubits) array of 0/1."""
    bits = list(bitstrings)
    width = len(bits[0]) if bits else 0
    return np.array([[c == "1" for c in b] for b in bits], dtype=np.uint8).reshape(len(bits), width)
