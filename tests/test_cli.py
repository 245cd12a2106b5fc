"""The veramp command line: output formats and one-line errors.

Expected amplitudes come from closed forms (GHZ: Nielsen & Chuang 2010).
"""

import json
import math
import subprocess
import sys

import pytest

from service.cli import main

GHZ = 'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[3];\nh q[0];\ncx q[0],q[1];\ncx q[1],q[2];\n'


@pytest.fixture
def ghz_file(tmp_path):
    p = tmp_path / "ghz.qasm"
    p.write_text(GHZ)
    return str(p)


def test_amplitudes_json(ghz_file, capsys):
    assert main(["amplitudes", ghz_file, "-b", "111", "-b", "010", "-b", "000", "--format", "json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    res = doc["results"]
    assert [r["bitstring"] for r in res] == ["111", "010", "000"]      # input order
    assert math.isclose(res[0]["amplitude"][0], 1 / math.sqrt(2), abs_tol=1e-15)
    assert res[1]["amplitude"] == [0.0, 0.0] and res[1]["probability"] == 0.0
    assert math.isclose(res[2]["probability"], 0.5, abs_tol=1e-15)


@pytest.mark.parametrize("engine", ["single", "batch", "statevector"])
def test_amplitudes_csv_from_file(ghz_file, tmp_path, capsys, engine):
    bits = tmp_path / "bits.txt"
    bits.write_text("# sampled\n000\n\n111\n")
    assert main(["amplitudes", ghz_file, "--bitstrings", str(bits), "--format", "csv", "--engine", engine,
                 "--budget", "0.2"]) == 0
    lines = capsys.readouterr().out.strip().splitlines()
    assert lines[0] == "bitstring,amplitude_re,amplitude_im,probability"
    assert [line.split(",")[0] for line in lines[1:]] == ["000", "111"]
    assert math.isclose(float(lines[1].split(",")[3]), 0.5, abs_tol=1e-14)


@pytest.mark.parametrize("argv,words", [
    (["amplitudes", "missing.qasm", "-b", "0"], "no such file"),
    (["amplitudes", "{ghz}", "-b", "01"], "has 2 characters"),
    (["amplitudes", "{ghz}"], "give bitstrings"),
    (["amplitudes", "{bad}", "-b", "000"], "bad.qasm:2:1: unknown gate 'hh'"),
    (["amplitudes", "{ghz}", "-b", "000", "--engine", "gpu"], "invalid choice"),
])
def test_errors_are_one_line(argv, words, ghz_file, tmp_path, capsys):
    bad = tmp_path / "bad.qasm"
    bad.write_text("OPENQASM 2.0; include \"qelib1.inc\"; qreg q[3];\nhh q[0];\n")
    argv = [a.format(ghz=ghz_file, bad=str(bad)) for a in argv]
    try:
        code = main(argv)
    except SystemExit as exc:  # argparse usage errors
        code = exc.code
    err = capsys.readouterr().err
    assert code == 2
    assert words in err
    assert err.count("\n") == 1 and err.startswith("veramp: error:")
    assert "Traceback" not in err


def test_console_script_no_traceback(tmp_path):
    bad = tmp_path / "bad.json"
    bad.write_text('{"format": "veramp.circuit", "version": 1, "num_qubits": 1, '
                   '"gates": [{"qubits": [0], "matrix": [[[1,0],[1,0]],[[0,0],[1,0]]]}]}')
    proc = subprocess.run([sys.executable, "-m", "service.cli", "amplitudes", str(bad), "-b", "0"],
                          capture_output=True, text=True)
    assert proc.returncode == 2
    assert "not unitary" in proc.stderr and "Traceback" not in proc.stderr


def test_generate_and_convert_round_trip(tmp_path, capsys):
    out = tmp_path / "c.json"
    assert main(["generate", "--grid", "2x3", "--cycles", "4", "--seed", "3", "--format", "json", "-o", str(out)]) == 0
    assert main(["convert", str(out), "--to", "qasm3", "-o", str(tmp_path / "c.qasm")]) == 0
    assert main(["amplitudes", str(out), "-b", "010101", "--format", "json"]) == 0
    a = json.loads(capsys.readouterr().out)["results"][0]["amplitude"]
    assert main(["amplitudes", str(tmp_path / "c.qasm"), "-b", "010101", "--format", "json"]) == 0
    b = json.loads(capsys.readouterr().out)["results"][0]["amplitude"]
    assert math.dist(a, b) < 1e-12


def test_xeb_command_json(tmp_path, capsys):
    # samples drawn from the ideal distribution of a 12-qubit random circuit: the linear XEB must
    # agree with N·mean p − 1 computed from the numpy state vector (Arute et al. 2019 definition)
    import numpy as np

    from contraction.analysis.xeb import sample_mixture
    from contraction.circuits.qasm_writer import write_qasm3
    from contraction.circuits.random_instances import grid_architecture, random_instance
    from contraction.execution.statevector import state_vector

    c = random_instance(grid_architecture(3, 4, 10), 4)
    p = np.abs(state_vector(c)) ** 2
    idx = sample_mixture(p, 1.0, 400, np.random.default_rng(1))
    (tmp_path / "c.qasm").write_text(write_qasm3(c))
    (tmp_path / "s.txt").write_text("\n".join(format(i, "012b") for i in idx))
    assert main(["xeb", str(tmp_path / "c.qasm"), "--samples", str(tmp_path / "s.txt"), "--format", "json",
                 "--bootstrap", "100", "--plot", str(tmp_path / "pt.png")]) == 0
    assert (tmp_path / "pt.png").read_bytes().startswith(b"\x89PNG")
    doc = json.loads(capsys.readouterr().out)
    assert {"linear_xeb", "linear_xeb_stderr", "log_xeb", "samples"} <= set(doc)
    assert doc["samples"] == 400
    assert doc["linear_xeb"] == pytest.approx(4096 * p[idx].mean() - 1, rel=1e-9)


def test_fit_command(tmp_path, capsys):
    # exact data on F(d) = 0.9·(1 − 0.05)^d: the weighted fit returns A and e (scipy curve_fit reference)
    rows = ["cycles,fidelity,stderr"] + [f"{d},{0.9 * 0.95 ** d},{0.01}" for d in range(4, 17, 2)]
    (tmp_path / "t.csv").write_text("\n".join(rows))
    assert main(["fit", str(tmp_path / "t.csv"), "--extrapolate", "20", "--plot", str(tmp_path / "f.svg")]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["per_cycle_error"] == pytest.approx(0.05, abs=1e-6)
    assert doc["amplitude"] == pytest.approx(0.9, abs=1e-5)
    assert doc["extrapolations"]["20.0"][0] == pytest.approx(0.9 * 0.95 ** 20, rel=1e-4)
    assert b"<svg" in (tmp_path / "f.svg").read_bytes()[:2000]


def test_marginal_and_block_commands(ghz_file, capsys):
    # GHZ (Nielsen & Chuang 2010): P(q2, q0) = 1/2 on 00 and 11; amplitudes on (q0, q1) with q2 = 1:
    # only |111> is non-zero, 1/sqrt 2, at row 3 (both listed qubits 1)
    assert main(["marginal", ghz_file, "--qubits", "2,0"]) == 0
    rows = capsys.readouterr().out.splitlines()
    assert rows[0] == "index,bits,probability"
    probs = [float(r.split(",")[2]) for r in rows[1:]]
    assert probs == pytest.approx([0.5, 0, 0, 0.5], abs=1e-15)
    assert main(["block", ghz_file, "--qubits", "0-1", "--fixed", "001", "--format", "json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["qubits"] == [0, 1]
    flat = [x for pair in doc["values"] for x in pair]
    assert flat == pytest.approx([0, 0, 0, 0, 0, 0, 1 / math.sqrt(2), 0], abs=1e-15)


def test_bad_qubit_list_is_one_line_error(ghz_file, capsys):
    assert main(["marginal", ghz_file, "--qubits", "0,7"]) != 0
    err = capsys.readouterr().err
    assert "0..2" in err and "Traceback" not in err


def test_path_command_recovers_with_honest_bounds(ghz_file, capsys):
    # GHZ: p(111) at theta = 0 is 1/2 (Nielsen & Chuang 2010). The recovery at 0.5 from 30 nodes, two
    # of which may be corrupted (Berlekamp–Welch; none is), must hold within its reported bound
    assert main(["path", ghz_file, "-b", "111", "--seed", "3", "--thetas", "0,1", "--fit-nodes", "0:1:30",
                 "--targets", "0.5", "--errors", "2", "--format", "json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["probability"][0] == pytest.approx(0.5, abs=1e-15)
    assert doc["fitted_degree"] == 2 * doc["gate_dimension_sum"]
    rec = doc["recovery"]
    assert rec["corrupted"] == []
    assert rec["actual_error"][0] <= rec["error_bound"][0]


def test_plan_then_estimate_reads_the_stored_plan(tmp_path, capsys, monkeypatch):
    """``veramp plan`` stores a plan; ``veramp estimate --count K`` then prices K one-by-one
    contractions with that very plan: K times its multiply-adds, nothing searched again."""
    from contraction.planning.rates import MachineRate

    data = tmp_path / "data"
    data.mkdir()
    (data / "calibration.json").write_text(json.dumps(MachineRate(1e10, 0.5, 1e-8, 2e-5, 2e-8, 1, 0.0).to_dict()))
    monkeypatch.setenv("VERAMP_DATA_DIR", str(data))
    circ = str(tmp_path / "g.qasm")
    assert main(["generate", "--grid", "3x3", "--cycles", "6", "--seed", "2", "--output", circ]) == 0
    assert main(["plan", circ, "--budget", "0.5"]) == 0
    planned = json.loads(capsys.readouterr().out)
    assert planned["stored"] is True and planned["best_madds"] > 0
    assert main(["estimate", circ, "--count", "4", "--engine", "single", "--format", "json"]) == 0
    est = json.loads(capsys.readouterr().out)
    assert est["count"] == 4 and est["engine"] == "single" and est["plan_cached"] is True
    assert est["madds"] == pytest.approx(4 * planned["best_madds"], rel=1e-12)
    assert est["reason"] == "requested"
    assert "measuring" not in capsys.readouterr().err      # the stored calibration was used


def test_estimate_says_when_it_measures_the_machine_first(tmp_path, capsys, monkeypatch):
    # a command that will be busy for half a minute says so first (common practice for CLIs)
    import service.cli.compute as compute_cli
    from contraction.planning.rates import MachineRate

    data = tmp_path / "data"
    data.mkdir()
    monkeypatch.setenv("VERAMP_DATA_DIR", str(data))
    calls = []
    monkeypatch.setattr(compute_cli, "load_or_measure",
                        lambda path: calls.append(path) or MachineRate(1e10, 0.5, 1e-8, 2e-5, 2e-8, 1, 0.0))
    circ = str(tmp_path / "g.qasm")
    assert main(["generate", "--grid", "3x3", "--cycles", "4", "--seed", "2", "--output", circ]) == 0
    capsys.readouterr()
    assert main(["estimate", circ, "--format", "json"]) == 0
    err = capsys.readouterr().err
    assert calls and "measuring this machine" in err and str(data) in err


def test_progress_line_shows_the_plan_search_then_the_tasks():
    # the line's wording is this project's own format (no outside source); the figures are the job's
    from service.cli.common import ProgressBar

    class Job:
        done, total, eta_seconds = 0, 8, None
        phase = "planning"
        planning = {"trials": 12, "best_madds": 3.2e12, "seconds": 41.0, "budget_seconds": 300.0}

    line = ProgressBar.line(Job())
    assert "12 trials" in line and "3.2e+12" in line and "41/300 s" in line
    Job.phase, Job.done, Job.eta_seconds = "contracting", 2, 30.0
    assert ProgressBar.line(Job()) == "[" + "#" * 7 + "." * 23 + "] 2/8 tasks, ETA 30s"


def test_progress_goes_to_a_log_as_plain_lines_and_short_stages_leave_nothing(monkeypatch):
    """Off a terminal (a log file) a long stage writes a plain line every ``every`` seconds and its last
    line; a short stage writes nothing; on a terminal a short stage's line is erased and a long one's
    kept. The clock is a stand-in advanced by the test (this project's own behaviour, no outside source)."""
    import io
    from types import SimpleNamespace as NS

    from service.cli import common

    clock = [100.0]
    monkeypatch.setattr(common.time, "monotonic", lambda: clock[0])

    def run(terminal: bool, seconds_per_report: float) -> str:
        buf = io.StringIO()
        bar = common.ProgressBar(terminal, every=30.0, stream=buf)
        for k in range(10):                                     # a search reporting ten times
            bar.search(NS(trials=k, best_madds=2e12, seconds=k * seconds_per_report, budget_seconds=300.0,
                          final=False))
            clock[0] += seconds_per_report
        bar.search(NS(trials=10, best_madds=1e12, seconds=10 * seconds_per_report, budget_seconds=300.0,
                      final=True))
        for done in range(5):                                   # then five tasks, quickly
            bar(NS(done=done, total=4, eta_seconds=1.0))
            clock[0] += 0.01
        return buf.getvalue()

    log = run(False, 10.0)
    lines = log.splitlines()
    assert lines == ["planning: 3 trials, best 2e+12 multiply-adds, 30/300 s",
                     "planning: 6 trials, best 2e+12 multiply-adds, 60/300 s",
                     "planning: 9 trials, best 2e+12 multiply-adds, 90/300 s",
                     "planning: 10 trials, best 1e+12 multiply-adds, 100/300 s"]
    assert "\r" not in log
    assert run(False, 0.01) == ""
    term_long = run(True, 10.0)
    assert term_long.count("\n") == 1 and "10 trials, best 1e+12" in term_long.split("\n")[0].split("\r")[-1]
    term_short = run(True, 0.01)
    assert "\n" not in term_short and term_short.endswith("\r") and not term_short.split("\r")[-2].strip()


def test_a_plan_made_ahead_serves_amplitudes_on_two_workers(tmp_path, capsys, monkeypatch):
    """``veramp plan`` plans for one worker's share of the memory cap, as ``veramp amplitudes`` runs
    on the configured workers: the amplitudes then use the stored plan instead of searching one in
    their own (much smaller) budget. The amplitude is checked against numpy's einsum applied gate by
    gate (``conftest.einsum_state``: shares no code with the engine)."""
    from contraction.circuits.loader import load_circuit
    from contraction.planning.rates import MachineRate

    from .conftest import einsum_state

    data = tmp_path / "data"
    data.mkdir()
    (data / "calibration.json").write_text(json.dumps(MachineRate(1e10, 0.5, 1e-8, 2e-5, 2e-8, 1, 0.0).to_dict()))
    monkeypatch.setenv("VERAMP_DATA_DIR", str(data))
    monkeypatch.setenv("VERAMP_WORKERS", "2")
    circ = tmp_path / "g.qasm"
    assert main(["generate", "--grid", "4x4", "--cycles", "10", "--seed", "4", "--output", str(circ)]) == 0
    cap = 64 * 2 ** 10                               # bytes: 4,096 complex128 elements, 2,048 per worker
    assert main(["plan", str(circ), "--budget", "0.5", "--memory", str(cap)]) == 0
    planned = json.loads(capsys.readouterr().out)
    assert planned["workers"] == 2 and planned["memory_share_bytes"] == cap // 2
    assert planned["stored"] is True and planned["slices"] > 1     # the cap is tight enough to need slices
    bits = "1011001110001011"
    assert main(["amplitudes", str(circ), "-b", bits, "--memory", str(cap), "--engine", "single",
                 "--budget", "0.1", "--format", "json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["plan"]["stored"] is True and doc["plan"]["madds"] == planned["best_madds"]
    psi = einsum_state(load_circuit(circ.read_text()))
    got = complex(*doc["results"][0]["amplitude"])
    assert abs(got - psi[int(bits, 2)]) < 1e-12
