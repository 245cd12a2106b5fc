"""Amplitudes of textbook circuits with known closed forms.

Source: M. Nielsen & I. Chuang, Quantum Computation and Quantum Information (2010): GHZ states
(sec. 1.3.6/2.6), the quantum Fourier transform of a basis state (ch. 5, eq. 5.2); and
E. Bernstein & U. Vazirani, SIAM J. Comput. 26, 1411 (1997): the hidden string is read with
probability 1.
"""

import cmath
import math

import pytest

from contraction.circuits.qasm_reader import read_qasm
from contraction.execution.amplitudes import amplitudes


def ghz_qasm(n: int) -> str:
    lines = ["OPENQASM 2.0;", 'include "qelib1.inc";', f"qreg q[{n}];", f"creg c[{n}];", "h q[0];"]
    lines += [f"cx q[{i}],q[{i + 1}];" for i in range(n - 1)]
    lines.append("measure q -> c;")
    return "\n".join(lines)


@pytest.mark.parametrize("dtype,tol", [("complex128", 1e-14), ("complex64", 1e-6)])
def test_ghz_44_qubits_network(dtype, tol, fast_planner):
    n = 44
    c = read_qasm(ghz_qasm(n))
    bits = ["0" * n, "1" * n, "01" * (n // 2), "1" + "0" * (n - 1)]
    run = amplitudes(c, bits, engine="single", dtype=dtype, planner=fast_planner)
    amps = [r.amplitude for r in run.results]
    assert abs(amps[0] - 1 / math.sqrt(2)) < tol
    assert abs(amps[1] - 1 / math.sqrt(2)) < tol
    assert amps[2] == 0 and amps[3] == 0          # exactly zero, no crash
    assert run.results[2].probability == 0.0


def bv_qasm(secret: str) -> str:
    n = len(secret)
    lines = ["OPENQASM 3.0;", 'include "stdgates.inc";', f"qubit[{n}] q;", "qubit anc;", "x anc;", "h anc;"]
    lines += [f"h q[{i}];" for i in range(n)]
    lines += [f"cx q[{i}], anc;" for i, s in enumerate(secret) if s == "1"]
    lines += [f"h q[{i}];" for i in range(n)]
    lines.append("h anc;")
    return "\n".join(lines)


def test_bernstein_vazirani_64_qubits(rng, fast_planner):
    secret = "".join(str(b) for b in rng.integers(0, 2, 64))
    c = read_qasm(bv_qasm(secret))
    assert c.num_qubits == 65
    other = secret[:10] + ("1" if secret[10] == "0" else "0") + secret[11:]
    run = amplitudes(c, [secret + "1", other + "1", secret + "0"], engine="single", planner=fast_planner)
    p = [r.probability for r in run.results]
    assert abs(p[0] - 1.0) < 1e-12
    assert p[1] < 1e-24 and p[2] < 1e-24


def qft_qasm(n: int, j: int) -> str:
    """Textbook QFT (Nielsen & Chuang fig. 5.1) on |j>, qubit 0 the most significant bit."""
    lines = ["OPENQASM 2.0;", 'include "qelib1.inc";', f"qreg q[{n}];"]
    lines += [f"x q[{i}];" for i in range(n) if (j >> (n - 1 - i)) & 1]
    for i in range(n):
        lines.append(f"h q[{i}];")
        for k in range(i + 1, n):
            lines.append(f"cu1(pi/{2 ** (k - i)}) q[{k}],q[{i}];")
    lines += [f"swap q[{i}],q[{n - 1 - i}];" for i in range(n // 2)]
    return "\n".join(lines)


@pytest.mark.parametrize("engine", ["statevector", "single", "batch"])
def test_qft_of_basis_state(engine, rng, fast_planner):
    n, j = 10, 357
    N = 2 ** n
    c = read_qasm(qft_qasm(n, j))
    ks = [0, 1, 511, 1023] + [int(k) for k in rng.integers(0, N, 12)]
    run = amplitudes(c, [format(k, f"0{n}b") for k in ks], engine=engine, planner=fast_planner)
    for k, r in zip(ks, run.results):
        expect = cmath.exp(2j * math.pi * j * k / N) / math.sqrt(N)
        assert abs(r.amplitude - expect) < 1e-12


def test_tiny_amplitudes_do_not_underflow(fast_planner):
    # A product state with amplitude cos(θ/2)^n far below 2^-53 (and far below the smallest
    # complex64 normal number): the exponent-stripping contraction keeps it.
    n, theta = 40, 3.0
    text = f'OPENQASM 2.0; include "qelib1.inc"; qreg q[{n}]; ry({theta}) q;' + \
        "".join(f"cx q[{i}],q[{i + 1}]; cx q[{i}],q[{i + 1}];" for i in range(n - 1))
    c = read_qasm(text)
    expect = math.cos(theta / 2) ** n          # ≈ 9.7e-47
    # complex64: float32 rounding in each of ~80 rescaled pairwise contractions (common practice bound)
    for dtype, tol in (("complex128", 1e-12), ("complex64", 1e-4)):
        run = amplitudes(c, ["0" * n], engine="single", dtype=dtype, planner=fast_planner)
        got = run.results[0].amplitude
        assert got != 0
        assert abs(got.real - expect) / expect < tol


def test_complex64_plain_or_stripped_per_slice(fast_planner):
    # A slice whose plain complex64 value is of ordinary size is kept as it is (exponent 0); one whose
    # value lies below the plain floor is contracted again with exponent stripping. Reference:
    # cos(θ/2)^n for the product state above (Nielsen & Chuang, eq. 4.5 for ry) and the closed form
    # of the GHZ amplitude 1/√2 (sec. 1.3.6).
    from contraction.execution.executor import COMPLEX64_PLAIN_FLOOR, contract_slice_scaled
    from contraction.network.builder import build_structure, tensor_arrays
    from contraction.planning.search import find_plan

    for n, theta in ((12, 3.0), (40, 3.0)):
        text = f'OPENQASM 2.0; include "qelib1.inc"; qreg q[{n}]; ry({theta}) q;' + \
            "".join(f"cx q[{i}],q[{i + 1}]; cx q[{i}],q[{i + 1}];" for i in range(n - 1))
        c = read_qasm(text)
        s = build_structure(c)
        tree = find_plan(s, fast_planner).tree(s)
        m, e = contract_slice_scaled(tree, tensor_arrays(s, c, "0" * n, dtype="complex64"), 0)
        expect = math.cos(theta / 2) ** n
        assert abs(complex(m) * 10 ** e - expect) / expect < 1e-4
        if expect > COMPLEX64_PLAIN_FLOOR:
            assert e == 0.0                      # n = 12: 1.6e-14, kept from the plain contraction
        else:
            assert e < -20                       # n = 40: 9.7e-47, rescaled contraction
    c = read_qasm(ghz_qasm(30))
    s = build_structure(c)
    tree = find_plan(s, fast_planner).tree(s)
    m, e = contract_slice_scaled(tree, tensor_arrays(s, c, "1" * 30, dtype="complex64"), 0)
    assert e == 0.0 and abs(complex(m) - 1 / math.sqrt(2)) < 1e-6
