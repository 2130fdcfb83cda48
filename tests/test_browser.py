"""Real-browser test: the device explorer app (``./bootstrap.sh app``) in headless Chromium.

One Voila session (the app command itself, on a free port of 127.0.0.1) driven by playwright
through Debian's Chromium (``executable_path``, never a downloaded browser; ``RINGKIT_CHROMIUM``
overrides the path). Checks, combined to keep the suite short (issue 14, issue 16 pt 8):

* no request leaves 127.0.0.1 (every request of the browser context is routed here; any
  other host is aborted and fails the test);
* the first screen says what it shows, and the exact lattice result is swapped in (the
  numbers table gains the lattice rows);
* no control label is cut off: every control description of the panel (read from the Python
  side) is rendered in full (``scrollWidth <= clientWidth`` of its label) on every tab;
* the figures are interactive canvases drawn at the screen's pixel density
  (backing store >= CSS size x devicePixelRatio), and a pan on the G(B) canvas changes the view;
* moving the mean-radius slider recomputes the plotted model: the displayed h/e period equals
  (h/e)/(pi r^2) for the new radius (scipy.constants).

Skipped cleanly when Chromium, playwright or voila is missing. docs/panels.md, "Tests".
"""

from __future__ import annotations

import math
import os
import re
import shutil
import sys
from pathlib import Path
from urllib.parse import urlparse

import pytest
from scipy import constants

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _servers import free_port, start, stop

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
LOCAL = {"127.0.0.1"}


def browser_missing() -> str | None:
    """Why the browser test cannot run here (None if it can)."""
    if not Path(CHROMIUM).exists():
        return f"no Chromium at {CHROMIUM} (apt-get install chromium)"
    from importlib.util import find_spec

    if find_spec("playwright") is None:
        return "playwright (Python package) is not installed"
    if find_spec("voila") is None:
        return "voila is not installed"
    return None


def _value(summary: str, key: str) -> tuple[str, str]:
    m = re.search(re.escape(key) + r"\s*([-+0-9.eE]+)\s*(\S+)", summary)
    assert m, f"{key!r} not found in {summary!r}"
    return m.group(1), m.group(2)


def _descriptions() -> set[str]:
    """Every control description of the explorer, from the Python side."""
    from ringkit.view.panels import DeviceExplorer

    ex = DeviceExplorer(live_lattice=False)
    texts = {w.description for w in ex.controls.values()}
    texts |= {b.description for b in (ex.run_button, ex.cancel_button, ex.save_button,
                                      ex.open_button, ex.show_preview, ex.show_full,
                                      ex.live_lattice, ex.study_path)}  # fmt: skip
    return {t for t in texts if t}


_LABELS_JS = """() => Array.from(document.querySelectorAll(
    '.ringkit-explorer .widget-label, .ringkit-explorer .widget-button,'
    + ' .ringkit-explorer .widget-checkbox label'))
  .filter(e => e.offsetParent !== null && e.textContent.trim())
  .map(e => [e.textContent.trim(), e.scrollWidth, e.clientWidth])"""


def _local_only(outside: list[str]):
    """A playwright route handler: requests to 127.0.0.1 go on, others are aborted and noted."""

    def route(r):
        if urlparse(r.request.url).hostname in LOCAL or r.request.url.startswith("data:"):
            r.continue_()
        else:
            outside.append(r.request.url)
            r.abort()

    return route


@pytest.fixture
def app_url(tmp_path):
    reason = browser_missing()
    if reason:
        pytest.skip(reason)
    port = free_port()
    proc = start("app", port, tmp_path)
    try:
        yield f"http://127.0.0.1:{port}/"
    finally:
        stop(proc)


