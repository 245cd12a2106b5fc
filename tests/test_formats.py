"""Circuit text formats: OpenQASM 2/3 features, the JSON document and its schema, round trips.

Semantics checked against the OpenQASM 3 specification (arXiv:2104.14722): modifiers
(ctrl/negctrl/inv/pow), gphase, broadcast; and against the OpenQASM 2.0 paper (arXiv:1707.03429):
register broadcast and gate definitions. Equalities are checked with numpy linear algebra.
"""

import json
import math

import jsonschema
import numpy as np
import pytest

from contraction.circuits import gates as G
from contraction.circuits.gates import compose
from contraction.circuits.json_document import read_json, schema, to_document, write_json
from contraction.circuits.model import Circuit, Gate
from contraction.circuits.qasm_reader import read_qasm
from contraction.circuits.qasm_writer import decompose_lines, write_qasm3, zyz_angles
from contraction.circuits.random_instances import grid_architecture, haar_unitary, random_instance
from contraction.execution.statevector import state_vector


def unitary_of(text: str) -> np.ndarray:
    c = read_qasm(text)
    return compose(c.num_qubits, c.gates, c.global_phase)


def test_modifiers_match_linear_algebra():
    """Modified gates against matrices written out here from the OpenQASM 3 specification's
    definitions (ctrl: |0><0| ⊗ 1 + |1><1| ⊗ U on (control, target); negctrl: the control reads 0;
    inv: U†; pow(k): U^k; T = diag(1, e^{iπ/4}), S = diag(1, i)). The matrix of a program is the
    product of its gates in order, qubit 0 most significant."""
    h3 = 'OPENQASM 3.0; include "stdgates.inc"; qubit[3] q;'
    i2 = np.eye(2)
    cx = np.array([[1, 0, 0, 0], [0, 1, 0, 0], [0, 0, 0, 1], [0, 0, 1, 0]])
    assert np.allclose(unitary_of(h3 + "ctrl @ x q[0], q[1];"), np.kron(cx, i2))
    ccx = np.eye(8)
    ccx[[6, 7]] = ccx[[7, 6]]                        # |110> <-> |111>
    assert np.allclose(unitary_of(h3 + "ctrl(2) @ x q[0], q[1], q[2];"), ccx)
    negcx = np.array([[0, 1, 0, 0], [1, 0, 0, 0], [0, 0, 1, 0], [0, 0, 0, 1]])
    assert np.allclose(unitary_of(h3 + "negctrl @ x q[0], q[1];"), np.kron(negcx, i2))
    tdg = np.diag([1, np.exp(-1j * np.pi / 4)])
    assert np.allclose(unitary_of(h3 + "inv @ t q[0];"), np.kron(tdg, np.eye(4)))
    assert np.allclose(unitary_of(h3 + "pow(0.5) @ z q[0];"), np.kron(np.diag([1, 1j]), np.eye(4)))
    assert np.allclose(unitary_of(h3 + "pow(-2) @ s q[0];"), np.kron(np.diag([1, -1]), np.eye(4)))
    # ctrl @ gphase(a) q is the phase gate p(a) = diag(1, e^{ia}) (OpenQASM 3 spec)
    assert np.allclose(unitary_of(h3 + "ctrl @ gphase(0.7) q[0];"), np.kron(np.diag([1, np.exp(0.7j)]), np.eye(4)))
    c = read_qasm(h3 + "gphase(0.25);")
    assert math.isclose(c.global_phase, 0.25)


def test_gate_definitions_broadcast_and_expressions():
    text = """OPENQASM 2.0;
include "qelib1.inc";
qreg a[2];
qreg b[2];
creg c[4];
gate mix(t) x, y { ry(t/2) x; cx x, y; rz(-t*2^2) y; }
h a;
mix(pi/3 + sin(0.2)*exp(1)) a, b;   // broadcast over registers
barrier a, b;
measure a -> c[0];
"""
    c = read_qasm(text)
    assert c.num_qubits == 4
    t = math.pi / 3 + math.sin(0.2) * math.exp(1)
    ref = Circuit(4, [Gate((0,), G.H), Gate((1,), G.H),
                      Gate((0,), G.ry(t / 2)), Gate((0, 2), G.CX), Gate((2,), G.rz(-t * 4)),
                      Gate((1,), G.ry(t / 2)), Gate((1, 3), G.CX), Gate((3,), G.rz(-t * 4))])
    assert np.allclose(state_vector(c), state_vector(ref))


def test_reset_of_fresh_qubit_is_a_no_op_and_oq3_measure_forms():
    text = 'OPENQASM 3.0; include "stdgates.inc"; qubit[2] q; bit[2] c; reset q; h q[0]; ' \
           'const float th = pi/5; rx(th) q[1]; c[0] = measure q[0]; c = measure q;'
    c = read_qasm(text)
    assert len(c.gates) == 2
    assert np.allclose(c.gates[1].matrix, G.rx(math.pi / 5))


