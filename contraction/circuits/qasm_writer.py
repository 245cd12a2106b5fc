"""Write a circuit as OpenQASM 3.

* A gate that came from the built-in library by name (and still has that matrix) is written by
  name from ``stdgates.inc`` (or an explicit ``gate`` definition for the library's extras).
* Any other single-qubit gate becomes ``U(θ, φ, λ)`` plus a global phase (exact ZYZ angles).
* Any other k-qubit gate (Haar-random, calibrated) is decomposed exactly into two-level
  rotations between basis states adjacent in Gray-code order — each a fully controlled ``U``
  written with ``ctrl @`` / ``negctrl @`` modifiers — and controlled ``gphase`` for the diagonal
  that remains. Every unitary can be exported this way; the cost is up to
  2^(k-1)·(2^k - 1) rotations per gate.

OpenQASM 2.0 has no modifiers, so only circuits whose gates all have library names could be
written in it; veramp writes OpenQASM 3 only.
"""

from __future__ import annotations

import cmath
import math

import numpy as np

from contraction.circuits import gates as G
from contraction.circuits.model import Circuit

_STDGATES = {"p", "x", "y", "z", "h", "s", "sdg", "t", "tdg", "sx", "rx", "ry", "rz", "cx", "cy", "cz",
             "cp", "crx", "cry", "crz", "ch", "swap", "ccx", "cswap", "cu", "phase", "cphase", "id",
             "u1", "u2", "u3"}
_EPS = 1e-14


def zyz_angles(m: np.ndarray) -> tuple[float, float, float, float]:
    """(θ, φ, λ, α) with m = e^{iα} U(θ, φ, λ) for a 2x2 unitary m."""
    c, s = abs(m[0, 0]), abs(m[1, 0])
    theta = 2.0 * math.atan2(s, c)
    if s < _EPS:
        alpha = cmath.phase(m[0, 0])
        return theta, 0.0, cmath.phase(m[1, 1]) - alpha, alpha
    if c < _EPS:
        alpha = cmath.phase(m[1, 0])
        return theta, 0.0, cmath.phase(-m[0, 1]) - alpha, alpha
    alpha = cmath.phase(m[0, 0])
    return theta, cmath.phase(m[1, 0]) - alpha, cmath.phase(-m[0, 1]) - alpha, alpha


def two_level_decomposition(u: np.ndarray):
    """Rotations and a diagonal with u = R_1 R_2 ... R_m D (R_i two-level, adjacent in Gray order).

    Returns ``(rotations, phases)``; each rotation is ``(a, b, V)``: V acts on basis states a and b
    (which differ in one bit), in the order (a, b).
    """
    d = u.shape[0]
    gray = [i ^ (i >> 1) for i in range(d)]
    w = np.array(u, dtype=np.complex128)
    rotations = []
    for j in range(d - 1):
        col = gray[j]
        for r in range(d - 1, j, -1):
            a, b = gray[r - 1], gray[r]
            x, y = w[a, col], w[b, col]
            if abs(y) < _EPS:
                continue
            nrm = math.hypot(abs(x), abs(y))
            g = np.array([[x.conjugate(), y.conjugate()], [-y, x]]) / nrm
            w[[a, b], :] = g @ w[[a, b], :]
            rotations.append((a, b, g.conj().T))
    return rotations, np.angle(np.diagonal(w))


def _fmt(x: float) -> str:
    return repr(float(x))


def _controlled_line(op: str, controls: list[tuple[str, int]], target: str | None) -> str:
    mods = "".join(("ctrl @ " if bit else "negctrl @ ") for _, bit in controls)
    args = [q for q, _ in controls] + ([target] if target else [])
    return f"{mods}{op} {', '.join(args)};"


def decompose_lines(m: np.ndarray, qubits: list[str]) -> tuple[list[str], float]:
    """OpenQASM 3 lines for gate ``m`` on ``qubits`` and a leftover global phase."""
    k = len(qubits)
    if k == 1:
        th, ph, la, al = zyz_angles(m)
        return [f"U({_fmt(th)}, {_fmt(ph)}, {_fmt(la)}) {qubits[0]};"], al
    rotations, phases = two_level_decomposition(m)
    lines: list[str] = []
    phase = float(phases[0])
    for s in range(len(phases)):                      # the diagonal acts first
        beta = float(phases[s] - phases[0])
        if abs(beta) > _EPS:
            bits = [(s >> (k - 1 - p)) & 1 for p in range(k)]
            lines.append(_controlled_line(f"gphase({_fmt(beta)})", list(zip(qubits, bits)), None))
    for a, b, v in reversed(rotations):               # then R_m ... R_1
        t = next(p for p in range(k) if ((a ^ b) >> (k - 1 - p)) & 1)
        if (a >> (k - 1 - t)) & 1:                    # order the 2x2 block as (bit 0, bit 1)
            v = v[::-1, ::-1]
        controls = [(qubits[p], (a >> (k - 1 - p)) & 1) for p in range(k) if p != t]
        th, ph, la, al = zyz_angles(v)
        lines.append(_controlled_line(f"U({_fmt(th)}, {_fmt(ph)}, {_fmt(la)})", controls, qubits[t]))
        if abs(al) > _EPS:
            lines.append(_controlled_line(f"gphase({_fmt(al)})", controls, None))
    return lines, phase


def _named_line(gate, names: list[str]) -> str | None:
    """The gate by its library name, if it has one that portable readers know (or we define)."""
    name = gate.name
    if name is None or name not in G.LIBRARY:
        return None
    if name not in _STDGATES and G.LIBRARY[name].num_params:
        return None  # parameterised extras are written by matrix
    if not np.allclose(G.LIBRARY[name].factory(*gate.params), gate.matrix, atol=1e-12):
        return None
    params = f"({', '.join(_fmt(p) for p in gate.params)})" if gate.params else ""
    return f"{name}{params} {', '.join(names)};"


def _definition(name: str) -> str:
    """An explicit ``gate`` definition of a parameterless library extra (e.g. iswap, c3x)."""
    spec = G.LIBRARY[name]
    args = [f"x{i}" for i in range(spec.num_qubits)]
    lines, extra = decompose_lines(spec.factory(), args)
    if abs(extra) > _EPS:
        lines.append(f"gphase({_fmt(extra)});")
    return f"gate {name} {', '.join(args)} {{ {' '.join(lines)} }}"


def write_qasm3(circuit: Circuit) -> str:
    """The circuit as an OpenQASM 3 program that reads back to the same amplitudes."""
    body: list[str] = []
    phase = circuit.global_phase
    extras: set[str] = set()
    for gate in circuit.gates:
        names = [f"q[{q}]" for q in gate.qubits]
        line = _named_line(gate, names)
        if line is not None:
            if gate.name not in _STDGATES:
                extras.add(gate.name)
            body.append(line)
            continue
        lines, extra = decompose_lines(gate.matrix, names)
        if gate.label:
            body.append(f"// {gate.label.replace(chr(10), ' ')}")
        body.extend(lines)
        phase += extra
    head = ["OPENQASM 3.0;", 'include "stdgates.inc";']
    head += [_definition(name) for name in sorted(extras)]
    head.append(f"qubit[{circuit.num_qubits}] q;")
    if abs(phase) > _EPS:
        body.append(f"gphase({_fmt(phase)});")
    return "\n".join(head + body) + "\n"
