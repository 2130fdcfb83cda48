"""Real-browser test: the device explorer rendered by Voila in headless Debian Chromium.

Voila serves a one-cell notebook showing :class:`~ringkit.view.panels.DeviceExplorer` on
127.0.0.1 (free port, temporary Jupyter config/runtime dirs, ``allow_root`` for CI running as
root). Playwright drives the system Chromium through ``executable_path`` (never a downloaded
browser; set ``RINGKIT_CHROMIUM`` to use another binary). The test moves the mean-radius
slider with the keyboard and checks that the kernel recomputed the plotted preview: the h/e
period shown next to the plot must equal (h/e)/(pi r^2) for the new radius (scipy constants)
and the rendered figure must change.

Skipped cleanly when Chromium, playwright or voila is missing.
"""

from __future__ import annotations

import math
import os
import re
import shutil
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest
from scipy import constants

pytestmark = pytest.mark.browser

CHROMIUM = os.environ.get("RINGKIT_CHROMIUM") or shutil.which("chromium") or "/usr/bin/chromium"
CHROMIUM_ARGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]
APP = """\
from IPython.display import display

from ringkit.view.panels import DeviceExplorer

explorer = DeviceExplorer()
display(explorer.widget)
"""


def _requirements() -> str | None:
    if not Path(CHROMIUM).exists():
        return f"no Chromium at {CHROMIUM} (apt-get install chromium)"
    try:
        import playwright.sync_api  # noqa: F401
    except ImportError:
        return "playwright (Python package) is not installed"
    try:
        import voila  # noqa: F401
    except ImportError:
        return "voila is not installed"
    return None


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.fixture
def voila_url(tmp_path):
    reason = _requirements()
    if reason:
        pytest.skip(reason)
    import nbformat

    root = tmp_path / "nb"
    root.mkdir()
    nb = nbformat.v4.new_notebook(
        cells=[nbformat.v4.new_code_cell(APP)],
        metadata={"kernelspec": {"name": "python3", "display_name": "Python 3",
                                 "language": "python"}},
    )  # fmt: skip
    nbformat.write(nb, root / "explorer.ipynb")
    env = {k: v for k, v in os.environ.items() if k != "MPLBACKEND"}
    for var, sub in (("JUPYTER_CONFIG_DIR", "config"), ("JUPYTER_RUNTIME_DIR", "runtime")):
        env[var] = str(tmp_path / sub)
    env["OPENBLAS_NUM_THREADS"] = "1"
    port = _free_port()
    log = open(tmp_path / "voila.log", "wb")
    proc = subprocess.Popen(
        [sys.executable, "-m", "voila", str(root / "explorer.ipynb"), "--no-browser",
         f"--port={port}", "--Voila.ip=127.0.0.1", "--ServerApp.allow_root=True",
         "--Voila.tornado_settings={'autoreload': False}"],
        cwd=root, env=env, stdout=log, stderr=subprocess.STDOUT,
    )  # fmt: skip
    try:
        deadline = time.monotonic() + 60
        while True:
            if proc.poll() is not None:
                pytest.fail("voila exited:\n" + (tmp_path / "voila.log").read_text()[-3000:])
            try:
                with socket.create_connection(("127.0.0.1", port), timeout=1):
                    break
            except OSError:
                if time.monotonic() > deadline:
                    pytest.fail("voila did not start within 60 s")
                time.sleep(0.3)
        yield f"http://127.0.0.1:{port}/"
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=15)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(timeout=15)
        log.close()


def _value(summary: str, key: str) -> str:
    m = re.search(re.escape(key) + r"\s*([-+0-9.eE]+)\s*(\S+)", summary)
    assert m, f"{key!r} not found in {summary!r}"
    return m.group(1), m.group(2)


def test_slider_changes_plotted_preview(voila_url, tmp_path):
    from playwright.sync_api import sync_playwright

    with sync_playwright() as p:
        ctx = p.chromium.launch_persistent_context(
            str(tmp_path / "chromium-profile"), executable_path=CHROMIUM, headless=True,
            args=CHROMIUM_ARGS,
        )  # fmt: skip
        try:
            page = ctx.new_page()
            errors: list[str] = []
            page.on("pageerror", lambda exc: errors.append(str(exc)))
            page.goto(voila_url, timeout=180_000)
            summary = page.locator(".ringkit-summary")
            summary.wait_for(timeout=180_000)
            page.wait_for_function(
                "() => document.querySelector('.ringkit-summary')?.innerText.includes('period')",
                timeout=120_000,
            )
            before = summary.inner_text()
            slider = page.locator(".widget-slider", has_text="mean radius (nm)").first
            r0 = float(slider.locator(".widget-readout").inner_text())
            image = page.locator(".ringkit-explorer img").nth(1)  # data figure (ring is first)
            shot0 = image.screenshot()
            handle = slider.locator(".noUi-handle").first
            handle.focus()
            for _ in range(5):  # step 10 nm each
                handle.press("ArrowRight")
            page.wait_for_function(
                "(old) => document.querySelector('.ringkit-summary').innerText !== old",
                arg=before, timeout=60_000,
            )  # fmt: skip
            # the last key press may still be on its way: wait until the shown radius settles
            r1 = float(slider.locator(".widget-readout").inner_text())
            assert r1 == pytest.approx(r0 + 50.0)
            period = constants.h / constants.e / (math.pi * (r1 * 1e-9) ** 2) * 1e3  # mT
            page.wait_for_function(
                "(want) => document.querySelector('.ringkit-summary').innerText.includes(want)",
                arg=f"{period:.3g} mT", timeout=60_000,
            )  # fmt: skip
            after = summary.inner_text()
            shown, unit = _value(after, "h/e period (mean radius)")
            assert unit == "mT" and float(shown) == pytest.approx(period, rel=2e-3)
            assert _value(after, "1D preview: mean G")[0] != _value(before, "1D preview: mean G")[0]
            page.wait_for_timeout(500)
            assert image.screenshot() != shot0  # the rendered figure changed
            assert not errors, errors
        finally:
            ctx.close()
