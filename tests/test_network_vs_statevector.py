"""The tensor-network and state-vector engines against the einsum reference of ``tests/conftest.py``
(one ``numpy.einsum`` per unfused gate, single-qubit gates included), and the Porter–Thomas
statistics of the resulting output distribution.

Porter–Thomas: S. Boixo et al., Nature Physics 14, 595 (2018), arXiv:1608.00263 — for a deep
random circuit, N·p over uniformly drawn bitstrings is ~Exp(1): E[N·p] = 1, E[(N·p)²] = 2,
E[(N·p)⁴] = 24 (so Var[(N·p)²] = 20), in the large-N limit.
"""

import numpy as np
import pytest

from contraction.circuits.random_instances import grid_architecture, random_instance
from contraction.execution.amplitudes import amplitudes
from contraction.execution.statevector import state_vector
from contraction.network.builder import build_structure
from contraction.planning.store import MemoryPlanStore

from .conftest import einsum_state, random_bitstrings


def _rel_err(a, b, floor=0.0):
    """Max relative error; ``floor`` bounds the denominator from below (see the complex64 check)."""
    a, b = np.asarray(a), np.asarray(b)
    return float(np.max(np.abs(a - b) / np.maximum(np.abs(b), floor)))


@pytest.mark.parametrize("rows,cols,cycles,gates", [(3, 4, 8, "haar"), (4, 5, 8, "haar"),
                                                    (4, 5, 10, "discrete")])
def test_network_equals_statevector(rows, cols, cycles, gates, rng, fast_planner):
    c = random_instance(grid_architecture(rows, cols, cycles), seed=rows * 100 + cycles, gates=gates)
    n = c.num_qubits
    bits = random_bitstrings(rng, n, 12)
    reference = einsum_state(c)
    ref = [reference[int(b, 2)] for b in bits]
    assert np.max(np.abs(state_vector(c) - reference)) < 1e-12
    cache = MemoryPlanStore()
    r128 = amplitudes(c, bits, engine="single", planner=fast_planner, plan_store=cache)
    assert _rel_err([r.amplitude for r in r128.results], ref) < 1e-10
    r64 = amplitudes(c, bits, engine="single", dtype="complex64", planner=fast_planner, plan_store=cache)
    assert r64.plan_cached                       # same layout, same plan for every dtype and bitstring
    # complex64: float32 rounding (eps 6e-8) accumulates over hundreds of sums; an amplitude far
    # below the typical size 2^(-n/2) loses relative precision to cancellation, so the error is
    # measured relative to max(|a|, 2^(-n/2)) (common practice for sampled-probability checks)
    floor = 2.0 ** (-n / 2)
    assert _rel_err([r.amplitude for r in r64.results], ref, floor) < 1e-5
    sv64 = amplitudes(c, bits, engine="statevector", dtype="complex64")
    assert _rel_err([r.amplitude for r in sv64.results], ref, floor) < 1e-5


def test_structure_independent_of_values_and_bitstring():
    arch = grid_architecture(3, 3, 6)
    a, b = random_instance(arch, 1), random_instance(arch, 2)
    assert a.circuit_id != b.circuit_id
    assert a.architecture_id == b.architecture_id
    assert build_structure(a).key == build_structure(b).key
    other = random_instance(grid_architecture(3, 3, 7), 1)
    assert other.architecture_id != a.architecture_id
    assert build_structure(other).key != build_structure(a).key


def test_porter_thomas_moments_from_network(rng, fast_planner):
    c = random_instance(grid_architecture(3, 4, 16), seed=7)
    n, N = c.num_qubits, 2 ** 12
    k = 400
    bits = random_bitstrings(rng, n, k)
    run = amplitudes(c, bits, engine="single", planner=fast_planner)
    x = N * np.array([r.probability for r in run.results])
    # sample means with 3-sigma bands: sd(N p) = 1, sd((N p)^2) = sqrt(20); a flat distribution
    # (N p = 1 everywhere) has second moment 1 and fails the second band (3 sqrt(20/400) = 0.67 < 1)
    assert abs(x.mean() - 1) < 3 / np.sqrt(k)
    assert abs((x ** 2).mean() - 2) < 3 * np.sqrt(20 / k)
    # the whole law: N p ~ Exp(1) (Kolmogorov–Smirnov against scipy's exponential distribution); the
    # flat distribution's KS distance from Exp(1) is 1 - 1/e = 0.63, far beyond any p-value cut
    from scipy import stats

    assert stats.kstest(x, "expon").pvalue > 1e-3
    assert stats.kstest(np.ones_like(x), "expon").pvalue < 1e-10
    # the whole distribution (state vector): E[sum p^2] = 2/(N+1) for Haar states (Boixo et al. 2018)
    p = np.abs(state_vector(c)) ** 2
    assert abs(p.sum() - 1) < 1e-12
    assert abs(N * (p ** 2).sum() - 2 * N / (N + 1)) < 0.1


