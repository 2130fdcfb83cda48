"""Jupyter widget panels: each a plain compute module plus a thin ipywidgets shell.

Figures are interactive ipympl canvases inside a Jupyter kernel, sharp fixed-size PNG images
otherwise (:class:`ringkit.view.panels._base.FigurePane`). docs/panels.md.

Panels (widget shells)
----------------------
DeviceExplorer
    Device design from the sheet density (or E_F) and mobility, with derived E_F, k_F, modes
    per arm, mean free path, L_T and Thouless energy: the exact single-channel model at once
    on every change, the exact lattice G(B) (flux tube) swapped in when ready, the full
    tight-binding G(B) on demand (background job, progress, cancel); save/load study TOML.
SizeScalingPanel
    Predicted h/e and h/2e amplitudes versus ring radius with simulated ensemble points.
MeasuredDataPanel
    Load a measured trace (upload or path), remove the background, extract area and
    amplitudes, compare with a simulated ring of the extracted area.

Compute functions (no widgets; importable without ipywidgets)
-------------------------------------------------------------
explorer: ExplorerParams, explorer_preview; explorer_full: explorer_full, FullResult;
explorer_live: LiveLattice; explorer_derived: derived_quantities; explorer_study: study_toml,
params_from_study; measured_series: series_l_phi;
scaling: ScalingParams, scaling_curves, simulate_points, calibrated_prefactors;
measured: LoadOptions, AnalysisOptions, load_trace_file, load_trace_bytes, analyze_trace,
demo_trace_text.
"""

from __future__ import annotations

import importlib

__all__ = ["DeviceExplorer", "SizeScalingPanel", "MeasuredDataPanel", "RingOutlookPanel"]

_WHERE = {
    "DeviceExplorer": "explorer_panel",
    "SizeScalingPanel": "scaling_panel",
    "MeasuredDataPanel": "measured_panel",
    "RingOutlookPanel": "outlook_panel",
}


def __getattr__(name: str):
    if name in _WHERE:
        return getattr(importlib.import_module(f"ringkit.view.panels.{_WHERE[name]}"), name)
    raise AttributeError(f"module 'ringkit.view.panels' has no attribute {name!r}")
