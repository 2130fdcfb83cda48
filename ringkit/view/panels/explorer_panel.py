"""Widget shell of the device explorer (compute parts: ``explorer*.py`` beside this module).

Responsibilities are split by module: :mod:`~ringkit.view.panels.explorer_controls` (widgets
<-> :class:`~ringkit.view.panels.explorer.ExplorerParams`, density/E_F input),
:mod:`~ringkit.view.panels.explorer_draw` (figures, banner, numbers table),
:mod:`~ringkit.view.panels.explorer_derived` (E_F, k_F, modes, l, L_T, E_Th),
:mod:`~ringkit.view.panels.explorer_study` (panel <-> study TOML), and this shell (layout,
callbacks, the live lattice in the background, the full computation, export/import).

On every control change the exact single-channel model is recomputed and drawn at once (the
instant first frame, labelled "single-channel"); with the live lattice on (the default, in
flux-tube mode, up to ``LIVE_MAX_SITES`` sites) the exact lattice G(B) of the same settings
is then computed and swapped in as soon as it is ready. Inside a Jupyter kernel the lattice
runs in a background thread (newest settings only, :class:`~ringkit.view.panels._base.LatestOnly`),
so controls never wait for it; headless (tests, scripts) it runs synchronously in the same
update. Latencies: benchmarks/bench_live_preview.py. The full tight-binding computation
(uniform field, more energies) runs on demand in a
:class:`~ringkit.view.panels._base.BackgroundJob`. docs/panels.md, "Device explorer".
"""

from __future__ import annotations

import math
import time
from dataclasses import replace
from pathlib import Path
from typing import Any

import ipywidgets as widgets

from ringkit.view.panels._base import (
    BackgroundJob,
    FigurePane,
    JobCancelled,
    LatestOnly,
    PanelBase,
    in_kernel,
)
from ringkit.view.panels.explorer import ExplorerParams, PreviewResult, explorer_preview
from ringkit.view.panels.explorer_controls import (
    DENSITY_UNIT,
    MEV,
    carrier_text,
    make_controls,
    params_from_controls,
    preset_carriers,
    set_controls,
)
from ringkit.view.panels.explorer_derived import Derived, derived_quantities
from ringkit.view.panels.explorer_draw import PREVIEW, ExplorerDrawing
from ringkit.view.panels.explorer_live import (
    LIVE_L_PHI_PENDING,
    LiveCancelled,
    LiveLattice,
    LiveResult,
)
from ringkit.view.style import new_figure, style_context

__all__ = ["DeviceExplorer"]

_AUTO = widgets.Layout(width="auto")


