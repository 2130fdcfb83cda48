"""Widget shell of the size-scaling panel (compute part: :mod:`ringkit.view.panels.scaling`).

Model curves follow every control change; simulated ensemble points are computed on demand in
a background job (progress bar, Cancel) and drawn with error bars; their prefactor calibration
can be applied to the curves.
"""

from __future__ import annotations

import html
import math
from typing import Any

import ipywidgets as widgets
import numpy as np

from ringkit._validation import ParameterError
from ringkit.view import plots
from ringkit.view.panels._base import BackgroundJob, FigurePane, JobCancelled, PanelBase
from ringkit.view.panels.scaling import (
    ScalingParams,
    calibrated_prefactors,
    scaling_curves,
    simulate_points,
)
from ringkit.view.style import new_figure

__all__ = ["SizeScalingPanel"]


def _parse_radii(text: str) -> list[float]:
    """Comma-separated radii in µm -> m."""
    try:
        vals = [float(x) * 1e-6 for x in text.replace(";", ",").split(",") if x.strip()]
    except ValueError:
        raise ParameterError(
            "simulated radii", text, "must be numbers in µm, e.g. 0.15, 0.25"
        ) from None
    if not vals or any(v <= 0 for v in vals):
        raise ParameterError("simulated radii", text, "must be > 0 µm, e.g. 0.15, 0.25")
    return vals


