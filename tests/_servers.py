"""Start and stop the servers of ``./bootstrap.sh lab`` / ``./bootstrap.sh app`` in tests.

Each server runs the real command on a free port of 127.0.0.1 in its own process group (which
the test stops by its id), with temporary Jupyter config/runtime dirs and without MPLBACKEND.
"""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import time
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
VENV_BIN = Path(os.environ.get("RINGKIT_VENV", ROOT / ".venv")) / "bin"


def free_port() -> int:
    """A free TCP port on 127.0.0.1."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def start(mode: str, port: int, tmp_path: Path, *extra: str, timeout: float = 90.0):
    """Run ``bootstrap.sh <mode> --port=<port> --no-browser <extra>`` until it listens."""
    if not (VENV_BIN / {"lab": "jupyter-lab", "app": "voila"}[mode]).exists():
        pytest.skip(f"{mode}: not installed in the venv (run ./bootstrap.sh setup)")
    env = {k: v for k, v in os.environ.items() if k != "MPLBACKEND"}
    for var, sub in (("JUPYTER_CONFIG_DIR", "config"), ("JUPYTER_RUNTIME_DIR", "runtime")):
        env[var] = str(tmp_path / sub)
    env["OPENBLAS_NUM_THREADS"] = "1"
    logfile = tmp_path / f"{mode}.log"
    log = open(logfile, "wb")  # closed by stop()
    proc = subprocess.Popen(
        ["bash", str(ROOT / "bootstrap.sh"), mode, f"--port={port}", "--no-browser", *extra],
        cwd=ROOT, env=env, stdout=log, stderr=subprocess.STDOUT, start_new_session=True,
    )  # fmt: skip
    proc.log, proc.logfile = log, logfile  # type: ignore[attr-defined]
    deadline = time.monotonic() + timeout
    while True:
        if proc.poll() is not None:
            log.close()
            pytest.fail(f"{mode} exited:\n" + logfile.read_text()[-3000:])
        try:
            with socket.create_connection(("127.0.0.1", port), timeout=1):
                return proc
        except OSError:
            if time.monotonic() > deadline:
                stop(proc)
                pytest.fail(f"{mode} did not listen on 127.0.0.1:{port} within {timeout:g} s")
            time.sleep(0.3)


def stop(proc) -> None:
    """Stop the process group started by :func:`start` (by its id)."""
    try:
        os.killpg(proc.pid, signal.SIGTERM)
        proc.wait(timeout=20)
    except subprocess.TimeoutExpired:
        os.killpg(proc.pid, signal.SIGKILL)
        proc.wait(timeout=10)
    except ProcessLookupError:
        pass
    proc.log.close()


def listens_only_on_loopback(port: int) -> bool:
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
