"""The one-command launchers: ``./bootstrap.sh lab`` and ``./bootstrap.sh app`` (issue 14).

Each test runs the real command (set-up check included) on a free port of 127.0.0.1 with a
time limit, checks that the server listens on 127.0.0.1 and serves the notebook, and stops
the process group it started. Skipped when the venv has no JupyterLab/Voila. docs/panels.md,
"Launch commands".
"""

from __future__ import annotations

import json
import os
import re
import signal
import socket
import subprocess
import time
import urllib.request
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
VENV_BIN = Path(os.environ.get("RINGKIT_VENV", ROOT / ".venv")) / "bin"

pytestmark = pytest.mark.notebook


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _start(mode: str, port: int, tmp_path: Path, *extra: str) -> subprocess.Popen:
    if not (VENV_BIN / {"lab": "jupyter-lab", "app": "voila"}[mode]).exists():
        pytest.skip(f"{mode}: not installed in the venv (run ./bootstrap.sh setup)")
    env = {k: v for k, v in os.environ.items() if k != "MPLBACKEND"}
    for var, sub in (("JUPYTER_CONFIG_DIR", "config"), ("JUPYTER_RUNTIME_DIR", "runtime")):
        env[var] = str(tmp_path / sub)
    log = open(tmp_path / f"{mode}.log", "wb")  # closed by _stop()
    proc = subprocess.Popen(
        ["bash", str(ROOT / "bootstrap.sh"), mode, f"--port={port}", "--no-browser", *extra],
        cwd=ROOT, env=env, stdout=log, stderr=subprocess.STDOUT, start_new_session=True,
    )  # fmt: skip
    proc.log = log  # type: ignore[attr-defined]
    deadline = time.monotonic() + 90
    while True:
        if proc.poll() is not None:
            log.close()
            pytest.fail(f"{mode} exited:\n" + (tmp_path / f"{mode}.log").read_text()[-3000:])
        try:
            with socket.create_connection(("127.0.0.1", port), timeout=1):
                return proc
        except OSError:
            if time.monotonic() > deadline:
                _stop(proc)
                pytest.fail(f"{mode} did not listen on 127.0.0.1:{port} within 90 s")
            time.sleep(0.3)


def _stop(proc: subprocess.Popen) -> None:
    try:
        os.killpg(proc.pid, signal.SIGTERM)  # the group this test started
        proc.wait(timeout=20)
    except subprocess.TimeoutExpired:
        os.killpg(proc.pid, signal.SIGKILL)
        proc.wait(timeout=10)
    except ProcessLookupError:
        pass
    proc.log.close()  # type: ignore[attr-defined]


def _listens_only_on_loopback(port: int) -> bool:
    """True if no other local address of this host answers on ``port``."""
    try:
        other = socket.gethostbyname(socket.gethostname())
    except OSError:
        return True
    if other.startswith("127."):
        return True
    try:
        with socket.create_connection((other, port), timeout=1):
            return False
    except OSError:
        return True


def test_lab_serves_the_notebooks_with_the_project_kernel(tmp_path):
    port = _free_port()
    proc = _start("lab", port, tmp_path, "--ServerApp.token=ringkit-test")
    try:
        base = f"http://127.0.0.1:{port}"
        q = "?token=ringkit-test"
        with urllib.request.urlopen(f"{base}/api/kernelspecs{q}", timeout=30) as r:
            specs = json.load(r)
        assert "ringkit" in specs["kernelspecs"]
        argv0 = specs["kernelspecs"]["ringkit"]["spec"]["argv"][0]
        assert Path(argv0).parent == VENV_BIN  # the project's venv (not resolved: symlinks)
        with urllib.request.urlopen(f"{base}/api/contents/01_device_design.ipynb{q}",
                                    timeout=30) as r:  # fmt: skip
            nb = json.load(r)
        assert nb["type"] == "notebook" and "DeviceExplorer" in json.dumps(nb["content"])
        with urllib.request.urlopen(f"{base}/lab{q}", timeout=30) as r:
            assert r.status == 200 and b"JupyterLab" in r.read()
        assert _listens_only_on_loopback(port)
    finally:
        _stop(proc)


def test_app_serves_the_explorer(tmp_path):
    port = _free_port()
    proc = _start("app", port, tmp_path)
    try:
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/", timeout=120) as r:
            assert r.status == 200
            head = r.read(200_000).decode("utf-8", "replace")
        assert re.search(r"<title>\s*01_device_design", head), head[:500]
        assert _listens_only_on_loopback(port)
    finally:
        _stop(proc)


def test_readme_demo_folder_matches_the_command_default():
    """Issue 16 pt 8: README, bootstrap.sh and `ringkit demo` name the same folder."""
    from ringkit.cli.demo import DEFAULT_OUT

    readme = (ROOT / "README.md").read_text()
    boot = (ROOT / "bootstrap.sh").read_text()
    assert f"run the embedded default study into ./{DEFAULT_OUT}" in readme
    assert f'OUT="${{1:-{DEFAULT_OUT}}}"' in boot
