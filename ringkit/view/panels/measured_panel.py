"""Widget shell of the measured-data panel (compute part: :mod:`ringkit.view.panels.measured`).

Load a trace by upload or path (or the invented demo trace), pick columns and units, choose
the background method and window, and see the trace with its background, the residual with a
simulated ring of the extracted area, the spectrum with the h/e and h/2e bands, and the
extracted numbers. Loader errors (unreadable uploads) and invalid settings are shown in the
message area; the last good plots stay.

Per-file options (columns, units, series resistance, terminals, grouping, contacts, radii,
current, noise, bandwidth) return to their defaults whenever a *different* file is loaded (a
setting made for one file, e.g. the demo's 1200 Ohm series resistance, never silently applies
to the next); changing an option reloads the same file. A temperature series (grouped by a
temperature column, or one file per temperature) gets an L_phi(T) fit
(:mod:`ringkit.view.panels.measured_series`). The cross-checks of
:mod:`ringkit.analysis.checks` (bands overlapping, no peak above the noise floor, implausible
amplitude or G) are shown in the message area. Resistance inputs also get the h/e and h/2e
amplitudes as dR (Ohm) and dR/R (%), and with a current, noise density and bandwidth whether
they exceed the noise floor (:mod:`ringkit.view.panels.measured_lab`; the same numbers as
``ringkit analyze``). A contact configuration (field "contacts", or a ``# contacts:`` header)
adds the four-terminal R_mn,kl analysis (:mod:`ringkit.view.panels.measured_fourterminal`;
docs/multiterminal.md). docs/panels.md.
"""

from __future__ import annotations

import html
import math
from pathlib import Path
from typing import Any

import ipywidgets as widgets
import numpy as np

from ringkit.view import plots
from ringkit.view.panels._base import FigurePane, PanelBase
from ringkit.view.panels.measured import (
    DEMO_LABEL,
    AnalysisOptions,
    LoadOptions,
    MeasuredAnalysis,
    analyze_trace,
    demo_trace_text,
    load_trace_bytes,
    load_trace_file,
)
from ringkit.view.panels.measured_fourterminal import four_terminal_view
from ringkit.view.panels.measured_lab import (
    LAB_UNITS,
    lab_record,
    lab_rows,
    parse_lab_inputs,
)
from ringkit.view.panels.measured_series import series_l_phi, trace_caption
from ringkit.view.style import DELTA_G_LABEL, field_scale, field_unit_for, new_figure

_STYLE = {"description_width": "170px"}
_WIDE = widgets.Layout(width="400px")

__all__ = ["MeasuredDataPanel"]


def _param(name: str, value: float, error: float, unit: str) -> str:
    """``name = value ± error unit`` with lengths in µm."""
    if unit == "m":
        value, error, unit = 1e6 * value, 1e6 * error, "µm"
    unit = "" if unit in ("1", "amplitude") else f" {unit}"
    return f"{name} = {value:.4g} ± {error:.2g}{unit}"


def _upload_items(value: Any) -> list[tuple[str, bytes]]:
    """(name, content) pairs from a FileUpload value (ipywidgets 8 tuple of dicts)."""
    items = []
    for item in value or ():
        name = item.get("name", "upload.txt") if isinstance(item, dict) else item.name
        content = item.get("content") if isinstance(item, dict) else item.content
        items.append((str(name), bytes(content)))
    return items


