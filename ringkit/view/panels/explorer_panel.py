"""Widget shell of the device explorer (see :mod:`ringkit.view.panels.explorer`).

Every control is converted to SI and packed into an
:class:`~ringkit.view.panels.explorer.ExplorerParams`; the quick preview is recomputed and the
figure re-rendered synchronously on each change (measured on the project's shared 2-core
machine at load average 4-5: median 0.2-0.3 s, slowest change < 0.5 s; preview compute
<= 0.2 s, PNG render ~0.1-0.3 s; only the artists' data move when the layout is unchanged, and
the ring outline is re-rendered only when the geometry changes); the full tight-binding
computation runs on demand in a :class:`~ringkit.view.panels._base.BackgroundJob`.

With "live lattice" checked (flux-tube mode) every change also recomputes the exact lattice
G(B) and its spectrum, synchronously in the same update, with the caches of
:class:`~ringkit.view.panels.explorer_live.LiveLattice` (figures per control kind:
benchmarks/bench_live_preview.py).
"""

from __future__ import annotations

import html
import math
import time
from typing import Any

import ipywidgets as widgets
import numpy as np

from ringkit.units import EV
from ringkit.view import plots
from ringkit.view.panels._base import BackgroundJob, FigurePane, JobCancelled, PanelBase
from ringkit.view.panels.explorer import (
    N_PROBES,
    ExplorerParams,
    PreviewResult,
    explorer_preview,
)
from ringkit.view.panels.explorer_live import LiveLattice, LiveResult
from ringkit.view.style import (
    COLORS,
    CONDUCTANCE_LABEL,
    field_scale,
    field_unit_for,
    new_figure,
    style_context,
)

__all__ = ["DeviceExplorer"]

MEV = 1e-3 * EV
_CM2 = 1e-4  # 1 cm^2/(V s) in m^2/(V s)
_CLEAN_MOBILITY = 10**7.45  # cm^2/(V s): the slider's top end means "no disorder"
_COHERENT_LPHI = 999.0  # µm: the L_phi slider's top end means "fully coherent"


def _preset_defaults(material: str) -> tuple[float, float]:
    """Fermi energy (meV) and mobility (cm^2/Vs) shown when a preset is chosen."""
    from ringkit.device.material import Material

    mat = Material.preset(material)
    mob = mat.transport_mobility
    if mob is None:  # metal film preset without disorder: l ~ 30 nm film (common practice)
        from ringkit.units import HBAR, E

        mob = E * 30e-9 / (HBAR * mat.fermi_wavevector)
    return mat.fermi_energy_J / MEV, mob / _CM2


def _fmt(value: float, unit: str, digits: int = 3) -> str:
    return "n/a" if value is None or not np.isfinite(value) else f"{value:.{digits}g} {unit}"