def test_qelib1_extras_parse():
    text = 'OPENQASM 2.0; include "qelib1.inc"; qreg q[5]; sx q[0]; sxdg q[1]; swap q[0],q[1]; ' \
           'cswap q[0],q[1],q[2]; crx(0.1) q[0],q[1]; cry(0.2) q[1],q[2]; cu3(0.1,0.2,0.3) q[2],q[3]; ' \
           'rxx(0.4) q[0],q[1]; ryy(0.5) q[1],q[2]; rzz(0.6) q[2],q[3]; c3x q[0],q[1],q[2],q[3]; ' \
           'c4x q[0],q[1],q[2],q[3],q[4]; rccx q[0],q[1],q[2]; rc3x q[0],q[1],q[2],q[3]; u2(0.1,0.2) q[4]; ' \
           'cu1(0.3) q[3],q[4]; cp(0.3) q[3],q[4]; csx q[0],q[4]; u(1,2,3) q[0]; p(0.1) q[1]; id q[2];'
    c = read_qasm(text)
    assert len(c.gates) == 21
    assert abs(np.linalg.norm(state_vector(c)) - 1) < 1e-12
    # rccx equals ccx up to relative phases: same |amplitudes| on basis states (qelib1 comment)
    rccx = unitary_of('OPENQASM 2.0; include "qelib1.inc"; qreg q[3]; rccx q[0],q[1],q[2];')
    assert np.allclose(np.abs(rccx), np.abs(G.CCX))


def test_json_schema_accepts_our_documents_and_rejects_bad_ones():
    c = random_instance(grid_architecture(2, 2, 3), 1, "discrete")
    doc = to_document(c)
    jsonschema.validate(doc, schema())
    named = {"format": "veramp.circuit", "version": 1, "num_qubits": 2,
             "gates": [{"qubits": [0], "gate": "rx", "params": [0.1]}, {"qubits": [0, 1], "gate": "cx"}]}
    jsonschema.validate(named, schema())
    assert read_json(json.dumps(named)).num_qubits == 2
    for bad in ({**named, "extra": 1}, {**named, "gates": [{"qubits": [0, 0], "gate": "cx"}]},
                {**named, "format": "x"}, {**named, "gates": [{"qubits": [0], "matrix": [[[1, 0]]], "gate": "x"}]}):
        with pytest.raises(jsonschema.ValidationError):
            jsonschema.validate(bad, schema())


def test_hashes():
    arch = grid_architecture(2, 3, 4)
    a = random_instance(arch, 5)
    again = read_json(write_json(a))
    assert again.circuit_id == a.circuit_id and again.architecture_id == a.architecture_id
    b = random_instance(arch, 6)
    assert b.architecture_id == a.architecture_id and b.circuit_id != a.circuit_id
    relabelled = Circuit(a.num_qubits, [Gate(g.qubits, g.matrix, "other label") for g in a.gates])
    assert relabelled.circuit_id == a.circuit_id          # labels do not change amplitudes
    shifted = Circuit(a.num_qubits, a.gates, global_phase=0.1)
    assert shifted.circuit_id != a.circuit_id


def test_zyz_and_two_level_decomposition_exact(rng):
    for _ in range(20):
        u = haar_unitary(2, rng)
        th, ph, la, al = zyz_angles(u)
        assert np.allclose(np.exp(1j * al) * G.u_gate(th, ph, la), u, atol=1e-12)
    for k in (2, 3):
        u = haar_unitary(2 ** k, rng)
        names = [f"q[{i}]" for i in range(k)]
        lines, phase = decompose_lines(u, names)
        back = unitary_of(f'OPENQASM 3.0; include "stdgates.inc"; qubit[{k}] q; ' + " ".join(lines))
        assert np.allclose(np.exp(1j * phase) * back, u, atol=1e-11)


def test_qasm3_export_round_trip_is_exact(rng):
    for gates in ("haar", "discrete"):
        c = random_instance(grid_architecture(2, 3, 5), 11, gates)
        back = read_qasm(write_qasm3(c))
        assert np.allclose(state_vector(back), state_vector(c), atol=1e-12)
    named = read_qasm('OPENQASM 2.0; include "qelib1.inc"; qreg q[3]; h q[0]; crz(0.3) q[0],q[1]; '
                      'iswap q[1],q[2]; rzz(0.2) q[0],q[2]; u3(0.1,0.2,0.3) q[1];')
    text = write_qasm3(named)
    assert "crz(0.3) q[0], q[1];" in text and "gate iswap" in text
    assert np.allclose(state_vector(read_qasm(text)), state_vector(named), atol=1e-12)