class MeasuredDataPanel(PanelBase):
    """Measured-data panel.

    Attributes
    ----------
    traces : tuple of Trace
        Traces of the last successful load.
    analysis : MeasuredAnalysis or None
        Last good analysis of the selected trace.
    artists : dict
        ``"trace"``, ``"background"``, ``"residual"``, ``"simulation"``, ``"spectrum"``.
    """

    def __init__(self) -> None:
        super().__init__()
        self.traces: tuple = ()
        self.analysis: MeasuredAnalysis | None = None
        self.artists: dict[str, Any] = {}
        self.source = ""
        style, lay = _STYLE, _WIDE
        self.upload = widgets.FileUpload(accept=".txt,.dat,.csv,.tsv", multiple=False)
        self.path = widgets.Text(description="file path", style=style, layout=lay)
        auto = widgets.Layout(width="auto")
        self.load_button = widgets.Button(description="Load path", icon="folder-open",
                                          layout=auto)  # fmt: skip
        self.demo_button = widgets.Button(description="Load demo (invented data)", icon="flask",
                                          layout=auto)  # fmt: skip
        self.load_controls = {
            "field_column": widgets.Text(description="field column", placeholder="auto",
                                         style=style, layout=lay),
            "signal_column": widgets.Text(description="signal column", placeholder="auto",
                                          style=style, layout=lay),
            "field_unit": widgets.Dropdown(options=["", "T", "mT", "G"], description="field unit",
                                           style=style, layout=lay),
            "signal_unit": widgets.Dropdown(
                options=["", "Ohm", "kOhm", "S", "e^2/h"], description="signal unit",
                style=style, layout=lay),
            "series_resistance": widgets.BoundedFloatText(
                value=0.0, min=0.0, max=1e9, description="series R (Ohm)", style=style,
                layout=lay),
            "terminals": widgets.Dropdown(options=["two", "four"], description="terminals",
                                          style=style, layout=lay),
            "group_by": widgets.Text(description="group by column", style=style, layout=lay,
                                     placeholder="auto (temperature column); none"),
            "contacts": widgets.Text(description="contacts (4-terminal)", style=style, layout=lay,
                                     placeholder="e.g. I 0→2, V 1–3 (or '# contacts:' header)"),
        }  # fmt: skip
        self.file_defaults = {k: w.value for k, w in self.load_controls.items()}
        self.trace_select = widgets.Dropdown(options=[], description="trace", style=style,
                                             layout=widgets.Layout(width="640px"))  # fmt: skip
        kw = dict(continuous_update=False, style=style, layout=lay)
        self.controls = {
            "field": widgets.FloatRangeSlider(value=(-1.0, 1.0), min=-1.0, max=1.0, step=0.1,
                                              description="field window (mT)", **kw),
            "background": widgets.Dropdown(
                options=["polynomial", "savgol", "moving_average", "none"],
                description="background", style=style, layout=lay),
            "degree": widgets.IntSlider(value=3, min=0, max=12, description="poly degree", **kw),
            "window_periods": widgets.FloatSlider(value=10.0, min=1.0, max=40.0, step=1.0,
                                                  description="window (periods)", **kw),
            "r_in": widgets.BoundedFloatText(value=0.0, min=0.0, max=1e5,
                                             description="r_in (nm, 0=auto)", **kw),
            "r_out": widgets.BoundedFloatText(value=0.0, min=0.0, max=1e5,
                                              description="r_out (nm, 0=auto)", **kw),
            "material": widgets.Dropdown(options=["GaAs", "InAs", "Au"],
                                         description="simulation material", style=style,
                                         layout=lay),
            "symmetrize": widgets.Dropdown(options=["none", "even", "odd"],
                                           description="4-terminal: analyse", style=style,
                                           layout=lay),
            "l_phi": widgets.FloatLogSlider(value=2.0, base=10, min=-1.5, max=2, step=0.05,
                                           description="sim. L_phi (µm)", readout_format=".3g",
                                           **kw),
            "current": widgets.Text(description="current (nA)", placeholder="e.g. 10", **kw),
            "noise": widgets.Text(description="noise (nV/√Hz)", placeholder="e.g. 5", **kw),
            "bandwidth": widgets.Text(description="bandwidth (Hz)", placeholder="e.g. 1", **kw),
        }  # fmt: skip
        self.file_defaults.update(r_in=0.0, r_out=0.0, current="", noise="", bandwidth="")
        self.lab: dict[str, Any] = {}  # lab_record of the shown analysis (measured_lab)
        self._notes: list[str] = []  # caveats and cross-checks of the shown analysis
        self.four_terminal = None  # FourTerminalResult of the shown trace (contacts given)
        self.four_summary = widgets.HTML(value="")
        self.series_button = widgets.Button(description="Fit L_phi(T) over all traces",
                                            icon="line-chart", layout=auto)  # fmt: skip
        self.series_summary = widgets.HTML(value="")
        self.series_summary.add_class("ringkit-series")
        self.series = None
        self.series_button.on_click(lambda _: self.fit_series())
        self._source_key: object = None
        self.upload.observe(self._on_upload, names="value")
        self.load_button.on_click(lambda _: self.load_path(self.path.value))
        self.demo_button.on_click(lambda _: self.load_demo())
        self.trace_select.observe(self._on_trace, names="value")
        self._quiet = False
        for key, w in self.controls.items():
            w.observe(self._on_lab if key in LAB_UNITS else self._on_control, names="value")
        for w in self.load_controls.values():
            w.observe(lambda _: self._reload(), names="value")

        fig, axes = new_figure(3, 1, size=(7.0, 7.2), layout=None)
        fig.subplots_adjust(left=0.12, right=0.88, bottom=0.07, top=0.94, hspace=0.5)
        self.figure = fig
        self.axes = axes[:, 0]
        self.pane = FigurePane(fig)
        load_box = widgets.VBox(
            [widgets.HBox([self.upload, self.demo_button]),
             widgets.HBox([self.path, self.load_button]),
             *self.load_controls.values()]
        )  # fmt: skip
        analysis_box = widgets.VBox(
            [*self.controls.values(), self.series_button, self.series_summary]
        )
        tabs = widgets.Tab(children=[load_box, analysis_box])
        tabs.set_title(0, "load")
        tabs.set_title(1, "analysis")
        self.widget = widgets.VBox(
            [tabs, self.trace_select, self.message, self.pane.widget, self.summary,
             self.four_summary]
        )  # fmt: skip
        self.widget.add_class("ringkit-measured")
        self._pending: tuple[str, Any] | None = None

    # ------------------------------------------------------------------ loading
    def load_options(self) -> LoadOptions:
        """Loader options from the controls."""
        c = self.load_controls
        return LoadOptions(
            field_column=c["field_column"].value,
            signal_column=c["signal_column"].value,
            field_unit=c["field_unit"].value,
            signal_unit=c["signal_unit"].value,
            series_resistance=float(c["series_resistance"].value),
            terminals=c["terminals"].value,
        )

    def _accept(self, result, source: str) -> None:
        self.traces = tuple(result.traces)
        self.source = source
        labels = [(trace_caption(i, t), i) for i, t in enumerate(self.traces)]
        self.series = None
        self.series_summary.value = ""
        self._quiet = True
        try:
            self.trace_select.options = labels
            self.trace_select.value = 0
            self._reset_field_window()
        finally:
            self._quiet = False
        self.update()
        if self.last_error is None and result.report.n_dropped:
            self.show_message(result.report.summary(), level="info")

    def _load(self, loader, source: str) -> bool:
        try:
            result = loader()
        except (ValueError, OSError) as exc:
            self.show_message(f"could not load {source}: {exc}")
            return False
        self._pending = None
        self._accept(result, source)
        return True

    def reset_file_options(self) -> None:
        """Every per-file option (columns, units, series R, terminals, grouping, radii) back to
        its default, without reloading."""
        self._suspend_reload = True
        self._quiet = True
        try:
            for key, value in self.file_defaults.items():
                w = self.load_controls.get(key) or self.controls[key]
                w.value = value
        finally:
            self._suspend_reload = False
            self._quiet = False

    def _new_source(self, key: object) -> None:
        """Reset the per-file options when ``key`` names a different file than the last."""
        if key != self._source_key:
            self.reset_file_options()
            self._source_key = key

    def load_bytes(self, content: bytes, filename: str) -> bool:
        """Load uploaded bytes; on failure show the loader's message (returns False).

        A different file (name or content) than the last one first resets the per-file
        options to their defaults (:meth:`reset_file_options`)."""
        import hashlib

        if not getattr(self, "_reloading", False):
            self._new_source(("bytes", filename, hashlib.sha256(content).hexdigest()))
        self._last_load = ("bytes", (content, filename))
        opts = self.load_options()
        return self._load(lambda: load_trace_bytes(content, filename, opts), f"upload {filename!r}")

    def load_path(self, path: str | Path) -> bool:
        """Load a file or folder path; on failure show the loader's message (a different path
        than the last one first resets the per-file options)."""
        if not getattr(self, "_reloading", False):
            self._new_source(("path", str(Path(path).expanduser().resolve())))
        self._last_load = ("path", path)
        opts = self.load_options()
        return self._load(lambda: load_trace_file(path, opts), str(path))

    def load_demo(self) -> bool:
        """Load the INVENTED demo trace (series resistance 1200 Ohm preset)."""
        content = demo_trace_text().encode()
        name = "ringkit-demo-invented.tsv"
        import hashlib

        self._new_source(("bytes", name, hashlib.sha256(content).hexdigest()))
        self._suspend_reload = True
        try:
            self.load_controls["series_resistance"].value = 1200.0
        finally:
            self._suspend_reload = False
        return self.load_bytes(content, name)

    def _reload(self) -> None:
        if getattr(self, "_suspend_reload", False):
            return
        last = getattr(self, "_last_load", None)
        if last is None:
            return
        self._reloading = True
        try:
            if last[0] == "bytes":
                self.load_bytes(*last[1])
            else:
                self.load_path(last[1])
        finally:
            self._reloading = False

    def _on_control(self, change: dict) -> None:
        if not self._quiet:
            self.update()

    def _on_upload(self, change: dict) -> None:
        items = _upload_items(change["new"])
        if items:
            self.load_bytes(items[0][1], items[0][0])

    def _on_trace(self, change: dict) -> None:
        if self.traces and not self._quiet:
            self._quiet = True
            try:
                self._reset_field_window()
            finally:
                self._quiet = False
            self.update()

    def _reset_field_window(self) -> None:
        tr = self.traces[self.trace_select.value or 0]
        lo, hi = float(tr.field[0]) * 1e3, float(tr.field[-1]) * 1e3
        sl = self.controls["field"]
        sl.min, sl.max = min(lo, sl.min), max(hi, sl.max)
        sl.value = (lo, hi)
        sl.min, sl.max = lo, hi
        sl.step = max((hi - lo) / 500.0, 1e-6)

    # ------------------------------------------------------------------ analysis
    def analysis_options(self) -> AnalysisOptions:
        """Analysis settings from the controls (raises ParameterError)."""
        c = self.controls
        b0, b1 = c["field"].value
        r_in, r_out = c["r_in"].value, c["r_out"].value
        radii = (r_in / 1e9, r_out / 1e9) if (r_in > 0 or r_out > 0) else (None, None)
        return AnalysisOptions(
            field_min=b0 / 1e3,
            field_max=b1 / 1e3,
            background=c["background"].value,
            degree=int(c["degree"].value),
            window_periods=float(c["window_periods"].value),
            r_in=radii[0],
            r_out=radii[1],
            material=c["material"].value,
            l_phi=c["l_phi"].value * 1e-6,
        )

    def update(self) -> bool:
        """Re-analyse the selected trace and redraw (keeps the last good plot on errors)."""
        if not self.traces:
            return False
        lab_inputs = self._lab_inputs()
        if lab_inputs is False:
            return False

        def work() -> None:
            trace = self.traces[self.trace_select.value or 0]
            analysis = analyze_trace(trace, self.analysis_options())
            self.lab = lab_record(trace, analysis.result, *(lab_inputs or ()))
            self.analysis = analysis
            self._draw(trace)

        ok = self.guarded(work)
        if ok and self.analysis is not None:
            notes = self._four_terminal() + list(self.analysis.notes) + self._cross_checks()
            self._notes = list(dict.fromkeys(notes))
            self._show_notes()
        return ok

    def _show_notes(self) -> None:
        """The shown analysis' caveats and cross-checks in the message area (or clear it)."""
        if self._notes:
            self.show_message("\n".join(self._notes), level="warning")
        else:
            self.clear_message()

    def _lab_inputs(self):
        """(current A, noise V/sqrt(Hz), bandwidth Hz), None when empty, or False after
        showing a one-line message for bad input (the last good numbers stay)."""
        c = self.controls
        try:
            return parse_lab_inputs(c["current"].value, c["noise"].value, c["bandwidth"].value)
        except ValueError as exc:
            self.show_message(f"{type(exc).__name__}: {exc}")
            return False

    def update_lab(self) -> bool:
        """dR, dR/R and detectability of the shown analysis from the current, noise and
        bandwidth controls, without re-analysing or redrawing."""
        if self.analysis is None or not self.traces:
            return False
        lab_inputs = self._lab_inputs()
        if lab_inputs is False:
            return False
        trace = self.traces[self.trace_select.value or 0]
        self.lab = lab_record(trace, self.analysis.result, *(lab_inputs or ()))
        self._summary()
        self._show_notes()
        return True

    def _on_lab(self, change: dict) -> None:
        if not self._quiet:
            self.update_lab()

    def _four_terminal(self) -> list[str]:
        """R_mn,kl analysis of the shown trace (contacts field or header); its message line."""
        c = self.controls
        opts = self.analysis_options()
        view = four_terminal_view(
            self.traces[self.trace_select.value or 0], self.load_controls["contacts"].value,
            symmetrize=c["symmetrize"].value, field_min=opts.field_min,
            field_max=opts.field_max, r_in=opts.r_in, r_out=opts.r_out,
        )  # fmt: skip
        self.four_terminal = view.result
        self.four_summary.value = view.html
        return [view.message] if view.message else []

    def _cross_checks(self) -> list[str]:
        """Messages of :func:`ringkit.analysis.checks.check_result` for the shown analysis."""
        from ringkit.analysis.checks import check_result

        opts = self.load_options()
        c = self.controls
        radii = None
        if c["r_in"].value > 0 and c["r_out"].value > 0:
            radii = (c["r_in"].value / 1e9, c["r_out"].value / 1e9)
        found = check_result(self.analysis.result, radii=radii, terminals=opts.terminals,
                             series_resistance=opts.series_resistance)  # fmt: skip
        return [f"{'warning' if f.level == 'warn' else 'check failed'}: {f.message}" for f in found]

    # ------------------------------------------------------------------ temperature series
    def fit_series(self) -> bool:
        """L_phi(T) over all loaded traces (grouped by temperature); result in
        ``self.series`` and the series summary, problems in the message area."""
        if not self.traces:
            self.show_message("load a temperature series first")
            return False
        try:
            opts = self.analysis_options()
            fit = series_l_phi(self.traces, opts)
        except ValueError as exc:
            self.show_message(f"L_phi(T) fit: {exc}")
            return False
        self.series = fit
        f = fit.fit["fit"]
        rows = [
            (
                f"T = {t:.3g} K",
                f"h/e amplitude {a:.3g} ± {da:.2g} e²/h; L_phi = {1e6 * lp:.3g} ± "
                f"{1e6 * dlp:.2g} µm",
            )
            for t, a, da, lp, dlp in zip(fit.temperatures, fit.amplitudes,
                                         fit.amplitude_errors, fit.l_phi, fit.l_phi_errors,
                                         strict=True)
        ]  # fmt: skip
        params = "; ".join(_param(k, v, f["errors"].get(k, math.nan), f["units"].get(k, ""))
                           for k, v in f["values"].items())  # fmt: skip
        rows.append(("fit", f"{f['model']}: {params}; reduced chi² {f['reduced_chi2']:.3g}"))
        rows.append(("path length", f"π r = {1e6 * fit.fit['path_length_m']:.4g} µm"))
        if fit.skipped:
            rows.append(("left out", "; ".join(fit.skipped)))
        body = "".join(
            f"<tr><td>{html.escape(k)}</td><td>{html.escape(v)}</td></tr>" for k, v in rows
        )
        self.series_summary.value = f"<table class='ringkit-numbers'>{body}</table>"
        return True

    def _draw(self, trace) -> None:
        a = self.analysis
        res = a.result
        top, mid, bottom = self.axes
        for ax in self.axes:
            for child in list(ax.child_axes):
                child.remove()
            ax.cla()
        for other in list(self.figure.axes):
            if other not in self.axes:
                other.remove()
        unit = field_unit_for(a.field)
        plots.plot_background(a.field, a.signal, a.background, a.residual, (top, mid),
                              field_unit=unit, period=res.period_he)  # fmt: skip
        demo = DEMO_LABEL in str(trace.metadata) or "invented" in self.source.lower()
        title = trace.label + (f" — {DEMO_LABEL}" if demo else "")
        top.set_title(title, fontsize=8)
        self.artists = {
            "trace": top.get_lines()[0],
            "background": top.get_lines()[1],
            "residual": mid.get_lines()[0],
        }
        twin = plots.plot_twin(
            mid, a.sim_field, a.sim_residual, ylabel=DELTA_G_LABEL + " simulated",
            label=f"1D ring, r = {a.sim_ring.radius * 1e9:.0f} nm", field_unit=unit, alpha=0.8,
        )  # fmt: skip
        sim = twin.get_lines()[0]
        top.set_xlabel(mid.get_xlabel())
        self.artists["simulation"] = sim
        sp = res.spectrum
        plots.plot_spectrum(sp.frequency, sp.amplitude, bottom, bands=res.bands,
                            kind="measured", label="measured")  # fmt: skip
        self.artists["spectrum"] = bottom.get_lines()[0]
        self.pane.refresh()
        self._summary()

    def _summary(self) -> None:
        r = self.analysis.result
        u = field_unit_for(r.period_he)
        s = field_scale(u)
        rows = [
            ("source", self.source),
            ("h/e period", f"{r.period_he * s:.4g} ± {r.period_he_err * s:.2g} {u}"),
            ("area", f"{r.area * 1e12:.4g} ± {r.area_err * 1e12:.2g} µm²"),
            ("effective radius", f"{r.radius * 1e9:.4g} ± {r.radius_err * 1e9:.2g} nm"),
            ("h/e rms / pp", f"{r.amplitude_he_rms:.3g} / {r.amplitude_he_pp:.3g} e²/h"),
            ("h/2e rms / pp", f"{r.amplitude_h2e_rms:.3g} / {r.amplitude_h2e_pp:.3g} e²/h"),
            ("relative h/e amplitude", f"{100 * r.relative_amplitude_he:.3g} %"),
            ("peak significance", f"{r.peak_significance:.3g}"),
            ("bands from", r.band_source),
            *lab_rows(self.lab),
        ]  # fmt: skip
        body = "".join(
            f"<tr><td>{html.escape(k)}</td>"
            f"<td data-key='{html.escape(k)}'>{html.escape(v)}</td></tr>"
            for k, v in rows
        )
        self.summary.value = f"<table class='ringkit-numbers'>{body}</table>"

    @property
    def numbers(self) -> dict[str, float]:
        """Extracted numbers of the last good analysis (SI; amplitudes in e^2/h)."""
        if self.analysis is None:
            return {}
        r = self.analysis.result
        items = r.as_dict().items()
        return {k: float(v) for k, v in items if isinstance(v, (int, float, np.floating))}