def test_explorer_app_in_a_browser(app_url, tmp_path):
    from playwright.sync_api import sync_playwright

    want_labels = _descriptions()
    outside: list[str] = []
    route = _local_only(outside)

    with sync_playwright() as p:
        ctx = p.chromium.launch_persistent_context(
            str(tmp_path / "chromium-profile"), executable_path=CHROMIUM, headless=True,
            args=CHROMIUM_ARGS, viewport={"width": 1280, "height": 1000},
        )  # fmt: skip
        try:
            ctx.route("**/*", route)
            page = ctx.new_page()
            errors: list[str] = []
            page.on("pageerror", lambda exc: errors.append(str(exc)))
            page.goto(app_url, timeout=180_000)
            summary = page.locator(".ringkit-summary")
            summary.wait_for(timeout=180_000)
            # first frame: the single-channel model; then the exact lattice is swapped in
            try:
                page.wait_for_function(
                    "() => document.querySelector('.ringkit-summary')?.innerText"
                    ".includes('lattice (live): mean G')",
                    timeout=120_000,
                )
            except Exception:  # say what the page shows instead
                pytest.fail(
                    "no lattice result within 120 s; page shows:\n"
                    + page.locator(".ringkit-explorer").inner_text()[:3000]
                )
            text = summary.inner_text()
            assert "single-channel: mean G" in text and "transverse modes per arm" in text

            # labels: every description rendered in full, on every tab
            seen: dict[str, tuple[int, int]] = {}
            for tab in page.locator(".ringkit-explorer .lm-TabBar-tab").all():
                tab.click()
                page.wait_for_timeout(200)
                for label, scroll, client in page.evaluate(_LABELS_JS):
                    seen[label] = (scroll, client)
            missing = sorted(want_labels - set(seen))
            assert not missing, f"labels not rendered: {missing}"
            cut = {k: v for k, v in seen.items() if k in want_labels and v[0] > v[1] + 1}
            assert not cut, f"labels cut off (scrollWidth, clientWidth): {cut}"
            page.locator(".ringkit-explorer .lm-TabBar-tab").first.click()

            # interactive canvases at the screen's pixel density
            canvases = page.evaluate(
                """() => Array.from(document.querySelectorAll('.ringkit-canvas canvas'))
                  .filter(c => c.clientWidth > 0)
                  .map(c => [c.width, c.clientWidth, window.devicePixelRatio])"""
            )
            assert len(canvases) >= 2, canvases
            assert all(w >= cw * dpr - 1 for w, cw, dpr in canvases), canvases

            # a pan on the G(B) canvas changes the view
            data_fig = page.locator(".ringkit-canvas").nth(1)
            page.wait_for_timeout(800)  # last redraw of the swap-in
            shot0 = data_fig.screenshot()
            data_fig.locator("button[title^='Left button pans']").click()
            box = data_fig.locator("canvas").last.bounding_box()
            x0, y0 = box["x"] + 0.5 * box["width"], box["y"] + 0.3 * box["height"]
            page.mouse.move(x0, y0)
            page.mouse.down()
            page.mouse.move(x0 + 120, y0 + 10, steps=8)
            page.mouse.up()
            page.wait_for_timeout(800)
            assert data_fig.screenshot() != shot0, "the pan did not change the view"
            data_fig.locator("button[title^='Left button pans']").click()  # tool off

            # the radius slider recomputes the model: h/e period for the new radius
            before = summary.inner_text()
            slider = page.locator(".widget-slider", has_text="mean radius (nm)").first
            r0 = float(slider.locator(".widget-readout").inner_text())
            handle = slider.locator(".noUi-handle").first
            handle.focus()
            for _ in range(5):  # step 10 nm each
                handle.press("ArrowRight")
            r1 = r0 + 50.0
            period = constants.h / constants.e / (math.pi * (r1 * 1e-9) ** 2) * 1e3  # mT
            page.wait_for_function(
                "(want) => document.querySelector('.ringkit-summary').innerText.includes(want)",
                arg=f"{period:.3g} mT", timeout=60_000,
            )  # fmt: skip
            assert float(slider.locator(".widget-readout").inner_text()) == pytest.approx(r1)
            after = summary.inner_text()
            shown, unit = _value(after, "h/e period (mean radius)")
            assert unit == "mT" and float(shown) == pytest.approx(period, rel=2e-3)
            key = "single-channel: mean G"
            assert _value(after, key)[0] != _value(before, key)[0]
            assert not errors, errors
            assert not outside, f"requests outside 127.0.0.1: {outside}"
        finally:
            ctx.close()


def _all_descriptions(widget) -> set[str]:
    """Every non-empty ``description`` in a widget tree (Python side)."""
    out, stack = set(), [widget]
    while stack:
        w = stack.pop()
        text = getattr(w, "description", "")
        if isinstance(text, str) and text.strip():
            out.add(text.strip())
        stack.extend(getattr(w, "children", ()))
    return out


