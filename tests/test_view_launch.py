"""The one-command launchers: ``./bootstrap.sh lab`` and ``./bootstrap.sh app`` (issue 14).

Each test runs the real command (set-up check included) on a free port of 127.0.0.1 with a
time limit, checks that the server listens on 127.0.0.1 and serves the notebook, and stops
the process group it started. Skipped when the venv has no JupyterLab/Voila. docs/panels.md,
"Launch commands".
"""

from __future__ import annotations

import json
import re
import sys
import urllib.request
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _servers import (
    ROOT,
    VENV_BIN,
    free_port,
    listens_only_on_loopback,
    start,
    stop,
)

pytestmark = pytest.mark.notebook


def test_lab_serves_the_notebooks_with_the_project_kernel(tmp_path):
    port = free_port()
    proc = start("lab", port, tmp_path, "--ServerApp.token=ringkit-test")
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
        assert listens_only_on_loopback(port)
    finally:
        stop(proc)


def test_app_serves_the_explorer(tmp_path):
    """Covered with more checks by tests/test_browser.py, which runs the same command; this
    plain HTTP check runs where Chromium/playwright are missing."""
    from test_browser import browser_missing

    if browser_missing() is None:
        pytest.skip("tests/test_browser.py runs ./bootstrap.sh app in a browser")
    port = free_port()
    proc = start("app", port, tmp_path)
    try:
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/", timeout=120) as r:
            assert r.status == 200
            head = r.read(200_000).decode("utf-8", "replace")
        assert re.search(r"<title>\s*explorer_app", head), head[:500]
        assert listens_only_on_loopback(port)
    finally:
        stop(proc)


def test_readme_demo_folder_matches_the_command_default():
    """Issue 16 pt 8: README, bootstrap.sh and `ringkit demo` name the same folder."""
    from ringkit.cli.demo import DEFAULT_OUT

    readme = (ROOT / "README.md").read_text()
    boot = (ROOT / "bootstrap.sh").read_text()
    assert f"run the embedded default study into ./{DEFAULT_OUT}" in readme
    assert f'OUT="${{1:-{DEFAULT_OUT}}}"' in boot
