"""The installed package, not the source tree: build the wheel, install it into a fresh virtual
environment outside the checkout, start ``veramp serve`` from it and get an amplitude back; and every
command's ``--help`` runs.

The reference value is the GHZ state (Greenberger, Horne & Zeilinger 1989; Nielsen & Chuang,
*Quantum Computation and Quantum Information*, 2000, §1.3.6 for the Bell/GHZ preparation by H and
CNOTs): p(000) = p(111) = 1/2, p(010) = 0.
"""

import json
import os
import shutil
import subprocess
import sys
import time
import zipfile
from pathlib import Path

import httpx
import pytest

from service.cli import build_parser

from .test_service import RATE
from .test_service_process import free_port

ROOT = Path(__file__).resolve().parents[1]


def _commands() -> list[str]:
    parser = build_parser()
    sub = next(a for a in parser._actions if a.__class__.__name__ == "_SubParsersAction")
    return sorted(sub.choices)


def test_top_level_help_runs():
    out = subprocess.run([sys.executable, "-m", "service.cli", "--help"], capture_output=True, text=True,
                         cwd=ROOT, timeout=60)
    assert out.returncode == 0, out.stderr
    for name in _commands():
        assert name in out.stdout


@pytest.mark.parametrize("command", _commands())
def test_every_command_help_runs(command, capsys):
    with pytest.raises(SystemExit) as exc:
        build_parser().parse_args([command, "--help"])
    assert exc.value.code == 0
    assert "usage:" in capsys.readouterr().out


@pytest.fixture(scope="module")
def wheel(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("wheel")
    # build from a clean copy: a stale build/ folder in the checkout would hide missing packages
    src = tmp_path_factory.mktemp("src") / "veramp"
    shutil.copytree(ROOT, src, ignore=shutil.ignore_patterns("build", "dist", "*.egg-info", ".git", "__pycache__",
                                                             ".pytest_cache"))
    proc = subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation",
                           "-w", str(out), str(src)], capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr[-2000:]
    (path,) = out.glob("veramp-*.whl")
    return path


def test_wheel_holds_every_subpackage(wheel):
    names = set(zipfile.ZipFile(wheel).namelist())
    # every package directory of the source tree is in the wheel
    for init in list(ROOT.glob("contraction/**/__init__.py")) + list(ROOT.glob("service/**/__init__.py")):
        assert init.relative_to(ROOT).as_posix() in names
    assert "contraction/schema/circuit.schema.json" in names


@pytest.mark.slow
def test_installed_wheel_serves_an_amplitude(wheel, tmp_path):
    venv = tmp_path / "venv"
    # the venv sees the test environment's third-party packages (a plain path entry, so the .pth
    # files there, such as an editable install of this checkout, are not run) but not the source
    # tree: the project itself comes only from the wheel
    subprocess.run([sys.executable, "-m", "venv", str(venv)], check=True, timeout=120)
    py = venv / "bin" / "python"
    site_dir = subprocess.run([str(py), "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
                              capture_output=True, text=True, check=True).stdout.strip()
    deps = [p for p in sys.path if p.endswith("site-packages") and Path(p).is_dir()]
    (Path(site_dir) / "_test_deps.pth").write_text("\n".join(deps) + "\n")
    subprocess.run([str(py), "-m", "pip", "install", "--quiet", "--no-deps", "--force-reinstall", str(wheel)],
                   check=True, timeout=300, cwd=tmp_path)
    where = subprocess.run([str(py), "-c", "import service, contraction; print(service.__file__)"],
                           capture_output=True, text=True, cwd=tmp_path, check=True).stdout
    assert str(venv) in where, where                        # not the checkout
    port = free_port()
    env = {k: v for k, v in os.environ.items() if k != "PYTHONPATH"}
    env.update(VERAMP_WORKERS="1")
    (tmp_path / "data").mkdir()
    (tmp_path / "data" / "calibration.json").write_text(json.dumps(RATE.to_dict()))
    proc = subprocess.Popen([str(venv / "bin" / "veramp"), "serve", "--port", str(port), "--data-dir",
                             str(tmp_path / "data")], cwd=tmp_path, env=env, start_new_session=True,
                            stdout=subprocess.PIPE, stderr=subprocess.STDOUT)
    try:
        for _ in range(300):
            try:
                if httpx.get(f"http://127.0.0.1:{port}/v1/health", timeout=0.5).status_code == 200:
                    break
            except httpx.TransportError:
                pass
            if proc.poll() is not None:
                raise AssertionError(proc.stdout.read().decode()[-3000:])
            time.sleep(0.1)
        qasm = 'OPENQASM 2.0; include "qelib1.inc"; qreg q[3]; h q[0]; cx q[0],q[1]; cx q[1],q[2];'
        r = httpx.post(f"http://127.0.0.1:{port}/v1/amplitudes", timeout=120,
                       json={"circuit": {"qasm": qasm}, "bitstrings": ["000", "111", "010"]})
        assert r.status_code == 200, r.text
        probs = {row["bitstring"]: row["probability"] for row in r.json()["results"]}
        assert probs["000"] == pytest.approx(0.5, abs=1e-12)
        assert probs["111"] == pytest.approx(0.5, abs=1e-12)
        assert probs["010"] == pytest.approx(0.0, abs=1e-12)
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            proc.kill()
