"""Tensor networks for amplitudes <x|C|0...0>, built from the circuit's layout alone.

:func:`build_structure` looks only at the qubit count and the qubits of each gate. It fuses every
single-qubit gate into the next multi-qubit gate on its wire (or into the output projector when
none follows); that rule is decided by the layout, never by gate values, so every random instance
of an architecture and every bitstring gives the same network and can share one contraction plan.

Tensors, in order: one |0> vector per qubit, one tensor per multi-qubit gate (indices: outputs
then inputs, first qubit most significant), one <x_q| projector per qubit that is not left open.
The projector values carry the bitstring; the structure does not.

Two variants share the builder:

* a **batch** of B bitstrings: every projector gets a second index of size B shared by all of them
  (a hyper-index, contracted by cotengra as a batch dimension), so one contraction gives B
  amplitudes; B is part of the structure and therefore of the plan's key;
* **open qubits**: no projector on those wires, whose final indices become output indices, so one
  contraction gives all 2^k amplitudes of a block.

The output axes are ``(batch?, open qubits in the order given)``.

**Diagonal gates** are the one value-dependent decision, and it is part of the structure (hence of
the network key): a multi-qubit gate whose matrix is exactly diagonal (CZ, controlled phases, ZZ
rotations) becomes a tensor of its k wire indices, which pass through it unchanged (hyper-indices),
instead of a tensor of 2k indices; the single-qubit gates waiting on its wires are not fused into it
but kept as their own small tensors. A plan made for such a network serves every circuit with the
same layout and the same diagonal gates. A diagonal gate meeting wires still in |0> (no gate on them
yet) acts on its other wires only, as its diagonal with those qubits at 0, and leaves them in |0>; the
first diagonal entry of one on |0> wires alone is a phase carried by a |0> vector. That is structure
too (which wires a gate meets before anything else touches them), and it makes controlled phases whose
control is still in |0> (the quantum Fourier transform of |0...0>) cost nothing.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from contraction.circuits.bitstrings import bit_table
from contraction.circuits.model import Circuit, Gate
from contraction.errors import VerampError


def _symbol(i: int) -> str:
    import cotengra as ctg

    return ctg.get_symbol(i)


@dataclass(frozen=True)
class NetworkStructure:
    """The layout of a network: index labels per tensor, the output and the index sizes.

    ``sources[t]`` says where tensor t's values come from: ``("init", q, phases)`` (|0> times the
    first diagonal entry of each diagonal gate in ``phases``, gates met while all their wires were in
    |0>); ``("gate", qubits, steps)`` with steps applied in order, each ``("pre", qubits, q, ids)``
    (single-qubit gates ``ids`` on wire q) or ``("gate", g)`` (circuit gate g); ``("diag", qubits, g)``
    (the diagonal of circuit gate g on ``qubits``, the wires' current indices, its other qubits at 0);
    or ``("proj", q, post)`` with the single-qubit gates after the last multi-qubit gate on q. A
    single-qubit gate id may also be ``("zero", g, q)``: diagonal gate g on wire q, its other qubits at 0.
    """

    num_qubits: int
    inputs: tuple[tuple[str, ...], ...]
    output: tuple[str, ...]
    sources: tuple[tuple, ...]
    batch: int = 0                       # B > 0: projectors carry a shared batch index of size B
    batch_label: str | None = None
    open_qubits: tuple[int, ...] = ()

    @property
    def size_dict(self) -> dict[str, int]:
        """Size of every index: 2 for qubit indices, the batch size for the batch index."""
        sizes = {ix: 2 for term in self.inputs for ix in term}
        if self.batch_label is not None:
            sizes[self.batch_label] = self.batch
        return sizes

    @property
    def output_shape(self) -> tuple[int, ...]:
        """Shape of the contraction's result (batch index first, then open qubits)."""
        sizes = self.size_dict
        return tuple(sizes[ix] for ix in self.output)

    @property
    def num_tensors(self) -> int:
        """Number of input tensors."""
        return len(self.inputs)

    @cached_property
    def canonical(self) -> dict[str, int]:
        """Index label -> canonical number (order of first appearance over the inputs)."""
        relabel: dict[str, int] = {}
        for term in self.inputs:
            for ix in term:
                relabel.setdefault(ix, len(relabel))
        return relabel

    @cached_property
    def labels(self) -> list[str]:
        """Canonical number -> index label."""
        return list(self.canonical)

    @cached_property
    def key(self) -> str:
        """Canonical hash of the network: indices relabelled in order of first appearance."""
        relabel = self.canonical
        sizes = self.size_dict
        doc = {
            "inputs": [[relabel[ix] for ix in term] for term in self.inputs],
            "output": [relabel.get(ix, -1) for ix in self.output],
            "sizes": [sizes[ix] for ix in relabel],
        }
        blob = json.dumps(doc, separators=(",", ":")).encode()
        return hashlib.sha256(b"veramp-network-v1\0" + blob).hexdigest()


def diagonal_gates(circuit: Circuit) -> frozenset[int]:
    """Indices of the multi-qubit gates whose matrices are exactly diagonal (off-diagonal entries all
    zero, as in CZ, controlled phases and ZZ rotations)."""
    return circuit.diagonal_gates


def _joined_by_next(circuit: Circuit, diagonal: frozenset[int]) -> frozenset[int]:
    """Diagonal multi-qubit gates whose wires next meet, all of them and nothing else, one non-diagonal
    gate (single-qubit gates aside): that gate will be multiplied into the same tensor, so the diagonal
    starts a full tensor (taking the single-qubit gates waiting on its wires) rather than a diagonal one
    beside tensors of its own for them. Layout only, given the diagonal gates."""
    upcoming: dict[int, int] = {}                  # wire -> next multi-qubit gate on it
    joined = set()
    for gi in range(len(circuit.gates) - 1, -1, -1):
        qs = circuit.gates[gi].qubits
        if len(qs) < 2:
            continue
        if gi in diagonal:
            nxt = {upcoming.get(q, -1) for q in qs}
            if len(nxt) == 1:
                (g2,) = nxt
                if g2 >= 0 and g2 not in diagonal and set(circuit.gates[g2].qubits) == set(qs):
                    joined.add(gi)
        for q in qs:
            upcoming[q] = gi
    return frozenset(joined)


def build_structure(circuit: Circuit, batch: int = 0, open_qubits: tuple[int, ...] = (),
                    diagonal: frozenset[int] | None = None) -> NetworkStructure:
    """The network of one amplitude of ``circuit`` (a scalar), of a batch of ``batch`` amplitudes
    (output: the batch axis) and/or of the block of amplitudes on ``open_qubits`` (output axes in
    that order).

    Layout-only fusion rules: single-qubit gates wait on their wire and are multiplied into the
    next multi-qubit gate there (or into the projector); a multi-qubit gate whose qubit set equals
    that of the tensor last written on all its wires is multiplied into that tensor. Gates in
    ``diagonal`` (default: :func:`diagonal_gates`) become diagonal tensors on the wires' indices,
    unless a full tensor on exactly their wires is there to take them or the next gate there is a
    non-diagonal one on exactly their wires (:func:`_joined_by_next`): a two-qubit gate written as
    several controlled gates, as OpenQASM programs do, is one tensor.
    """
    n = circuit.num_qubits
    diagonal = diagonal_gates(circuit) if diagonal is None else diagonal
    counter = 0
    wire: list[str] = []
    last: list[int] = [-1] * n          # tensor that last wrote each wire (-1: the |0> vector)
    inputs: list[tuple[str, ...]] = []
    sources: list = []
    for q in range(n):
        wire.append(_symbol(counter))
        counter += 1
        inputs.append((wire[q],))
        sources.append(("init", q, []))
    pending: list[list[int]] = [[] for _ in range(n)]
    tensor_qubits: dict[int, tuple[int, ...]] = {}

    def waiting(qs) -> list:
        """The single-qubit gates waiting on ``qs`` as steps of the next tensor there (taken off the wires)."""
        steps = [("pre", qs, q, tuple(pending[q])) for q in qs if pending[q]]
        for q in qs:
            pending[q] = []
        return steps

    def last_on_all(qs) -> int:
        """The full tensor last written on every wire of ``qs`` and on no other wire, or -1."""
        t = last[qs[0]]
        if t < 0 or any(last[q] != t for q in qs):
            return -1
        return t if set(tensor_qubits.get(t, ())) == set(qs) else -1

    joined = _joined_by_next(circuit, diagonal)
    for gi, gate in enumerate(circuit.gates):
        qs = gate.qubits
        if len(qs) == 1:
            pending[qs[0]].append(gi)
            continue
        t = last_on_all(qs)
        if t >= 0:
            # multiplied into the tensor last written on exactly these wires (a diagonal gate too: the
            # tensor is full already)
            sources[t][2].extend(waiting(qs) + [("gate", gi)])
            continue
        zero = [q for q in qs if last[q] == -1 and not pending[q]] if gi in diagonal else []
        if gi in diagonal and (zero or gi not in joined):
            # wires still in |0> (no tensor and no single-qubit gate on them yet) hold the value 0: the
            # gate acts on the others as its restriction to 0 there, and they stay in |0>
            if zero:
                qs = tuple(q for q in qs if q not in zero)
                if not qs:                   # all in |0>: a phase, kept by the first wire's |0> vector
                    sources[zero[0]][2].append(gi)
                    continue
                if len(qs) == 1:             # a one-qubit diagonal: it waits on its wire like any other
                    pending[qs[0]].append(("zero", gi, qs[0]))
                    continue
            for q in qs:
                if pending[q]:               # the waiting single-qubit gates: a tensor of their own
                    o = _symbol(counter)
                    counter += 1
                    inputs.append((o, wire[q]))
                    sources.append(("gate", (q,), [("pre", (q,), q, tuple(pending[q]))]))
                    wire[q], last[q], pending[q] = o, len(inputs) - 1, []
            for q in qs:
                last[q] = len(inputs)          # nothing merges into (or across) a diagonal tensor
            inputs.append(tuple(wire[q] for q in qs))
            sources.append(("diag", qs, gi))     # qs: the gate's qubits not in |0>, in its order
            continue
        steps = waiting(qs)
        outs = []
        for q in qs:
            outs.append(_symbol(counter))
            counter += 1
        ins = [wire[q] for q in qs]
        for q, o in zip(qs, outs):
            wire[q] = o
            last[q] = len(inputs)
        tensor_qubits[len(inputs)] = qs
        inputs.append(tuple(outs) + tuple(ins))
        sources.append(("gate", qs, steps + [("gate", gi)]))
    open_qubits = tuple(int(q) for q in open_qubits)
    if len(set(open_qubits)) != len(open_qubits) or any(not 0 <= q < n for q in open_qubits):
        raise ValueError(f"open qubits {open_qubits} must be distinct qubits of 0..{n - 1}")
    if batch < 0 or (batch and len(open_qubits) == n):
        raise ValueError("a batch needs at least one projected qubit and a positive size")
    blabel = _symbol(counter) if batch else None
    output: list[str] = [blabel] if batch else []
    for q in range(n):
        if q in open_qubits:
            # single-qubit gates after the last multi-qubit gate on an open wire: one more tensor
            if pending[q]:
                o = _symbol(counter + 1 + q)
                inputs.append((o, wire[q]))
                sources.append(("gate", (q,), tuple(("pre", (q,), q, tuple(pending[q])) for _ in [0])))
                wire[q] = o
            continue
        inputs.append((wire[q], blabel) if batch else (wire[q],))
        sources.append(("proj", q, tuple(pending[q])))
    output.extend(wire[q] for q in open_qubits)
    frozen = tuple((s[0], s[1], tuple(s[2])) if s[0] in ("gate", "init") else s for s in sources)
    return NetworkStructure(n, tuple(inputs), tuple(output), frozen, batch, blabel, open_qubits)


_ZERO = np.array([1.0, 0.0])


def _restricted_diagonal(circuit: Circuit, gate_id: int, qubits: tuple[int, ...]) -> np.ndarray:
    """The diagonal of diagonal gate ``gate_id`` as a tensor over ``qubits`` (some of its qubits, in
    its order), its other qubits at 0."""
    gate = circuit.gates[gate_id]
    d = np.diagonal(gate.matrix).reshape((2,) * len(gate.qubits))
    return d[tuple(slice(None) if q in qubits else 0 for q in gate.qubits)]


def _matrix(circuit: Circuit, entry) -> np.ndarray:
    """A waiting single-qubit gate: circuit gate ``entry``, or ``("zero", g, q)``, diagonal gate g on
    wire q with its other qubits at 0."""
    if isinstance(entry, tuple):
        return np.diag(_restricted_diagonal(circuit, entry[1], (entry[2],)))
    return circuit.gates[entry].matrix


def _product(circuit: Circuit, gate_ids) -> np.ndarray:
    m = _matrix(circuit, gate_ids[0])
    for g in gate_ids[1:]:
        m = _matrix(circuit, g) @ m
    return m


def _phase(circuit: Circuit, gate_ids) -> complex:
    """The product of diagonal gates ``gate_ids`` restricted to all their wires at 0 (each met wires in |0> only)."""
    return complex(np.prod([_restricted_diagonal(circuit, g, ()) for g in gate_ids])) if gate_ids else 1.0


def _embed(matrix: np.ndarray, acts_on: tuple[int, ...], order: tuple[int, ...]) -> np.ndarray:
    """A gate on qubits ``acts_on`` (a subset of ``order``) as a matrix in ``order``'s basis."""
    k = len(order)
    rest = [q for q in order if q not in acts_on]
    full = np.kron(matrix, np.eye(2 ** len(rest))) if rest else matrix
    current = list(acts_on) + rest
    if current == list(order):
        return full
    perm = [current.index(q) for q in order]
    t = full.reshape((2,) * (2 * k))
    t = t.transpose(perm + [p + k for p in perm])
    return t.reshape(2 ** k, 2 ** k)


def _gate_tensor(circuit: Circuit, qubits: tuple[int, ...], steps) -> np.ndarray:
    m = None
    for step in steps:
        if step[0] == "pre":
            part = _embed(_product(circuit, step[3]), (step[2],), qubits)
        else:
            gate = circuit.gates[step[1]]
            part = gate.matrix if gate.qubits == qubits else _embed(gate.matrix, gate.qubits, qubits)
        m = part if m is None else part @ m
    return m


def tensor_arrays(structure: NetworkStructure, circuit: Circuit, bits,
                  dtype=np.complex128, reuse: list[np.ndarray] | None = None) -> list[np.ndarray]:
    """The values of every tensor of ``structure`` for this circuit and bitstring (a list of
    ``structure.batch`` bitstrings for a batch; the bits of open qubits are ignored).

    ``reuse``: arrays this function returned for the same structure, circuit and dtype (another
    bitstring); its gate and initial-state tensors are shared instead of computed again, so many
    bitstrings cost one set of gate tensors plus their own projectors."""
    if structure.batch:
        if isinstance(bits, str) or len(bits) != structure.batch:
            raise ValueError(f"a batch structure needs a list of {structure.batch} bitstrings")
        table = bit_table(bits).astype(np.intp)  # (B, n)
    if reuse is not None and len(reuse) != len(structure.sources):
        raise ValueError("reuse must come from the same structure")
    arrays: list[np.ndarray] = []
    for k, src in enumerate(structure.sources):
        kind = src[0]
        if kind in ("gate", "init", "diag") and reuse is not None:
            arrays.append(reuse[k])
        elif kind == "diag":
            arrays.append(np.asarray(_restricted_diagonal(circuit, src[2], src[1]), dtype=dtype))
        elif kind == "gate":
            m = _gate_tensor(circuit, src[1], src[2])
            arrays.append(np.asarray(m, dtype=dtype).reshape((2,) * (2 * len(src[1]))))
        elif kind == "init":
            arrays.append((_ZERO * _phase(circuit, src[2])).astype(dtype))
        else:
            q, post = src[1], src[2]
            if structure.batch:
                # (wire, batch): column b is <x_b[q]| (times the trailing single-qubit gates)
                rows = np.eye(2, dtype=np.complex128)
                if post:
                    rows = rows @ _product(circuit, post)
                arrays.append(np.ascontiguousarray(rows[table[:, q]].T).astype(dtype))
                continue
            row = np.zeros(2, dtype=np.complex128)
            row[int(bits[q])] = 1.0
            if post:
                row = row @ _product(circuit, post)
            arrays.append(row.astype(dtype))
    return arrays


def fused_gates(circuit: Circuit) -> list:
    """The circuit's gates after the network's fusion: each multi-qubit tensor as one gate, then
    the single-qubit gates left at the end of each wire. Same product as ``circuit.gates``."""

    structure = build_structure(circuit)
    out = []
    for src in structure.sources:
        if src[0] == "gate":
            out.append(Gate(src[1], _gate_tensor(circuit, src[1], src[2])))
        elif src[0] == "diag":
            out.append(Gate(src[1], np.diag(_restricted_diagonal(circuit, src[2], src[1]).ravel())))
        elif src[0] == "init" and src[2]:
            out.append(Gate((src[1],), _phase(circuit, src[2]) * np.eye(2)))
        elif src[0] == "proj" and src[2]:
            out.append(Gate((src[1],), _product(circuit, src[2])))
    return out


#: number types of tensors and amplitudes, by name
DTYPES = {"complex128": np.complex128, "complex64": np.complex64}


def resolve_dtype(name: str):
    """The numpy type called ``name``; raises :class:`VerampError` for any other name."""
    try:
        return DTYPES[name]
    except KeyError:
        raise VerampError(f"unknown dtype {name!r}; choose complex128 or complex64") from None
