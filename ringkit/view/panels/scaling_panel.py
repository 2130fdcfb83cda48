"""Widget shell of the size-scaling panel (compute parts: :mod:`ringkit.view.panels.scaling`,
:mod:`ringkit.view.panels.scaling_bands`; figure: :mod:`ringkit.view.panels.scaling_draw`).

The figure shows the simulated quantile bands (16-84 %, median) of the h/e and h/2e rms
amplitudes versus radius from the shipped size dataset (or bands recomputed for the panel's own
rings in a background job with progress and Cancel), and the semi-analytic law with the
prefactors fitted through the medians (read-only, with errors), dashed outside the simulated
radii. When the panel's settings differ from the simulated rings, the bands are hidden and the
panel says which settings differ. Typed prefactors remain as a labelled advanced override.
"""

from __future__ import annotations

import html
import math
from typing import Any

import ipywidgets as widgets
import numpy as np

from ringkit._validation import ParameterError
from ringkit.view.panels._base import BackgroundJob, FigurePane, JobCancelled, PanelBase
from ringkit.view.panels.scaling import ScalingParams
from ringkit.view.panels.scaling_bands import (
    dataset_mismatch,
    law_curves,
    law_prefactors,
    params_for_dataset,
    recompute_bands,
    size_dataset,
)
from ringkit.view.panels.scaling_draw import plot_size_bands
from ringkit.view.style import new_figure

__all__ = ["SizeScalingPanel"]


def _parse_radii(text: str) -> list[float]:
    """Comma-separated radii in µm -> m."""
    try:
        vals = [float(x) * 1e-6 for x in text.replace(";", ",").split(",") if x.strip()]
    except ValueError:
        raise ParameterError(
            "simulated radii", text, "must be numbers in µm, e.g. 0.3, 0.5, 1.0"
        ) from None
    if len(vals) < 2 or any(v <= 0 for v in vals):
        raise ParameterError("simulated radii", text, "must be >= 2 radii > 0 µm, e.g. 0.3, 0.5")
    return vals


def _pm(value, err, scale: float = 1.0, unit: str = "e²/h") -> str:
    if value is None:
        return "unconstrained by the bands"
    if err is None:
        return f"{value * scale:.3g} {unit}"
    return f"{value * scale:.3g} ± {err * scale:.2g} {unit}"