class SizeScalingPanel(PanelBase):
    """Predicted h/e and h/2e amplitudes versus radius, with simulated ensemble points.

    Attributes
    ----------
    dataset : xarray.Dataset or None
        Last good model (and simulated points) dataset.
    points : dict or None
        Last simulated points (``simulate_points`` output).
    artists : dict
        ``"he"``, ``"h2e"`` model lines.
    """

    def __init__(self, params: ScalingParams | None = None) -> None:
        super().__init__()
        p = params or ScalingParams()
        self.dataset = None
        self.points: dict | None = None
        self.points_params: ScalingParams | None = None
        self.job: BackgroundJob | None = None
        self.artists: dict[str, Any] = {}
        style = {"description_width": "220px"}
        lay = widgets.Layout(width="440px")
        kw = dict(continuous_update=False, style=style, layout=lay)
        l_phi_um = 1e3 if not math.isfinite(p.l_phi) else p.l_phi * 1e6
        self.controls = {
            "material": widgets.Dropdown(options=["GaAs", "InAs", "Au"], value=p.material,
                                         description="material", style=style, layout=lay),
            "l_phi": widgets.FloatLogSlider(value=l_phi_um, base=10, min=-1.5, max=3, step=0.05,
                                           description="L_phi (µm)", readout_format=".3g", **kw),
            "temperature": widgets.FloatLogSlider(value=max(p.temperature, 1e-3), base=10,
                                                  min=-3, max=1.5, step=0.05,
                                                  description="temperature (K)",
                                                  readout_format=".3g", **kw),
            "mean_free_path": widgets.BoundedFloatText(
                value=0.0 if p.mean_free_path is None else p.mean_free_path * 1e6, min=0.0,
                max=1e3, step=0.01, description="mean free path (µm, 0=preset)", **kw),
            "radius": widgets.FloatRangeSlider(value=(p.r_min * 1e6, p.r_max * 1e6), min=0.02,
                                               max=10.0, step=0.01,
                                               description="radius range (µm)", **kw),
            "n_averaged": widgets.BoundedIntText(value=p.n_averaged, min=1, max=10**6,
                                                 description="samples averaged N", **kw),
            "dimension": widgets.Dropdown(options=[("2DEG (d=2)", 2), ("metal film (d=3)", 3)],
                                          value=p.dimension, description="diffusion dimension",
                                          style=style, layout=lay),
            "coherent_amplitude": widgets.BoundedFloatText(
                value=p.coherent_amplitude, min=0.0, max=100.0, step=0.01,
                description="h/e prefactor (e²/h)", **kw),
            "aas_amplitude": widgets.BoundedFloatText(
                value=p.aas_amplitude, min=0.0, max=100.0, step=0.01,
                description="AAS prefactor (e²/h)", **kw),
        }  # fmt: skip
        for w in self.controls.values():
            w.observe(lambda _: self.update(), names="value")
        self.sim_radii = widgets.Text(value="0.15, 0.25, 0.35", description="simulated radii (µm)",
                                      style=style, layout=lay)  # fmt: skip
        self.sim_seeds = widgets.BoundedIntText(value=4, min=2, max=1000,
                                                description="samples per radius", style=style,
                                                layout=lay)  # fmt: skip
        self.sim_width = widgets.BoundedFloatText(value=50.0, min=5.0, max=2000.0,
                                                  description="arm width (nm)", style=style,
                                                  layout=lay)  # fmt: skip
        self.sim_button = widgets.Button(
            description="Simulate ensemble", icon="play", layout=widgets.Layout(width="auto")
        )
        self.cancel_button = widgets.Button(
            description="Cancel", icon="stop", disabled=True, layout=widgets.Layout(width="auto")
        )
        self.calibrate = widgets.Button(
            description="Calibrate prefactors", disabled=True, layout=widgets.Layout(width="auto")
        )
        self.progress = widgets.FloatProgress(value=0.0, min=0.0, max=1.0, description="sim:")
        self.progress_label = widgets.Label(value="not run")
        self.sim_button.on_click(lambda _: self.run_simulation())
        self.cancel_button.on_click(lambda _: self.job and self.job.cancel())
        self.calibrate.on_click(lambda _: self.apply_calibration())

        fig, axes = new_figure(1, 1, size=(6.4, 4.0), layout=None)
        fig.subplots_adjust(left=0.13, right=0.97, bottom=0.13, top=0.95)
        self.figure, self.ax = fig, axes[0, 0]
        self.pane = FigurePane(fig)
        sim_box = widgets.VBox([
            self.sim_radii, self.sim_seeds, self.sim_width,
            widgets.HBox([self.sim_button, self.cancel_button, self.calibrate]),
            widgets.HBox([self.progress, self.progress_label]),
        ])  # fmt: skip
        tabs = widgets.Tab(children=[widgets.VBox(list(self.controls.values())), sim_box])
        tabs.set_title(0, "model")
        tabs.set_title(1, "simulation")
        self.widget = widgets.VBox([tabs, self.message, self.pane.widget, self.summary])
        self.widget.add_class("ringkit-scaling")
        self.update()

    def params_from_controls(self) -> ScalingParams:
        """Current settings (raises ParameterError)."""
        c = self.controls
        l_phi = c["l_phi"].value
        r0, r1 = c["radius"].value
        mfp = c["mean_free_path"].value
        return ScalingParams(
            material=c["material"].value,
            l_phi=math.inf if l_phi >= 999.0 else l_phi * 1e-6,
            temperature=c["temperature"].value,
            mean_free_path=mfp * 1e-6 if mfp > 0 else None,
            r_min=r0 * 1e-6,
            r_max=r1 * 1e-6,
            n_averaged=int(c["n_averaged"].value),
            coherent_amplitude=float(c["coherent_amplitude"].value),
            aas_amplitude=float(c["aas_amplitude"].value),
            dimension=int(c["dimension"].value),
        )

    def update(self) -> bool:
        """Recompute the model curves (and re-place stored points) and redraw."""

        def work() -> None:
            params = self.params_from_controls()
            pts = self.points if self.points_params is not None else None
            self.dataset = scaling_curves(params, simulated=pts)
            self.params = params
            self._draw()

        return self.guarded(work)

    def run_simulation(self) -> BackgroundJob | None:
        """Start the ensemble simulation in a background thread (returns the job, or None
        when the settings are invalid; the message is then shown in the panel)."""
        if self.job is not None and self.job.running:
            return self.job
        try:
            params = self.params_from_controls()
            radii = _parse_radii(self.sim_radii.value)
        except ValueError as exc:  # shown in the panel; the button must not raise
            self.show_message(f"{type(exc).__name__}: {exc}")
            return None
        seeds = tuple(range(int(self.sim_seeds.value)))
        width = float(self.sim_width.value) * 1e-9
        self.sim_button.disabled, self.cancel_button.disabled = True, False
        self.progress.value, self.progress.bar_style = 0.0, "info"

        def progress(frac: float, text: str) -> None:
            self.progress.value, self.progress_label.value = frac, text

        def done(points: dict) -> None:
            self.points, self.points_params = points, params
            self.update()
            self.progress.bar_style = "success"
            self.progress_label.value = f"done in {self.job.elapsed:.1f} s" if self.job else "done"
            self.sim_button.disabled, self.cancel_button.disabled = False, True
            self.calibrate.disabled = False

        def failed(exc: BaseException) -> None:
            cancelled = isinstance(exc, JobCancelled)
            self.progress.bar_style = "warning" if cancelled else "danger"
            self.progress_label.value = "cancelled" if cancelled else "failed"
            if not cancelled:
                self.show_message(f"simulation failed: {type(exc).__name__}: {exc}")
            self.sim_button.disabled, self.cancel_button.disabled = False, True

        self.job = BackgroundJob(
            lambda report, _c: simulate_points(params, radii, seeds=seeds, width=width,
                                               report=report),
            on_progress=progress, on_done=done, on_error=failed,
        )  # fmt: skip
        return self.job.start()

    def apply_calibration(self) -> None:
        """Set the prefactor controls to the values that match the simulated points."""
        if self.dataset is None or "sim_amplitude_he_rms" not in self.dataset:
            self.show_message("no simulated points to calibrate on", level="warning")
            return
        c_he, c_aas = calibrated_prefactors(self.dataset)
        self.controls["coherent_amplitude"].value = round(c_he, 6)
        self.controls["aas_amplitude"].value = round(c_aas, 6)

    def _draw(self) -> None:
        ds = self.dataset
        ax = self.ax
        ax.cla()
        pts = None
        if "sim_amplitude_he_rms" in ds:
            pts = {}
            for order, key in ((1, "amplitude_he_rms"), (2, "amplitude_h2e_rms")):
                if f"sim_{key}" in ds:
                    err = ds.get(f"sim_{key}_err")
                    pts[order] = (ds["sim_radius"].values, ds[f"sim_{key}"].values,
                                  None if err is None else err.values)  # fmt: skip
        plots.plot_amplitude_scaling(
            ds["radius"].values,
            {1: ds["amplitude_he_rms"].values, 2: ds["amplitude_h2e_rms"].values},
            ax, points=pts,
        )  # fmt: skip
        lines = ax.get_lines()
        self.artists = {"he": lines[0], "h2e": lines[1]}
        self.pane.refresh()
        p = self.params
        lt = float(ds.attrs.get("thermal_length_m", np.inf))
        rows = [
            ("mean free path", f"{ds.attrs['mean_free_path_m'] * 1e6:.3g} µm"),
            ("thermal length L_T", "inf" if not np.isfinite(lt) else f"{lt * 1e6:.3g} µm"),
            ("h/e rms at r_min", f"{float(ds['amplitude_he_rms'][0]):.3g} e²/h"),
            ("h/e rms at r_max", f"{float(ds['amplitude_he_rms'][-1]):.3g} e²/h"),
            ("h/2e rms at r_max", f"{float(ds['amplitude_h2e_rms'][-1]):.3g} e²/h"),
            ("radius range", f"{p.r_min * 1e6:.3g} - {p.r_max * 1e6:.3g} µm"),
        ]
        if self.points is not None and self.points_params is not None:
            q = self.points_params
            n = int(self.points["n_samples"][0])
            rows.append(("simulated points", f"{q.material}, L_phi {q.l_phi * 1e6:.3g} µm, "
                         f"T {q.temperature:.3g} K, {n} samples per radius"))  # fmt: skip
            for note in self.points.get("notes", ()):
                rows.append(("simulation note", note))
        body = "".join(
            f"<tr><td>{html.escape(k)}</td>"
            f"<td data-key='{html.escape(k)}'>{html.escape(v)}</td></tr>"
            for k, v in rows
        )
        self.summary.value = f"<table class='ringkit-numbers'>{body}</table>"