def test_engines_on_circuits_with_one_qubit_gates_match_the_einsum_reference(rng, fast_planner):
    """Programs with single-qubit gates of every kind the reader knows (the fusion rule merges them
    into neighbouring gates in both engines, the reference applies each one on its own)."""
    from contraction.circuits.qasm_reader import read_qasm
    from contraction.circuits.textbook import qft

    text = ('OPENQASM 3.0; include "stdgates.inc"; qubit[6] q;\n'
            "h q[0]; t q[1]; sx q[2]; rx(0.3) q[3]; ry(-1.1) q[4]; u(0.4, 0.2, -0.9) q[5];\n"
            "cx q[0], q[1]; cz q[2], q[3]; s q[1]; tdg q[0]; rz(2.2) q[4]; cx q[4], q[5];\n"
            "swap q[1], q[4]; y q[2]; p(0.5) q[3]; cp(1.3) q[0], q[5]; ccx q[1], q[2], q[3]; h q[5];\n")
    for circuit in (read_qasm(text), qft(7)):
        n = circuit.num_qubits
        reference = einsum_state(circuit)
        assert np.max(np.abs(state_vector(circuit) - reference)) < 1e-12
        bits = random_bitstrings(rng, n, 6)
        run = amplitudes(circuit, bits, engine="single", planner=fast_planner)
        got = np.array([r.amplitude for r in run.results])
        want = np.array([reference[int(b, 2)] for b in bits])
        assert np.max(np.abs(got - want)) < 1e-12
    # the QFT of |0…0> is the uniform superposition (Nielsen & Chuang §5.1): every amplitude 2^(-7/2)
    assert np.allclose(einsum_state(qft(7)), 2 ** -3.5, atol=1e-14)


def test_diagonal_gates_are_part_of_the_structure(rng, fast_planner):
    """Exactly diagonal multi-qubit gates become k-index tensors on the wires (hyper-indices): the
    network key says which gates are diagonal, so a plan serves exactly the circuits with that
    pattern; amplitudes stay exact (einsum reference) with the single-qubit gates around them."""
    from contraction.circuits import gates as G
    from contraction.circuits.model import Circuit, Gate
    from contraction.circuits.random_instances import haar_unitary
    from contraction.network.builder import diagonal_gates

    def circuit(two_qubit):
        g, r = [], np.random.default_rng(3)
        for layer in range(6):
            g += [Gate((q,), haar_unitary(2, r), "u") for q in range(8)]
            g += [Gate((q, q + 1), two_qubit(r), "two") for q in range(layer % 2, 7, 2)]
        return Circuit(8, g)

    cz = circuit(lambda r: G.CZ)
    cphase = circuit(lambda r: G.controlled(G.phase_gate(float(r.uniform(0, 6)))))
    haar = circuit(lambda r: haar_unitary(4, r))
    assert len(diagonal_gates(cz)) == 21 and not diagonal_gates(haar)
    s_cz, s_cp, s_haar = build_structure(cz), build_structure(cphase), build_structure(haar)
    assert s_cz.key == s_cp.key != s_haar.key                    # same layout, same diagonal pattern
    assert build_structure(cz, diagonal=frozenset()).key == s_haar.key
    # a diagonal gate adds no index (a full 4x4 tensor adds two), the single-qubit gates kept apart
    # from it add one each
    one_qubit_tensors = sum(1 for src in s_cz.sources if src[0] == "gate" and len(src[1]) == 1)
    assert len(s_cz.canonical) == len(s_haar.canonical) - 2 * 21 + one_qubit_tensors
    bits = random_bitstrings(rng, 8, 6)
    for c in (cz, cphase):
        reference = einsum_state(c)
        run = amplitudes(c, bits, engine="single", planner=fast_planner)
        assert np.max(np.abs(np.array([r.amplitude for r in run.results])
                             - np.array([reference[int(b, 2)] for b in bits]))) < 1e-12
        assert np.max(np.abs(state_vector(c) - reference)) < 1e-12


