"""Shared plumbing of the widget panels: figure pane, message area, background jobs.

A panel owns pyplot-free figures and shows them as interactive ipympl canvases inside a
Jupyter kernel, or as PNG bytes in ``ipywidgets.Image`` (headless, static exports, no ipympl;
tests read the artists directly). Compute
errors that are bad input (:class:`ValueError`, which includes
:class:`~ringkit._validation.ParameterError`) are shown in the panel's message area while the
last good plot stays on screen. Long computations run in a :class:`BackgroundJob` (a thread
with a progress callback and cooperative cancellation).
"""

from __future__ import annotations

import html
import importlib.util
import os
import threading
import time
import warnings
from collections.abc import Callable
from typing import TYPE_CHECKING, Any

import ipywidgets as widgets

from ringkit.view.style import figure_to_png

if TYPE_CHECKING:  # pragma: no cover
    from matplotlib.figure import Figure

__all__ = [
    "FigurePane",
    "PanelBase",
    "BackgroundJob",
    "JobCancelled",
    "LatestOnly",
    "canvas_available",
    "in_kernel",
]


def in_kernel() -> bool:
    """True inside a Jupyter kernel (a frontend may show widgets and canvases)."""
    try:
        from IPython import get_ipython
    except ImportError:  # pragma: no cover - IPython comes with ipywidgets
        return False
    shell = get_ipython()
    return shell is not None and getattr(shell, "kernel", None) is not None


def canvas_available() -> bool:
    """True when figures can be interactive ipympl canvases: ipympl is installed, the code
    runs inside a Jupyter kernel (a frontend can show the canvas), and ``RINGKIT_FIGURES`` is
    not ``"png"``."""
    if os.environ.get("RINGKIT_FIGURES", "").lower() == "png" or not in_kernel():
        return False
    return importlib.util.find_spec("ipympl") is not None


class FigurePane:
    """A figure shown as an interactive ipympl canvas, or as PNG in an ``ipywidgets.Image``.

    The canvas (zoom, pan, cursor read-out) is used when :func:`canvas_available`; otherwise
    (no ipympl, no kernel: headless tests, static export) the figure is rendered to PNG at
    ``png_scale`` times its nominal resolution (``PNG_SCALE`` = 2 inside a kernel, where a
    screen shows it; 1 headless) and shown at exactly its nominal CSS size
    (``figsize x figure.dpi`` px; narrower screens only scale it down), so text stays sharp
    on high-density screens and is never stretched.

    Parameters
    ----------
    figure : Figure
        A pyplot-free figure (see :func:`ringkit.view.style.new_figure`).
    interactive : bool, optional
        Force the canvas (True) or the PNG image (False); default :func:`canvas_available`.

    Attributes
    ----------
    widget : ipywidgets.Widget
        What the panel displays (the canvas or ``image``).
    image : ipywidgets.Image
        The PNG view (holds the last PNG bytes in PNG mode).
    interactive : bool
    png_scale : float
    render_count : int
    """

    PNG_SCALE = 2.0

    def __init__(self, figure: Figure, *, interactive: bool | None = None) -> None:
        self.figure = figure
        w_in, h_in = figure.get_size_inches()
        css_w, css_h = round(w_in * figure.dpi), round(h_in * figure.dpi)
        self.css_size = (css_w, css_h)
        self.image = widgets.Image(
            format="png",
            layout=widgets.Layout(width=f"{css_w}px", height="auto", max_width="100%"),
        )
        self.image.add_class("ringkit-figure")
        self.render_count = 0
        self.png_scale = self.PNG_SCALE if in_kernel() else 1.0
        self.interactive = canvas_available() if interactive is None else bool(interactive)
        self.canvas = None
        self.widget: widgets.Widget = self.image
        if self.interactive:
            from ipympl.backend_nbagg import Canvas, FigureManager

            canvas = Canvas(figure)
            with warnings.catch_warnings():
                # ipympl 0.10 Toolbar + traitlets: a DeprecationWarning about super().__init__
                # arguments inside ipympl (upstream, harmless)
                warnings.filterwarnings(
                    "ignore", "Passing unrecognized arguments", DeprecationWarning
                )
                self._manager = FigureManager(canvas, 0)
            canvas.header_visible = False
            canvas.footer_visible = True  # cursor read-out
            canvas.toolbar_position = "left"
            canvas.toolbar_visible = "visible"
            canvas.resizable = False
            canvas.capture_scroll = False
            canvas.layout = widgets.Layout(width=f"{css_w + 40}px", max_width="100%")
            canvas.add_class("ringkit-figure")
            canvas.add_class("ringkit-canvas")
            self.canvas = canvas
            self.widget = canvas

    def refresh(self) -> None:
        """Redraw the canvas, or render the PNG and push the bytes to the image."""
        if self.canvas is not None:
            from ringkit.view.style import style_context

            with style_context():
                self.canvas.draw_idle()
        else:
            self.image.value = figure_to_png(self.figure, dpi=self.png_scale * self.figure.dpi)
        self.render_count += 1


