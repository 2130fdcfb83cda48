"""Jupyter widget panels: each a plain compute module plus a thin ipywidgets shell.

Panels (widget shells)
----------------------
DeviceExplorer
    Device design: quick exact 1D-network preview on every control change, full tight-binding
    G(B) on demand (background job, progress, cancel), both drawn together.
SizeScalingPanel
    Predicted h/e and h/2e amplitudes versus ring radius with simulated ensemble points.
MeasuredDataPanel
    Load a measured trace (upload or path), remove the background, extract area and
    amplitudes, compare with a simulated ring of the extracted area.

Compute functions (no widgets; importable without ipywidgets)
-------------------------------------------------------------
explorer: ExplorerParams, explorer_preview; explorer_full: explorer_full, FullResult;
scaling: ScalingParams, scaling_curves, simulate_points, calibrated_prefactors;
measured: LoadOptions, AnalysisOptions, load_trace_file, load_trace_bytes, analyze_trace,
demo_trace_text.
"""

from __future__ import annotations

import importlib

__all__ = ["DeviceExplorer", "SizeScalingPanel", "MeasuredDataPanel"]

_WHERE = {
    "DeviceExplorer": "explorer_panel",
    "SizeScalingPanel": "scaling_panel",
    "MeasuredDataPanel": "measured_panel",
}


def __getattr__(name: str):
    if name in _WHERE:
        return getattr(importlib.import_module(f"ringkit.view.panels.{_WHERE[name]}"), name)
    raise AttributeError(f"module 'ringkit.view.panels' has no attribute {name!r}")