class DeviceExplorer(PanelBase):
    """Device explorer panel.

    Parameters
    ----------
    params : ExplorerParams, optional
        Initial settings.
    live_lattice : bool
        Start with the live lattice view on (the "live lattice" checkbox).
    live : LiveLattice, optional
        The cached live-lattice computation to use (default: a new one).

    Attributes
    ----------
    controls : dict of str -> widget
        The input widgets (display units in their descriptions).
    preview : PreviewResult or None
        Last good quick-preview result.
    full : FullResult or None
        Last full tight-binding result (``full_params`` are its settings).
    live : LiveResult or None
        Lattice result of the live view for the current settings (None when it is off or
        unavailable; ``live_note`` then says why).
    live_lattice : ipywidgets.Checkbox
        Turns the live lattice view on and off.
    live_view : LiveLattice
        Its computation and caches (``live_view.builds`` counts lattice builds).
    artists : dict
        Current matplotlib artists: ``"preview"``, ``"full"``, ``"live"`` (G(B) lines),
        ``"preview_spectrum"``, ``"full_spectrum"``, ``"live_spectrum"``.
    latency : float
        Wall time in s of the last control-change -> PNG update.
    """

    def __init__(
        self,
        params: ExplorerParams | None = None,
        *,
        live_lattice: bool = False,
        live: LiveLattice | None = None,
    ) -> None:
        super().__init__()
        p = params or ExplorerParams()
        self.live_view = live if live is not None else LiveLattice()
        self.live: LiveResult | None = None
        self.live_note: str | None = None
        self._twin: Any = None
        self._suspend = False
        self.preview: PreviewResult | None = None
        self.params: ExplorerParams | None = None
        self.full: Any = None
        self.full_params: ExplorerParams | None = None
        self.job: BackgroundJob | None = None
        self.latency = float("nan")
        self.artists: dict[str, Any] = {}
        self.controls = self._make_controls(p)
        for w in self.controls.values():
            w.observe(self._on_change, names="value")
        self.controls["material"].observe(self._on_material, names="value")

        fig, axes = new_figure(2, 1, size=(6.6, 5.0), layout=None)
        fig.subplots_adjust(left=0.11, right=0.88, bottom=0.09, top=0.9, hspace=0.42)
        self.figure = fig
        self.ax_g, self.ax_s = axes[0, 0], axes[1, 0]
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
        self.run_button = widgets.Button(description="Run tight-binding", icon="play")
        self.cancel_button = widgets.Button(description="Cancel", icon="stop", disabled=True)
        self.progress = widgets.FloatProgress(value=0.0, min=0.0, max=1.0, description="full:")
        self.progress_label = widgets.Label(value="not run")
        self.show_preview = widgets.Checkbox(value=True, description="show 1D preview")
        self.show_full = widgets.Checkbox(value=True, description="show tight-binding")
        self.live_lattice = widgets.Checkbox(
            value=bool(live_lattice), description="live lattice (flux tube)"
        )
        self.live_lattice.observe(lambda _: self.update(), names="value")
        self.run_button.on_click(lambda _: self.run_full())
        self.cancel_button.on_click(lambda _: self.cancel_full())
        self.show_preview.observe(lambda _: self.redraw(), names="value")
        self.show_full.observe(lambda _: self.redraw(), names="value")
        self.widget = self._layout()
        self.widget.add_class("ringkit-explorer")
        self.update()

    # ------------------------------------------------------------------ controls
    @staticmethod
    def _make_controls(p: ExplorerParams) -> dict[str, widgets.Widget]:
        e_f, mob = _preset_defaults(p.material)
        if p.fermi_energy is not None:
            e_f = p.fermi_energy / MEV
        if p.mobility is not None:
            mob = 10**7.5 if math.isinf(p.mobility) else p.mobility / _CM2
        style = {"description_width": "150px"}
        lay = widgets.Layout(width="380px")
        kw = dict(continuous_update=False, style=style, layout=lay)
        lphi_um = 1e3 if p.phase_coherence_length is None else p.phase_coherence_length * 1e6
        return {
            "material": widgets.Dropdown(
                options=["GaAs", "InAs", "Au"], value=p.material, description="material",
                style=style, layout=lay,
            ),
            "radius": widgets.FloatSlider(
                value=p.radius * 1e9, min=50, max=3000, step=10,
                description="mean radius (nm)", **kw,
            ),
            "width": widgets.FloatSlider(
                value=p.width * 1e9, min=5, max=1000, step=5,
                description="upper arm width (nm)", **kw,
            ),
            "width_ratio": widgets.FloatSlider(
                value=p.width_ratio, min=0.2, max=3.0, step=0.05,
                description="width lower/upper", **kw,
            ),
            "lead_angle": widgets.FloatSlider(
                value=math.degrees(p.lead_angle), min=95, max=265, step=1,
                description="left lead angle (deg)", **kw,
            ),
            "fermi_energy": widgets.BoundedFloatText(
                value=e_f, min=1e-3, max=2e4, step=0.1,
                description="Fermi energy (meV)", **kw,
            ),
            "mobility": widgets.FloatLogSlider(
                value=mob, base=10, min=0, max=7.5, step=0.05,
                description="mobility (cm²/Vs; max=clean)", readout_format=".3g", **kw,
            ),
            "lphi": widgets.FloatLogSlider(
                value=lphi_um, base=10, min=-1.5, max=3, step=0.05,
                description="L_phi (µm; max=∞)", readout_format=".3g", **kw,
            ),
            "temperature": widgets.FloatSlider(
                value=p.temperature, min=0.0, max=10.0, step=0.01,
                description="temperature (K)", **kw,
            ),
            "field": widgets.FloatRangeSlider(
                value=(p.field_min * 1e3, p.field_max * 1e3), min=-300, max=300, step=0.5,
                description="field window (mT)", **kw,
            ),
            "gate": widgets.FloatSlider(
                value=p.gate_potential / MEV, min=-20, max=20, step=0.05,
                description="arm gate (meV)", **kw,
            ),
            "gate_arm": widgets.Dropdown(
                options=["upper", "lower"], value=p.gate_arm, description="gated arm",
                style=style, layout=lay,
            ),
            "coupling": widgets.FloatSlider(
                value=p.coupling, min=0.02, max=0.5, step=0.01,
                description="junction ε (preview)", **kw,
            ),
            "lattice_spacing": widgets.BoundedFloatText(
                value=0.0 if p.lattice_spacing is None else p.lattice_spacing * 1e9,
                min=0.0, max=100.0, step=0.5, description="lattice a (nm, 0=auto)", **kw,
            ),
            "field_mode": widgets.Dropdown(
                options=[("AB flux tube (fast)", "flux_tube"), ("uniform field", "uniform")],
                value=p.field_mode, description="full model field", style=style, layout=lay,
            ),
            "seed": widgets.BoundedIntText(
                value=p.seed, min=0, max=2**31 - 1, description="disorder seed", **kw,
            ),
        }  # fmt: skip

    def params_from_controls(self) -> ExplorerParams:
        """Current control values as :class:`ExplorerParams` (raises ParameterError)."""
        c = self.controls
        b0, b1 = c["field"].value
        lphi = c["lphi"].value
        mob = c["mobility"].value
        return ExplorerParams(
            material=c["material"].value,
            radius=c["radius"].value / 1e9,
            width=c["width"].value / 1e9,
            width_ratio=c["width_ratio"].value,
            lead_angle=math.radians(c["lead_angle"].value),
            fermi_energy=c["fermi_energy"].value * MEV,
            mobility=math.inf if mob >= _CLEAN_MOBILITY else mob * _CM2,
            phase_coherence_length=None if lphi >= _COHERENT_LPHI else lphi * 1e-6,
            temperature=c["temperature"].value,
            field_min=b0 * 1e-3,
            field_max=b1 * 1e-3,
            gate_potential=c["gate"].value * MEV,
            gate_arm=c["gate_arm"].value,
            coupling=c["coupling"].value,
            lattice_spacing=(c["lattice_spacing"].value / 1e9) or None,
            field_mode=c["field_mode"].value,
            seed=int(c["seed"].value),
        )

    def _layout(self) -> widgets.Widget:
        c = self.controls
        device = widgets.VBox(
            [c[k] for k in ("material", "radius", "width", "width_ratio", "lead_angle",
                            "fermi_energy", "mobility")]
        )  # fmt: skip
        physics = widgets.VBox(
            [c[k] for k in ("lphi", "temperature", "field", "gate", "gate_arm", "coupling")]
        )
        full = widgets.VBox(
            [
                c["lattice_spacing"],
                c["field_mode"],
                c["seed"],
                self.live_lattice,
                widgets.HBox([self.run_button, self.cancel_button]),
                widgets.HBox([self.progress, self.progress_label]),
                widgets.HBox([self.show_preview, self.show_full]),
            ]
        )
        tabs = widgets.Tab(children=[device, physics, full])
        for i, title in enumerate(("device", "physics", "full model")):
            tabs.set_title(i, title)
        figures = widgets.HBox([self.ring_pane.image, self.pane.image])
        return widgets.VBox([tabs, self.message, figures, self.summary])

    # ------------------------------------------------------------------ callbacks
    def _on_material(self, change: dict) -> None:
        e_f, mob = _preset_defaults(change["new"])
        self._suspend = True
        try:
            self.controls["fermi_energy"].value = e_f
            self.controls["mobility"].value = mob
        finally:
            self._suspend = False
        self.update()

    def _on_change(self, change: dict) -> None:
        if self._suspend or change.get("owner") is self.controls["material"]:
            return
        self.update()

    def update(self) -> bool:
        """Recompute the quick preview from the controls and redraw (keeps the last good plot
        and shows the message when the settings are invalid). Returns True on success."""
        t0 = time.perf_counter()

        def work() -> None:
            params = self.params_from_controls()
            result = explorer_preview(params)
            live, note = self._live_update(params)
            self.params = params
            self.preview = result
            self.live, self.live_note = live, note
            self._draw()

        ok = self.guarded(work)
        self.latency = time.perf_counter() - t0
        return ok

    def _live_update(self, params: ExplorerParams) -> tuple[LiveResult | None, str | None]:
        """Live lattice result for ``params`` and a note (why it is off); raises
        ParameterError for invalid settings (shown by :meth:`update`)."""
        if not self.live_lattice.value:
            return None, None
        why = self.live_view.unavailable(params)
        if why is not None:
            return None, f"off: {why}"
        return self.live_view.compute(params), None

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

    # ------------------------------------------------------------------ drawing
    def redraw(self) -> None:
        """Redraw with the current results (no recomputation)."""
        with self.draw_lock:
            self._draw()

    def _draw(self) -> None:
        pv = self.preview
        full = self.full if self.show_full.value else None
        stale = full is not None and self.full_params != self.params
        self._draw_ring(full, stale)
        unit = field_unit_for(pv.field) if pv is not None else None
        key = (
            self.show_preview.value,
            None if full is None else id(full),
            stale,
            unit,
            self.live is not None,
        )
        if pv is not None and self.show_preview.value and key == self._layout_key:
            self._update_preview_artists(pv, unit)  # fast path: same layout, new preview data
        else:
            self._build_axes(pv, full, stale)
            self._layout_key = key
        self.pane.refresh()
        self._update_summary(stale)

    def _build_axes(self, pv, full, stale: bool) -> None:
        ax_g, ax_s = self.ax_g, self.ax_s
        for ax in (ax_g, ax_s):
            for child in list(ax.child_axes):
                child.remove()
            ax.cla()
        for other in list(self.figure.axes):
            if other not in (ax_g, ax_s):  # twin axes of the previous draw
                other.remove()
        self.artists = {}
        if pv is not None and self.show_preview.value:
            plots.plot_conductance(
                pv.field, pv.conductance, ax_g, label="1D network preview", period=pv.period
            )
            self.artists["preview"] = ax_g.get_lines()[0]
        with style_context():
            ax_g.set_ylabel(CONDUCTANCE_LABEL + " 1D preview", color=COLORS["model"])
        live = self.live
        ref = pv if pv is not None else (live if live is not None else full)
        unit = field_unit_for(ref.field) if ref is not None else "auto"
        self._twin = None
        if live is not None:
            self._twin = plots.plot_twin(
                ax_g, live.field, live.conductance, kind="tightbinding", label="lattice (live)",
                ylabel=CONDUCTANCE_LABEL + " lattice", field_unit=unit,
            )  # fmt: skip
            self.artists["live"] = self._twin.get_lines()[0]
        if full is not None:
            lbl = "tight-binding" + (" (earlier settings)" if stale else "")
            if self._twin is None:
                self._twin = plots.plot_twin(
                    ax_g, full.field, full.conductance, kind="tightbinding", label=lbl,
                    ylabel=CONDUCTANCE_LABEL + " tight-binding", ls="--" if stale else "-",
                    field_unit=unit,
                )  # fmt: skip
                self.artists["full"] = self._twin.get_lines()[0]
            else:  # beside the live line: dotted, same axis
                with style_context():
                    (line,) = self._twin.plot(
                        full.field * field_scale(unit), full.conductance, ls=":", lw=1.2,
                        color=COLORS["simulation"], label=lbl,
                    )  # fmt: skip
                    self._twin.legend(loc="lower right", fontsize=7)
                self.artists["full"] = line
                plots.set_headroom(self._twin, 0.4, [live.conductance, full.conductance])
        if pv is not None:
            show_pv = self.show_preview.value
            if show_pv:
                plots.plot_spectrum(
                    pv.spectrum.frequency, pv.spectrum.amplitude, ax_s, bands=pv.bands,
                    label="1D preview",
                )  # fmt: skip
                self.artists["preview_spectrum"] = ax_s.get_lines()[0]
            first = not show_pv
            if live is not None:
                plots.plot_spectrum(
                    live.spectrum.frequency, live.spectrum.amplitude, ax_s,
                    bands=pv.bands if first else None, kind="tightbinding",
                    label="lattice (live)", area_axis=first,
                )  # fmt: skip
                self.artists["live_spectrum"] = ax_s.get_lines()[-1]
                first = False
            if full is not None:
                kw = {"ls": ":", "color": COLORS["simulation"]} if live is not None else {}
                plots.plot_spectrum(
                    full.spectrum.frequency, full.spectrum.amplitude, ax_s,
                    bands=pv.bands if first else None, kind="tightbinding",
                    label="tight-binding", area_axis=first, **kw,
                )  # fmt: skip
                self.artists["full_spectrum"] = ax_s.get_lines()[-1]
                first = False
            if first:
                plots.plot_spectrum([], [], ax_s, bands=pv.bands)
            ax_s.set_xlim(0.0, 1.3 * max(hi for _, hi in pv.bands.values()))
            self._fit_spectrum_y()
        marks = {ln.get_gid(): ln for ln in ax_g.get_lines() if ln.get_gid()}
        notes = {t.get_text().split(":")[0]: t for t in ax_g.texts}
        self._marks = {k: (marks[f"period-{k}"], notes[k]) for k in ("h/e", "h/2e") if k in notes}
        spans = {p.get_gid(): p for p in ax_s.patches if p.get_gid()}
        labels = {t.get_gid(): t for t in ax_s.texts if t.get_gid()}
        self._bands = {o: (spans[f"band-{o}"], labels[f"band-{o}"]) for o in (1, 2)
                       if f"band-{o}" in spans}  # fmt: skip

    def _update_preview_artists(self, pv: PreviewResult, unit: str) -> None:
        """Move the existing artists to new preview data (no new axes, ticks or labels)."""
        x = pv.field * field_scale(unit)
        self.artists["preview"].set_data(x, pv.conductance)
        pad = 0.05 * (x[-1] - x[0])
        self.ax_g.set_xlim(x[0] - pad, x[-1] + pad)
        plots.set_headroom(self.ax_g, 0.4, [pv.conductance])
        for label, per in (("h/e", pv.period), ("h/2e", pv.period / 2)):
            if label in self._marks:
                plots.update_period_mark(self.ax_g, self._marks[label], per, field_unit=unit,
                                         label=label)  # fmt: skip
        self.artists["preview_spectrum"].set_data(pv.spectrum.frequency, pv.spectrum.amplitude)
        live = self.live
        if live is not None and "live" in self.artists:
            self.artists["live"].set_data(live.field * field_scale(unit), live.conductance)
            self.artists["live_spectrum"].set_data(live.spectrum.frequency, live.spectrum.amplitude)
            ys = [live.conductance]
            if "full" in self.artists:
                ys.append(np.asarray(self.artists["full"].get_ydata(), dtype=float))
            plots.set_headroom(self._twin, 0.4, ys)
        for order, (lo, hi) in pv.bands.items():
            if order in self._bands:
                rect, text = self._bands[order]
                rect.set_x(lo)
                rect.set_width(hi - lo)
                text.xy = ((lo + hi) / 2, text.xy[1])
        self.ax_s.set_xlim(0.0, 1.3 * max(hi for _, hi in pv.bands.values()))
        self._fit_spectrum_y()

    def _fit_spectrum_y(self) -> None:
        top = self.ax_s.get_xlim()[1]
        peak = 0.0
        for ln in self.ax_s.get_lines():
            f = np.asarray(ln.get_xdata(), dtype=float)
            a = np.asarray(ln.get_ydata(), dtype=float)
            vis = a[(f > 0) & (f <= top) & np.isfinite(a)]
            if vis.size:
                peak = max(peak, float(vis.max()))
        self.ax_s.set_ylim(0.0, 1.1 * peak if peak > 0 else 1.0)

    def _draw_ring(self, full, stale: bool) -> None:
        p = self.params if self.preview is not None else None
        show_lattice = (
            full is not None and not stale and getattr(full, "positions", None) is not None
        )
        key = (
            ("lattice", id(full))
            if show_lattice
            else (
                "sketch",
                p and p.geometry(),
                p and (p.gate_arm if p.gate_potential != 0 else None),
                N_PROBES if p and p.phase_coherence_length is not None else 0,
            )
        )
        if key == self._ring_key:
            return
        ax = self.ax_ring
        for child in list(self.ring_figure.axes):
            if child is not ax:
                child.remove()  # colour bar of a previous lattice plot
        ax.cla()
        if show_lattice:
            plots.plot_ring_sites(
                full.positions, ax, values=full.onsite_meV, lead_sites=full.lead_sites,
                probe_sites=full.probe_sites, value_label="on-site disorder (meV)",
            )  # fmt: skip
            self._caption(ax, f"lattice: {len(full.positions)} sites")
        elif p is not None:
            geo = p.geometry()
            plots.plot_ring_sketch(
                geo.r_in, geo.r_out, ax, lead_angles=geo.lead_angles, lead_width=geo.lead_width,
                gate_arm=key[2], probes=key[3],
            )  # fmt: skip
            self._caption(ax, "device outline" + (" + dephasing probes" if key[3] else ""))
        self._ring_key = key
        self.ring_pane.refresh()

    @staticmethod
    def _caption(ax, text: str) -> None:
        # a text in axes coordinates instead of a title: titles re-run the axis layout
        # (~25 ms per render of this small figure)
        with style_context():
            ax.text(0.5, 1.02, text, transform=ax.transAxes, ha="center", va="bottom")

    def _update_summary(self, stale: bool) -> None:
        pv = self.preview
        rows = []
        if pv is not None:
            unit = field_unit_for(pv.period)
            rows.append(("h/e period (mean radius)", _fmt(pv.period * field_scale(unit), unit)))
            rows.append(("1D preview: mean G", _fmt(float(np.mean(pv.conductance)), "e²/h", 4)))
            rows.append(("1D preview: h/e rms", _fmt(pv.amplitude_he, "e²/h")))
            rows.append(("1D preview: h/2e rms", _fmt(pv.amplitude_h2e, "e²/h")))
            rows.append(("1D preview: coherent fraction", f"{pv.ring.coherent_fraction:.3f}"))
        live = self.live
        if live is not None:
            what = "rebuilt lattice" if live.rebuilt else "cached lattice"
            rows.append(
                (
                    "lattice (live): sites",
                    f"{live.n_sites:,} (a = {live.lattice_spacing * 1e9:.3g} nm)",
                )
            )
            rows.append(("lattice (live): mean G", _fmt(live.mean_conductance, "e²/h", 4)))
            rows.append(("lattice (live): h/e rms", _fmt(live.amplitude_he, "e²/h")))
            rows.append(("lattice (live): h/2e rms", _fmt(live.amplitude_h2e, "e²/h")))
            rows.append(
                (
                    "lattice (live): update",
                    f"{1e3 * live.timings['total']:.0f} ms ({what}, {live.factorizations} "
                    f"factorization(s), {live.n_solved} flux values per energy)",
                )
            )
            rows.append(("lattice (live): model", "; ".join(live.notes)))
        elif self.live_note:
            rows.append(("lattice (live)", self.live_note))
        if self.full is not None:
            tag = " (earlier settings)" if stale else ""
            rows.append(
                (f"tight-binding: mean G{tag}", _fmt(self.full.mean_conductance, "e²/h", 4))
            )
            rows.append((f"tight-binding: h/e rms{tag}", _fmt(self.full.amplitude_he, "e²/h")))
        body = "".join(
            f"<tr><td>{html.escape(k)}</td>"
            f"<td data-key='{html.escape(k)}'>{html.escape(v)}</td></tr>"
            for k, v in rows
        )
        self.summary.value = f"<table class='ringkit-numbers'>{body}</table>"