def _voila(notebook: Path, port: int, tmp_path: Path):
    """Serve one notebook with Voila and the ringkit template (no outside requests)."""
    import subprocess

    env = {k: v for k, v in os.environ.items() if k != "MPLBACKEND"}
    env["JUPYTER_PATH"] = str(Path(__file__).resolve().parents[1] / "share" / "jupyter")
    for var, sub in (("JUPYTER_CONFIG_DIR", "config"), ("JUPYTER_RUNTIME_DIR", "runtime")):
        env[var] = str(tmp_path / sub)
    env["OPENBLAS_NUM_THREADS"] = "1"
    voila = Path(sys.executable).with_name("voila")
    root = ["--ServerApp.allow_root=True"] if os.geteuid() == 0 else []
    log = open(tmp_path / f"voila-{port}.log", "wb")  # closed by stop()
    proc = subprocess.Popen(
        [str(voila), str(notebook), f"--port={port}", "--no-browser", "--Voila.ip=127.0.0.1",
         "--template=ringkit", *root],
        env=env, stdout=log, stderr=subprocess.STDOUT, start_new_session=True,
    )  # fmt: skip
    proc.log, proc.logfile = log, tmp_path / f"voila-{port}.log"  # type: ignore[attr-defined]
    return proc


@pytest.mark.parametrize(
    ("notebook", "css", "panel"),
    [
        ("02_amplitude_vs_size.ipynb", "ringkit-scaling", "SizeScalingPanel"),
        ("03_measured_vs_model.ipynb", "ringkit-measured", "MeasuredDataPanel"),
    ],
)
def test_other_panels_show_full_labels_and_stay_local(notebook, css, panel, tmp_path):
    """Issue 14 pt 5 / issue 16 pt 8 for the size-scaling and measured-data panels: every
    control label is rendered in full at the default width, and no request leaves 127.0.0.1."""
    import socket
    import time

    reason = browser_missing()
    if reason:
        pytest.skip(reason)
    from playwright.sync_api import sync_playwright

    import ringkit.view.panels as panels

    want = _all_descriptions(getattr(panels, panel)().widget)
    port = free_port()
    nb = Path(__file__).resolve().parents[1] / "notebooks" / notebook
    proc = _voila(nb, port, tmp_path)
    outside: list[str] = []
    route = _local_only(outside)

    try:
        deadline = time.monotonic() + 90
        while True:
            try:
                socket.create_connection(("127.0.0.1", port), timeout=1).close()
                break
            except OSError:
                assert proc.poll() is None, proc.logfile.read_text()[-3000:]
                assert time.monotonic() < deadline, "voila did not start within 90 s"
                time.sleep(0.3)
        js = (
            "() => Array.from(document.querySelectorAll("
            f"'.{css} .widget-label, .{css} .widget-button, .{css} .widget-checkbox label'))"
            ".filter(e => e.offsetParent !== null && e.textContent.trim())"
            ".map(e => [e.textContent.trim(), e.scrollWidth, e.clientWidth])"
        )
        with sync_playwright() as p:
            ctx = p.chromium.launch_persistent_context(
                str(tmp_path / "chromium-profile"), executable_path=CHROMIUM, headless=True,
                args=CHROMIUM_ARGS, viewport={"width": 1280, "height": 1000},
            )  # fmt: skip
            try:
                ctx.route("**/*", route)
                page = ctx.new_page()
                page.goto(f"http://127.0.0.1:{port}/", timeout=180_000)
                page.locator(f".{css}").first.wait_for(timeout=180_000)
                page.wait_for_timeout(500)
                seen: dict[str, tuple[int, int]] = {}
                tabs = page.locator(f".{css} .lm-TabBar-tab").all() or [None]
                for tab in tabs:
                    if tab is not None:
                        tab.click()
                        page.wait_for_timeout(200)
                    for label, scroll, client in page.evaluate(js):
                        seen[label] = (scroll, client)
                shown = want & set(seen)
                assert len(shown) >= max(3, len(want) // 2), (sorted(want), sorted(seen))
                cut = {k: v for k, v in seen.items() if k in want and v[0] > v[1] + 1}
                assert not cut, f"labels cut off (scrollWidth, clientWidth): {cut}"
                assert not outside, f"requests outside 127.0.0.1: {outside}"
            finally:
                ctx.close()
    finally:
        stop(proc)
