"""Widget shell of the outlook panel "Will my rings oscillate?" (compute part:
:mod:`ringkit.view.panels.outlook`).

Before fabrication: the settings are checked on every change (bad input: one line in the
message area, the last result stays); "Run ensemble" computes the amplitude statistics in a
background job (progress bar, Cancel) and draws the h/e histogram with the noise floor, the
quantiles and the chance of seeing h/e above the floor. After measurement: "Load fit" reads a
``fit.json`` of ``ringkit fit`` and overlays the measured amplitudes on the model quantile
bands versus temperature.
"""

from __future__ import annotations

import html
import math
from typing import Any

import ipywidgets as widgets

from ringkit.view.fit_plots import plot_fit_overlay
from ringkit.view.panels._base import BackgroundJob, FigurePane, JobCancelled, PanelBase
from ringkit.view.panels.outlook import (
    Outlook,
    OutlookParams,
    measured_overlay,
    reevaluate,
    ring_outlook,
    same_physics,
)
from ringkit.view.style import COLORS, new_figure

__all__ = ["RingOutlookPanel"]

_UNIT = {"e2/h": "e²/h", "ohm": "Ω"}


class RingOutlookPanel(PanelBase):
    """Will rings like this one show h/e oscillations above my noise floor?

    Parameters
    ----------
    params : OutlookParams, optional
        Initial settings (default: those of ``result``, else the defaults).
    result : Outlook, optional
        A finished :func:`ring_outlook` to show at once.

    Attributes
    ----------
    result : Outlook or None
        Last finished computation.
    overlay : dict or None
        Last loaded measured overlay (:func:`measured_overlay`).
    params : OutlookParams or None
        Settings of the controls when last valid.
    base : OutlookParams
        The settings given at construction; those without a control (seed, flux window,
        probes, tolerances) are kept from it.
    job : BackgroundJob or None
    """

    def __init__(
        self, params: OutlookParams | None = None, *, result: Outlook | None = None
    ) -> None:
        super().__init__()
        p = params or (result.params if result is not None else OutlookParams())
        self.base = p  # settings without a control (seed, window, probes, tolerances)
        self.params: OutlookParams | None = None
        self.result: Outlook | None = result  # e.g. computed in a notebook cell
        self.overlay: dict | None = None
        self.job: BackgroundJob | None = None
        style = {"description_width": "200px"}
        lay = widgets.Layout(width="400px")
        kw = dict(style=style, layout=lay)
        dens = 0.0 if p.density is None else p.density / 1e15
        mob = 0.0 if p.mobility is None else p.mobility * 1e4
        l_phi = 0.0 if not math.isfinite(p.l_phi) else p.l_phi * 1e6
        self.controls = {
            "material": widgets.Dropdown(options=["GaAs", "InAs", "Au"], value=p.material,
                                         description="material", **kw),
            "density": widgets.FloatText(value=dens, description="density (1e11 cm⁻², 0=preset)",
                                         **kw),
            "mobility": widgets.FloatText(value=mob, description="mobility (cm²/Vs, 0=preset)",
                                          **kw),
            "radius": widgets.FloatText(value=p.radius * 1e9, description="mean radius (nm)", **kw),
            "width": widgets.FloatText(value=p.width * 1e9, description="arm width (nm)", **kw),
            "temperature": widgets.FloatText(value=p.temperature, description="temperature (K)",
                                             **kw),
            "l_phi": widgets.FloatText(value=l_phi, description="L_phi (µm, 0=coherent)", **kw),
            "noise_floor": widgets.FloatText(value=p.noise_floor, description="noise floor (rms)",
                                             **kw),
            "floor_unit": widgets.Dropdown(options=[("e²/h", "e2/h"), ("Ω (dR)", "ohm")],
                                           value=p.floor_unit, description="floor unit", **kw),
            "n_rings": widgets.IntText(value=p.n_rings, description="rings to make", **kw),
            "realizations": widgets.IntText(value=p.realizations,
                                            description="realizations (at most)", **kw),
            "calibrate_l_phi": widgets.Checkbox(value=p.calibrate_l_phi,
                                                description="measure the realised L_phi", **kw),
        }  # fmt: skip
        for w in self.controls.values():
            w.observe(lambda _: self.update(), names="value")
        self.run_button = widgets.Button(description="Run ensemble", icon="play",
                                         layout=widgets.Layout(width="auto"))  # fmt: skip
        self.cancel_button = widgets.Button(description="Cancel", icon="stop", disabled=True,
                                            layout=widgets.Layout(width="auto"))  # fmt: skip
        self.progress = widgets.FloatProgress(value=0.0, min=0.0, max=1.0, description="run:")
        self.progress_label = widgets.Label(value="not run")
        self.fit_path = widgets.Text(value="", placeholder="DIR/fit.json of ringkit fit",
                                     description="fit result", **kw)  # fmt: skip
        self.load_button = widgets.Button(description="Load fit", icon="upload",
                                          layout=widgets.Layout(width="auto"))  # fmt: skip
        self.run_button.on_click(lambda _: self.run())
        self.cancel_button.on_click(lambda _: self.job and self.job.cancel())
        self.load_button.on_click(lambda _: self.load_fit(self.fit_path.value))
        fig, axes = new_figure(1, 2, size=(10.0, 3.6), layout=None)
        fig.subplots_adjust(left=0.08, right=0.98, bottom=0.16, top=0.92, wspace=0.28)
        self.figure, self.ax_hist, self.ax_overlay = fig, axes[0, 0], axes[0, 1]
        self.pane = FigurePane(fig)
        before = widgets.VBox([
            *self.controls.values(),
            widgets.HBox([self.run_button, self.cancel_button]),
            widgets.HBox([self.progress, self.progress_label]),
        ])  # fmt: skip
        after = widgets.VBox([widgets.HBox([self.fit_path, self.load_button])])
        tabs = widgets.Tab(children=[before, after])
        tabs.set_title(0, "before fabrication")
        tabs.set_title(1, "after measurement")
        title = widgets.HTML("<b>Will my rings show oscillations?</b>")
        self.widget = widgets.VBox([title, tabs, self.message, self.pane.widget, self.summary])
        self.widget.add_class("ringkit-outlook")
        self.update()
        self._draw()

    def params_from_controls(self) -> OutlookParams:
        """Current settings (raises ParameterError naming the parameter)."""
        c = {k: w.value for k, w in self.controls.items()}
        return self.base.updated(  # divisions: 150 nm -> exactly 1.5e-07 m
            material=c["material"],
            density=c["density"] * 1e15 if c["density"] else None,
            mobility=c["mobility"] / 1e4 if c["mobility"] else None,
            radius=c["radius"] / 1e9,
            width=c["width"] / 1e9,
            temperature=c["temperature"],
            l_phi=c["l_phi"] / 1e6 if c["l_phi"] else math.inf,
            noise_floor=c["noise_floor"],
            floor_unit=c["floor_unit"],
            n_rings=c["n_rings"],
            realizations=c["realizations"],
            calibrate_l_phi=c["calibrate_l_phi"],
        )

    def update(self) -> bool:
        """Check the settings; a finished result is re-evaluated for a new floor or N."""

        def work() -> None:
            new = self.params_from_controls()
            self.params = new
            res = self.result
            if res is not None and same_physics(res.params, new):
                self.result = reevaluate(res, new)
                self._draw()

        return self.guarded(work)

    def run(self) -> BackgroundJob | None:
        """Start the ensemble in a background job (None if the settings are invalid)."""
        if self.job is not None and self.job.running:
            return self.job
        try:
            params = self.params_from_controls()
        except ValueError as exc:  # shown in the panel; a button must not raise
            self.show_message(f"{type(exc).__name__}: {exc}")
            return None
        self.run_button.disabled, self.cancel_button.disabled = True, False
        self.progress.value, self.progress.bar_style = 0.0, "info"

        def progress(frac: float, text: str) -> None:
            self.progress.value, self.progress_label.value = frac, text

        def done(res: Outlook) -> None:
            self.result = res
            with self.draw_lock:
                self._draw()
            self.progress.bar_style = "success"
            self.progress_label.value = f"done in {res.elapsed:.1f} s"
            self.run_button.disabled, self.cancel_button.disabled = False, True

        def failed(exc: BaseException) -> None:
            cancelled = isinstance(exc, JobCancelled)
            self.progress.bar_style = "warning" if cancelled else "danger"
            self.progress_label.value = "cancelled" if cancelled else "failed"
            if not cancelled:
                self.show_message(f"{type(exc).__name__}: {str(exc).splitlines()[0]}")
            self.run_button.disabled, self.cancel_button.disabled = False, True

        self.job = BackgroundJob(lambda report, _c: ring_outlook(params, report=report),
                                 on_progress=progress, on_done=done, on_error=failed)  # fmt: skip
        return self.job.start()

    def load_fit(self, source: Any) -> bool:
        """Overlay the measured amplitudes of a ``fit.json`` (path or dict)."""

        def work() -> None:
            if isinstance(source, str) and not source.strip():
                raise ValueError("fit result: give the path of a fit.json written by ringkit fit")
            self.overlay = measured_overlay(source)
            self._draw()

        return self.guarded(work)

    def _draw(self) -> None:
        ax, ax2 = self.ax_hist, self.ax_overlay
        ax.cla()
        ax2.cla()
        res = self.result
        rows: list[tuple[str, str]] = []
        if res is None:
            ax.text(0.5, 0.5, "press Run ensemble", ha="center", va="center",
                    transform=ax.transAxes, color="0.4")  # fmt: skip
        else:
            self._draw_result(res, rows)
        self._draw_overlay(res)
        self.pane.refresh()
        body = "".join(
            f"<tr><td>{html.escape(k)}</td><td data-key='{html.escape(k)}'>{html.escape(v)}</td>"
            "</tr>"
            for k, v in rows
        )
        self.summary.value = f"<table class='ringkit-numbers'>{body}</table>" if rows else ""

    def _draw_result(self, res: Outlook, rows: list) -> None:
        from ringkit.view.stats_plots import plot_amplitude_histogram

        p = res.params
        unit = _UNIT[p.floor_unit]
        from ringkit.analysis.ensemble_stats import bootstrap_quantiles

        qv, qe = bootstrap_quantiles(res.floor_samples, res.stats.q, seed=p.seed)
        qs = {float(q): (float(qv[0, i]), float(qe[0, i])) for i, q in enumerate(res.stats.q)}
        plot_amplitude_histogram(res.floor_samples, self.ax_hist, quantiles=qs,
                                 noise_floor=p.noise_floor,
                                 xlabel=f"h/e rms amplitude ({unit})")  # fmt: skip
        self.ax_hist.set_title(f"P(h/e > floor) = {res.p:.2f} ({res.p_low:.2f}-{res.p_high:.2f})",
                               fontsize="medium")  # fmt: skip
        rows.append(("answer", res.sentence()))
        for label, q, val, err in res.quantile_rows():
            rows.append((f"{label} {100 * q:.0f} %", f"{val:.3g} ± {err:.2g} e²/h"))
        rows.append(("realizations", f"{res.stats.n_realizations} ({res.stats.stop_reason})"))
        if math.isfinite(p.l_phi):
            rows.append(("realised L_phi", res.realised_l_phi()))
        for note in res.notes:
            rows.append(("note", note))

    def _draw_overlay(self, res: Outlook | None) -> None:
        ax = self.ax_overlay
        ov = self.overlay
        if res is not None:
            s, t = res.stats, res.params.temperature
            for j, (name, color) in enumerate((("h/e", COLORS["he"]), ("h/2e", COLORS["h2e"]))):
                lo, med, hi = s.quantiles[j]
                lab = f"outlook {name} (16-50-84 %)"
                ax.errorbar([t], [med], yerr=[[med - lo], [hi - med]], fmt="s", color=color,
                            mfc="white", capsize=4, label=lab)  # fmt: skip
        if ov is not None:
            plot_fit_overlay(ov, ax)
        if res is None and ov is None:
            ax.text(0.5, 0.5, "measured amplitudes: load a fit.json", ha="center", va="center",
                    transform=ax.transAxes, color="0.4")  # fmt: skip
            return
        if ov is None:
            ax.set_xlabel("temperature (K)")
            ax.set_ylabel("rms amplitude (e²/h)")
            ax.legend(fontsize="x-small", frameon=False)
