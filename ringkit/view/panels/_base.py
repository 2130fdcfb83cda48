"""Shared plumbing of the widget panels: PNG figure pane, message area, background jobs.

A panel owns pyplot-free Agg figures and shows them as PNG bytes in ``ipywidgets.Image``
(works headless, in Voila and in static exports; tests read the artists directly). Compute
errors that are bad input (:class:`ValueError`, which includes
:class:`~ringkit._validation.ParameterError`) are shown in the panel's message area while the
last good plot stays on screen. Long computations run in a :class:`BackgroundJob` (a thread
with a progress callback and cooperative cancellation).
"""

from __future__ import annotations

import html
import threading
import time
from collections.abc import Callable
from typing import TYPE_CHECKING, Any

import ipywidgets as widgets

from ringkit.view.style import figure_to_png

if TYPE_CHECKING:  # pragma: no cover
    from matplotlib.figure import Figure

__all__ = ["FigurePane", "PanelBase", "BackgroundJob", "JobCancelled"]


class FigurePane:
    """An Agg figure displayed as PNG in an :class:`ipywidgets.Image`.

    Parameters
    ----------
    figure : Figure
        A figure with an Agg canvas (see :func:`ringkit.view.style.new_figure`).
    """

    def __init__(self, figure: Figure) -> None:
        self.figure = figure
        self.image = widgets.Image(format="png", layout=widgets.Layout(max_width="100%"))
        self.render_count = 0

    def refresh(self) -> None:
        """Render the figure and push the PNG bytes to the widget."""
        self.image.value = figure_to_png(self.figure)
        self.render_count += 1


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