def test_diagonal_gates_on_wires_still_in_zero(rng, fast_planner):
    """A diagonal gate meeting wires no gate has touched yet acts on its other wires only (its diagonal
    with those qubits at 0) or, on |0> wires alone, is a phase: checked against the einsum reference
    for every engine, including a ZZ rotation on |00> (phase exp(-i theta/2), not 1) and
    three-qubit diagonals with one, two or three wires in |0>."""
    from contraction.circuits import gates as G
    from contraction.circuits.model import Circuit, Gate
    from contraction.circuits.textbook import qft
    from contraction.execution.blocks import block_amplitudes, marginal_probabilities

    r = np.random.default_rng(5)

    def diag(k):
        return np.diag(np.exp(1j * r.uniform(0, 2 * np.pi, 2 ** k)))

    def zz(theta):                                   # exp(-i theta/2 Z x Z)
        return np.diag(np.exp(-0.5j * theta * np.array([1, -1, -1, 1])))

    c = Circuit(7, [Gate((0, 1), zz(0.7)), Gate((2, 3, 4), diag(3)), Gate((1,), G.H), Gate((1, 2), diag(2)),
                    Gate((2, 5, 6), diag(3)), Gate((5,), G.rx(0.3)), Gate((0, 5, 6), diag(3)),
                    Gate((3, 4), G.CX), Gate((0, 3, 4), diag(3)), Gate((4, 6), diag(2)), Gate((0, 1), zz(0.2)),
                    Gate((6,), G.rx(1.1)),
                    Gate((1, 3, 5), diag(3)), Gate((2, 3), haar_like(r))])
    s = build_structure(c)
    # three gates met |0> wires only (phases), four became one-qubit gates waiting on a wire, one a
    # diagonal on two of its three wires, one stayed whole
    assert sum(len(src[2]) for src in s.sources if src[0] == "init") == 3
    assert sum(1 for src in s.sources if src[0] == "diag") == 2
    reference = einsum_state(c)
    assert abs(abs(reference[0]) - 1) > 1e-3        # a circuit that does something
    bits = [format(i, "07b") for i in range(128)]
    for engine in ("single", "batch", "stacked", "statevector"):
        for dtype, tol in (("complex128", 1e-12), ("complex64", 1e-6)):
            run = amplitudes(c, bits, engine=engine, dtype=dtype, planner=fast_planner)
            assert np.max(np.abs(np.array([x.amplitude for x in run.results]) - reference)) < tol, (engine, dtype)
    block = block_amplitudes(c, (1, 4, 6), "0" * 7, engine="single", planner=fast_planner)
    want = [reference[int(b, 2)] for b in ("0" + f"{i >> 2 & 1}" + "00" + f"{i >> 1 & 1}" + "0" + f"{i & 1}"
                                          for i in range(8))]
    assert np.max(np.abs(block.values - want)) < 1e-12
    marginal = marginal_probabilities(c, (0, 2, 5), engine="single", planner=fast_planner)
    p = (np.abs(reference.reshape((2,) * 7)) ** 2).sum(axis=(1, 3, 4, 6)).ravel()
    assert np.max(np.abs(marginal.values - p)) < 1e-12
    # the QFT of |0...0> is the uniform superposition (Nielsen & Chuang §5.1): its controlled phases all
    # have their control still in |0> when they act, so 40 qubits cost a product of Hadamards
    s40 = build_structure(qft(40))
    assert not any(src[0] == "diag" for src in s40.sources)
    run = amplitudes(qft(40), random_bitstrings(rng, 40, 4), engine="single", planner=fast_planner)
    assert run.plan.madds < 1e4
    assert all(abs(x.amplitude - 2.0 ** -20) < 1e-12 * 2.0 ** -20 for x in run.results)


def haar_like(r):
    """A random two-qubit unitary (QR of a complex Gaussian matrix; not used as a Haar sample here)."""
    q, _ = np.linalg.qr(r.normal(size=(4, 4)) + 1j * r.normal(size=(4, 4)))
    return q


@pytest.mark.parametrize("gates", ["discrete", "haar"])
def test_a_circuit_written_as_openqasm_controlled_gates_builds_the_same_network(gates):
    """OpenQASM 3 writes each two-qubit gate as a chain of controlled gates (a diagonal one first, then
    controlled U's on the same pair, single-qubit phases between). The network of the program read back
    is the network of the circuit it was written from (same structure key: a plan serves both), and
    its amplitudes match the einsum reference of the original circuit (numpy, gate by gate; shares no
    code with the engine)."""
    from contraction.circuits.loader import load_circuit
    from contraction.circuits.qasm_writer import write_qasm3

    c = random_instance(grid_architecture(3, 3, 6), 5, gates=gates)
    back = load_circuit(write_qasm3(c))
    assert len(back.gates) > len(c.gates)                  # written as more gates than it has
    s, sb = build_structure(c), build_structure(back)
    assert sb.key == s.key and sb.num_tensors == s.num_tensors
    psi = einsum_state(c)
    bits = random_bitstrings(np.random.default_rng(11), c.num_qubits, 6)
    run = amplitudes(back, bits, engine="single", plan_store=MemoryPlanStore())
    for r in run.results:
        assert abs(r.amplitude - psi[int(r.bitstring, 2)]) < 1e-10
