"""Drawing of the device explorer: G(B), spectrum, ring outline/lattice and the numbers table.

:class:`ExplorerDrawing` is a mixin of :class:`~ringkit.view.panels.explorer_panel.DeviceExplorer`
(it uses the panel's ``figure``, axes, panes, results and ``show_*`` checkboxes). A banner at
the top of the figure says what is shown: the single-channel model (instant first frame) and
whether the exact lattice result (with its number of transverse modes) is shown, still
computing, or off and why. Only the artists' data move when the layout is unchanged.
"""

from __future__ import annotations

import html
import math
from typing import Any

import numpy as np

from ringkit.view import plots
from ringkit.view.panels.explorer import N_PROBES, PreviewResult
from ringkit.view.panels.explorer_derived import format_value
from ringkit.view.style import (
    COLORS,
    CONDUCTANCE_LABEL,
    field_scale,
    field_unit_for,
    style_context,
)

__all__ = ["ExplorerDrawing"]

PREVIEW = "single-channel"
"""Name of the quick model in labels (the exact single-channel network ring)."""


def _fmt(value: float, unit: str, digits: int = 3) -> str:
    return format_value(value, unit, digits)


class ExplorerDrawing:
    """Drawing part of the device explorer (mixin; see the module docstring)."""

    figure: Any
    artists: dict

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
            self._live_line() is not None,
        )
        if pv is not None and self.show_preview.value and key == self._layout_key:
            self._update_preview_artists(pv, unit)  # fast path: same layout, new preview data
        else:
            self._build_axes(pv, full, stale)
            self._layout_key = key
        self._style_live_line()
        self._banner.set_text(self.banner_text())
        self.pane.refresh()
        self._update_summary(stale)

    def _live_line(self):
        """Lattice result to draw: the current one, else (while the new one is computed) the
        previous one, drawn faint and dashed so that the axes need not be rebuilt."""
        if self.live is not None:
            return self.live
        return self.live_stale if self.live_pending else None

    def _style_live_line(self) -> None:
        stale = self.live is None and self._live_line() is not None
        for key in ("live", "live_spectrum"):
            line = self.artists.get(key)
            if line is not None:
                line.set_alpha(0.35 if stale else 1.0)
                line.set_linestyle("--" if stale else "-")

    def banner_text(self) -> str:
        """What the figure shows (single-channel model, lattice with N modes, or why not)."""
        pv = self.preview
        parts = []
        if pv is not None and self.show_preview.value:
            parts.append(f"{PREVIEW} model (1 mode, instant)")
        live = self.live
        if live is not None:
            parts.append(
                f"exact lattice, {self._modes_text()} per arm, {live.n_sites:,} sites"
                + _thermal_text(live)
                + _l_phi_banner(live)
            )
        elif self.live_lattice.value and self.live_pending:
            old = " (dashed: previous settings)" if self._live_line() is not None else ""
            parts.append(f"exact lattice ({self._modes_text()} per arm): computing…{old}")
        elif self.live_note:
            parts.append(f"lattice {self.live_note}")
        if self.full is not None and self.show_full.value:
            parts.append("tight-binding run")
        return "shown: " + " + ".join(parts) if parts else ""

    def _modes_text(self) -> str:
        d = {q.key: q for q in self.derived}
        return f"{d['modes'].text} modes" if "modes" in d else "N modes"

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
                pv.field, pv.conductance, ax_g, label=f"{PREVIEW} (1 mode)", period=pv.period
            )
            self.artists["preview"] = ax_g.get_lines()[0]
        with style_context():
            ax_g.set_ylabel(CONDUCTANCE_LABEL + f" {PREVIEW}", color=COLORS["model"])
        live = self._live_line()
        ref = pv if pv is not None else (live if live is not None else full)
        unit = field_unit_for(ref.field) if ref is not None else "auto"
        self._twin = None
        if live is not None:
            self._twin = plots.plot_twin(
                ax_g, live.field, live.conductance, kind="tightbinding",
                label=f"lattice ({self._modes_text()}/arm)",
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
                    label=PREVIEW,
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
        live = self._live_line()
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
                N_PROBES if p and p.l_phi is not None else 0,
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
                gate_arm=key[2], probes=key[3], leads=geo.lead_outlines(),
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
            rows.append((f"{PREVIEW}: mean G", _fmt(float(np.mean(pv.conductance)), "e²/h", 4)))
            rows.append((f"{PREVIEW}: h/e rms", _fmt(pv.amplitude_he, "e²/h")))
            rows.append((f"{PREVIEW}: h/2e rms", _fmt(pv.amplitude_h2e, "e²/h")))
            rows.append((f"{PREVIEW}: coherent fraction", f"{pv.ring.coherent_fraction:.3f}"))
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
            rows.append(("lattice (live): thermal average", _thermal_row(live)))
            if live.n_probes:
                rows.append(("lattice (live): L_phi", _l_phi_row(live)))
            rows.append(("lattice (live): model", "; ".join(live.notes)))
        elif self.live_lattice.value and self.live_pending:
            rows.append(("lattice (live)", "computing…"))
        elif self.live_note:
            rows.append(("lattice (live)", self.live_note))
        if self.full is not None:
            tag = " (earlier settings)" if stale else ""
            rows.append(
                (f"tight-binding: mean G{tag}", _fmt(self.full.mean_conductance, "e²/h", 4))
            )
            rows.append((f"tight-binding: h/e rms{tag}", _fmt(self.full.amplitude_he, "e²/h")))
        derived = [(q.label, q.text) for q in self.derived]
        self.summary.value = _table(derived, "ringkit-derived") + _table(rows, "ringkit-numbers")


def _thermal_text(live) -> str:
    """Banner part for the live thermal average ("" at T = 0)."""
    if live.thermal_tol == 0.0:
        return ""
    state = "" if live.thermal_converged else ", not converged"
    return f", {live.n_energies} energies, thermal error ≤ {live.thermal_error:.1g} e²/h{state}"


def _thermal_row(live) -> str:
    """Numbers-table entry: energies, error estimate and goal of the live thermal average."""
    if live.thermal_tol == 0.0:
        return "T = 0: single energy (exact)"
    state = "converged" if live.thermal_converged else "NOT converged (energy budget)"
    return (
        f"{live.n_energies} energies, estimated error {live.thermal_error:.2g} e²/h "
        f"(goal {live.thermal_tol:g}, {state}; the full computation uses 1e-4)"
    )


def _l_phi_row(live) -> str:
    """Requested and realised L_phi of the live view's dephasing probes."""
    asked = f"requested {live.l_phi * 1e6:.3g} µm"
    if math.isfinite(live.l_phi_realised):
        err = live.l_phi_realised_err
        pm = f" ± {err * 1e6:.2g}" if math.isfinite(err) else ""
        return f"{asked}; realised {live.l_phi_realised * 1e6:.3g}{pm} µm ({live.l_phi_status})"
    status = live.l_phi_status
    if status.startswith(("not measured", "being measured")):
        return f"{asked}; realised: {status}"
    return f"{asked}; realised: not measured ({status})"


def _l_phi_banner(live) -> str:
    """Short banner text: requested and realised L_phi (or that it is being measured)."""
    if live.n_probes == 0 or live.l_phi is None:
        return ""
    asked = f"L_phi requested {live.l_phi * 1e6:.3g} µm"
    if math.isfinite(live.l_phi_realised):
        err = live.l_phi_realised_err
        pm = f" ± {err * 1e6:.2g}" if math.isfinite(err) else ""
        return f"; {asked}, realised {live.l_phi_realised * 1e6:.3g}{pm} µm"
    if live.l_phi_status.startswith("being measured"):
        return f"; {asked}, realised: being measured…"
    return f"; {asked}, realised: not measured"


def _table(rows: list[tuple[str, str]], cls: str) -> str:
    body = "".join(
        f"<tr><td>{html.escape(k)}</td><td data-key='{html.escape(k)}'>{html.escape(v)}</td></tr>"
        for k, v in rows
    )
    return f"<table class='{cls}'>{body}</table>"