class DeviceExplorer(ExplorerDrawing, PanelBase):
    """Device explorer panel.

    Parameters
    ----------
    params : ExplorerParams, optional
        Initial settings.
    live_lattice : bool
        Start with the live lattice view on (default; the "live lattice" checkbox).
    live : LiveLattice, optional
        The cached live-lattice computation to use (default: a new one).
    background : bool, optional
        Compute the live lattice in a background thread (default: inside a Jupyter kernel).
    live_calibration : bool
        With dephasing, follow the analytic-coupling live frame by the device's L_phi
        calibration and redraw with the calibrated coupling and the realised L_phi (default).

    Attributes
    ----------
    controls : dict of str -> widget
        The input widgets (display units in their descriptions).
    fermi_source : {"density", "fermi_energy"}
        Which of the two carrier controls is the input (the one typed last).
    preview : PreviewResult or None
        Last good single-channel result.
    derived : list of Derived
        Derived quantities of the current settings (E_F, k_F, modes per arm, l, L_T, E_Th).
    full : FullResult or None
        Last full tight-binding result (``full_params`` are its settings).
    live : LiveResult or None
        Lattice result for the current settings (None while computing, when off or
        unavailable; ``live_note`` then says why).
    live_pending : bool
        A lattice result for the current settings is being computed.
    live_stale : LiveResult or None
        While it is, the previous lattice result (drawn faint and dashed).
    live_lattice : ipywidgets.Checkbox
        Turns the live lattice view on and off.
    live_view : LiveLattice
        Its computation and caches (``live_view.builds`` counts lattice builds).
    artists : dict
        Current matplotlib artists: ``"preview"``, ``"full"``, ``"live"`` (G(B) lines),
        ``"preview_spectrum"``, ``"full_spectrum"``, ``"live_spectrum"``.
    latency : float
        Wall time in s of the last control change until the single-channel frame was drawn.
    live_latency : float
        Wall time in s of the last control change until the lattice result was drawn.
    """

    def __init__(
        self,
        params: ExplorerParams | None = None,
        *,
        live_lattice: bool = True,
        live: LiveLattice | None = None,
        background: bool | None = None,
        live_calibration: bool = True,
    ) -> None:
        super().__init__()
        p = params or ExplorerParams()
        self.live_view = live if live is not None else LiveLattice()
        self.live: LiveResult | None = None
        self.live_params: ExplorerParams | None = None
        self.live_note: str | None = None
        self.live_pending = False
        self.live_stale: LiveResult | None = None
        self.background = in_kernel() if background is None else bool(background)
        self.live_calibration = bool(live_calibration)
        self._worker = LatestOnly(self._live_compute, self._live_done, self._live_failed)
        self._submitted: dict[int, float] = {}
        self._twin: Any = None
        self._suspend = False
        self.preview: PreviewResult | None = None
        self.derived: list[Derived] = []
        self.params: ExplorerParams | None = None
        self.full: Any = None
        self.full_params: ExplorerParams | None = None
        self.job: BackgroundJob | None = None
        self.latency = float("nan")
        self.live_latency = float("nan")
        self.artists: dict[str, Any] = {}
        self.controls, self.fermi_source = make_controls(p)
        for key, w in self.controls.items():
            if key in ("density", "fermi_energy"):
                w.observe(self._on_carrier, names="value")
            elif key == "material":
                w.observe(self._on_material, names="value")
            else:
                w.observe(self._on_change, names="value")

        fig, axes = new_figure(2, 1, size=(6.6, 5.2), layout=None)
        fig.subplots_adjust(left=0.11, right=0.88, bottom=0.09, top=0.86, hspace=0.45)
        self.figure = fig
        self.ax_g, self.ax_s = axes[0, 0], axes[1, 0]
        with style_context():
            self._banner = fig.text(0.5, 0.985, "", ha="center", va="top", fontsize=8,
                                    wrap=True)  # fmt: skip
        self.pane = FigurePane(fig)
        ring_fig, ring_axes = new_figure(1, 1, size=(3.6, 3.6), layout=None)
        ring_fig.subplots_adjust(left=0.2, right=0.97, bottom=0.13, top=0.92)
        self.ring_figure = ring_fig
        self.ax_ring = ring_axes[0, 0]
        self.ring_pane = FigurePane(ring_fig)
        self._ring_key: Any = None
        self._layout_key: Any = None
        self._marks: dict = {}
        self._bands: dict = {}
        self.run_button = widgets.Button(description="Run tight-binding", icon="play",
                                         layout=_AUTO)  # fmt: skip
        self.cancel_button = widgets.Button(description="Cancel", icon="stop", disabled=True,
                                            layout=_AUTO)  # fmt: skip
        self.progress = widgets.FloatProgress(value=0.0, min=0.0, max=1.0, description="full:")
        self.progress_label = widgets.Label(value="not run")
        self.show_preview = widgets.Checkbox(value=True, description=f"show {PREVIEW} model",
                                             layout=_AUTO)  # fmt: skip
        self.show_full = widgets.Checkbox(value=True, description="show tight-binding run",
                                          layout=_AUTO)  # fmt: skip
        self.live_lattice = widgets.Checkbox(
            value=bool(live_lattice), description="live exact lattice (flux tube)", layout=_AUTO
        )
        self.study_path = widgets.Text(value="explorer-study.toml", description="study file",
                                       style={"description_width": "90px"},
                                       layout=widgets.Layout(width="420px"))  # fmt: skip
        self.save_button = widgets.Button(description="Save as study TOML", icon="save",
                                          layout=_AUTO)  # fmt: skip
        self.open_button = widgets.Button(description="Load study TOML", icon="folder-open",
                                          layout=_AUTO)  # fmt: skip
        self.live_lattice.observe(lambda _: self.update(), names="value")
        self.run_button.on_click(lambda _: self.run_full())
        self.cancel_button.on_click(lambda _: self.cancel_full())
        self.save_button.on_click(lambda _: self.export_study(self.study_path.value))
        self.open_button.on_click(lambda _: self.import_study(self.study_path.value))
        self.show_preview.observe(lambda _: self.redraw(), names="value")
        self.show_full.observe(lambda _: self.redraw(), names="value")
        self.widget = self._layout()
        self.widget.add_class("ringkit-explorer")
        self.update()

    def _layout(self) -> widgets.Widget:
        c = self.controls
        device = widgets.VBox(
            [c[k] for k in ("material", "radius", "width", "width_ratio", "lead_angle",
                            "density", "fermi_energy", "mobility")]
        )  # fmt: skip
        physics = widgets.VBox(
            [c[k] for k in ("l_phi", "temperature", "field", "gate", "gate_arm", "coupling")]
        )
        full = widgets.VBox(
            [
                self.live_lattice,
                c["lattice_spacing"],
                c["field_mode"],
                c["seed"],
                widgets.HBox([self.run_button, self.cancel_button]),
                widgets.HBox([self.progress, self.progress_label]),
                widgets.HBox([self.show_preview, self.show_full]),
            ]
        )
        batch = widgets.VBox([self.study_path, widgets.HBox([self.save_button, self.open_button])])
        tabs = widgets.Tab(children=[device, physics, full, batch])
        for i, title in enumerate(("device", "physics", "lattice model", "batch study")):
            tabs.set_title(i, title)
        figures = widgets.HBox([self.ring_pane.widget, self.pane.widget])
        return widgets.VBox([tabs, self.message, figures, self.summary])

    # ------------------------------------------------------------------ callbacks
    def params_from_controls(self) -> ExplorerParams:
        """Current control values as :class:`ExplorerParams` (raises ParameterError)."""
        return params_from_controls(self.controls, self.fermi_source)

    def _quietly(self, values: dict[str, Any]) -> None:
        self._suspend = True
        try:
            for key, value in values.items():
                self.controls[key].value = value
        finally:
            self._suspend = False

    def _on_material(self, change: dict) -> None:
        if self._suspend:
            return
        source, n, e_f = preset_carriers(change["new"])
        self.fermi_source = source
        self._quietly({"density": round(n / DENSITY_UNIT, 6), "fermi_energy": round(e_f / MEV, 6)})
        from ringkit.view.panels.explorer_controls import _preset_mobility

        self._quietly({"mobility": _preset_mobility(change["new"])})
        self._refresh_carriers()
        self.update()

    def _refresh_carriers(self) -> None:
        """Show the derived one of density / E_F (4 digits); invalid input is left to update."""
        c = self.controls
        try:
            if self.fermi_source == "density":
                n = c["density"].value * DENSITY_UNIT
                self.params_from_controls()  # range check before converting
                _, ef = carrier_text(c["material"].value, density=n)
                self._quietly({"fermi_energy": ef})
            else:
                self.params_from_controls()
                nd, _ = carrier_text(
                    c["material"].value, fermi_energy=c["fermi_energy"].value * MEV
                )
                self._quietly({"density": nd})
        except ValueError:
            pass  # update() shows the message

    def _on_carrier(self, change: dict) -> None:
        if self._suspend:
            return
        self.fermi_source = "density" if change["owner"] is self.controls["density"] else (
            "fermi_energy")  # fmt: skip
        self._refresh_carriers()
        self.update()

    def _on_change(self, change: dict) -> None:
        if self._suspend:
            return
        self.update()

    def update(self) -> bool:
        """Recompute the single-channel model and redraw at once, then the live lattice
        (background thread in a kernel, else here). Invalid settings keep the last good plot
        and show the message. Returns True on success."""
        t0 = time.perf_counter()

        def work() -> None:
            params = self.params_from_controls()
            derived = derived_quantities(params)
            result = explorer_preview(params)
            note = self._live_note(params)
            self.params, self.preview, self.derived = params, result, derived
            keep = self.live_lattice.value and note is None and self.live_params == params
            if not keep:
                self.live_stale = self.live if self.live is not None else self.live_stale
                self.live, self.live_params = None, None
            if not self.live_lattice.value or note is not None:
                self.live_stale = None
            self.live_note = note
            self.live_pending = bool(self.live_lattice.value and note is None and not keep)
            self._draw()

        ok = self.guarded(work)
        if ok and self.preview.notes:
            self.show_message("\n".join(self.preview.notes), level="warning")
        self.latency = time.perf_counter() - t0
        if ok and self.live_pending:
            serial = self._worker.submit(self.params)
            self._submitted[serial] = t0
            if not self.background:
                self._worker.wait()
        return ok

    def _live_note(self, params: ExplorerParams) -> str | None:
        """Why the live lattice is off for ``params`` (None if it runs); raises
        ParameterError for invalid settings."""
        if not self.live_lattice.value:
            return None
        why = self.live_view.unavailable(params)
        return None if why is None else f"off: {why}"

    def _live_compute(self, params: ExplorerParams) -> LiveResult:
        # newer settings cancel this update between energies (LiveCancelled, dropped by
        # _live_failed): the wait is one update, never the sum of queued ones
        def cancelled() -> bool:
            return params != self.params

        result = self.live_view.compute(params, cancelled=cancelled)
        if not self.live_calibration or result.n_probes == 0:
            return result
        # dephased: draw the analytic-coupling frame now ("being measured…"), then measure
        # the realised L_phi on the device (cached calibrator) and redraw with that coupling
        self._live_frame(params, replace(result, l_phi_status=LIVE_L_PHI_PENDING))
        final = self.live_view.compute(params, cancelled=cancelled, calibrate_l_phi=True)
        return replace(final, rebuilt=result.rebuilt)  # (the first frame built the lattice)

    def _live_frame(self, params: ExplorerParams, result: LiveResult) -> None:
        """Draw a first (analytic-coupling) live frame while its calibration runs."""
        with self.draw_lock:
            if params != self.params or not self.live_lattice.value:
                return
            self.live, self.live_params, self.live_stale = result, params, None
            self._draw()

    def _live_done(self, serial: int, params: ExplorerParams, result: LiveResult) -> None:
        with self.draw_lock:
            if params != self.params or not self.live_lattice.value:
                return  # settings moved on: a newer computation follows
            self.live, self.live_params, self.live_pending = result, params, False
            self.live_stale = None
            self._draw()
            self.live_latency = time.perf_counter() - self._submitted.pop(serial, math.nan)

    def _live_failed(self, serial: int, params: ExplorerParams, exc: BaseException) -> None:
        with self.draw_lock:
            self._submitted.pop(serial, None)
            if params != self.params or isinstance(exc, LiveCancelled):
                return
            self.live_pending = False
            self.live_note = f"failed: {type(exc).__name__}: {exc}"
            self._draw()
        self.show_message(f"lattice view: {type(exc).__name__}: {exc}")

    def wait_live(self, timeout: float | None = 120.0) -> bool:
        """Block until the live lattice computation is idle (True if it is)."""
        return self._worker.wait(timeout)

    # ------------------------------------------------------------------ batch studies
    def export_study(self, path: str | Path) -> bool:
        """Save the current settings as a study TOML at ``path`` (message on failure)."""
        from ringkit.view.panels.explorer_study import study_toml

        try:
            params = self.params_from_controls()
            flux = (
                self.live.flux if (self.live is not None and self.live_params == params) else None
            )
            text = study_toml(params, flux=flux)
            path = Path(path).expanduser()
            tmp = path.with_name(path.name + ".tmp")
            tmp.write_text(text)
            tmp.replace(path)
        except (ValueError, OSError) as exc:
            self.show_message(f"could not save the study: {exc}")
            return False
        self.show_message(f"saved {path} (run: ringkit study {path} --out DIR)", level="info")
        return True

    def import_study(self, path: str | Path) -> bool:
        """Load the settings of a study TOML into the controls; an unreadable or invalid file
        gives one line in the message area and changes nothing."""
        from ringkit.view.panels.explorer_study import params_from_study

        try:
            text = Path(path).expanduser().read_text()
            params, notes = params_from_study(text, source=str(path))
            derived_quantities(params)  # every value checked before any control moves
            explorer_preview(params)
        except (ValueError, OSError, UnicodeDecodeError) as exc:
            self.show_message(f"could not load {path}: {_one_line(exc)}")
            return False
        self._suspend = True
        try:
            self.fermi_source = set_controls(self.controls, params)
        finally:
            self._suspend = False
        self._refresh_carriers()
        ok = self.update()
        if ok:
            moved = self.params != params
            extra = notes + (
                ["some values were outside the panel's control ranges"] if moved else []
            )
            self.show_message(f"loaded {path}" + ("; " + "; ".join(extra) if extra else ""),
                              level="warning" if extra else "info")  # fmt: skip
        return ok

    # ------------------------------------------------------------------ full computation
    def run_full(self) -> BackgroundJob | None:
        """Start the full tight-binding computation for the current settings (background
        thread, progress bar, cancellable). Returns the job (``job.wait()`` blocks), or None
        when the settings are invalid (the message is shown in the panel)."""
        from ringkit.view.panels.explorer_full import explorer_full

        if self.job is not None and self.job.running:
            return self.job
        try:
            params = self.params_from_controls()
        except ValueError as exc:  # shown in the panel; the button must not raise
            self.show_message(f"{type(exc).__name__}: {exc}")
            return None
        self.progress.value = 0.0
        self.progress.bar_style = "info"
        self.progress_label.value = "starting"
        self.run_button.disabled = True
        self.cancel_button.disabled = False

        def on_progress(frac: float, text: str) -> None:
            self.progress.value = frac
            self.progress_label.value = text

        def on_done(result: Any) -> None:
            with self.draw_lock:
                self.full, self.full_params = result, params
                self._draw()
            self.progress.value = 1.0
            self.progress.bar_style = "success"
            self.progress_label.value = f"done in {self.job.elapsed:.1f} s" if self.job else "done"
            self._job_finished()

        def on_error(exc: BaseException) -> None:
            if isinstance(exc, JobCancelled):
                self.progress.bar_style = "warning"
                self.progress_label.value = "cancelled"
            else:
                self.progress.bar_style = "danger"
                self.progress_label.value = "failed"
                self.show_message(f"tight-binding computation failed: {type(exc).__name__}: {exc}")
            self._job_finished()

        self.job = BackgroundJob(
            lambda report, cancelled: explorer_full(params, report=report),
            on_progress=on_progress,
            on_done=on_done,
            on_error=on_error,
        )
        return self.job.start()

    def _job_finished(self) -> None:
        self.run_button.disabled = False
        self.cancel_button.disabled = True

    def cancel_full(self) -> None:
        """Cancel a running full computation (stops at its next progress report)."""
        if self.job is not None:
            self.job.cancel()
            self.progress_label.value = "cancelling"


def _one_line(exc: BaseException) -> str:
    text = " ".join(str(exc).split())
    return f"{type(exc).__name__}: {text}"