class SizeScalingPanel(PanelBase):
    """Simulated amplitude bands versus radius and the law fitted through them.

    Attributes
    ----------
    data : dict or None
        Size dataset shown (shipped, or recomputed for the panel's rings).
    law : xarray.Dataset or None
        Last law curves (:func:`law_curves`).
    mismatch : list of str
        How the settings differ from the rings of ``data`` (bands hidden unless empty).
    artists : dict
        Of :func:`plot_size_bands` (``"he"``, ``"h2e"``, bands, medians...).
    """

    def __init__(self, params: ScalingParams | None = None, *, dataset: Any = "shipped") -> None:
        super().__init__()
        self.data: dict | None = None
        self.data_error: str | None = None
        if dataset is not None:
            try:
                self.data = size_dataset(None if dataset == "shipped" else dataset)
            except ValueError as exc:
                self.data_error = str(exc)
        if params is None:
            params = (
                params_for_dataset(self.data, ScalingParams()) if self.data else ScalingParams()
            )
        p = params
        self.params = p
        self.law = None
        self.mismatch: list[str] = []
        self.job: BackgroundJob | None = None
        self.artists: dict[str, Any] = {}
        style = {"description_width": "220px"}
        lay = widgets.Layout(width="440px")
        kw = dict(continuous_update=False, style=style, layout=lay)
        l_phi_um = 1e3 if not math.isfinite(p.l_phi) else p.l_phi * 1e6
        self.controls = {
            "material": widgets.Dropdown(options=["GaAs", "InAs", "Au"], value=p.material,
                                         description="material", style=style, layout=lay),
            "l_phi": widgets.FloatLogSlider(value=l_phi_um, base=10, min=-1.5, max=3, step=0.01,
                                           description="L_phi (µm)", readout_format=".3g", **kw),
            "temperature": widgets.FloatLogSlider(value=max(p.temperature, 1e-3), base=10,
                                                  min=-3, max=1.5, step=0.05,
                                                  description="temperature (K)",
                                                  readout_format=".3g", **kw),
            "mean_free_path": widgets.BoundedFloatText(
                value=0.0 if p.mean_free_path is None else p.mean_free_path * 1e6, min=0.0,
                max=1e3, step=0.01, description="mean free path (µm, 0=preset)", **kw),
            "width": widgets.BoundedFloatText(value=p.width * 1e9, min=5.0, max=2000.0,
                                              description="arm width (nm)", **kw),
            "radius": widgets.FloatRangeSlider(value=(p.r_min * 1e6, p.r_max * 1e6), min=0.02,
                                               max=10.0, step=0.01,
                                               description="radius range (µm)", **kw),
            "n_averaged": widgets.BoundedIntText(value=p.n_averaged, min=1, max=10**6,
                                                 description="samples averaged N", **kw),
            "dimension": widgets.Dropdown(options=[("2DEG (d=2)", 2), ("metal film (d=3)", 3)],
                                          value=p.dimension, description="diffusion dimension",
                                          style=style, layout=lay),
            "override_prefactors": widgets.Checkbox(
                value=p.override_prefactors, description="override the fitted prefactors",
                style=style, layout=lay),
            "coherent_amplitude": widgets.BoundedFloatText(
                value=p.coherent_amplitude, min=0.0, max=100.0, step=0.01,
                description="typed h/e prefactor (e²/h)", **kw),
            "aas_amplitude": widgets.BoundedFloatText(
                value=p.aas_amplitude, min=0.0, max=100.0, step=0.01,
                description="typed AAS prefactor (e²/h)", **kw),
        }  # fmt: skip
        for w in self.controls.values():
            w.observe(lambda _: self.update(), names="value")
        self.fitted = widgets.HTML(value="")
        self.fitted.add_class("ringkit-fitted")
        self.bands_note = widgets.HTML(value="")
        self.bands_note.add_class("ringkit-bands-note")
        radii = "0.3, 0.4, 0.5, 0.7, 1.0"
        self.sim_radii = widgets.Text(value=radii, description="simulated radii (µm)",
                                      style=style, layout=lay)  # fmt: skip
        self.sim_seeds = widgets.BoundedIntText(value=8, min=5, max=10000,
                                                description="realizations per radius",
                                                style=style, layout=lay)  # fmt: skip
        self.sim_button = widgets.Button(
            description="Recompute bands", icon="play", layout=widgets.Layout(width="auto")
        )
        self.cancel_button = widgets.Button(
            description="Cancel", icon="stop", disabled=True, layout=widgets.Layout(width="auto")
        )
        self.shipped_button = widgets.Button(
            description="Shipped bands", layout=widgets.Layout(width="auto")
        )
        self.progress = widgets.FloatProgress(value=0.0, min=0.0, max=1.0, description="sim:")
        self.progress_label = widgets.Label(value="not run")
        self.sim_button.on_click(lambda _: self.run_simulation())
        self.cancel_button.on_click(lambda _: self.job and self.job.cancel())
        self.shipped_button.on_click(lambda _: self.use_dataset("shipped"))

        fig, axes = new_figure(1, 1, size=(6.4, 4.0), layout=None)
        fig.subplots_adjust(left=0.13, right=0.97, bottom=0.13, top=0.95)
        self.figure, self.ax = fig, axes[0, 0]
        self.pane = FigurePane(fig)
        c = self.controls
        advanced = widgets.VBox([c["override_prefactors"], c["coherent_amplitude"],
                                 c["aas_amplitude"]])  # fmt: skip
        model_keys = [k for k in c if k not in ("override_prefactors", "coherent_amplitude",
                                                "aas_amplitude")]  # fmt: skip
        sim_box = widgets.VBox([
            widgets.HTML("Bands for the rings of the model tab (material, mean free path, "
                         "arm width, T, L_phi), flux-tube field, seeds 0..n-1, probes "
                         "calibrated on every ring to realise L_phi. Computed at T = 0 while "
                         "the law's thermal factor stays &ge; 0.98; above that every "
                         "realization needs ~180 energies (minutes per ring)."),
            self.sim_radii, self.sim_seeds,
            widgets.HBox([self.sim_button, self.cancel_button, self.shipped_button]),
            widgets.HBox([self.progress, self.progress_label]),
        ])  # fmt: skip
        tabs = widgets.Tab(children=[widgets.VBox([c[k] for k in model_keys]), sim_box, advanced])
        tabs.set_title(0, "model")
        tabs.set_title(1, "simulated bands")
        tabs.set_title(2, "advanced")
        self.widget = widgets.VBox(
            [tabs, self.message, self.bands_note, self.fitted, self.pane.widget, self.summary]
        )
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
            width=float(c["width"].value) * 1e-9,
            override_prefactors=bool(c["override_prefactors"].value),
        )

    def update(self) -> bool:
        """Recompute the law, compare the settings with the bands' rings, and redraw."""

        def work() -> None:
            params = self.params_from_controls()
            for k in ("coherent_amplitude", "aas_amplitude"):
                self.controls[k].disabled = not params.override_prefactors
            self.mismatch = dataset_mismatch(params, self.data) if self.data else []
            drawable = law_prefactors(params, self.data)["coherent_amplitude"] is not None
            self.law = law_curves(params, self.data) if drawable else None
            self.params = params
            self._draw()

        return self.guarded(work)

    def use_dataset(self, data: Any) -> None:
        """Show another size dataset (``"shipped"``, a path, or a dataset dict)."""
        self.data = size_dataset(None) if data == "shipped" else (
            data if isinstance(data, dict) else size_dataset(data)
        )  # fmt: skip
        self.update()

    def run_simulation(self) -> BackgroundJob | None:
        """Recompute the bands for the panel's rings in a background thread (returns the job,
        or None when the settings are invalid; the message is then shown in the panel)."""
        if self.job is not None and self.job.running:
            return self.job
        try:
            params = self.params_from_controls()
            radii = _parse_radii(self.sim_radii.value)
            n = int(self.sim_seeds.value)
        except ValueError as exc:  # shown in the panel; the button must not raise
            self.show_message(f"{type(exc).__name__}: {exc}")
            return None
        self.sim_button.disabled, self.cancel_button.disabled = True, False
        self.progress.value, self.progress.bar_style = 0.0, "info"

        def progress(frac: float, text: str) -> None:
            self.progress.value, self.progress_label.value = frac, text

        def done(data: dict) -> None:
            self.data = data
            self.update()
            self.progress.bar_style = "success"
            self.progress_label.value = f"done in {self.job.elapsed:.1f} s" if self.job else "done"
            self.sim_button.disabled, self.cancel_button.disabled = False, True

        def failed(exc: BaseException) -> None:
            cancelled = isinstance(exc, JobCancelled)
            self.progress.bar_style = "warning" if cancelled else "danger"
            self.progress_label.value = "cancelled" if cancelled else "failed"
            if not cancelled:
                self.show_message(f"simulation failed: {type(exc).__name__}: {exc}")
            self.sim_button.disabled, self.cancel_button.disabled = False, True

        self.job = BackgroundJob(
            lambda report, _c: recompute_bands(params, radii, n, executor=self.executor,
                                               report=report,
                                               calibrate_l_phi=self.calibrate_probes),
            on_progress=progress, on_done=done, on_error=failed,
        )  # fmt: skip
        return self.job.start()

    executor: Any = None
    """Executor for recomputed bands (None: a process pool per run; tests set a serial one)."""
    calibrate_probes: bool = True
    """Recomputed bands use probes calibrated on each ring (realised L_phi = the panel's)."""

    def _draw(self) -> None:
        ax = self.ax
        ax.cla()
        show = self.data is not None and not self.mismatch
        self.artists = plot_size_bands(ax, self.law, self.data, show_bands=show)
        self.pane.refresh()
        self._notes(show)
        pre = law_prefactors(self.params, self.data)
        rows = [
            ("h/e prefactor c_he", _pm(pre["coherent_amplitude"], pre["coherent_amplitude_err"])),
            ("AAS prefactor c_aas", _pm(pre["aas_amplitude"], pre["aas_amplitude_err"])),
            ("prefactors from", str(pre["source"])),
        ]
        if pre["source"] == "fit":
            if pre.get("l_phi_fitted"):
                rows.append(("L_phi of the simulated rings (fitted)",
                             _pm(pre.get("l_phi"), pre.get("l_phi_err"), 1e6, "µm")))  # fmt: skip
            rows.append(("fit chi²/dof", f"{pre['chi2_stat']:.3g}/{pre['dof']} (p = "
                         f"{pre['p_value_stat']:.2g}) with bootstrap errors only"))  # fmt: skip
            if pre.get("model_discrepancy"):
                extra = f"{100 * pre['model_discrepancy']:.0f} % per point"
                then = f"chi²/dof then {pre['chi2']:.3g}/{pre['dof']}"
                rows.append(("model discrepancy added", f"{extra} ({then})"))
        self.fitted.value = _table(rows, "ringkit-fitted-table")
        ds = self.law
        if ds is None:  # h/e prefactor unconstrained: bands only
            rows = [("law", "not drawn: the h/e prefactor is unconstrained by these bands")]
            self.summary.value = _table(rows, "ringkit-numbers")
            return
        lt = float(ds.attrs.get("thermal_length_m", np.inf))
        rows = [
            ("mean free path", f"{ds.attrs['mean_free_path_m'] * 1e6:.3g} µm"),
            ("thermal length L_T", "inf" if not np.isfinite(lt) else f"{lt * 1e6:.3g} µm"),
            ("law continuity", "continuous in r (no regime boundary); nominal crossover "
             f"l = πr at r = {ds.attrs['regime_boundary_radius'] * 1e6:.3g} µm"),
            ("h/e law at r_min", f"{float(ds['amplitude_he_rms'][0]):.3g} e²/h"),
            ("h/e law at r_max", f"{float(ds['amplitude_he_rms'][-1]):.3g} e²/h"),
            ("h/2e law at r_max", f"{float(ds['amplitude_h2e_rms'][-1]):.3g} e²/h"),
        ]  # fmt: skip
        if self.data is not None:
            n = sorted(set(int(x) for x in self.data["n_realizations"]))
            rows.append(("simulated rings", self.data["family"].describe()))
            rows.append(("realizations per radius", ", ".join(map(str, n))))
        self.summary.value = _table(rows, "ringkit-numbers")

    def _notes(self, show: bool) -> None:
        if self.data is None:
            why = self.data_error or "no size dataset loaded"
            text = f"No simulated bands ({why}); the law uses the typed prefactors."
        else:
            rings = self.data["family"].describe()
            fit = self.data.get("fit") or {}
            if fit.get("l_phi_fitted"):
                realised = _pm(fit.get("l_phi"), fit.get("l_phi_err"), 1e6, "um")
                rings += f"; realised L_phi (law fit) {realised}"
            if show:
                text = f"Simulated bands: {rings}."
            else:
                text = (f"Bands hidden: they are for {rings}; your settings differ in "
                        + "; ".join(self.mismatch)
                        + ". The law (prefactors fitted to those rings) is drawn for your "
                        "settings; use 'Recompute bands' for your own rings.")  # fmt: skip
        self.bands_note.value = f"<div class='ringkit-bands-text'>{html.escape(text)}</div>"


def _table(rows, css: str) -> str:
    body = "".join(
        f"<tr><td>{html.escape(k)}</td><td data-key='{html.escape(k)}'>{html.escape(v)}</td></tr>"
        for k, v in rows
    )
    return f"<table class='{css}'>{body}</table>"