class LatestOnly:
    """Run ``func(arg)`` in one worker thread for the most recently submitted ``arg`` only.

    Submissions made while a computation runs replace each other; when it ends, only the
    newest is started (older ones are dropped). ``on_done(arg, result)`` /
    ``on_error(arg, exc)`` run in the worker thread; ``is_current(arg)`` lets them check that
    no newer submission is pending.
    """

    def __init__(self, func, on_done, on_error) -> None:
        self._func, self._on_done, self._on_error = func, on_done, on_error
        self._lock = threading.Lock()
        self._pending: list = []
        self._serial = 0
        self._thread: threading.Thread | None = None
        self._running = False
        self._idle = threading.Event()
        self._idle.set()

    def submit(self, arg) -> int:
        """Queue ``arg`` (replacing a queued one); returns its serial number."""
        with self._lock:
            self._serial += 1
            self._pending[:] = [(self._serial, arg)]
            self._idle.clear()
            if not self._running:  # (a finishing worker may still be alive: not "running")
                self._running = True
                self._thread = threading.Thread(target=self._run, daemon=True,
                                                name="ringkit-live")  # fmt: skip
                self._thread.start()
            return self._serial

    def is_current(self, serial: int) -> bool:
        """True if ``serial`` is the newest submission."""
        return serial == self._serial

    def _run(self) -> None:
        while True:
            with self._lock:
                if not self._pending:
                    self._running = False
                    self._idle.set()
                    return
                serial, arg = self._pending.pop()
            try:
                result = self._func(arg)
            except BaseException as exc:  # shown by the panel, never lost
                self._report(self._on_error, serial, arg, exc)
            else:
                try:
                    self._on_done(serial, arg, result)
                except BaseException as exc:  # e.g. a drawing error: shown, worker goes on
                    self._report(self._on_error, serial, arg, exc)

    @staticmethod
    def _report(callback, *args) -> None:
        try:
            callback(*args)
        except BaseException:  # pragma: no cover - the worker must survive its callbacks
            import traceback

            traceback.print_exc()

    def wait(self, timeout: float | None = None) -> bool:
        """Block until nothing is queued or running; True if idle."""
        return self._idle.wait(timeout)


class JobCancelled(Exception):
    """Raised inside a job function when cancellation was requested."""


class BackgroundJob:
    """Run ``func(report, cancelled)`` in a daemon thread.

    ``report(fraction, text)`` updates the progress (0..1) and raises :class:`JobCancelled`
    once :meth:`cancel` was called, so job functions that report between chunks of work are
    cancellable; ``cancelled`` is the :class:`threading.Event` itself for finer checks.

    Parameters
    ----------
    func : callable
        ``func(report, cancelled) -> result``.
    on_progress : callable, optional
        ``on_progress(fraction, text)``, called from the worker thread.
    on_done : callable, optional
        ``on_done(result)`` after success (worker thread).
    on_error : callable, optional
        ``on_error(exc)`` after failure or cancellation (worker thread).
    """

    def __init__(
        self,
        func: Callable[[Callable[[float, str], None], threading.Event], Any],
        *,
        on_progress: Callable[[float, str], None] | None = None,
        on_done: Callable[[Any], None] | None = None,
        on_error: Callable[[BaseException], None] | None = None,
    ) -> None:
        self._func = func
        self._on_progress = on_progress
        self._on_done = on_done
        self._on_error = on_error
        self.cancelled = threading.Event()
        self.result: Any = None
        self.error: BaseException | None = None
        self.elapsed: float | None = None
        self._thread = threading.Thread(target=self._run, daemon=True, name="ringkit-job")

    def _report(self, fraction: float, text: str = "") -> None:
        if self.cancelled.is_set():
            raise JobCancelled("cancelled by the user")
        if self._on_progress is not None:
            self._on_progress(min(max(float(fraction), 0.0), 1.0), text)

    def _run(self) -> None:
        t0 = time.perf_counter()
        try:
            self.result = self._func(self._report, self.cancelled)
            if self.cancelled.is_set():
                raise JobCancelled("cancelled by the user")
        except BaseException as exc:  # reported to the panel, never lost
            self.error = exc
            self.elapsed = time.perf_counter() - t0
            if self._on_error is not None:
                self._on_error(exc)
            return
        self.elapsed = time.perf_counter() - t0
        if self._on_done is not None:
            self._on_done(self.result)

    def start(self) -> BackgroundJob:
        """Start the worker thread; returns self."""
        self._thread.start()
        return self

    def cancel(self) -> None:
        """Ask the job to stop at its next progress report."""
        self.cancelled.set()

    @property
    def running(self) -> bool:
        """True while the worker thread is alive."""
        return self._thread.is_alive()

    def wait(self, timeout: float | None = None) -> bool:
        """Block until the job ends (or ``timeout`` s); True if it has ended."""
        self._thread.join(timeout)
        return not self._thread.is_alive()


class PanelBase:
    """Message area, summary area and the "keep the last good plot" update rule.

    Subclasses build ``self.widget`` (the panel's top-level box) and call :meth:`guarded`
    around every recompute-and-redraw.
    """

    def __init__(self) -> None:
        self.message = widgets.HTML(value="")
        self.message.add_class("ringkit-message")
        self.summary = widgets.HTML(value="")
        self.summary.add_class("ringkit-summary")
        self.last_error: str | None = None
        self.draw_lock = threading.RLock()
        self.widget: widgets.Widget = widgets.VBox()

    def show_message(self, text: str, *, level: str = "error") -> None:
        """Show ``text`` (plain text, escaped) in the message area."""
        color = {"error": "#b00020", "info": "#1b4f9c", "warning": "#8a6d00"}.get(level, "#000")
        self.message.value = (
            f'<div style="color:{color};white-space:pre-wrap">{html.escape(text)}</div>'
        )
        if level == "error":
            self.last_error = text

    def clear_message(self) -> None:
        """Empty the message area."""
        self.message.value = ""
        self.last_error = None

    def guarded(self, func: Callable[[], Any]) -> bool:
        """Run ``func``; on a ValueError show its message and keep the current plots.

        Returns
        -------
        bool
            True if ``func`` completed.
        """
        try:
            with self.draw_lock:
                func()
        except ValueError as exc:
            self.show_message(f"{type(exc).__name__}: {exc}")
            return False
        self.clear_message()
        return True

    def _ipython_display_(self) -> None:  # pragma: no cover - needs a frontend
        from IPython.display import display

        display(self.widget)
